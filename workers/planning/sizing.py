"""Deadline sizing: the fewest nodes of one kind whose plan meets a deadline.

With identical nodes this is one-dimensional bin packing: every node is a bin whose
capacity is the deadline, every job an item of ``duration / speed`` seconds
(``../shared/references.md`` section 5). The answer is an interval, proven from both
sides: ``nodes_needed`` comes with a plan that meets the deadline (first fit decreasing,
best fit decreasing, on batches of long jobs and short fillers the long jobs first and
their gaps filled exactly (``split_fill``, :mod:`.sizing_split`; the long jobs moved by
:mod:`.sizing_gaps` until the gaps fit the lower bound), the LP's fractional
packing rounded (:mod:`.sizing_round`) or its dive (:mod:`.sizing_lp`), the perfect
packing search of
:mod:`workers.planning.perfect` at the lower bound, minimum bin slack, the local search
or the exact search), and ``nodes_lower_bound`` with the rule that proves no plan with
fewer nodes exists (``total_work`` = the work over the deadline rounded up;
Martello-Toth ``L2``; the ``cardinality`` bound; on batches of few jobs per node
``matching`` and the LP bound ``lp_farley`` of :mod:`.sizing_lp` (on batches of long
jobs and short fillers also on the long jobs alone); ``filler_waste``, the gaps the
fillers cannot fill; ``search`` when the exact search refuted a count). When they meet,
the answer is proven optimal.

Rounding, so that both sides stay proofs for the true (real) durations. Work is
measured in ticks of ``resolution`` seconds of a speed-1 node; a node can do
``C = floor(deadline * speed / resolution)`` ticks (computed exactly with fractions):

* lower bounds use every job *rounded down* to ticks. A set of jobs that fits a node
  in real seconds has a tick sum that is an integer no larger than its real work over
  the resolution, so no larger than C: every real plan is a packing of the rounded
  items, and a bound on those bins is a bound for the real jobs;
* packings found by the perfect packing, local and exact searches use every job
  *rounded up*: their real work is at most their tick sum, at most C, so they fit in
  real seconds too;
* every plan returned is checked again on the real durations in exact arithmetic: each
  node's work ``sum(duration) / speed`` is at most the deadline as exact rationals, and
  its floating-point times (``start + duration / speed``, back to back, as
  :class:`workers.planning.result.Schedule` states them) end by the deadline too. A plan
  built in floating point that meets the deadline only up to round-off is repaired
  (a few jobs moved, a node added if need be) before its node count is claimed.

When every duration is a whole multiple of a power of two coarser than ``resolution``
(whole seconds, say), the ticks are of that grid instead (``sizing_ticks.solver_grid``):
each job is then a whole number of ticks, rounded neither way, and ``C`` loses nothing,
so the packing in ticks is exactly the packing in seconds.

Ticks are int64 and exact as floats only up to ``rational.MAX_TICKS``: a capacity or a
total work past it is refused (``/resolution``), naming the finest resolution that works.

Cost model (stated in every result as ``cost_model``): every node of the farm is rented
from 0 until the makespan, billed per started unit of the granularity (second, minute or
hour): ``nodes * ceil(makespan / unit) * unit / 3600 * node_hour_cost`` (the ceiling
taken exactly).
"""

from __future__ import annotations

