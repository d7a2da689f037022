"""An exhaustive branch and bound for small rentals, in exact arithmetic.

A batch of at most :data:`BRANCH_JOBS` jobs is small enough to walk every plan: each job
in turn (longest first) goes to a free farm node, to a priced node already open, or to a
new node of an offer with ``max_count`` left, wherever it still ends by the deadline.
Work is counted in whole multiples of ``1 / S`` seconds (``S`` the least common
denominator of the durations, so every sum is exact) and each capacity is rounded down
to that grid, which loses nothing: a load on the grid fits a capacity exactly when it
fits its rounding down. Bills are exact fractions (:meth:`.rental_plan.Market.bill`).

The walk takes the cheapest step first and cuts a branch once its cost so far plus a
lower bound on the rest reaches the best plan's cost (with no fewer rented nodes). The
rest's bound: the work of the jobs left beyond the room of the free farm nodes and of the
open priced nodes within the units they are already billed, at the least price of one
more billed unit per work it adds (``unit price / (speed * unit)``: one more unit lets a
node do at most ``speed * unit`` more seconds of speed-1 work, and a new node's bill is
at least its work at that rate). Symmetries are cut exactly: nodes of one type with equal
loads are one choice, and one new node per offer is tried.

Every leaf is a plan meeting the deadline exactly; :func:`.rental_plan.verify` checks it
again (the floating-point clock of ``Schedule.sequenced`` too) and the verified leaf with
the least (cost, rented nodes) is kept. When the walk finishes, no plan costs less than
the least cost of its leaves (a cut branch costs at least the best verified plan), so the
``search`` bound is the least of the best verified cost and the cost of any leaf that
:func:`.rental_plan.verify` refused.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

from .budget import Budget
from .rental_plan import Bin, Market, Verified, verify

#: batches of at most this many jobs are searched exhaustively
BRANCH_JOBS = 24


@dataclass
class Branch:
    """The walk's outcome: the best verified plan (the one given when none is better),
    the ``search`` bound (None unless ``complete``), whether it finished, whether it
    stopped on a plan at the target, and the nodes it visited."""

    best: Verified
    bound: Fraction | None
    complete: bool
    reached: bool
    visited: int


@dataclass
class _Node:
    """One node of the walk: a free farm node (``offer`` None) or a priced one; ``kind``
    identifies nodes that are interchangeable (equal loads: one choice)."""

    offer: int | None
    farm: int | None
    cap: int  # work it can do by the deadline, on the grid
    serves: frozenset[int]  # classes
    kind: tuple[object, ...]
    load: int = 0
    jobs: list[int] | None = None


class _Walk:
    def __init__(self, mk: Market, best: Verified, target: Fraction, budget: Budget) -> None:
        self.mk, self.budget = mk, budget
        inst = mk.instance
        exact = [Fraction(x) for x in inst.durations.tolist()]
        self.scale = scale = math.lcm(1, *[f.denominator for f in exact])
        self.w = [int(f * scale) for f in exact]
        names, cls = mk.classes
        nc = len(names)
        self.cls = [int(c) for c in cls.tolist()]
        self.order = sorted(range(inst.n), key=lambda j: (-self.w[j], self.cls[j], j))
        # a job equal to the one before it (duration and class) goes to a node no earlier
        self.twin = [
            i > 0
            and self.w[self.order[i]] == self.w[self.order[i - 1]]
            and self.cls[self.order[i]] == self.cls[self.order[i - 1]]
            for i in range(inst.n)
        ]
        self.at = [0] * inst.n  # node index of the job at each position
        # per class, the work of the jobs from each position on
        self.suffix = [[0] * (inst.n + 1) for _ in range(nc)]
        for i in range(inst.n - 1, -1, -1):
            j = self.order[i]
            for c in range(nc):
                self.suffix[c][i] = self.suffix[c][i + 1] + (self.w[j] if self.cls[j] == c else 0)
        # costs in whole multiples of 1 / den
        unit_cost = [mk.unit_cost(o) for o in range(len(mk.offers))]
        self.den = math.lcm(1, *[u.denominator for u in unit_cost])
        self.uc = [int(u * self.den) for u in unit_cost]
        self.best = best
        self.best_q = math.ceil(best.cost * self.den)
        self.target_q = target * self.den
        self.nodes: list[_Node] = []
        for f in mk.free_farm:
            nd = inst.nodes[f]
            self.nodes.append(
                _Node(
                    None,
                    f,
                    math.floor(mk.farm_capacity(f) * scale),
                    frozenset(c for c in range(nc) if mk.farm_serves(f, c)),
                    (nd.speed, nd.free_at, nd.provides),
                    0,
                    [],
                )
            )
        self.offer_cap = [max(-1, math.floor(c * scale)) for c in mk.full_capacity]
        self.offer_serves = [
            frozenset(c for c in range(nc) if mk.offer_serves(o, c)) for o in range(len(mk.offers))
        ]
        # per class: the least price of one more billed unit per grid step of work it
        # adds, on the offers serving it, as (numerator, denominator) in 1 / den
        self.rates: list[tuple[int, int] | None] = []
        for c in range(nc):
            rates = [
                Fraction(self.uc[o]) / (Fraction(off.speed) * mk.unit * scale)
                for o, off in enumerate(mk.offers)
                if self.offer_cap[o] > 0 and c in self.offer_serves[o]
            ]
            r = min(rates, default=None)
            self.rates.append(None if r is None else (r.numerator, r.denominator))
        self.nc = nc
        self.counts = [0] * len(mk.offers)
        self._bills: dict[tuple[int, int], int] = {}
        self._rooms: dict[tuple[int, int], int] = {}
        self.floor: Fraction | None = None
        self.visited = 0
        self.stopped = False
        self.done = False

    def _end(self, o: int, load: int) -> Fraction:
        off = self.mk.offers[o]
        return Fraction(off.boot) + Fraction(load, self.scale) / Fraction(off.speed)

    def bill(self, o: int, load: int) -> int:
        """The bill of a used node of offer ``o`` with ``load`` (a node running only
        zero-length jobs is used: billed to its boot), in 1 / den."""
        key = (o, load)
        got = self._bills.get(key)
        if got is None:
            got = self._bills[key] = self.uc[o] * self.mk.units(self._end(o, load))
        return got

    def billed_room(self, o: int, load: int) -> int:
        """Work a priced node with ``load`` can still take within its billed units."""
        key = (o, load)
        got = self._rooms.get(key)
        if got is None:
            mk = self.mk
            cap = math.floor(mk.capacity(o, mk.units(self._end(o, load))) * self.scale)
            got = self._rooms[key] = max(0, min(cap, self.offer_cap[o]) - load)
        return got

    def rest(self, i: int) -> int:
        """A lower bound (in 1 / den) on what the jobs from position ``i`` on add: per
        class, their work beyond the room of the nodes serving it (module docstring)."""
        rooms = [0] * self.nc
        for nd in self.nodes:
            r = nd.cap - nd.load if nd.offer is None else self.billed_room(nd.offer, nd.load)
            if r > 0:
                for c in nd.serves:
                    rooms[c] += r
        low = 0
        for c in range(self.nc):
            over = self.suffix[c][i] - rooms[c]
            rate = self.rates[c]
            if over > 0 and rate is not None:
                low = max(low, -(-over * rate[0] // rate[1]))
        return low

    def run(self) -> None:
        self.dfs(0, 0, 0)

    def dfs(self, i: int, cost: int, rented: int) -> None:
        self.visited += 1
        if self.visited & 511 == 0 and self.budget.expired():
            self.stopped = True
        if self.stopped or self.done:
            return
        low = cost + self.rest(i) if i < len(self.order) else cost
        if low > self.best_q or (low == self.best_q and rented >= self.best.rented):
            return
        if i == len(self.order):
            self.leaf(cost)
            return
        j = self.order[i]
        w, c = self.w[j], self.cls[j]
        first = self.at[i - 1] if self.twin[i] else 0
        steps: list[tuple[int, int, int, int]] = []  # delta, new rented, node, offer
        seen: set[tuple[object, ...]] = set()
        for k in range(first, len(self.nodes)):
            nd = self.nodes[k]
            if c not in nd.serves or nd.load + w > nd.cap or (nd.kind, nd.load) in seen:
                continue
            seen.add((nd.kind, nd.load))
            delta = (
                0
                if nd.offer is None
                else self.bill(nd.offer, nd.load + w) - self.bill(nd.offer, nd.load)
            )
            steps.append((delta, 0, k, -1))
        for o, off in enumerate(self.mk.offers):
            if (
                self.counts[o] < off.max_count
                and c in self.offer_serves[o]
                and w <= self.offer_cap[o]
            ):
                steps.append((self.bill(o, w), int(off.farm is None), -1, o))
        steps.sort(key=lambda s: (s[0], s[1]))
        for delta, new, k, o in steps:
            if cost + delta > self.best_q:
                break  # the steps after it cost no less
            if k < 0:
                off = self.mk.offers[o]
                kind = ("offer", o)
                nd = _Node(o, off.farm, self.offer_cap[o], self.offer_serves[o], kind, w, [j])
                self.nodes.append(nd)
                self.counts[o] += 1
                self.at[i] = len(self.nodes) - 1
                self.dfs(i + 1, cost + delta, rented + new)
                self.counts[o] -= 1
                self.nodes.pop()
            else:
                nd = self.nodes[k]
                nd.load += w
                nd.jobs.append(j)  # type: ignore[union-attr]
                self.at[i] = k
                self.dfs(i + 1, cost + delta, rented)
                nd.jobs.pop()  # type: ignore[union-attr]
                nd.load -= w
            if self.stopped or self.done:
                return

    def leaf(self, cost_q: int) -> None:
        cost = Fraction(cost_q, self.den)
        p = self.mk.instance.durations
        plan = [
            Bin(nd.offer, nd.farm, list(nd.jobs or ()), float(p[nd.jobs or []].sum()))
            for nd in self.nodes
        ]
        v = verify(self.mk, plan)
        if v is None:  # exact, but no order keeps the floating-point clock in time
            self.floor = cost if self.floor is None else min(self.floor, cost)
            return
        if v.cost != cost:
            raise ArithmeticError("the branch and bound priced a plan unlike verify")
        if v.key < self.best.key:
            self.best, self.best_q = v, cost_q
            if cost_q <= self.target_q:
                self.done = True  # a proven bound meets it


def branch(mk: Market, best: Verified, target: Fraction, budget: Budget) -> Branch:
    """Walk every plan of a small batch (module docstring) for one better than ``best``;
    stop early when a plan reaches ``target`` (a proven bound) or ``budget`` runs out."""
    walk = _Walk(mk, best, target, budget)
    walk.run()
    complete = not walk.stopped and not walk.done
    bound: Fraction | None = None
    if complete:
        bound = walk.best.cost if walk.floor is None else min(walk.best.cost, walk.floor)
    return Branch(walk.best, bound, complete, walk.done, walk.visited)


__all__ = ["BRANCH_JOBS", "Branch", "branch"]
