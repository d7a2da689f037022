"""Filling the nodes of a rental plan one at a time, to the tick when it can be.

The bin-at-a-time scheme of minimum bin slack (Gupta and Ho 1999), for nodes of unequal
capacity and jobs of several eligibility classes: the classes served by the fewest nodes
go first, each node in turn takes all that is left of a class when it fits, else the
longest jobs it can still fit (the scarcest class first, a later class only once no job
of a scarcer one fits) until a little room is left, and that room is then completed by
subset sums over the shorter jobs left (bitsets over whole ticks; as much of the scarcest
class as can be). Jobs left over at the end are repacked with the jobs of the nodes left
open (:func:`_repack`). Jobs are sized in ticks rounded up and capacities in ticks rounded
down, so a fill in ticks fits in exact arithmetic; a node whose floating-point clock
passes the deadline in every order :func:`.rental_plan.clock_order` tries gives back its
shortest jobs. The caller verifies the plan exactly (:func:`.rental_plan.verify`).
"""

from __future__ import annotations

import bisect
import math
import random
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction
from functools import cached_property

import numpy as np

from .rental_plan import Bin, Market, Plan, clock_order

#: the exact completion works on a room of at most this many ticks
MAX_ROOM = 1 << 15
#: items (size copies) tried by one exact completion at most
MAX_ITEMS = 600
#: (ticks less, short jobs' room kept for the completion) of the fills tried in turn on a
#: node whose floating-point clock passes the deadline: other sets of jobs first
RETRIES = ((0, 2), (0, 3), (0, 5), (0, 8), (1, 2), (2, 2), (3, 2))


