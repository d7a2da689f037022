"""The rental search (:func:`.rental.rent` calls :func:`search`): a first plan (the free
farm filled scarcest class first, rented nodes opened on the cheapest offer per work), the
``work`` bound, today's sizing answer when there is one kind and no farm
(:mod:`.rental_single`), the ``cover`` relaxation (:mod:`.rental_cover`) searched below
the first plan's cost, its optimum packed node by node to the tick (:mod:`.rental_fill`,
with a repacking of the nodes left open when jobs are left over; a plan at its cost is
proven optimal), for a small batch the exhaustive branch and bound
(:mod:`.rental_branch`, the ``search`` bound when it finishes), moves that re-kind or
close rented nodes, and the ``lp_patterns`` bound; then, while the gap is open and the
budget lasts, more packings of the ``cover`` optimum (units spread otherwise over the
nodes, nodes filled in other orders, more room left to the exact completions), so that a
search with time left never stops unproven on its own. Every plan is verified exactly
(:func:`.rental_plan.verify`); every bound is exact (:mod:`.rental_bounds`,
:mod:`.rental_cover`, :mod:`.rental_branch`). The first answer's time is counted from the
request's budget, its checks included.
"""

from __future__ import annotations

import math
import random
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from .budget import Budget
from .errors import InvalidInstance, Issue
from .rental_bounds import pattern_bound, work_bound
from .rental_branch import BRANCH_JOBS, branch
from .rental_cover import Cover, cover_bound
from .rental_fill import fill_targets, open_nodes
from .rental_plan import (
    Market,
    Verified,
    as_plan,
    greedy,
    improve,
    place_rented,
    room,
    verify,
)
from .rental_single import applies, from_sizing

#: guided packings tried from the cover relaxation
GUIDED_TRIES = 6
#: seconds a packing step of 10,000 jobs may take: not started with less left
STEP_SECONDS = 0.25
#: short jobs' room more left to a fill's exact completion, by packing variant (the
#: last: the whole room when it is small enough for one)
KEEPS = (0, 3, 10, 1 << 40)


@dataclass
class Found:
    """The best verified plan so far, every proven bound on the cheapest cost by its rule
    (``bounds``, each with its ``evidence``), when the first plan was found and whether
    the budget ran out before a proof."""

    best: Verified
    bounds: dict[str, Fraction]
    evidence: dict[str, Any]
    first: float
    ran_out: bool = False

    @property
    def source(self) -> str:
        """The rule of the best bound (the first found of equal ones)."""
        return max(self.bounds, key=lambda k: self.bounds[k])

    @property
    def bound(self) -> Fraction:
        """The best bound so far."""
        return self.bounds[self.source]

    @property
    def proven(self) -> bool:
        return self.bound >= self.best.cost


def _first(mk: Market, exact: bool) -> Verified | None:
    """The first plan: the free farm filled scarcest class first (:mod:`.rental_fill`),
    the rest on rented nodes opened on the offer with the least price per work; the
    older greedy (:func:`.rental_plan.greedy`) when that leaves jobs over."""
    farm = [(None, f, mk.farm_capacity(f)) for f in mk.free_farm]
    plan, left = fill_targets(mk, farm, exact=exact)
    left = open_nodes(mk, plan, left, exact=exact)
    counts: dict[int, int] = {}
    for b in plan:
        if b.offer is not None:
            counts[b.offer] = counts.get(b.offer, 0) + 1
    if left:
        left = place_rented(mk, plan, left, counts)
    if not left:
        v = verify(mk, plan)
        if v is not None:
            return v
    plan, left = greedy(mk)
    return verify(mk, plan) if not left else None


def search(mk: Market, budget: Budget, outer: Budget) -> Found:
    best = _first(mk, exact=False)
    bounds: dict[str, Fraction] = {}
    evidence: dict[str, Any] = {}
    bounds["work"], evidence["work"] = work_bound(mk)
    if best is None:  # the greedy missed: pack the cover relaxation's optimum instead
        best = _guided(mk, None, budget)
    if best is None:
        raise InvalidInstance(
            "no plan within the kinds' max_count was found (not proven impossible)",
            [
                Issue(("kinds", o, "max_count"), "the search found no plan")
                for o, off in enumerate(mk.offers)
                if off.farm is None
            ],
        )
    first = outer.elapsed()  # from the request, its checks included
    if applies(mk):  # one kind, no farm, no boot: today's sizing answer and bound
        v, bounds["nodes"], evidence["nodes"] = from_sizing(mk, budget.child(0.5))
        if v is not None and v.key < best.key:
            best = v
    found = Found(best, bounds, evidence, first)
    _check_bound(found)
    cov: Cover | None = None
    if not found.proven:
        cov = cover_bound(mk, best.cost, budget.child(0.5))
        evidence["cover"] = {"complete": cov.complete, "visited": cov.visited}
        if cov.complete:
            bounds["cover"] = min(cov.value, best.cost)
        _check_bound(found)
        if not found.proven:
            guided = _guided(mk, best.cost, budget, cov)
            if guided is not None and guided.key < found.best.key:
                found.best = guided
            _check_bound(found)
    if not found.proven and mk.instance.n <= BRANCH_JOBS:
        br = branch(mk, found.best, found.bound, budget.child(0.8))
        found.best = br.best
        evidence["search"] = {
            "complete": br.complete,
            "reached_bound": br.reached,
            "visited": br.visited,
        }
        if br.bound is not None:
            bounds["search"] = br.bound
        _check_bound(found)
    if not found.proven and budget.remaining() >= STEP_SECONDS:
        better = improve(mk, as_plan(mk, found.best), budget)
        v = verify(mk, better) if better is not None else None
        if v is not None and v.key < found.best.key:
            found.best = v
        _check_bound(found)
    if not found.proven and not budget.expired():
        bounds["lp_patterns"], evidence["lp_patterns"] = pattern_bound(mk, budget)
        _check_bound(found)
    if not found.proven:
        _more(mk, found, budget, cov)
    found.ran_out = not found.proven  # _more returns unproven only once the budget is spent
    return found


