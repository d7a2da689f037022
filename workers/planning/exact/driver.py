"""The anytime loop of ``method: exact`` for identical nodes.

1. LPT (Graham 1969) and every lower bound of :mod:`workers.planning.bounds`; if they meet,
   the LPT plan is optimal and we are done.
2. Better starts: MULTIFIT (Coffman, Garey and Johnson 1978) and largest differencing
   (Karmarkar and Karp 1982), each polished by the local search of :mod:`.improve` (moves
   and swaps off the critical node, then optimal two-node repartitions by subset sum).
3. Rounds until LB = UB, each resuming where the last one stopped:

   a. the LP bound of bin packing (:mod:`.lpbound`: column generation, made rigorous by
      Farley's bound in integers; probed by :mod:`.lpprobes`) on capacities between LB
      and UB - 1: it probes LB (or UB - 1 first when the gap is narrow), then the capacity
      where the LP value reaches m, estimated from the last refuted probe; every refuted
      capacity raises LB;
   b. once the LP cannot raise LB, dives guided by the LP at LB (restarted with random
      tie-breaking when they fail; after a few failures also at LB + 1): a packing at LB
      proves it optimal;
   c. the neighbourhood search of :mod:`.improve` (a share of the time);
   d. the decision search of :mod:`.decision` on capacities between LB and UB: UB - 1
      first (refuting it proves the incumbent optimal), then a binary search below it;
      probes get a node allowance that grows each round (unfinished probes are resumed).

   A packing found at capacity C becomes the incumbent (UB <= C); a capacity proven
   infeasible raises LB to C + 1.
4. Stop when LB = UB (proven optimal), when the budget's own wall clock is spent or when it
   reports a cancel; return the best plan and the best proven bound. Every step works in
   slices of a few milliseconds between two looks at the clock.

Real durations and ticks
------------------------
Durations are real seconds. The search works on whole ticks of ``inst.resolution``, every
duration *rounded down*: a real plan is also a plan of the rounded batch and no longer than
it, so the optimum of the rounded batch, times the resolution, never exceeds the real
optimum. Every bound found by the search (a refuted capacity C gives OPT >= (C + 1) ticks)
is therefore valid for the true durations once multiplied by the resolution. Plans are the
other way round: a packing found on ticks is turned into a schedule on the *true*
durations and its makespan is measured there, so the reported makespan is exact; jobs
shorter than one tick are left out of the search and placed afterwards, longest first, on
the node that is free first. With integer durations and resolution 1 the two views agree
and "proven optimal" means what it says; with finer durations the search can close the
gap only up to the resolution (reported as ``closed_at_resolution``).

Certificates
------------
A bound raised by the search is reported as ``search`` with the refuted capacity. When the
LP refuted it, ``refuted_by`` carries Farley's certificate: integer duals per distinct
length whose total exceeds m times the best value of any pattern that fits the refuted
capacity (a bounded knapsack anyone can re-solve; :func:`.lpbound.check_certificate`).
"""

from __future__ import annotations

import time
from fractions import Fraction
from typing import TYPE_CHECKING, Any

import numpy as np
import numpy.typing as npt

from .. import bounds, greedy
from ..budget import Budget, StopReason
from ..errors import InvalidInstance, Issue
from ..model import Instance
from ..rational import ticks_to_seconds_down
from ..result import Certificate, PlanResult, Schedule
from . import constructions, decision, lpbound
from .improve import descend, neighbourhood_search, pair_balance
from .lpprobes import LPProbes