class Pool:
    """The jobs left, per class, longest first, with the longest one that fits found by
    bisection and taken jobs skipped by a union-find "next alive" pointer."""

    def __init__(self, mk: Market, jobs: list[int] | None = None) -> None:
        inst = mk.instance
        names, cls = mk.classes
        self.q, self.small = mk.job_ticks
        lf = inst.order_longest_first
        if jobs is not None:
            keep = np.zeros(inst.n, dtype=bool)
            keep[jobs] = True
            lf = lf[keep[lf]]
        of = cls[lf]
        self.jobs: list[list[int]] = [lf[of == c].tolist() for c in range(len(names))]
        self.neg: list[list[int]] = [[-self.q[j] for j in js] for js in self.jobs]
        self.parent: list[list[int]] = [list(range(len(js) + 1)) for js in self.jobs]
        self.alive = [len(js) for js in self.jobs]
        qa = np.asarray(self.q, dtype=np.int64)
        self.ticks = [int(qa[js].sum()) if js else 0 for js in self.jobs]  # alive, per class
        self.taken: list[list[bool]] = [[False] * len(js) for js in self.jobs]

    @cached_property
    def where(self) -> dict[int, tuple[int, int]]:
        """(class, position) of every job of the pool."""
        return {j: (c, k) for c, js in enumerate(self.jobs) for k, j in enumerate(js)}

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
        self.ticks[c] -= self.q[self.jobs[c][k]]
        return self.jobs[c][k]

    def take_run(self, c: int, k: int, limit: int) -> tuple[list[int], int]:
        """From position ``k`` on, the jobs left of class ``c`` taken in turn while they fit
        in ``limit`` ticks together (what repeated longest-that-fits picks while the next
        one fits). Returns them and their ticks."""
        js, q, par, taken = self.jobs[c], self.q, self.parent[c], self.taken[c]
        out: list[int] = []
        used = 0
        while k < len(js):
            j = js[k]
            if used + q[j] > limit:
                break
            par[k] = k + 1
            taken[k] = True
            out.append(j)
            used += q[j]
            k = self._find(c, k + 1)
        self.alive[c] -= len(out)
        self.ticks[c] -= used
        return out, used

    def take_all(self, c: int) -> list[int]:
        """Every job of class ``c`` left."""
        out = []
        k = self._find(c, 0)
        while k < len(self.jobs[c]):
            out.append(self.take(c, k))
            k = self._find(c, k + 1)
        return out

    def give_back(self, jobs: list[int]) -> None:
        """Jobs taken before, left again (the pointers of their classes rebuilt)."""
        touched = set()
        for j in jobs:
            c, k = self.where[j]
            self.taken[c][k] = False
            self.alive[c] += 1
            self.ticks[c] += self.q[j]
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
        """The jobs left, class by class, longest first."""
        return [
            j
            for js, t in zip(self.jobs, self.taken, strict=True)
            for j, x in zip(js, t, strict=True)
            if not x
        ]


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
    margin: int = 2,
) -> tuple[list[int], int]:
    """Jobs for one node with ``room`` ticks, from ``classes`` in that order (longest
    first until ``margin`` short jobs' room is left, then an exact completion when
    ``exact``); the first ``primary`` classes only before the completion when given.
    Returns (jobs, room left)."""
    out: list[int] = []
    keep = margin * pool.small if exact else 0
    greedy = classes if primary is None else classes[:primary]
    for i, c in enumerate(greedy):
        if 0 < pool.ticks[c] <= room:  # every job of the class left fits: all of them
            room -= pool.ticks[c]
            out += pool.take_all(c)
        if any(pool.longest_at_most(e, room) >= 0 for e in greedy[:i]):
            break  # a scarcer class still fits: the completion chooses
        while room > keep and pool.alive[c]:
            k = pool.longest_at_most(c, room - keep)
            if k < 0:
                break
            got, used = pool.take_run(c, k, room - keep)
            out += got
            room -= used
    if room <= 0:
        return out, room
    for c in classes:  # a class whose jobs left all fit: all of them (scarcest first)
        if 0 < pool.ticks[c] <= room:
            room -= pool.ticks[c]
            out += pool.take_all(c)
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
    """Jobs left (of at most ``room`` ticks) for the room, from bitset subset sums of the
    first class and of the others: the largest sum of the first class then of the
    others in what is left, unless filling ``room`` exactly gives up less of the first
    class than that leaves empty (a scarce class short on its nodes is as bad as room
    left). Returns (jobs, room left)."""
    first = pool.candidates(classes[0], room, MAX_ITEMS)
    others: list[tuple[int, int]] = []
    for c in classes[1:]:
        others += pool.candidates(c, room, MAX_ITEMS - len(others))
    if not others:
        reach = _reach(pool, first, room, stop=True)
        top = reach[-1].bit_length() - 1
        return _pick(pool, first, reach, top), room - top
    rf, ro = _reach(pool, first, room), _reach(pool, others, room)
    a, b = rf[-1], ro[-1]
    mirrored = int(format(b, f"0{room + 1}b")[::-1], 2)  # bit g: b reaches room - g
    both = a & mirrored
    g = a.bit_length() - 1  # the most of the first class, the rest in what is left
    rest = (b & ((1 << (room - g + 1)) - 1)).bit_length() - 1
    if both and both.bit_length() - 1 > g - (room - g - rest):
        g = both.bit_length() - 1  # exact, giving up less of the first class than of room
        rest = room - g
    got = _pick(pool, first, rf, g) + _pick(pool, others, ro, rest)
    return got, room - g - rest


def _reach(pool: Pool, items: list[tuple[int, int]], room: int, *, stop: bool = False) -> list[int]:
    """The sums (bitsets up to ``room``) reachable with the first i items, for every i
    (stopped once ``room`` itself is reached when ``stop``)."""
    mask = (1 << (room + 1)) - 1
    reach = [1]
    for c, k in items:
        r = reach[-1]
        reach.append((r | (r << pool.q[pool.jobs[c][k]])) & mask)
        if stop and reach[-1] >> room & 1:
            break
    return reach


def _pick(pool: Pool, items: list[tuple[int, int]], reach: list[int], t: int) -> list[int]:
    """Take the items behind the reachable sum ``t`` (none for ``t <= 0``)."""
    got: list[int] = []
    for i in range(len(reach) - 1, 0, -1):
        if t <= 0:
            break
        if not (reach[i - 1] >> t) & 1:
            c, k = items[i - 1]
            got.append(pool.take(c, k))
            t -= pool.q[got[-1]]
    return got


def cap_ticks(mk: Market, work: Fraction) -> int:
    """Whole ticks of work that fit in ``work`` seconds of speed-1 work, rounded down."""
    return max(0, math.floor(work / Fraction(mk.instance.resolution)))