import math
import time
from collections.abc import Callable, Iterable, Sequence
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from . import bounds as bounds_mod
from .binpacking import (
    FOUND,
    REFUTED,
    best_fit_decreasing,
    first_fit_decreasing,
    min_bin_slack,
    pack_search,
    reduce_bins,
)
from .budget import Budget
from .errors import Infeasible, InvalidInstance, Issue
from .kernels import least_loaded
from .model import Instance, Node
from .perfect import perfect_fill
from .rational import array_sum, ceil_div, down, ticks, up
from .result import Schedule
from .sizing_fit import Fit as _Fit
from .sizing_lp import LP_SHARE, lp_worth
from .sizing_phase import State as _State
from .sizing_phase import lp_phase as _lp_phase
from .sizing_phase import split_phase as _split_phase
from .sizing_result import (  # re-exported for their importers
    BILLING as BILLING,
)
from .sizing_result import (
    COST_MODEL as COST_MODEL,
)
from .sizing_result import (
    DEFAULT_BILLING as DEFAULT_BILLING,
)
from .sizing_result import (
    MAX_CURVE_NODES as MAX_CURVE_NODES,
)
from .sizing_result import (
    CurveRow as CurveRow,
)
from .sizing_result import (
    SizingProgress as SizingProgress,
)
from .sizing_result import (
    SizingProgressHook as SizingProgressHook,
)
from .sizing_result import (
    SizingResult as SizingResult,
)
from .sizing_result import (
    cost_of as cost_of,
)
from .sizing_ticks import _tick_limit as _tick_limit
from .sizing_ticks import capacity_ticks as capacity_ticks
from .sizing_ticks import solver_grid
from .sizing_ticks import work_ticks as work_ticks

#: billing granularities and their unit in seconds
DEFAULT_MAX_NODES = 2000
#: the curve goes this far below the lower bound and above the answer
CURVE_BELOW, CURVE_ABOVE = 2, 3
#: the first call of the exact search gets about this many bin visits (then doubled
#: while the budget lasts)
SEARCH_FIRST_WORK = 20_000_000
#: minimum bin slack: search nodes per bin, and steps of its two-item completion
#: (fewer when the bins are many: about MBS_WORK nodes and MBS_PAIR_WORK steps in all)
MBS_NODES, MBS_WORK, MBS_PAIR_WORK = 1000, 4_000_000, 30_000_000
#: ... which take about MBS_SECONDS in all; minimum bin slack gets MBS_SHARE of the time
#: left (it does not read the clock itself), and is skipped when even its least work (20
#: nodes and 200 pair steps a bin: about MBS_FLOOR_PER_BIN seconds a bin) exceeds that
MBS_SECONDS, MBS_SHARE, MBS_FLOOR_PER_BIN = 1.4, 0.5, 1.5e-5
#: local search: share of each round's time, bins emptied per try, move evaluations per try
LOCAL_SHARE, LOCAL_FREE_BINS, LOCAL_WORK = 0.5, 3, 2_000_000
#: share of the time left that the search may use (the curve comes after it)
SEARCH_SHARE = 0.85
#: share of the time left that the perfect packing search (workers.planning.perfect) may
#: use at the lower bound before minimum bin slack and the search (it gives up sooner
#: when the bound looks out of reach)
FILL_SHARE = 0.9
#: ... for batches of more than this many jobs (below, the exact search is the stronger)
FILL_MIN_JOBS = 60
#: the LP step (:mod:`.sizing_lp`) gets LP_SHARE of the time left before the perfect
#: packing on batches of at most LP_FULL_JOBS_PER_NODE jobs per node at the lower bound;
#: beyond, LP_DENSE_SHARE before it (its refutations take milliseconds; no dives) and
#: LP_SHARE of what is left after it (the perfect packing closes most of those batches)
LP_FULL_JOBS_PER_NODE, LP_DENSE_SHARE = 2.9, 0.08
#: the plan of long jobs and exact fills (:mod:`.sizing_split`, with the gap repair of
#: :mod:`.sizing_gaps`) and the LP bound on the long jobs may use this share of the time
#: left (the fills take about 15 us a node; on 100,000 farm jobs the plan needs 0.4-0.5 s)
SPLIT_SHARE = 0.9
#: the exact search runs for lower bounds up to this many nodes (a node of it costs O(bins))
EXACT_MAX_BINS = 1000
#: best fit decreasing runs for batches up to this many jobs (its bin moves grow with n)
BFD_MAX_JOBS = 50_000
#: what follows the searches (the plan's nodes, the curve) costs about this much per job
#: and per node of the best plan (0.2-0.3 s for 100,000 jobs on our machine, more under load):
#: the searches leave it that much of the budget, and at least half of it to themselves
POST_SECONDS_PER_JOB, POST_SECONDS_PER_NODE = 1.6e-6, 2.5e-6
#: curve rows use the lifted bin-packing bound for batches up to this many jobs
CURVE_LIFT_MAX_JOBS = 20_000

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]


