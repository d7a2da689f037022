"""Rental plans: the priced market of a rental request, plans on it, and their exact check.

The model (as issue 18 states it). The farm you have: existing nodes (speed, provides,
free_at) costing nothing unless an optional ``hour_cost`` each. Kinds you may rent: name,
speed, provides, hour_cost, boot (seconds from the start before a rented node can run
anything, billed), max_count. A rented node is billed from the start until its last job
ends (boot included), rounded up to the billing unit (second, minute, hour) with an
optional ``min_billed`` seconds; a kind's node that runs nothing is not rented and costs
nothing. A farm node with an ``hour_cost`` is billed the same way, its ``free_at`` in the
place of the boot (from 0 until its last job ends), and costs nothing when it runs nothing.
Every job (durations on a speed-1 node, ``requires`` tags) must end by the deadline, at the
least total cost; among equal costs, fewer rented nodes.

:class:`Market` is that model in one object (jobs, free farm nodes, and every priced node
type as an :class:`Offer`: the kinds, then the farm nodes with a price). A :class:`Plan`
is a list of :class:`Bin` (one node and its jobs); :func:`verify` turns a plan into a
:class:`~.result.Schedule` (``Schedule.sequenced``: each node runs its jobs back to back
from its ``free_at``, which is the boot for a rented node) and checks it exactly: every
job on a node that provides its tags, every node's last job ending by the deadline in
exact arithmetic and in the schedule's floating-point times, the cost summed exactly.
The searches here work in floating point with a relative margin of 1e-12 on every
capacity; :func:`verify` alone decides what a plan is.
"""

from __future__ import annotations

import heapq
import math
import random
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property

import numpy as np
import numpy.typing as npt

from .budget import Budget
from .model import FloatArray, Instance, Node
from .rational import array_sum, exact_sum, ticks
from .result import Schedule

#: every capacity used by a search is shrunk by this share (the exact check decides)
MARGIN = 1e-12


@dataclass(frozen=True, eq=False)
class Offer:
    """One priced node type: a kind to rent (``farm is None``, up to ``max_count`` nodes)
    or one farm node with an hour cost (``farm`` its index, ``max_count`` 1, ``boot`` its
    ``free_at``)."""

    name: str
    speed: float
    provides: frozenset[str]
    hour_cost: float
    boot: float
    max_count: int
    farm: int | None = None