if TYPE_CHECKING:
    from ..progress import ProgressHook

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: ``auto`` runs the search for at most this many seconds
AUTO_SECONDS = 2.0
#: node allowance of a capacity probe in the first round; multiplied each round
FIRST_ALLOWANCE = 2_000
ALLOWANCE_GROWTH = 4
#: probes below UB - 1 get this much less of the allowance
LOWER_PROBE_DIVISOR = 4
#: at most this many paused capacity searches are kept (each holds a memo table)
MAX_OPEN_SEARCHES = 6
#: a slice of the search between two clock checks aims at this many seconds
SLICE_SECONDS = 0.004
#: the fewest search nodes in a slice of the decision search
MIN_SLICE_NODES = 10
#: progress is reported at most this often when nothing improved (seconds)
PROGRESS_INTERVAL = 0.2
#: share of the remaining time given to the neighbourhood search at each round
LNS_SHARE = 0.1
LNS_SEED = 20261201
#: with at least this many jobs per node, a short neighbourhood search (this share of the
#: time) runs before the LP
LNS_FIRST_JOBS_PER_NODE = 3.5
LNS_FIRST_SHARE = 0.05
#: share of the remaining time the LP bound may take in one round
LP_SHARE = 0.7
#: share of the remaining time the LP dive may take in one round
DIVE_SHARE = 0.5
#: ... divided by 1 + (failed dives) / DIVE_DECAY
DIVE_DECAY = 8
#: share of the remaining time the two-node balancing may take on each start
BALANCE_SHARE = 0.05
#: at most this many local-search steps between two clock checks
DESCENT_CHUNK = 64
#: the local search is skipped above this many jobs (its steps cost O(n^2))
DESCENT_MAX_JOBS = 3_000


def schedule_from(inst: Instance, node_of: npt.NDArray[np.integer[Any]]) -> Schedule:
    """A schedule of ``inst`` with the given node per job, each node running longest first."""
    return Schedule.sequenced(inst, node_of)


class _Reporter:
    """Calls the progress hook on improvement, and at most every PROGRESS_INTERVAL else."""

    def __init__(self, hook: ProgressHook | None, budget: Budget) -> None:
        self.hook = hook
        self.budget = budget
        self.last_time = -1.0
        self.last: tuple[float, float] | None = None

    def __call__(self, makespan: float, bound: float) -> None:
        if self.hook is None:
            return
        from ..progress import Progress

        now = self.budget.elapsed()
        improved = self.last is None or makespan < self.last[0] or bound > self.last[1]
        if not improved and now - self.last_time < PROGRESS_INTERVAL:
            return
        self.last = (makespan, bound)
        self.last_time = now
        self.hook(Progress(now, makespan, bound))


class _Incumbent:
    """The best plan so far (true durations) and the best tick makespan of any packing."""

    def __init__(self, inst: Instance, q: I64, pos_jobs: npt.NDArray[np.intp], lpt: Schedule):
        self.inst = inst
        self.q = q
        self.pos_jobs = pos_jobs
        self.zero_jobs = inst.order_longest_first[q.size :]
        self.schedule = lpt
        self.source = "longest_first"
        m = inst.m
        self.packing: I32 = lpt.node_of[pos_jobs].astype(np.int32)
        self.ub_ticks = constructions.makespan_ticks(q, self.packing, m) if q.size else 0

    def best_packing(self) -> I32:
        """A copy of the packing (indices into ``q``) with the fewest ticks so far."""
        return self.packing.copy()

    def consider(self, packing: I32, source: str) -> bool:
        """Take a packing of the positive-tick jobs (indices into ``q``); True if better."""
        inst = self.inst
        m = inst.m
        ticks = constructions.makespan_ticks(self.q, packing, m)
        if ticks < self.ub_ticks:
            self.ub_ticks = ticks
            self.packing = packing.copy()
        node_of = np.zeros(inst.n, dtype=np.int32)
        node_of[self.pos_jobs] = packing
        if self.zero_jobs.size:
            load = np.bincount(packing, weights=inst.durations[self.pos_jobs], minlength=m)
            for j in self.zero_jobs.tolist():
                k = int(np.argmin(load))
                node_of[j] = k
                load[k] += inst.durations[j]
        sched = schedule_from(inst, node_of)
        if sched.makespan_exact < self.schedule.makespan_exact:
            self.schedule = sched
            self.source = source
            return True
        return False