def _more(mk: Market, found: Found, budget: Budget, cov: Cover | None) -> None:
    """With the gap still open, more packings of the ``cover`` optimum while the budget
    lasts: the billed units spread otherwise over the nodes of each offer and the nodes
    filled in other orders (seeded, the same every time); a packing is not started with
    less than one and a half times the last one's time left."""
    variant, took = 0, 0.0
    while (
        not found.proven
        and budget.remaining() >= max(STEP_SECONDS, 1.5 * took)
        and not budget.expired()
    ):
        variant += 1
        t0 = budget.elapsed()
        v = _guided(mk, found.best.cost, budget, cov, variant)
        took = budget.elapsed() - t0
        if v is not None and v.key < found.best.key:
            found.best = v
            _check_bound(found)


def _check_bound(found: Found) -> None:
    """The best bound so far is never above the plan's cost (the bounds are proofs)."""
    if found.bound > found.best.cost:
        raise ArithmeticError(
            f"bound {found.source} above a verified plan's cost: a bound is wrong"
        )


def _guided(
    mk: Market,
    upper: Fraction | None,
    budget: Budget,
    known: Cover | None = None,
    variant: int = 0,
) -> Verified | None:
    """Pack the ``cover`` relaxation's optimum (``known`` when it holds one) best fit
    decreasing (the rest by cheapest insertion); when jobs are left over, ask the
    relaxation again for that much more work. ``variant`` > 0: the units spread and the
    nodes ordered otherwise (:func:`_caps`, :func:`.rental_fill.fill_targets`). The best
    verified plan found, or None."""
    extra = Fraction(0)
    best: Verified | None = None
    for _ in range(GUIDED_TRIES):
        if budget.remaining() < STEP_SECONDS:  # a packing takes about this long
            break
        if known is not None and known.units and extra == 0:
            cov = known
        else:
            cov = cover_bound(mk, None, budget.child(0.3), extra=extra)
        if not cov.units and extra > 0:
            break
        keep = KEEPS[variant % len(KEEPS)] if variant else 0
        plan, left = fill_targets(mk, _caps(mk, cov, variant), seed=variant or None, keep=keep)
        left = open_nodes(mk, plan, left)
        counts: dict[int, int] = {}
        for b in plan:
            if b.offer is not None:
                counts[b.offer] = counts.get(b.offer, 0) + 1
        still = place_rented(mk, plan, left, counts)
        v = verify(mk, plan) if not still else None
        if v is not None and (best is None or v.key < best.key):
            best = v
        if not left or (upper is not None and cov.value >= upper):
            break
        lost = sum(room(mk, b) for b in plan if b.farm is None and b.jobs) + float(
            mk.instance.durations[left].sum()
        )
        extra += Fraction(max(lost, float(mk.instance.durations[left].max())))
    return best


def _caps(mk: Market, cov: Any, variant: int = 0) -> list[tuple[int | None, int | None, Fraction]]:
    """The nodes of a cover solution: the free farm, and per offer its nodes with their
    billed units spread to do the most work (each up to the units ending by the
    deadline first). ``variant`` > 0: then units moved between nodes below that limit
    (seeded; the total work they can do stays the same), evenly for variant 1."""
    caps: list[tuple[int | None, int | None, Fraction]] = [
        (None, f, mk.farm_capacity(f)) for f in mk.free_farm
    ]
    d = mk.d_exact
    rng = random.Random(variant)
    for o, h_total in cov.units.items():
        n = cov.nodes[o]
        if n == 0:
            continue
        lo, hi = mk.hmin(o), mk.htop(o)
        fl = max(lo, min(hi, math.floor(d / mk.unit)))
        hs = [lo] * n
        rest = h_total - lo * n
        for limit in (fl, hi):
            for i in range(n):
                add = min(rest, limit - hs[i])
                if add > 0:
                    hs[i] += add
                    rest -= add
        if variant:
            _respread(hs, lo, fl, rng, even=variant == 1)
        for h in hs:
            caps.append((o, mk.offers[o].farm, mk.capacity(o, h)))
    return caps


def _respread(hs: list[int], lo: int, top: int, rng: random.Random, *, even: bool) -> None:
    """Move billed units between the nodes whose units are in ``[lo, top]`` (there a
    node's work grows by the same amount per unit, so the total stays), evenly or at
    random."""
    idx = [i for i, h in enumerate(hs) if lo <= h <= top]
    if len(idx) < 2:
        return
    total = sum(hs[i] for i in idx)
    if even:
        q, r = divmod(total, len(idx))
        for k, i in enumerate(idx):
            hs[i] = q + (1 if k < r else 0)
        return
    for _ in range(len(idx)):
        a, b = rng.sample(idx, 2)
        step = rng.randint(0, max(0, min(hs[a] - lo, top - hs[b], 1 + (top - lo) // 8)))
        hs[a] -= step
        hs[b] += step