@dataclass(frozen=True, eq=False)
class Market:
    """A rental request as plain numbers: jobs (``instance``: durations, ids, requires,
    deadline, resolution; its nodes are the farm), the free farm nodes, the offers, the
    billing unit ``unit`` (seconds) and ``min_billed`` (seconds)."""

    instance: Instance
    offers: tuple[Offer, ...]
    unit: int
    min_billed: float
    free_farm: tuple[int, ...]  # indices of the farm nodes that cost nothing

    @property
    def deadline(self) -> float:
        return float(self.instance.deadline)  # type: ignore[arg-type]

    @cached_property
    def d_exact(self) -> Fraction:
        return Fraction(self.deadline)

    @cached_property
    def classes(self) -> tuple[tuple[frozenset[str], ...], npt.NDArray[np.intp]]:
        """The distinct ``requires`` sets (eligibility classes) and each job's class."""
        req = self.instance.requires
        if req is None:
            return (frozenset(),), np.zeros(self.instance.n, dtype=np.intp)
        names = sorted(set(req), key=lambda s: (len(s), sorted(s)))
        index = {s: i for i, s in enumerate(names)}
        return tuple(names), np.array([index[r] for r in req], dtype=np.intp)

    @cached_property
    def job_ticks(self) -> tuple[list[int], int]:
        """Every job's duration in ticks rounded up, and the ``n // 10``-th smallest (the
        margin a fill keeps for its exact completion)."""
        inst = self.instance
        _, hi = ticks(inst.durations, inst.resolution)
        if not hi.size:
            return [], 1
        k = max(1, hi.size // 10) - 1
        return hi.tolist(), max(1, int(np.partition(hi, k)[k]))

    @cached_property
    def grain(self) -> Fraction:
        """The largest ``g`` with every duration a whole multiple of it (0: all are 0): any
        set of jobs sums to a multiple of ``g``."""
        vals = np.unique(self.instance.durations)
        vals = vals[vals > 0]
        if not vals.size:
            return Fraction(0)
        if (vals == np.floor(vals)).all() and float(vals.max()) < 2.0**53:
            return Fraction(int(np.gcd.reduce(vals.astype(np.int64))))
        exact = [Fraction(v) for v in vals.tolist()]
        den = math.lcm(*[f.denominator for f in exact])
        return Fraction(math.gcd(*[int(f * den) for f in exact]), den)

    def class_work(self) -> list[Fraction]:
        """The exact work (speed-1 seconds) of each class."""
        names, cls = self.classes
        return [array_sum(self.instance.durations[cls == c]) for c in range(len(names))]

    def offer_serves(self, o: int, c: int) -> bool:
        return self.classes[0][c] <= self.offers[o].provides

    def farm_serves(self, f: int, c: int) -> bool:
        return self.classes[0][c] <= self.instance.nodes[f].provides

    def farm_capacity(self, f: int) -> Fraction:
        """The work farm node ``f`` can do by the deadline, exactly."""
        return self._farm_caps[f]

    def farm_room(self, f: int) -> Fraction:
        """What jobs can fill of farm node ``f``: its capacity rounded down to a whole
        multiple of the grain (every set of jobs sums to one)."""
        return self._farm_rooms[f]

    @cached_property
    def _farm_rooms(self) -> list[Fraction]:
        g = self.grain
        return [c if g == 0 else math.floor(c / g) * g for c in self._farm_caps]

    @cached_property
    def _farm_caps(self) -> list[Fraction]:
        d = self.d_exact
        return [
            Fraction(nd.speed) * max(Fraction(0), d - Fraction(nd.free_at))
            for nd in self.instance.nodes
        ]

    # -- billing, exactly -------------------------------------------------------------
    def units(self, end: Fraction) -> int:
        """Billed units of a node whose last job ends at ``end``."""
        t = max(end, Fraction(self.min_billed))
        return -((-t.numerator * 1) // (t.denominator * self.unit))

    def bill(self, o: int, end: Fraction) -> Fraction:
        """The exact bill of a used node of offer ``o`` whose last job ends at ``end``."""
        return Fraction(self.offers[o].hour_cost) * self.units(end) * self.unit / 3600

    def hmin(self, o: int) -> int:
        """The fewest units a used node of offer ``o`` is billed."""
        return self._hmin[o]

    def htop(self, o: int) -> int:
        """The most units a node of offer ``o`` ending by the deadline is billed."""
        return max(self._hmin[o], self._hdeadline)

    @cached_property
    def _hmin(self) -> list[int]:
        return [self.units(Fraction(off.boot)) for off in self.offers]

    @cached_property
    def _hdeadline(self) -> int:
        return self.units(self.d_exact)

    @cached_property
    def full_capacity(self) -> list[Fraction]:
        """Per offer, the work one node can do by the deadline (negative: none)."""
        return [self.capacity(o, self.htop(o)) for o in range(len(self.offers))]

    def unit_cost(self, o: int) -> Fraction:
        """The price of one billed unit of offer ``o``."""
        return Fraction(self.offers[o].hour_cost) * self.unit / 3600

    def capacity(self, o: int, h: int) -> Fraction:
        """The work a node of offer ``o`` billed at most ``h`` units can do by the
        deadline: speed * (min(h * unit, deadline) - boot) (negative: none)."""
        off = self.offers[o]
        end = min(Fraction(h * self.unit), self.d_exact)
        return Fraction(off.speed) * (end - Fraction(off.boot))

    def price_per_work(self, o: int) -> Fraction | None:
        """The least bill per second of speed-1 work of one node of offer ``o``: bill /
        work is smallest when the node is as full as its billed units allow, so only the
        largest billed units ending by the deadline and the last unit can be best."""
        d = self.d_exact
        cands = {self.htop(o), max(self.hmin(o), math.floor(d / self.unit))}
        best: Fraction | None = None
        for h in cands:
            cap = self.capacity(o, h)
            if h >= self.hmin(o) and cap > 0:
                r = self.unit_cost(o) * h / cap
                best = r if best is None or r < best else best
        return best


@dataclass
class Bin:
    """One node of a plan: a free farm node (``offer is None``), or a node of an offer;
    ``farm`` is the farm node's index for farm nodes."""

    offer: int | None
    farm: int | None
    jobs: list[int] = field(default_factory=list)
    work: float = 0.0
    spill: list[int] = field(default_factory=list)  # jobs given back by a fill


Plan = list[Bin]


def bin_start(mk: Market, b: Bin) -> float:
    if b.farm is not None:
        return mk.instance.nodes[b.farm].free_at
    return mk.offers[b.offer].boot  # type: ignore[index]


def bin_speed(mk: Market, b: Bin) -> float:
    if b.farm is not None:
        return mk.instance.nodes[b.farm].speed
    return mk.offers[b.offer].speed  # type: ignore[index]


def room(mk: Market, b: Bin, limit: float | None = None) -> float:
    """Work ``b`` can still take before ``limit`` (default: the deadline), with margin."""
    end = mk.deadline if limit is None else min(limit, mk.deadline)
    return bin_speed(mk, b) * (end - bin_start(mk, b)) * (1 - MARGIN) - b.work


def float_bill(mk: Market, o: int, work: float) -> float:
    """A bill in floating point, for the searches' choices only."""
    off = mk.offers[o]
    t = max(off.boot + work / off.speed, mk.min_billed)
    return off.hour_cost * math.ceil(t / mk.unit - 1e-12) * mk.unit / 3600


def eligible_offers(mk: Market, c: int, p: float) -> list[int]:
    """Offers that can run a job of class ``c`` and duration ``p`` by the deadline,
    cheapest work first."""
    out = []
    for o, off in enumerate(mk.offers):
        if mk.offer_serves(o, c) and off.boot + p / off.speed <= mk.deadline * (1 - MARGIN):
            out.append(o)
    return sorted(out, key=lambda o: (mk.price_per_work(o) or Fraction(0), o))


def place_rented(mk: Market, plan: Plan, jobs: list[int], counts: dict[int, int]) -> list[int]:
    """First fit of ``jobs`` (in the given order) on the offer with the least cost per
    work that can run each (the next ones once it has no room and no ``max_count``
    left): its first open node with room, or a new node when that costs less than the
    open node's bill grows. Returns the jobs no offer could take."""
    p = mk.instance.durations
    _, cls = mk.classes
    left = []
    open_bins: dict[int, list[Bin]] = {}
    for b in plan:
        if b.offer is not None:
            open_bins.setdefault(b.offer, []).append(b)
    cap = {id(b): room(mk, b) + b.work for bs in open_bins.values() for b in bs}
    smallest = float(p[jobs].min()) if jobs else 0.0
    by_class = [eligible_offers(mk, c, 0.0) for c in range(len(mk.classes[0]))]
    limit = mk.deadline * (1 - MARGIN)
    for j in jobs:
        c, pj = int(cls[j]), float(p[j])
        offs = [o for o in by_class[c] if mk.offers[o].boot + pj / mk.offers[o].speed <= limit]
        best: Bin | None = None
        best_delta = math.inf
        for o in offs:  # the cheapest offer with room on a node or a node left
            for b in open_bins.get(o, ()):
                if cap[id(b)] - b.work >= pj:
                    best = b
                    best_delta = float_bill(mk, o, b.work + pj) - float_bill(mk, o, b.work)
                    break
            if counts.get(o, 0) < mk.offers[o].max_count and (
                best is None or float_bill(mk, o, pj) < best_delta * (1 - 1e-9)
            ):
                best = Bin(o, mk.offers[o].farm)
                cap[id(best)] = room(mk, best)
                plan.append(best)
                open_bins.setdefault(o, []).append(best)
                counts[o] = counts.get(o, 0) + 1
            if best is not None:
                break
        if best is None:
            left.append(j)
            continue
        best.jobs.append(j)
        best.work += pj
        if cap[id(best)] - best.work < smallest:
            open_bins[best.offer].remove(best)  # type: ignore[index]
    return left


def greedy(mk: Market) -> tuple[Plan, list[int]]:
    """The first plan: the free farm filled first by earliest finish (longest jobs
    first), then what is left on rented nodes (:func:`place_rented`: the kind with the
    least cost per work, first-fit-decreasing style). Returns the plan and the jobs that
    could not be placed."""
    inst = mk.instance
    p = inst.durations
    _, cls = mk.classes
    order = inst.order_longest_first.tolist()
    plan: Plan = [Bin(None, f) for f in mk.free_farm]
    groups: dict[tuple[float, frozenset[str]], list[tuple[float, int]]] = {}
    for k, b in enumerate(plan):
        nd = inst.nodes[b.farm]  # type: ignore[index]
        if nd.free_at < mk.deadline:
            groups.setdefault((nd.speed, nd.provides), []).append((nd.free_at, k))
    for heap in groups.values():
        heapq.heapify(heap)
    serve = {
        (c, key): mk.classes[0][c] <= key[1] for c in range(len(mk.classes[0])) for key in groups
    }
    limit = mk.deadline * (1 - MARGIN)
    rest = []
    for j in order:
        pj, c = float(p[j]), int(cls[j])
        best_key, best_end = None, math.inf
        for key, heap in groups.items():
            if heap and serve[(c, key)]:
                end = heap[0][0] + pj / key[0]
                if end < best_end and end <= limit:
                    best_key, best_end = key, end
        if best_key is None:
            rest.append(j)
            continue
        _, k = heapq.heapreplace(groups[best_key], (best_end, groups[best_key][0][1]))
        plan[k].jobs.append(j)
        plan[k].work += pj
    left = place_rented(mk, plan, rest, {})
    return plan, left


#: seeded orders tried, after longest first and its reverse, on a node whose
#: floating-point clock passes the deadline though its exact end does not
ORDER_TRIES = 6


def clock_order(mk: Market, start: float, speed: float, jobs: list[int]) -> list[int] | None:
    """``jobs`` (given longest first) in an order whose floating-point clock, as
    ``Schedule.sequenced`` runs it (one running sum from ``start``), ends by the deadline:
    as given, reversed, then seeded shuffles (the same every time); None when none does.
    The exact end does not depend on the order; the rounding of the running sum does."""
    run = (mk.instance.durations[jobs] / speed).tolist()
    idx = list(range(len(jobs)))
    for t in range(ORDER_TRIES + 2):
        if t < 2:
            seq = idx if t == 0 else idx[::-1]
        else:
            seq = list(idx)
            random.Random(t - 2).shuffle(seq)
        clock = start
        for i in seq:
            clock = clock + run[i]
        if clock <= mk.deadline:
            return [jobs[i] for i in seq]
        if t == 0 and math.fsum(run) + start > mk.deadline * (1 + 1e-9):
            return None  # over by more than rounding: no order helps
    return None


def _orders(mk: Market, sched: Schedule) -> npt.NDArray[np.intp] | None:
    """A job order for ``Schedule.sequenced`` in which every node ends by the deadline in
    floating point (longest first where that does, :func:`clock_order` elsewhere), or
    None."""
    inst = sched.instance
    lf = inst.order_longest_first
    node_of = sched.node_of
    grouped = lf[np.argsort(node_of[lf], kind="stable")]
    bounds = np.searchsorted(node_of[grouped], np.arange(len(inst.nodes) + 1))
    late = [  # nodes given jobs that end late (a busy node given none is no part of it)
        k for k in np.flatnonzero(sched.loads > mk.deadline).tolist() if bounds[k + 1] > bounds[k]
    ]
    parts: list[npt.NDArray[np.intp]] = []
    last = 0
    for k in late:
        lo, hi = int(bounds[k]), int(bounds[k + 1])
        nd = inst.nodes[k]
        seq = clock_order(mk, nd.free_at, nd.speed, grouped[lo:hi].tolist())
        if seq is None:
            return None
        parts += [grouped[last:lo], np.array(seq, dtype=np.intp)]
        last = hi
    parts.append(grouped[last:])
    return np.concatenate(parts)


@dataclass(frozen=True, eq=False)
class Verified:
    """A plan checked exactly: its schedule, exact cost, rented count per kind."""

    schedule: Schedule
    cost: Fraction
    rent: dict[str, int]
    rented: int
    bills: tuple[Fraction, ...]  # per node of the schedule (0 for free ones)

    @property
    def key(self) -> tuple[Fraction, int]:
        return self.cost, self.rented


def verify(mk: Market, plan: Plan) -> Verified | None:
    """The plan as a schedule, checked exactly (see the module docstring); None when a
    node's last job would end after the deadline or a job is missing or misplaced."""
    inst = mk.instance
    p = inst.durations
    names, cls = mk.classes
    nodes: list[Node] = list(inst.nodes)
    node_of = np.full(inst.n, -1, dtype=np.int32)
    bills = [Fraction(0)] * len(nodes)
    owner: list[Bin | None] = [None] * len(nodes)
    rent: dict[str, int] = {}
    kinds = [b for b in plan if b.farm is None and b.jobs]
    kinds.sort(key=lambda b: b.offer)  # type: ignore[arg-type,return-value]
    for b in plan:
        if b.farm is not None:
            owner[b.farm] = b
    for b in kinds:
        off = mk.offers[b.offer]  # type: ignore[index]
        rent[off.name] = rent.get(off.name, 0) + 1
        nodes.append(Node(f"{off.name}-{rent[off.name]:02d}", off.speed, off.provides, off.boot))
        owner.append(b)
        bills.append(Fraction(0))
    width = {k: max(2, len(str(v))) for k, v in rent.items()}
    seen: dict[str, int] = {}
    for k in range(inst.m, len(nodes)):
        name = mk.offers[owner[k].offer].name  # type: ignore[union-attr,index]
        seen[name] = seen.get(name, 0) + 1
        nd = nodes[k]
        nodes[k] = Node(f"{name}-{seen[name]:0{width[name]}d}", nd.speed, nd.provides, nd.free_at)
    for k, ob in enumerate(owner):
        if ob is None or not ob.jobs:
            continue
        b = ob
        idx = np.array(b.jobs, dtype=np.intp)
        if (node_of[idx] != -1).any():
            return None
        node_of[idx] = k
        if not all(names[c] <= nodes[k].provides for c in set(cls[idx].tolist())):
            return None
        end = Fraction(nodes[k].free_at) + exact_sum(p[idx]) / Fraction(nodes[k].speed)
        if end > mk.d_exact:
            return None
        if b.offer is not None:
            bills[k] = mk.bill(b.offer, end)
    if (node_of < 0).any():
        return None
    sched = Schedule.sequenced(inst.with_nodes(nodes), node_of)
    # only nodes that run a job must end by the deadline (a farm node busy past it and
    # given nothing is no part of the plan)
    running = np.bincount(node_of, minlength=len(nodes)) > 0
    if float(sched.loads[running].max()) > mk.deadline:
        order = _orders(mk, sched)
        if order is None:
            return None
        sched = Schedule.sequenced(sched.instance, node_of, order)
        if float(sched.loads[running].max()) > mk.deadline:
            return None
    cost = sum(bills, Fraction(0))
    return Verified(sched, cost, rent, len(kinds), tuple(bills))


def as_plan(mk: Market, v: Verified) -> Plan:
    """A verified plan back as bins (to improve it)."""
    inst = mk.instance
    sched = v.schedule
    nodes = sched.instance.nodes
    by_name = {o.name: i for i, o in enumerate(mk.offers) if o.farm is None}
    farm_offer = {o.farm: i for i, o in enumerate(mk.offers) if o.farm is not None}
    bins = []
    for k in range(len(nodes)):
        if k < inst.m:
            bins.append(Bin(farm_offer.get(k), k))
        else:
            bins.append(Bin(by_name[nodes[k].id.rsplit("-", 1)[0]], None))
    p: FloatArray = inst.durations
    for j, k in enumerate(sched.node_of.tolist()):
        bins[k].jobs.append(j)
        bins[k].work += float(p[j])
    return bins


def improve(mk: Market, plan: Plan, budget: Budget) -> Plan | None:
    """Moves within the budget (floating point; the caller verifies): each rented node
    re-kinded to the offer with the least bill for its jobs, then each rented node,
    cheapest first, closed when its jobs fit in the room of the other nodes for less
    than its bill. None when nothing changed."""
    p = mk.instance.durations
    names, cls = mk.classes
    counts: dict[int, int] = {}
    for b in plan:
        if b.offer is not None and b.jobs:
            counts[b.offer] = counts.get(b.offer, 0) + 1
    changed = False
    for b in plan:
        if b.farm is not None or not b.jobs:
            continue
        need = {int(c) for c in set(cls[b.jobs].tolist())}
        cur, pick = float_bill(mk, b.offer, b.work), b.offer  # type: ignore[arg-type]
        for o, off in enumerate(mk.offers):
            if off.farm is not None or o == b.offer or counts.get(o, 0) >= off.max_count:
                continue
            if all(mk.offer_serves(o, c) for c in need) and (
                off.boot + b.work / off.speed <= mk.deadline * (1 - MARGIN)
            ):
                bill = float_bill(mk, o, b.work)
                if bill < cur * (1 - 1e-12):
                    cur, pick = bill, o
        if pick != b.offer:
            counts[b.offer] -= 1  # type: ignore[index]
            counts[pick] = counts.get(pick, 0) + 1  # type: ignore[index,arg-type]
            b.offer = pick
            changed = True
    costly = sorted(
        (b for b in plan if b.offer is not None and b.jobs),
        key=lambda b: float_bill(mk, b.offer, b.work),  # type: ignore[arg-type]
    )
    for b in costly:
        if budget.expired():
            break
        others = [t for t in plan if t is not b and (t.jobs or t.offer is None)]
        saved = float_bill(mk, b.offer, b.work)  # type: ignore[arg-type]
        moved: list[tuple[int, Bin]] = []
        extra = 0.0
        for j in sorted(b.jobs, key=lambda j: -float(p[j])):
            pj, c = float(p[j]), names[cls[j]]
            best, best_delta = None, math.inf
            for t in others:
                prov = (
                    mk.offers[t.offer].provides
                    if t.offer is not None
                    else mk.instance.nodes[t.farm].provides  # type: ignore[index]
                )
                serves = c <= prov
                if serves and room(mk, t) >= pj:
                    delta = (
                        0.0
                        if t.offer is None
                        else (
                            float_bill(mk, t.offer, t.work + pj) - float_bill(mk, t.offer, t.work)
                        )
                    )
                    if delta < best_delta:
                        best, best_delta = t, delta
                        if delta == 0.0:
                            break
            if best is None or extra + best_delta >= saved:
                break
            best.jobs.append(j)
            best.work += pj
            extra += best_delta
            moved.append((j, best))
        if len(moved) == len(b.jobs) and extra < saved * (1 - 1e-12):
            b.jobs, b.work = [], 0.0
            changed = True
        else:
            for j, t in moved:
                t.jobs.remove(j)
                t.work -= float(p[j])
    return [b for b in plan if b.jobs or b.offer is None] if changed else None