def solve_exact(
    inst: Instance,
    budget: Budget,
    *,
    progress: ProgressHook | None = None,
    auto: bool = False,
) -> PlanResult:
    """Best plan within ``budget`` and its proven lower bound, for identical nodes.

    With ``auto`` the LPT plan is returned at once when the bounds prove it optimal;
    otherwise the search runs for at most ``AUTO_SECONDS`` and the result says so.
    """
    if not inst.identical:
        raise InvalidInstance(
            "the exact search needs identical nodes",
            [Issue(("nodes",), "speeds, free_at or required tags differ")],
        )
    m, res = inst.m, inst.resolution
    ratio = greedy.lpt_ratio(m)
    lpt = greedy.longest_first_schedule(inst)
    cert0 = bounds.lower_bounds(inst, upper=lpt.makespan)
    report = _Reporter(progress, budget)
    extras: dict[str, Any] = {}
    if Fraction(cert0.value) >= lpt.makespan_exact:  # exact: no tolerance
        if auto:
            extras = {
                "method_requested": "auto",
                "auto_choice": "longest_first: its plan meets the lower bound (proven optimal)",
            }
        report(lpt.makespan, cert0.value)
        return PlanResult(
            lpt,
            "longest_first" if auto else "exact",
            cert0,
            ratio,
            StopReason.PROVED_OPTIMAL,
            budget.elapsed(),
            extras,
        )
    if auto:
        budget = Budget(
            min(budget.seconds, AUTO_SECONDS),
            budget.should_stop,
            budget.poll_interval,
            started=budget.started,
        )
        extras = {
            "method_requested": "auto",
            "auto_choice": f"exact: the gap after longest_first is open; search for at most "
            f"{budget.seconds:g} s",
        }
    method = "exact"

    cached = inst.sorted_desc_ticks  # None past 2**53 ticks in all: each job's still fits
    q_all = bounds.to_ticks(inst.sorted_desc, res) if cached is None else cached.copy()
    npos = int(np.count_nonzero(q_all > 0))
    q = np.ascontiguousarray(q_all[:npos])
    pos_jobs = inst.order_longest_first[:npos]
    inc = _Incumbent(inst, q, pos_jobs, lpt)
    lb_ticks = bounds.tick_bounds(q_all, m)
    bp = cert0.evidence.get("bin_packing")
    if bp:
        lb_ticks = max(lb_ticks, int(bp["refuted_capacity_ticks"]) + 1)
    report(inc.schedule.makespan, cert0.value)

    stats: dict[str, Any] = {
        "nodes": 0,
        "probes": 0,
        "refuted_capacity_ticks": None,
        "lp_seconds": 0.0,
        "dive_seconds": 0.0,
    }
    if npos > 0 and lb_ticks < inc.ub_ticks and not budget.expired():
        _constructions(inst, q, inc, budget, lb_ticks)
        report(inc.schedule.makespan, max(cert0.value, ticks_to_seconds_down(lb_ticks, res)))
        if lb_ticks < inc.ub_ticks and q[0] and inc.ub_ticks < decision.MAX_TICKS:
            lb_ticks = _search(q, m, lb_ticks, inc, budget, report, res, cert0.value, stats)

    # certificate
    cert_bounds = dict(cert0.bounds)
    evidence = dict(cert0.evidence)
    value, source = cert0.value, cert0.source
    search_bound = ticks_to_seconds_down(lb_ticks, res)
    if stats["refuted_capacity_ticks"] is not None and search_bound > value:
        cert_bounds["search"] = search_bound
        value, source = search_bound, "search"
        rc = int(stats["refuted_capacity_ticks"])
        evidence["search"] = {
            "refuted_capacity_ticks": rc,
            "refuted_capacity": ticks_to_seconds_down(rc, res),
            "nodes": int(stats["nodes"]),
        }
        if stats.get("lp"):
            evidence["search"]["refuted_by"] = stats["lp"]
    sched = inc.schedule
    cert = Certificate(value=value, source=source, bounds=cert_bounds, evidence=evidence)
    proven = Fraction(value) >= sched.makespan_exact
    closed = lb_ticks >= inc.ub_ticks  # the search has nothing left at this resolution
    stop = budget.stop_reason(proven=proven, ran_out=not closed)
    if closed and stop is StopReason.HEURISTIC:
        extras["closed_at_resolution"] = True
    extras["search"] = {
        "nodes": int(stats["nodes"]),
        "capacity_probes": int(stats["probes"]),
        "plan_from": inc.source,
        "lp_probes": int(stats.get("lp_probes", 0)),
        "lp_seconds": round(float(stats["lp_seconds"]), 4),
        "dives": int(stats.get("dives", 0)),
        "dive_seconds": round(float(stats["dive_seconds"]), 4),
    }
    report(sched.makespan, value)
    return PlanResult(sched, method, cert, ratio, stop, budget.elapsed(), extras)