def clock_fits(mk: Market, b: Bin, start: float, speed: float, rank: list[int]) -> None:
    """Give back the shortest jobs of ``b`` while no order of its jobs that
    :func:`.rental_plan.clock_order` tries ends by the deadline in floating point (as
    ``Schedule.sequenced`` runs it: one running sum); they go to ``b``'s ``spill``."""
    p = mk.instance.durations
    q, _ = mk.job_ticks
    res, deadline = mk.instance.resolution, mk.deadline
    # far enough from the deadline that no rounding of the running sum can pass it
    margin = 4 * (len(b.jobs) + 2) * math.ulp(max(deadline, 1.0))
    if start + sum(q[j] for j in b.jobs) * res / speed <= deadline - margin:
        return
    while b.jobs:
        if clock_order(mk, start, speed, sorted(b.jobs, key=rank.__getitem__)) is not None:
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
    seed: int | None = None,
    keep: int = 0,
) -> tuple[Plan, list[int]]:
    """The jobs packed into the given nodes ``(offer, farm, work capacity)``: nodes
    serving the scarcest class first, free farm nodes before rented ones, larger first
    (with a ``seed``: in a seeded random order within those groups); each filled by
    :func:`fill_bin`, ``keep`` more short jobs' room left to its exact completion.
    Returns the plan and the jobs left over."""
    names, _ = mk.classes
    nc = len(names)
    serving = [
        [mk.offer_serves(o, c) if o is not None else mk.farm_serves(f, c) for c in range(nc)]  # type: ignore[arg-type]
        for o, f, _ in targets
    ]
    rank = class_rank(mk, serving)
    pos = {c: i for i, c in enumerate(rank)}
    pool = Pool(mk)

    shuffle = [0.0] * len(targets)
    if seed is not None:
        rng = random.Random(seed)
        shuffle = [rng.random() for _ in targets]

    def key(i: int) -> tuple[int, int, float, Fraction]:
        o, _, cap = targets[i]
        first = min((pos[c] for c in range(nc) if serving[i][c]), default=nc)
        return first, int(o is not None), shuffle[i], -cap

    order_pos = np.empty(mk.instance.n, dtype=np.int64)
    order_pos[mk.instance.order_longest_first] = np.arange(mk.instance.n)
    lf = order_pos.tolist()
    slots: list[_Slot] = []
    for i in sorted(range(len(targets)), key=key):
        o, f, cap = targets[i]
        nd = mk.instance.nodes[f] if f is not None else None
        start = nd.free_at if nd is not None else mk.offers[o].boot  # type: ignore[index]
        speed = nd.speed if nd is not None else mk.offers[o].speed  # type: ignore[index]
        cls_here = [c for c in rank if serving[i][c]]
        slots.append(_Slot(Bin(o, f), cls_here, cap_ticks(mk, cap), start, speed, key(i)[0]))
    left = _fill_slots(mk, pool, slots, lf, exact, keep) + pool.left()
    if left and exact:
        left = _repack(mk, slots, left, lf)
    return [s.bin for s in slots if s.bin.jobs or s.bin.offer is None], left


@dataclass
class _Slot:
    """A node being filled: its bin, the classes it serves (scarcest first), its room in
    ticks, start, speed, and the rank of its scarcest class."""

    bin: Bin
    classes: list[int]
    room: int
    start: float
    speed: float
    scarce: int

    def used(self, q: list[int]) -> int:
        return sum(q[j] for j in self.bin.jobs)


def _fill_slots(
    mk: Market, pool: Pool, slots: list[_Slot], lf: list[int], exact: bool, keep: int = 0
) -> list[int]:
    """Fill each slot in turn (:func:`fill_bin`, ``keep`` more short jobs' room left to
    the exact completion); a node whose floating-point clock passes the deadline is
    refilled (:data:`RETRIES`). Returns the jobs given back for good."""
    spill: list[int] = []
    p = mk.instance.durations
    for s in slots:
        b = s.bin
        for k, (tight, margin) in enumerate(RETRIES):
            jobs, _ = fill_bin(pool, s.classes, s.room - tight, exact=exact, margin=margin + keep)
            b.jobs, b.spill = jobs, []
            b.work = float(p[jobs].sum())
            clock_fits(mk, b, s.start, s.speed, lf)
            if not b.spill or k == len(RETRIES) - 1:
                break
            pool.give_back(b.jobs + b.spill)
        spill += b.spill
        b.spill = []
    return spill