# -- the core ---------------------------------------------------------------------------
@dataclass(frozen=True, eq=False)
class SizingArgs:
    """A sizing request read into core objects: the jobs on one node of the kind to rent
    (``base``, with the deadline and resolution) and the options."""

    base: Instance
    max_nodes: int
    node_hour_cost: float | None
    billing: str
    curve_nodes: tuple[int, ...]

    @property
    def node(self) -> Node:
        return self.base.nodes[0]

    def check(self) -> None:
        """The checks that need no search (tens of microseconds a job): a job no node of
        the kind can run or finish in time, a resolution too fine, more nodes needed than
        ``max_nodes`` by the lower bound alone. Raises what :func:`size` would."""
        base, node = self.base, self.node
        deadline = float(base.deadline)  # type: ignore[arg-type]
        _check_feasible(base, node, base.durations / node.speed, deadline)
        limit = Fraction(deadline) * Fraction(node.speed)
        too_fine = _tick_limit(base.durations, limit, base.resolution)
        if too_fine:
            raise InvalidInstance("the resolution is too fine for these times", too_fine)
        grid = solver_grid(base.durations, base.resolution)
        q_lo, _ = ticks(base.durations, grid)
        cap = capacity_ticks(deadline, node.speed, grid)
        lower, source, _, _ = _lower_bound(q_lo, cap, array_sum(base.durations), limit)
        _check_lower(lower, source, self.max_nodes)