def _constructions(inst: Instance, q: I64, inc: _Incumbent, budget: Budget, lb: int) -> None:
    """MULTIFIT and LDM, each polished by the descent, into the incumbent (until LB)."""
    m = inst.m
    starts: list[tuple[str, I32 | None]] = [("longest_first", inc.schedule.node_of[inc.pos_jobs])]
    starts.append(("multifit", constructions.multifit(q, m, should_stop=budget.expired)))
    if not budget.expired():
        starts.append(("ldm", constructions.ldm(q, m, should_stop=budget.expired)))
    for name, packing in starts:
        if packing is None or budget.expired() or inc.ub_ticks <= lb:
            continue
        packing = packing.astype(np.int32, copy=True)
        inc.consider(packing, name)
        steps = 0
        chunk = 1  # steps per call, sized to take about SLICE_SECONDS (a step can cost n m)
        while q.size <= DESCENT_MAX_JOBS and not budget.expired():
            t0 = time.perf_counter()
            done = descend(q, packing, m, chunk)
            dt = time.perf_counter() - t0
            steps += done
            if done < chunk:
                break
            chunk = int(min(DESCENT_CHUNK, max(1, chunk * SLICE_SECONDS / max(dt, 1e-9))))
        if steps:
            inc.consider(packing, name + "+descent")
        if inc.ub_ticks > lb and not budget.expired():
            seconds = BALANCE_SHARE * budget.remaining()
            if pair_balance(q, packing, m, lb, seconds, should_stop=budget.expired):
                inc.consider(packing, name + "+balance")