def _repack(mk: Market, slots: list[_Slot], left: list[int], lf: list[int]) -> list[int]:
    """Jobs left over after a fill: empty every node with a tick of room or more, every
    node serving a class left over that runs a job of another class, and, when one of
    them has room for no job among theirs and the ones left, every node holding a job
    that fits that room; fill them again with their jobs and the ones left, scarcest
    class first and the smallest node first (a small node is hard to fill exactly late).
    Then once more with also every node running a job of a class after its scarcest one
    (jobs that can move on) and the classes left over right after each node's scarcest
    class. The filling with the fewest ticks left over is kept; returns the jobs left
    over."""
    q, _ = mk.job_ticks
    _, cls = mk.classes
    short = {int(c) for c in cls[left].tolist()}  # classes left over
    open_ = [
        s
        for s in slots
        if s.room - s.used(q) >= 1
        or (short & set(s.classes) and any(int(cls[j]) not in short for j in s.bin.jobs))
    ]
    if not open_:
        return left
    # a small room no job of the pool fits: the nodes holding a job that fits it join
    rooms = [s.room - s.used(q) for s in open_]
    shortest = min(q[j] for j in left + [j for s in open_ for j in s.bin.jobs])
    small = max((r for r in rooms if 0 < r < shortest), default=0)
    if small:
        chosen = {id(s) for s in open_}
        open_ += [
            s for s in slots if id(s) not in chosen and any(q[j] <= small for j in s.bin.jobs)
        ]
    chosen = {id(s) for s in open_}
    movers = [
        s
        for s in slots
        if id(s) not in chosen and any(int(cls[j]) != s.classes[0] for j in s.bin.jobs)
    ]
    before = {id(s): (list(s.bin.jobs), s.classes) for s in open_ + movers}
    best, kept = left, dict(before)
    for wide in (False, True):
        nodes = open_ + movers if wide else list(open_)
        for s in nodes:
            own = before[id(s)][1]
            if wide:  # the classes left over right after the node's scarcest class
                rest = own[1:]
                s.classes = own[:1] + [c for c in rest if c in short]
                s.classes += [c for c in rest if c not in short]
        pool = Pool(mk, left + [j for s in nodes for j in before[id(s)][0]])
        nodes.sort(key=lambda s: (s.scarce, s.room))
        again = _fill_slots(mk, pool, nodes, lf, True) + pool.left()
        if sum(q[j] for j in again) < sum(q[j] for j in best):
            best, kept = again, {id(s): (list(s.bin.jobs), s.classes) for s in open_ + movers}
        for s in nodes:  # as before, for the next try
            s.bin.jobs, s.classes = list(before[id(s)][0]), before[id(s)][1]
        if not best:
            break
    p = mk.instance.durations
    for s in open_ + movers:
        s.bin.jobs = kept[id(s)][0]
        s.classes = before[id(s)][1]
        s.bin.work = float(p[s.bin.jobs].sum())
    return best


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
    full = {o: cap_ticks(mk, mk.full_capacity[o]) for o in kinds}  # ticks of a whole node
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
                and full[o] >= longest
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
            got, room = fill_bin(pool, cheapest, full[o], exact=exact)
            off = mk.offers[o]
            used = Fraction(full[o] - room) * res
            end = Fraction(off.boot) + used / Fraction(off.speed)
            edge = mk.capacity(o, mk.units(end))
            more = cap_ticks(mk, edge) - (full[o] - room)
            others = [c2 for c2 in rank if mk.offer_serves(o, c2) and c2 not in cheapest]
            if more > 0 and others:
                got2, _ = fill_bin(pool, others, more, exact=exact)
                got += got2
            b = Bin(o, off.farm, got, float(mk.instance.durations[got].sum()))
            clock_fits(mk, b, off.boot, off.speed, lf)
            spill += b.spill
            b.spill = []
            plan.append(b)
            counts[o] = counts.get(o, 0) + 1
    return pool.left() + spill
