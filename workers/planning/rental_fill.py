"""Filling the nodes of a rental plan one at a time, to the tick when it can be.

The bin-at-a-time scheme of minimum bin slack (Gupta and Ho 1999), for nodes of unequal
capacity and jobs of several eligibility classes: the classes served by the fewest nodes
go first, each node in turn takes the longest jobs it can still fit (the scarcest class
first) until a little room is left, and that room is then completed exactly by a subset
sum over the shorter jobs left (a bitset over whole ticks). Jobs are sized in ticks
rounded up and capacities in ticks rounded down, so a fill in ticks fits in exact
arithmetic; a node whose floating-point clock would still pass the deadline gives back
its shortest jobs. The caller verifies the plan exactly (:func:`.rental_plan.verify`).
"""

from __future__ import annotations

import bisect
import math
from collections.abc import Sequence
from fractions import Fraction

import numpy as np

from .rational import ticks
from .rental_plan import Bin, Market, Plan

#: the exact completion works on a room of at most this many ticks
MAX_ROOM = 1 << 15
#: items (size copies) tried by one exact completion at most
MAX_ITEMS = 600


class Pool:
    """The jobs left, per class, longest first, with the longest one that fits found by
    bisection and taken jobs skipped by a union-find "next alive" pointer."""

    def __init__(self, mk: Market, jobs: list[int] | None = None) -> None:
        inst = mk.instance
        names, cls = mk.classes
        _, hi = ticks(inst.durations, inst.resolution)
        self.q = hi.tolist()
        order = inst.order_longest_first.tolist()
        if jobs is not None:
            keep = set(jobs)
            order = [j for j in order if j in keep]
        self.jobs: list[list[int]] = [[] for _ in names]
        for j in order:
            self.jobs[int(cls[j])].append(j)
        self.neg: list[list[int]] = [[-self.q[j] for j in js] for js in self.jobs]
        self.parent: list[list[int]] = [list(range(len(js) + 1)) for js in self.jobs]
        self.alive = [len(js) for js in self.jobs]
        self.where = {j: (c, k) for c, js in enumerate(self.jobs) for k, j in enumerate(js)}
        self.taken: list[list[bool]] = [[False] * len(js) for js in self.jobs]
        small = sorted(self.q)[: max(1, len(self.q) // 10)]
        self.small = small[-1] if small else 1

    def _find(self, c: int, i: int) -> int:
        par = self.parent[c]
        root = i
        while par[root] != root:
            root = par[root]
        while par[i] != root:
            par[i], i = root, par[i]
        return root

    def longest_at_most(self, c: int, room: int) -> int:
        """Position (in class ``c``) of the longest job left of at most ``room`` ticks,
        or -1."""
        i = bisect.bisect_left(self.neg[c], -room)
        k = self._find(c, i)
        return k if k < len(self.jobs[c]) else -1

    def take(self, c: int, k: int) -> int:
        self.parent[c][k] = k + 1
        self.taken[c][k] = True
        self.alive[c] -= 1
        return self.jobs[c][k]

    def give_back(self, jobs: list[int]) -> None:
        """Jobs taken before, left again (the pointers of their classes rebuilt)."""
        touched = set()
        for j in jobs:
            c, k = self.where[j]
            self.taken[c][k] = False
            self.alive[c] += 1
            touched.add(c)
        for c in touched:
            t = self.taken[c]
            self.parent[c] = [i + 1 if i < len(t) and t[i] else i for i in range(len(t) + 1)]

    def candidates(self, c: int, room: int, limit: int) -> list[tuple[int, int]]:
        """Up to ``limit`` (class, position) of jobs left of at most ``room`` ticks, at most
        ``room // size`` of each size."""
        out: list[tuple[int, int]] = []
        k = self.longest_at_most(c, room)
        seen: dict[int, int] = {}
        js, n = self.jobs[c], len(self.jobs[c])
        while 0 <= k < n and len(out) < limit:
            s = self.q[js[k]]
            if seen.get(s, 0) < room // s:
                seen[s] = seen.get(s, 0) + 1
                out.append((c, k))
                k = self._find(c, k + 1)
            else:  # jump past every copy of this size
                k = self._find(c, bisect.bisect_right(self.neg[c], -s))
        return out

    def left(self) -> list[int]:
        out = []
        for c, js in enumerate(self.jobs):
            k = self._find(c, 0)
            while k < len(js):
                out.append(js[k])
                k = self._find(c, k + 1)
        return out


def class_rank(mk: Market, serving: list[list[bool]]) -> list[int]:
    """Classes, the one served by the fewest nodes (of ``serving``, per node and class)
    first; ties by fewer tags last."""
    names, _ = mk.classes
    count = [sum(row[c] for row in serving) for c in range(len(names))]
    return sorted(range(len(names)), key=lambda c: (count[c], -len(names[c]), c))


def fill_bin(
    pool: Pool,
    classes: list[int],
    room: int,
    *,
    exact: bool,
    primary: int | None = None,
) -> tuple[list[int], int]:
    """Jobs for one node with ``room`` ticks, from ``classes`` in that order (longest
    first until a little room is left, then an exact completion when ``exact``); the
    first ``primary`` classes only before the completion when given. Returns (jobs,
    room left)."""
    out: list[int] = []
    keep = 2 * pool.small if exact else 0
    greedy = classes if primary is None else classes[:primary]
    for c in greedy:
        while room > keep and pool.alive[c]:
            k = pool.longest_at_most(c, room - keep)
            if k < 0:
                break
            out.append(pool.take(c, k))
            room -= pool.q[out[-1]]
    if room <= 0:
        return out, room
    if exact and room <= MAX_ROOM:
        got, room = _complete(pool, classes, room)
        out += got
    for c in classes:  # what still fits, longest first
        while room > 0 and pool.alive[c]:
            k = pool.longest_at_most(c, room)
            if k < 0:
                break
            out.append(pool.take(c, k))
            room -= pool.q[out[-1]]
    return out, room


def _complete(pool: Pool, classes: list[int], room: int) -> tuple[list[int], int]:
    """The subset of the jobs left (of at most ``room`` ticks) with the largest sum at
    most ``room``: a bitset subset sum, stopped once ``room`` itself is reached."""
    items: list[tuple[int, int]] = []
    for c in classes:
        items += pool.candidates(c, room, MAX_ITEMS - len(items))
    mask = (1 << (room + 1)) - 1
    reach = [1]
    goal = 1 << room
    for c, k in items:
        r = reach[-1]
        r = (r | (r << pool.q[pool.jobs[c][k]])) & mask
        reach.append(r)
        if r & goal:
            break
    top = reach[-1].bit_length() - 1
    if top <= 0:
        return [], room
    t, got = top, []
    for i in range(len(reach) - 1, 0, -1):
        if not (reach[i - 1] >> t) & 1:
            c, k = items[i - 1]
            got.append(pool.take(c, k))
            t -= pool.q[got[-1]]
    return got, room - top


def cap_ticks(mk: Market, work: Fraction) -> int:
    """Whole ticks of work that fit in ``work`` seconds of speed-1 work, rounded down."""
    return max(0, math.floor(work / Fraction(mk.instance.resolution)))


def clock_fits(mk: Market, b: Bin, start: float, speed: float, rank: list[int]) -> None:
    """Give back the shortest jobs of ``b`` while its floating-point clock (as
    ``Schedule.sequenced`` runs it: longest first, one running sum) passes the deadline;
    they go to ``b``'s ``spill``."""
    p = mk.instance.durations
    while b.jobs:
        clock = start
        for j in sorted(b.jobs, key=lambda j: rank[j]):
            clock = clock + float(p[j]) / speed
        if clock <= mk.deadline:
            return
        j = max(b.jobs, key=lambda j: rank[j])
        b.jobs.remove(j)
        b.work -= float(p[j])
        b.spill.append(j)


def fill_targets(
    mk: Market,
    targets: Sequence[tuple[int | None, int | None, Fraction]],
    *,
    exact: bool = True,
) -> tuple[Plan, list[int]]:
    """The jobs packed into the given nodes ``(offer, farm, work capacity)``: nodes
    serving the scarcest class first, free farm nodes before rented ones, larger first;
    each filled by :func:`fill_bin`. Returns the plan and the jobs left over."""
    names, _ = mk.classes
    nc = len(names)
    serving = [
        [mk.offer_serves(o, c) if o is not None else mk.farm_serves(f, c) for c in range(nc)]  # type: ignore[arg-type]
        for o, f, _ in targets
    ]
    rank = class_rank(mk, serving)
    pos = {c: i for i, c in enumerate(rank)}
    pool = Pool(mk)

    def key(i: int) -> tuple[int, int, Fraction]:
        o, _, cap = targets[i]
        first = min((pos[c] for c in range(nc) if serving[i][c]), default=nc)
        return first, int(o is not None), -cap

    plan: Plan = []
    order_pos = np.empty(mk.instance.n, dtype=np.int64)
    order_pos[mk.instance.order_longest_first] = np.arange(mk.instance.n)
    lf = order_pos.tolist()
    spill: list[int] = []
    for i in sorted(range(len(targets)), key=key):
        o, f, cap = targets[i]
        b = Bin(o, f)
        cls_here = [c for c in rank if serving[i][c]]
        nd = mk.instance.nodes[f] if f is not None else None
        start = nd.free_at if nd is not None else mk.offers[o].boot  # type: ignore[index]
        speed = nd.speed if nd is not None else mk.offers[o].speed  # type: ignore[index]
        room = cap_ticks(mk, cap)
        for tight in range(4):  # a clock that passes the deadline: refill a tick shorter
            jobs, _ = fill_bin(pool, cls_here, room - tight, exact=exact)
            b.jobs, b.spill = jobs, []
            b.work = float(sum(float(mk.instance.durations[j]) for j in jobs))
            clock_fits(mk, b, start, speed, lf)
            if not b.spill or tight == 3:
                break
            pool.give_back(b.jobs + b.spill)
        spill += b.spill
        plan.append(b)
    return [b for b in plan if b.jobs or b.offer is None], pool.left() + spill


def open_nodes(mk: Market, plan: Plan, jobs: list[int], *, exact: bool = True) -> list[int]:
    """Rented nodes opened for ``jobs``, scarcest class first: each on the offer with the
    least price per work that serves the class and has ``max_count`` left, filled (by
    :func:`fill_bin`) first with the classes it is the cheapest offer for, then with any
    class it serves up to the end of its last billed unit. Appended to ``plan``; returns
    the jobs no offer could take."""
    names, _ = mk.classes
    nc = len(names)
    if not jobs:
        return []
    counts: dict[int, int] = {}
    for b in plan:
        if b.offer is not None:
            counts[b.offer] = counts.get(b.offer, 0) + 1
    kinds = [o for o, off in enumerate(mk.offers) if off.farm is None]
    serving = [[mk.offer_serves(o, c) for c in range(nc)] for o in kinds]
    rank = class_rank(mk, serving)
    price = {o: mk.price_per_work(o) for o in kinds}
    pool = Pool(mk, jobs)
    lf_pos = np.empty(mk.instance.n, dtype=np.int64)
    lf_pos[mk.instance.order_longest_first] = np.arange(mk.instance.n)
    lf = lf_pos.tolist()
    res = Fraction(mk.instance.resolution)
    spill: list[int] = []
    for c in rank:
        while pool.alive[c]:
            longest = pool.q[pool.jobs[c][pool.longest_at_most(c, 1 << 62)]]
            offs = [
                o
                for o in kinds
                if mk.offer_serves(o, c)
                and price[o] is not None
                and counts.get(o, 0) < mk.offers[o].max_count
                and cap_ticks(mk, mk.capacity(o, mk.htop(o))) >= longest
            ]
            if not offs:
                break
            o = min(offs, key=lambda o: (price[o], o))
            cheapest = [
                c2
                for c2 in rank
                if mk.offer_serves(o, c2)
                and all(
                    price[o2] is None or price[o2] >= price[o]  # type: ignore[operator]
                    for o2 in kinds
                    if mk.offer_serves(o2, c2) and counts.get(o2, 0) < mk.offers[o2].max_count
                )
            ]
            if c not in cheapest:
                cheapest.insert(0, c)
            full = cap_ticks(mk, mk.capacity(o, mk.htop(o)))
            got, room = fill_bin(pool, cheapest, full, exact=exact)
            off = mk.offers[o]
            used = Fraction(full - room) * res
            end = Fraction(off.boot) + used / Fraction(off.speed)
            edge = mk.capacity(o, mk.units(end))
            more = cap_ticks(mk, edge) - (full - room)
            others = [c2 for c2 in rank if mk.offer_serves(o, c2) and c2 not in cheapest]
            if more > 0 and others:
                got2, _ = fill_bin(pool, others, more, exact=exact)
                got += got2
            b = Bin(o, off.farm, got, float(sum(float(mk.instance.durations[j]) for j in got)))
            clock_fits(mk, b, off.boot, off.speed, lf)
            spill += b.spill
            b.spill = []
            plan.append(b)
            counts[o] = counts.get(o, 0) + 1
    return pool.left() + spill