def size(
    durations: Iterable[float] | npt.ArrayLike,
    deadline: float,
    node: Node | None = None,
    *,
    time_budget: float = 1.0,
    job_ids: Sequence[str] | None = None,
    requires: Sequence[Iterable[str]] | None = None,
    max_nodes: int = DEFAULT_MAX_NODES,
    node_hour_cost: float | None = None,
    billing: str = DEFAULT_BILLING,
    curve_nodes: Sequence[int] = (),
    resolution: float = 1.0,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingResult:
    """The fewest nodes like ``node`` (default: speed 1) that finish the jobs by ``deadline``.

    ``durations`` are seconds on a speed-1 node. Raises :class:`InvalidInstance` for bad
    input and :class:`Infeasible` when a job is longer than the deadline on this node, a
    job requires a tag the node does not provide, or more than ``max_nodes`` are needed.
    """
    node = node if node is not None else Node("node")
    issues = check_options(max_nodes, node_hour_cost, billing, curve_nodes, time_budget)
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the sizing options", issues)
    if not (isinstance(deadline, int | float) and math.isfinite(deadline) and deadline > 0):
        raise InvalidInstance("bad deadline", [Issue(("deadline",), "must be a finite number > 0")])
    base = Instance.build(
        durations,
        [node],
        job_ids=job_ids,
        requires=requires,
        deadline=deadline,
        resolution=resolution,
    )
    args = SizingArgs(base, max_nodes, node_hour_cost, billing, tuple(curve_nodes))
    return _size(args, Budget(time_budget, should_stop), progress)


def _check_lower(lower: int, source: str, max_nodes: int) -> None:
    """Raise :class:`Infeasible` when the lower bound alone needs more than ``max_nodes``."""
    if lower > max_nodes:
        raise Infeasible(
            f"at least {lower} nodes are needed ({source}), above max_nodes ({max_nodes})",
            jobs=[],
            issues=[Issue(("max_nodes",), f"at least {lower} nodes are needed")],
        )


def _is_int(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and float(x).is_integer()


def _is_finite_nonneg(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x) and x >= 0


def check_options(
    max_nodes: object,
    node_hour_cost: object,
    billing: object,
    curve_nodes: object,
    time_budget: object,
) -> list[Issue]:
    issues: list[Issue] = []
    if not _is_int(max_nodes) or int(max_nodes) < 1:  # type: ignore[call-overload]
        issues.append(Issue(("max_nodes",), "must be a whole number >= 1"))
    if node_hour_cost is not None and not _is_finite_nonneg(node_hour_cost):
        issues.append(Issue(("node_hour_cost",), "must be a finite number >= 0"))
    if billing not in BILLING:
        issues.append(Issue(("billing",), f"must be one of {', '.join(BILLING)}"))
    if not isinstance(curve_nodes, list | tuple):
        issues.append(Issue(("curve_nodes",), "must be a list of whole numbers >= 1"))
    else:
        if len(curve_nodes) > MAX_CURVE_NODES:
            issues.append(Issue(("curve_nodes",), f"at most {MAX_CURVE_NODES} node counts"))
        for i, k in enumerate(curve_nodes[:MAX_CURVE_NODES]):
            if not _is_int(k) or not 1 <= int(k) <= 10**6:
                issues.append(Issue(("curve_nodes", i), "must be a whole number in 1..1000000"))
    if time_budget is not None and not _is_finite_nonneg(time_budget):
        issues.append(Issue(("time_budget",), "must be a finite number >= 0"))
    return issues


def _check_feasible(base: Instance, node: Node, times: F64, deadline: float) -> None:
    """Raise :class:`Infeasible` naming the jobs no node of this kind can finish in time."""
    if base.requires is not None:
        bad = [j for j, r in enumerate(base.requires) if not r <= node.provides]
        if bad:
            raise Infeasible.naming(
                "require a tag the node does not provide",
                base.job_ids,
                bad,
                lambda j: Issue(("jobs", j, "requires"), "not provided by the node"),
            )
    # exactly: duration > deadline * speed; floats settle all but the jobs within a few
    # units in the last place of the deadline
    over = times > deadline
    near = np.flatnonzero(np.abs(times - deadline) <= 4 * np.spacing(deadline))
    limit = Fraction(deadline) * Fraction(node.speed)
    for j in near.tolist():
        over[j] = Fraction(float(base.durations[j])) > limit
    bad_idx = np.flatnonzero(over).tolist()
    if bad_idx:
        raise Infeasible.naming(
            f"take longer than the deadline ({deadline:g} s) on a node of speed "
            f"{node.speed:g}, so no number of nodes can meet it",
            base.job_ids,
            bad_idx,
            lambda j: Issue(("jobs", j, "duration"), f"{times[j]:g} s on this node > deadline"),
        )


def _lower_bound(
    q_lo: I64, cap: int, total: Fraction, limit: Fraction
) -> tuple[int, str, dict[str, int], dict[str, Any]]:
    """Every node-count lower bound, the best one and its name.

    ``total`` is the exact work (speed-1 seconds) and ``limit`` the exact work a node can
    do by the deadline (deadline times speed).
    """
    bounds: dict[str, int] = {}
    ticks_total = int(q_lo.sum())
    work = -(-ticks_total // cap) if cap > 0 else (0 if ticks_total == 0 else q_lo.size)
    # the same bound on the real work, exactly
    work = max(work, ceil_div(total, limit))
    bounds["total_work"] = max(1, work) if q_lo.size else 0
    bp = bounds_mod.BinPackingBound(q_lo)
    bins, alpha, which = bp.bins_needed(cap)
    evidence: dict[str, Any] = {"capacity_ticks": cap}
    bounds[which] = bins  # the better of L2 and the cardinality bound, with its alpha
    evidence[which] = {"alpha_ticks": alpha}
    source = max(bounds, key=lambda k: (bounds[k], k == "total_work"))
    return bounds[source], source, bounds, evidence


def _search(
    state: _State,
    q_lo: I64,
    q_hi: I64,
    cap: int,
    fit: _Fit,
    budget: Budget,
    report: Callable[[], None],
) -> dict[str, Any]:
    """Anytime search on the open interval, in rounds until it closes or time runs out.

    Each round gives a slice of the time left to the local search (which tries to save a
    bin of the best packing) and one call to the exact search at the lower end (which
    either packs into that many bins, closing the interval, or refutes it, raising the
    lower bound by one).
    """
    pos = np.flatnonzero(q_hi > 0)
    hi_order = pos[np.argsort(-q_hi[pos], kind="stable")]
    lo_pos = np.flatnonzero(q_lo > 0)
    lo_desc = np.sort(q_lo[lo_pos])[::-1].copy()
    hi_desc = q_hi[hi_order].copy()
    same = bool(np.array_equal(q_lo, q_hi))
    # a node costs O(bins): start near SEARCH_FIRST_WORK operations, then follow the clock
    limit = max(1000, SEARCH_FIRST_WORK // max(1, state.lower))
    info: dict[str, Any] = {
        "nodes": 0,
        "calls": 0,
        "refuted": [],
        "local_search_calls": 0,
        "local_search_saved": 0,
    }
    # the local search works on whole ticks rounded up: the packing must hold there too
    local_ok = bool((np.bincount(state.bin_of, weights=q_hi) <= cap).all())
    exact_ok = state.lower <= EXACT_MAX_BINS  # beyond, its nodes are too dear to close gaps
    seed = 0
    current = state.bin_of  # the local search walks on from its last packing
    while state.lower < state.upper and not budget.expired() and (local_ok or exact_ok):
        slice_end = time.perf_counter() + max(0.01, LOCAL_SHARE * budget.remaining())
        while local_ok and state.lower < state.upper and time.perf_counter() < slice_end:
            if budget.expired():
                break
            new, used = reduce_bins(
                q_hi, cap, current, state.upper, LOCAL_FREE_BINS, LOCAL_WORK, seed
            )
            seed += 1
            info["local_search_calls"] += 1
            current = new
            if used < state.upper:
                plan, used, start = fit.settle(new, int(used))
                if used >= state.upper:  # pragma: no cover - ticks rounded up fit exactly
                    local_ok = False
                    break
                info["local_search_saved"] += state.upper - used
                state.upper, state.method = used, "local_search"
                state.bin_of, state.start = plan, start
                report()
        if not exact_ok or state.lower >= state.upper or budget.expired():
            continue
        k = state.lower
        t0 = time.perf_counter()
        status, assign, used = pack_search(hi_desc, cap, k, limit)
        info["nodes"] += used
        info["calls"] += 1
        if status == FOUND:
            bin_of = np.zeros(q_hi.size, dtype=np.int32)  # zero-length jobs go to node 0
            bin_of[hi_order] = assign
            plan, used, start = fit.settle(bin_of, k)
            if used < state.upper:
                state.upper, state.method = used, "search"
                state.bin_of, state.start = plan, start
                report()
            exact_ok = False
            continue
        refuted = status == REFUTED
        if refuted and not same:
            status2, _, used2 = pack_search(lo_desc, cap, k, limit)
            info["nodes"] += used2
            refuted = status2 == REFUTED
            if status2 == FOUND:  # k fits rounded down, not rounded up: too coarse to tell
                info["undecided_at_resolution"] = k
                exact_ok = False
                continue
        if refuted:
            state.lower, state.source = k + 1, "search"
            info["refuted"].append(k)
            report()
            continue
        spent = time.perf_counter() - t0
        rate = limit / max(spent, 1e-6)  # nodes per second, so the next call fits the budget
        want = 0.9 * rate * (1 - LOCAL_SHARE) * budget.remaining()
        limit = int(min(2 * limit, max(1000, want), 1 << 40))
    return info


def _size(args: SizingArgs, budget: Budget, progress: SizingProgressHook | None) -> SizingResult:
    """Size ``args`` within ``budget`` (:func:`size`, and ``size_request`` for a request
    read at the service's edge)."""
    base, node, max_nodes = args.base, args.node, args.max_nodes
    node_hour_cost, billing, curve_nodes = args.node_hour_cost, args.billing, args.curve_nodes
    time_budget = budget.seconds
    deadline = float(base.deadline)  # type: ignore[arg-type]
    speed = node.speed
    times = base.durations / speed  # what Schedule computes for every job on this node
    _check_feasible(base, node, times, deadline)
    limit = Fraction(deadline) * Fraction(speed)  # a node's work by the deadline, exactly
    too_fine = _tick_limit(base.durations, limit, base.resolution)
    if too_fine:
        raise InvalidInstance("the resolution is too fine for these times", too_fine)
    order = np.argsort(-times, kind="stable")
    sizes = times[order]
    grid = solver_grid(base.durations, base.resolution)
    q_lo, q_hi = ticks(base.durations, grid)
    cap = capacity_ticks(deadline, speed, grid)
    fit = _Fit(base.durations, times, speed, deadline, q_hi, cap, order)

    def plan_from(sorted_bins: npt.NDArray[np.int32], used: int) -> tuple[Any, int, F64]:
        """A float packing (bins in sorted order) as a plan that meets the deadline."""
        bin_of = np.empty(base.n, dtype=np.int32)
        bin_of[order] = sorted_bins
        return fit.settle(bin_of, used)

    b_ffd, _, n_ffd = first_fit_decreasing(sizes, deadline)
    bin_of, n_ffd, start = plan_from(b_ffd, int(n_ffd))
    lower, source, bounds, evidence = _lower_bound(q_lo, cap, array_sum(base.durations), limit)
    evidence["tick_seconds"] = grid  # what every *_ticks figure below counts
    state = _State(lower, source, n_ffd, "ffd", bin_of, start)
    upper_bounds = {"ffd": n_ffd}
    first_answer = budget.elapsed()

    def report() -> None:
        if progress is not None:
            progress(SizingProgress(budget.elapsed(), state.upper, state.lower))

    report()
    _check_lower(state.lower, state.source, max_nodes)
    cancelled = ran_out = False
    if state.lower < state.upper and base.n <= BFD_MAX_JOBS:
        b_bfd, _, n_bfd = best_fit_decreasing(sizes, deadline)
        if n_bfd < state.upper:
            bin_of, n_bfd, start = plan_from(b_bfd, int(n_bfd))
        upper_bounds["bfd"] = int(n_bfd)
        if n_bfd < state.upper:
            state.upper, state.method = int(n_bfd), "bfd"
            state.bin_of, state.start = bin_of, start
            report()
    # the searches end early enough for the plan's nodes and the curve that follow
    post = POST_SECONDS_PER_JOB * base.n + POST_SECONDS_PER_NODE * state.upper
    work = budget.child(max(0.5, 1.0 - post / max(budget.remaining(), 1e-9)))
    notes = (bounds, evidence, upper_bounds)
    lp_ok = time_budget > 0 and lp_worth(base.n, state.lower, state.source)
    # with more jobs a node the perfect packing closes most batches: the LP gets a short
    # turn before it (its refutations take milliseconds) and the rest of its share after
    few = base.n <= LP_FULL_JOBS_PER_NODE * max(1, state.lower)
    if state.lower < state.upper and time_budget > 0:  # long jobs and short fillers
        _split_phase(state, (q_lo, q_hi, cap), fit, work.child(SPLIT_SHARE), notes, report)
    if lp_ok and state.lower < state.upper:
        share = LP_SHARE if few else LP_DENSE_SHARE
        lp_budget = work.child(share)
        cancelled = _lp_phase(state, (q_lo, q_hi, cap), fit, lp_budget, notes, report, few)
    if state.lower < state.upper and time_budget > 0 and base.n > FILL_MIN_JOBS and not cancelled:
        # a packing at the lower bound itself, when the bound is tight (issue 5)
        fill_budget = work.child(FILL_SHARE)
        fill = perfect_fill(
            q_hi,
            cap,
            state.lower,
            fill_budget.remaining(),
            should_stop=fill_budget.expired,
            order=order,  # longest first by time is longest first in ticks too
        )
        cancelled = fill_budget.cancelled
        if fill is not None:
            upper_bounds["perfect_fill"] = fill.bins
            evidence["perfect_fill"] = {"attempts": fill.attempts, "moves": fill.moves}
            if fill.bins < state.upper:
                bin_of, used, start = fit.settle(fill.bin_of.astype(np.int32), fill.bins)
                if used < state.upper:
                    state.upper, state.method = used, "perfect_fill"
                    state.bin_of, state.start = bin_of, start
                    report()
    if lp_ok and not few and state.lower < state.upper and not cancelled:
        cancelled = _lp_phase(state, (q_lo, q_hi, cap), fit, work.child(LP_SHARE), notes, report)
    mbs_time = MBS_SHARE * work.remaining()
    if (
        state.lower < state.upper
        and time_budget > 0
        and not cancelled
        and MBS_FLOOR_PER_BIN * state.lower <= mbs_time
    ):
        bins = max(1, state.lower)
        # MBS_WORK + MBS_PAIR_WORK steps take about MBS_SECONDS (40 ns a step on our
        # machine): at most MBS_SHARE of the time left, a second's worth at most
        scale = min(1.0, mbs_time / MBS_SECONDS)
        nodes_per_bin = min(MBS_NODES, max(20, int(scale * MBS_WORK) // bins))
        pair_steps = max(200, min(base.n, int(scale * MBS_PAIR_WORK) // bins))
        b_mbs, _, n_mbs = min_bin_slack(sizes, deadline, nodes_per_bin, pair_steps)
        if 0 < n_mbs < state.upper:
            bin_of, n_mbs, start = plan_from(b_mbs, int(n_mbs))
        upper_bounds["mbs"] = int(n_mbs)
        if 0 < n_mbs < state.upper:
            state.upper, state.method = int(n_mbs), "mbs"
            state.bin_of, state.start = bin_of, start
            report()
    if state.lower < state.upper and time_budget > 0 and not cancelled:
        search_budget = work.child(SEARCH_SHARE)  # the rest is for the curve
        info = _search(state, q_lo, q_hi, cap, fit, search_budget, report)
        evidence["search"] = info
        if state.source == "search":
            bounds["search"] = state.lower
        if state.method in ("search", "local_search"):
            upper_bounds[state.method] = state.upper
        cancelled = search_budget.cancelled
        ran_out = search_budget.expired()
    if state.upper > max_nodes:
        raise Infeasible(
            f"no plan with at most max_nodes ({max_nodes}) nodes was found: the best has "
            f"{state.upper}, the lower bound is {state.lower}",
            jobs=[],
            issues=[Issue(("max_nodes",), f"the best plan found needs {state.upper} nodes")],
        )
    budget.cancelled = budget.cancelled or cancelled or work.cancelled
    stop = budget.stop_reason(
        proven=state.lower >= state.upper,
        ran_out=ran_out or (time_budget > 0 and work.expired()),
    )
    # the same node count, balanced: longest first often ends earlier than the packing
    plan_method = state.method
    lpt_bins, lpt_start = least_loaded(order, times, state.upper)
    if (
        base.n
        and (lpt_start + times).max() < (state.start + times).max()
        and fit.meets(lpt_bins, state.upper, lpt_start)
    ):
        state.bin_of, state.start, plan_method = lpt_bins, lpt_start, "longest_first"
    width = max(3, len(str(state.upper)))  # ids as identical_nodes() names them
    nodes = tuple(Node(f"node-{k + 1:0{width}d}", speed, node.provides) for k in range(state.upper))
    inst = Instance(
        job_ids=base.job_ids,
        durations=base.durations,
        nodes=nodes,
        requires=base.requires,
        groups=base.groups,
        deadline=deadline,
        resolution=base.resolution,
        duration_p90=base.duration_p90,
    )
    schedule = Schedule(inst, state.bin_of, state.start)
    if not fit.meets(state.bin_of, state.upper, state.start):  # pragma: no cover
        raise AssertionError("a sizing plan misses the deadline")
    curve = _curve(
        base,
        fit,
        state,
        schedule.makespan,
        speed,
        curve_nodes,
        node_hour_cost,
        billing,
    )
    return SizingResult(
        schedule=schedule,
        deadline=deadline,
        nodes_needed=state.upper,
        nodes_lower_bound=state.lower,
        bound_source=state.source,
        bounds=bounds,
        evidence=evidence,
        stop_reason=stop,
        solve_seconds=budget.elapsed(),
        first_answer_seconds=first_answer,
        method=state.method,
        plan_method=plan_method,
        upper_bounds=upper_bounds,
        node_hour_cost=node_hour_cost,
        billing=billing,
        curve=curve,
    )


def _curve(
    base: Instance,
    fit: _Fit,
    state: _State,
    plan_makespan: float,
    speed: float,
    curve_nodes: Sequence[int],
    node_hour_cost: float | None,
    billing: str,
) -> tuple[CurveRow, ...]:
    """Makespan (best plan known, never rising with more nodes) and lower bound per count.

    Each row's makespan is the best of longest-first on that many nodes, the sizing plan
    (for ``nodes_needed`` and above) and the row before it: a plan for k nodes is also a
    plan for k + 1 (one node stays idle). ``meets_deadline`` says one of those plans
    meets the deadline exactly. The lower bound is the identical-node bound on the
    speed-1 durations, divided by the speed exactly and rounded down.
    """
    times, order = fit.times, fit.order
    n = times.size
    counts = set(range(max(1, state.lower - CURVE_BELOW), state.lower + CURVE_ABOVE + 1))
    counts.update(range(max(1, state.upper - CURVE_BELOW), state.upper + CURVE_ABOVE + 1))
    counts.update(int(k) for k in curve_nodes)
    plain = Node("n")  # lower_bounds only counts the nodes
    jobs_only = Instance(  # the batch as the bounds see it (no tags, no deadline)
        job_ids=base.job_ids, durations=base.durations, nodes=(plain,), resolution=base.resolution
    )
    jobs_only.sorted_desc_ticks  # noqa: B018 (computed once here, shared by every count)
    rows: list[CurveRow] = []
    best, best_meets = math.inf, False
    for k in sorted(counts):
        if k >= n:
            # one job per node: each fits alone (checked), and its float time too
            own, own_meets = (float(times.max()) if n else 0.0), True
        else:
            bins, start = least_loaded(order, times, k)
            own = float((start + times).max())
            own_meets = fit.meets(bins, k, start)
        if k >= state.upper:
            own, own_meets = min(own, plan_makespan), True
        best, best_meets = min(best, own), best_meets or own_meets
        inst_k = jobs_only.with_nodes((plain,) * k)
        # the lifted bin-packing bound (given an upper end) costs O(n) per probe: only for
        # batches where it can still add something to the mean load
        upper = up(Fraction(best) * Fraction(speed)) if n <= CURVE_LIFT_MAX_JOBS else None
        cert = bounds_mod.lower_bounds(inst_k, upper=upper)
        lb = min(down(Fraction(cert.value) / Fraction(speed)), best)
        rows.append(
            CurveRow(
                nodes=k,
                makespan=best,
                lower_bound=lb,
                cost=cost_of(k, best, node_hour_cost, billing),
                meets_deadline=best_meets,
                provably_misses=k < state.lower,
            )
        )
    return tuple(rows)