def _search(
    q: I64,
    m: int,
    lb_ticks: int,
    inc: _Incumbent,
    budget: Budget,
    report: _Reporter,
    res: float,
    lb0: float,
    stats: dict[str, Any],
) -> int:
    """The capacity search between ``lb_ticks`` and the incumbent; returns the new LB."""
    open_searches: dict[int, decision.CompletionSearch] = {}
    allowance = FIRST_ALLOWANCE
    # a search node can cost O(n) (the bounds at a node opening): start small on big batches
    slice_nodes = max(MIN_SLICE_NODES, min(1_000, 2_000_000 // max(1, q.size)))
    rng = np.random.default_rng(LNS_SEED)
    lp = LPProbes(q, m, SLICE_SECONDS)

    def lns(share: float) -> None:
        """A share of the time to the neighbourhood search, which finds tight packings
        that the exhaustive search would reach late."""
        best = inc.best_packing()
        if neighbourhood_search(
            q, best, m, lb_ticks, share * budget.remaining(), rng, should_stop=budget.expired
        ):
            inc.consider(best, "neighbourhood")
            report(inc.schedule.makespan, max(lb0, ticks_to_seconds_down(lb_ticks, res)))
            for c in [c for c in open_searches if c >= inc.ub_ticks]:
                del open_searches[c]

    if q.size >= LNS_FIRST_JOBS_PER_NODE * m:
        # with many jobs per node the simple bounds are usually tight and a short
        # neighbourhood search often closes the gap before the LP has been set up
        lns(LNS_FIRST_SHARE)
    while lb_ticks < inc.ub_ticks and not budget.expired():
        # the LP bound of bin packing on the capacities just below the incumbent
        t0 = time.perf_counter()
        new_lb = lp.raise_bound(lb_ticks, inc, budget, LP_SHARE * budget.remaining())
        stats["lp_seconds"] += time.perf_counter() - t0
        stats["lp_probes"] = len(lp.probes)
        if new_lb > lb_ticks:
            lb_ticks = new_lb
            stats["refuted_capacity_ticks"] = lb_ticks - 1
            stats["lp"] = lp.evidence
            for c in [c for c in open_searches if c < lb_ticks]:
                del open_searches[c]
            report(inc.schedule.makespan, max(lb0, ticks_to_seconds_down(lb_ticks, res)))
        if lb_ticks >= inc.ub_ticks:
            break
        # the LP dive at the lower bound, once the LP bound cannot raise it: a packing there
        # proves it optimal
        t0 = time.perf_counter()
        packing = None
        if lp.ready_to_dive(lb_ticks):
            # failed dives hand more of the time to the other searches
            share = DIVE_SHARE * DIVE_DECAY / (DIVE_DECAY + lp.failed_dives)
            packing = lp.dive(lb_ticks, inc, budget, share * budget.remaining())
        stats["dive_seconds"] += time.perf_counter() - t0
        stats["dives"] = lp.dives_started
        if lp.dive_refuted is not None and lp.dive_refuted >= lb_ticks:
            lb_ticks = lp.dive_refuted + 1
            stats["refuted_capacity_ticks"] = lb_ticks - 1
            stats["lp"] = lp.evidence
            report(inc.schedule.makespan, max(lb0, ticks_to_seconds_down(lb_ticks, res)))
        if packing is not None and inc.consider(packing, "lp_dive"):
            for c in [c for c in open_searches if c >= inc.ub_ticks]:
                del open_searches[c]
            report(inc.schedule.makespan, max(lb0, ticks_to_seconds_down(lb_ticks, res)))
        if lb_ticks >= inc.ub_ticks:
            break
        lns(LNS_SHARE)
        if lb_ticks >= inc.ub_ticks:
            break
        lo, hi = lb_ticks, inc.ub_ticks - 1
        first = True
        while lo <= hi and not budget.expired():
            # the capacity just below the incumbent first (its refutation proves the
            # incumbent optimal), then a binary search below it
            cap = hi if first else (lo + hi) // 2
            first = False
            s = open_searches.pop(cap, None)
            if s is None:
                s = decision.CompletionSearch(q, m, cap)
            stats["probes"] += 1
            before = s.nodes
            status = s.status
            # the probe just below the incumbent gets the full allowance, the others less
            own = allowance if cap == inc.ub_ticks - 1 else allowance // LOWER_PROBE_DIVISOR
            while status == decision.PAUSED and s.nodes < own:
                t0 = time.perf_counter()
                n0 = s.nodes
                status = s.run(min(slice_nodes, own - s.nodes))
                dt = time.perf_counter() - t0
                ran = s.nodes - n0
                if status == decision.PAUSED and dt > 0 and ran > 0:
                    # aim the next slice at SLICE_SECONDS at the rate just seen
                    want = ran * SLICE_SECONDS / dt
                    slice_nodes = int(min(max(want, MIN_SLICE_NODES), 2 * slice_nodes, 1e6))
                if budget.expired():
                    break
                report(inc.schedule.makespan, max(lb0, ticks_to_seconds_down(lb_ticks, res)))
            stats["nodes"] += s.nodes - before
            if status == decision.FEASIBLE:
                inc.consider(s.packing(), "search")
                hi = inc.ub_ticks - 1
                for c in [c for c in open_searches if c >= inc.ub_ticks]:
                    del open_searches[c]
            elif status == decision.INFEASIBLE:
                if cap + 1 > lb_ticks:
                    lb_ticks = cap + 1
                    stats["refuted_capacity_ticks"] = cap
                    stats["lp"] = None
                lo = cap + 1
                for c in [c for c in open_searches if c < lb_ticks]:
                    del open_searches[c]
            else:
                open_searches[cap] = s
                while len(open_searches) > MAX_OPEN_SEARCHES:
                    del open_searches[next(iter(open_searches))]
                if cap == hi:
                    hi = cap - 1  # undecided just below the incumbent: look lower
                else:
                    lo = cap + 1
            report(inc.schedule.makespan, max(lb0, ticks_to_seconds_down(lb_ticks, res)))
        allowance *= ALLOWANCE_GROWTH
    return lb_ticks


def warm_up() -> None:
    """Compile (or load from numba's cache) every kernel of the exact search, so that no
    timed solve pays for it: each kernel on a tiny input, then Graham's tight LPT family
    for m = 3 through the whole pipeline (a generous budget: loading the kernels of a
    fresh process takes a good part of a second, and the solve ends once proven)."""
    q = np.array([5, 5, 4, 4, 3, 3, 3], dtype=np.int64)
    node_of = np.zeros(q.size, dtype=np.int32)
    constructions.first_fit_decreasing(q, 3, 9, node_of)
    descend(q, node_of, 3, 4)
    pair_balance(q, (np.arange(q.size) % 3).astype(np.int32), 3, 9, 1.0)
    decision.CompletionSearch(q, 3, 9).run(1000)
    decision.CompletionSearch(q, 3, 8, memo_bits=10).run(1000)
    decision.CompletionSearch(q, 3, 9, memo_bits=14).run(1000)
    lpbound.warm_up()
    solve_exact(Instance.build(q.tolist(), 3), Budget(10.0))
