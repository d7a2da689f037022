"""Plans for real farms: node speeds, requires/provides tags, and nodes still busy (free_at).

``solve_farm`` is what ``solve.solve`` calls for every instance that is not identical nodes
in effect (``solve`` alone decides that, with :func:`identical_in_effect`). Methods:

``list``           jobs in batch order, each onto the eligible node where it would finish
                   first.
``longest_first``  the LPT rule for uniform machines: jobs longest first, each onto the
                   eligible node where it would finish first (Gonzalez, Ibarra and Sahni
                   1977 studied it for speeds; Lee 1991 for nodes free at different times).
``exact``          LPT plus a local search (moves and swaps off the node that finishes
                   last, respecting eligibility); when the instance is small enough, a MILP
                   through HiGHS (``farm_milp``) as a hint for a better plan, then an
                   exhaustive branch and bound in exact arithmetic (``farm_exact``) that
                   finds the optimum or proves the best plan optimal; larger instances get
                   random restarts from the local optimum (iterated local search) until
                   the budget is spent; certificate either way.
``auto``           the same choice as ``exact``; ``extras["auto"]`` says what was chosen.

An instance that is identical nodes in effect (every node speed 1 and free at 0, every job
allowed everywhere) is planned by the identical-node code (``solve`` hands it there), so
it gets exactly those results.

A-priori guarantees (``worst_case_ratio``), only where a published one applies:

- one speed, no tags, all free at 0: LPT within Graham's (1969) ``4/3 - 1/(3m)`` and list
  within ``2 - 1/m`` (identical nodes with time scaled by the speed);
- speeds, no tags, all free at 0: LPT within ``1 + sqrt(3)/3`` (Kovacs, Algorithmica 2010,
  upper bound, verified in ``../shared/references.md``; the older ``2m/(m+1)`` of Gonzalez,
  Ibarra and Sahni 1977 is from memory there and is not used);
- one speed with busy nodes, no tags: LPT within ``3/2 - 1/(2m)`` (Lee 1991, from memory);
  list within ``2 - 1/m`` (Graham's 1966 argument with the ``mean_load`` bound of
  ``farm_bounds``: the job j that ends last started no later than the mean finish
  ``(sum f + (sum p - p_j) / s) / m``, so it ends by ``mean_load + (1 - 1/m) p_j / s``;
  common practice);
- with tags, or speeds and busy nodes together: ``None`` (no guarantee known).

The gap always comes from the proven bound. ``exact``/``auto`` keep the LPT guarantee (their
plan is never worse than LPT's). ``stop_reason`` is ``proved_optimal`` when the bound meets
the plan, ``time_budget`` when the budget ran out, ``heuristic`` when the search ended
earlier at a local optimum (large instances) without a proof.
"""

from __future__ import annotations

import dataclasses
import math
import time
from collections.abc import Callable
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from . import farm_exact, farm_milp
from .budget import Budget
from .farm_bounds import Eligibility, eligibility, farm_lower_bounds
from .farm_kernels import NodeClasses, earliest_finish_classes, improve
from .greedy import lpt_ratio
from .kernels import Farm, earliest_finish, pure
from .model import FloatArray, Instance
from .progress import Progress, ProgressHook
from .rational import down
from .result import Certificate, PlanResult, Schedule

KOVACS_2010 = 1.0 + math.sqrt(3.0) / 3.0

#: seconds a compiled local-search call should last (the budget is checked between calls)
CALL_SECONDS = 0.05
#: about what building the final plan and certificate costs per job (kept off the budget)
FINISH_SECONDS_PER_JOB = 4e-7
#: up to this many job x node pairs the plain-Python kernels are used (no compile/load cost)
TINY_WORK = 2_000
#: random restarts from the local optimum (iterated local search) up to this many jobs
MAX_KICK_JOBS = 20_000
#: the exact decision search (``farm_exact.bisect``) runs on farms up to this many job x
#: node pairs (above, the local search with restarts does better in the same time)
MAX_DECISION_PAIRS = 50_000
#: shares of the time left for the local search and then for HiGHS (where it runs) before
#: the exact decision search takes the rest
LOCAL_SHARE = 0.2
MILP_SHARE = 0.5


def ratio_for(
    inst: Instance, method: str, elig: Eligibility | None = None
) -> tuple[float | None, str]:
    """The published guarantee of ``method`` (``list`` or ``longest_first``) on ``inst``."""
    if elig is None:
        elig = eligibility(inst)
    tags = not elig.all_eligible
    speeds = {nd.speed for nd in inst.nodes}
    busy = any(nd.free_at != 0 for nd in inst.nodes)
    m = inst.m
    if tags:
        return None, "none known with requires/provides tags"
    if method == "longest_first":
        if not busy and len(speeds) == 1:
            return lpt_ratio(
                m
            ), "graham_1969: 4/3 - 1/(3m) (one speed: identical nodes, time scaled)"
        if not busy:
            return KOVACS_2010, (
                "kovacs_2010: 1 + sqrt(3)/3 (verified); gonzalez_ibarra_sahni_1977 2m/(m+1) "
                "is from memory and not used"
            )
        if len(speeds) == 1:
            return 1.5 - 1.0 / (2 * m), "lee_1991: 3/2 - 1/(2m) (from memory)"
        return None, "none known for speeds and busy nodes together"
    if method == "list" and len(speeds) == 1:
        return 2.0 - 1.0 / m, "graham_1966 argument with the busy-node mean load (common practice)"
    return None, "none known"


def arrays(inst: Instance) -> tuple[FloatArray, FloatArray]:
    """Node speeds and free_at as arrays."""
    s = np.array([nd.speed for nd in inst.nodes], dtype=np.float64)
    f = np.array([nd.free_at for nd in inst.nodes], dtype=np.float64)
    return s, f


def schedule_from_nodes(inst: Instance, node_of: npt.NDArray[np.int32]) -> Schedule:
    """Back-to-back from each node's free_at, longest job first on every node."""
    return Schedule.sequenced(inst, node_of)


def _tiny(inst: Instance) -> bool:
    """Small enough that plain Python beats loading the compiled kernels (CLI start-up)."""
    return inst.n * inst.m <= TINY_WORK


def _reserve(inst: Instance) -> float:
    """Seconds of the budget kept back to build the final plan and its certificate."""
    return 0.005 + FINISH_SECONDS_PER_JOB * inst.n


def _makespan(
    node_of: npt.NDArray[np.int32], durations: FloatArray, s: FloatArray, f: FloatArray
) -> float:
    """The latest node finish of ``node_of``, in floating point (what the search steers by;
    the result is measured exactly by :class:`Schedule`)."""
    return float((f + np.bincount(node_of, durations, s.shape[0]) / s).max())


def farm_arrays(inst: Instance, elig: Eligibility) -> Farm:
    """``inst``'s farm as the kernels read it."""
    s, f = arrays(inst)
    return Farm(s, f, elig.job_type, elig.eligible)


def greedy_schedule(inst: Instance, elig: Eligibility, method: str) -> Schedule:
    """``list`` (batch order) or ``longest_first`` (LPT) with earliest finish."""
    farm = farm_arrays(inst, elig)
    order = np.arange(inst.n, dtype=np.intp) if method == "list" else inst.order_longest_first
    if _tiny(inst):
        node_of, start = pure(earliest_finish)(order, inst.durations, farm)
    else:
        node_of, start = earliest_finish_classes(
            order, inst.durations, farm, node_classes(inst, elig)
        )
    return Schedule(inst, node_of, start)


def node_classes(inst: Instance, elig: Eligibility) -> NodeClasses:
    """Nodes grouped by (speed, which job types may run there): node indices class by
    class, where each class starts, and ``[type, class]`` eligibility."""
    keys: dict[tuple[float, bytes], list[int]] = {}
    for k, nd in enumerate(inst.nodes):
        keys.setdefault((nd.speed, elig.eligible[:, k].tobytes()), []).append(k)
    groups = list(keys.values())
    members = np.array([k for g in groups for k in g], dtype=np.int64)
    cstart = np.cumsum([0] + [len(g) for g in groups]).astype(np.int64)
    celig = np.ascontiguousarray(elig.eligible[:, [g[0] for g in groups]])
    return NodeClasses(members, cstart, celig)


def improver(
    inst: Instance, elig: Eligibility, compiled: bool = True
) -> Callable[[npt.NDArray[np.int32], int], tuple[int, bool]]:
    """The local-search kernel :func:`.farm_kernels.improve` on ``inst`` (compiled, or its
    pure-Python twin): ``(plan, most steps) -> (steps taken, at a local optimum)``."""
    farm, nodes = farm_arrays(inst, elig), node_classes(inst, elig)
    kernel = improve if compiled else pure(improve)

    def step(node_of: npt.NDArray[np.int32], max_steps: int) -> tuple[int, bool]:
        return kernel(node_of, inst.durations, farm, inst.order_longest_first, nodes, max_steps)

    return step


def local_search(
    inst: Instance,
    elig: Eligibility,
    sched: Schedule,
    budget: Budget,
    target: float,
    progress: ProgressHook | None,
    lower: float,
    kick: bool = True,
) -> tuple[Schedule, int, bool]:
    """Improve ``sched`` until a local optimum, the target makespan, or the budget; then,
    with ``kick``, random restarts from the local optimum until the budget is spent."""
    s, f = arrays(inst)
    node_of = sched.node_of.copy()
    total, done = 0, False
    best = sched.makespan
    chunk = 4
    step = improver(inst, elig, compiled=not _tiny(inst))
    reserve = _reserve(inst)
    while not budget.expired() and budget.remaining() > reserve:
        t = time.perf_counter()
        steps, done = step(node_of, chunk)
        took = time.perf_counter() - t
        total += steps
        # keep every compiled call short against the budget (about CALL_SECONDS)
        if steps and not done:
            per_step = took / steps
            goal = min(CALL_SECONDS, 0.5 * budget.remaining())
            chunk = int(max(1, min(4 * chunk, goal / max(per_step, 1e-9))))
        ms = _makespan(node_of, inst.durations, s, f)
        if progress is not None and ms < best:
            progress(Progress(budget.elapsed(), ms, lower))
        best = min(best, ms)
        if done or ms <= target:
            break
    if done and kick and inst.n <= MAX_KICK_JOBS:
        kicks = _kicks(inst, elig, node_of, budget, reserve, target, progress, lower)
        total += kicks
    if total == 0:
        return sched, 0, done
    cand = schedule_from_nodes(inst, node_of)
    return (cand if cand.makespan < sched.makespan else sched), total, done


def _kicks(
    inst: Instance,
    elig: Eligibility,
    node_of: npt.NDArray[np.int32],
    budget: Budget,
    reserve: float,
    target: float,
    progress: ProgressHook | None,
    lower: float,
) -> int:
    """Iterated local search from a local optimum (``node_of``, updated in place when a
    better plan is found): move a few random jobs to random eligible nodes, run the local
    search again, keep the result if the makespan went down. Seeded, so reproducible."""
    s, f = arrays(inst)
    step = improver(inst, elig)
    rng = np.random.default_rng(0)
    options = [np.flatnonzero(row) for row in elig.eligible]
    best = _makespan(node_of, inst.durations, s, f)
    tries = 0
    size = max(2, inst.n // 100)
    while not budget.expired() and budget.remaining() > reserve and best > target:
        trial = node_of.copy()
        for j in rng.choice(inst.n, size=min(size, inst.n), replace=False).tolist():
            opt = options[elig.job_type[j]]
            trial[j] = opt[rng.integers(opt.size)]
        done = False
        while not done and budget.remaining() > reserve:
            done = step(trial, 256)[1]
        tries += 1
        ms = _makespan(trial, inst.durations, s, f)
        if ms < best * (1 - 1e-12):
            best = ms
            node_of[:] = trial
            if progress is not None:
                progress(Progress(budget.elapsed(), ms, lower))
    return tries


def identical_in_effect(inst: Instance, elig: Eligibility) -> bool:
    """Every node speed 1 and free at 0, and every job allowed everywhere."""
    return elig.all_eligible and all(nd.is_plain for nd in inst.nodes)


def as_farm_result(inst: Instance, res: PlanResult) -> PlanResult:
    """A result planned as identical nodes (tags every node provides dropped), given back
    on ``inst`` and saying so."""
    sched = Schedule(inst, res.schedule.node_of, res.schedule.start)
    extras = dict(res.extras)
    extras["farm"] = {"reduced_to": "identical nodes (every node speed 1, free at 0, all tags)"}
    return dataclasses.replace(res, schedule=sched, extras=extras)


def solve_farm(
    inst: Instance,
    elig: Eligibility,
    method: str,
    budget: Budget,
    progress: ProgressHook | None,
) -> PlanResult:
    """Plan a farm with speeds, tags and busy nodes; see the module doc for the methods."""
    if method in ("list", "longest_first"):
        sched = greedy_schedule(inst, elig, method)
        cert = farm_lower_bounds(inst, elig, sched.makespan)
        ratio, why = ratio_for(inst, method, elig)
        return PlanResult(
            schedule=sched,
            method=method,
            certificate=cert,
            worst_case_ratio=ratio,
            stop_reason=budget.stop_reason(proven=_closed(sched, cert.exact_value), ran_out=False),
            solve_seconds=budget.elapsed(),
            extras={"worst_case_ratio_source": why},
        )
    return _search(inst, elig, method, budget, progress)


def _net(inst: Instance, budget: Budget) -> Budget:
    """What is left of ``budget`` minus the reserve for the final plan and certificate."""
    left = budget.remaining() - _reserve(inst)
    return budget.child(max(0.0, left) / max(budget.remaining(), 1e-9))


def _closed(sched: Schedule, lb: float | Fraction) -> bool:
    """The bound meets the plan exactly (no tolerance)."""
    return Fraction(lb) >= sched.makespan_exact


def _search(
    inst: Instance, elig: Eligibility, method: str, budget: Budget, progress: ProgressHook | None
) -> PlanResult:
    """``exact`` and ``auto``: MILP when small enough, else LPT + local search."""
    lpt = greedy_schedule(inst, elig, "longest_first")
    cert = farm_lower_bounds(inst, elig, lpt.makespan)
    ratio, why = ratio_for(inst, "longest_first", elig)
    extras: dict[str, Any] = {
        "worst_case_ratio_source": why + " (the plan is never worse than LPT)"
    }
    best, lower, exact = lpt, cert.value, cert.exact_value
    if progress is not None:
        progress(Progress(budget.elapsed(), best.makespan, lower))
    small = farm_milp.small_enough(inst, elig)
    decide = inst.n * inst.m <= MAX_DECISION_PAIRS
    choice = "milp" if small else "longest_first+local_search"
    info: dict[str, Any] = {"chose": choice}
    if decide:
        info["then"] = "exact decision search (farm_exact.bisect)"
    if method == "auto":
        info["why"] = (
            f"{inst.n} jobs x eligible nodes fits the MILP (HiGHS)"
            if small
            else f"too large for the MILP (more than {farm_milp.MAX_JOBS} jobs or "
            f"{farm_milp.MAX_PAIRS} job-node pairs): LPT then moves and swaps"
            + (", then the exact decision search" if decide else "")
        )
    bounds = dict(cert.bounds)
    evidence = dict(cert.evidence)
    source, value = cert.source, cert.value
    if not _closed(best, exact) and not budget.expired():
        # moves and swaps first: cheap, and they hand the exact search an upper bound
        best, steps, local_opt = local_search(
            inst,
            elig,
            best,
            budget.child(LOCAL_SHARE) if decide else budget,
            lower,
            progress,
            lower,
            kick=not small,
        )
        info["local_search"] = {"steps": steps, "local_optimum": local_opt}
    if small and not _closed(best, exact) and not budget.expired():
        # HiGHS is a hint: its plan is kept when it checks (it is measured again here, in
        # exact arithmetic), its bound is never reported as proven (its tolerances make
        # it false at large durations). A share of the time goes to it, the rest to the
        # exact search that proves (or finds) the optimum.
        limit = max(0.01, MILP_SHARE * budget.remaining() - 0.03)
        out = farm_milp.solve_milp(inst, elig, lower, best.makespan, limit)
        info["milp_status"] = out.message
        if out.node_of is not None and (out.node_of >= 0).all():
            cand = schedule_from_nodes(inst, out.node_of)
            if cand.makespan_exact < best.makespan_exact:
                best = cand
        evidence["milp_hint"] = {
            "dual_bound": out.dual_bound,
            "claimed_optimal": out.optimal,
            "proof": False,
        }
    if decide and not _closed(best, exact) and not budget.expired():
        proof = farm_exact.bisect(inst, elig, best.node_of, lower, _net(inst, budget))
        if proof.makespan < best.makespan_exact:
            best = schedule_from_nodes(inst, proof.node_of)
        proved = down(proof.lower_bound)
        info["exact_search"] = {"nodes": proof.nodes, "finished": proof.finished}
        if proof.lower_bound > exact:
            bounds["search"] = proved
            source, value, exact = "search", proved, proof.lower_bound
            evidence["search"] = {
                "rule": "exact decision search in whole ticks (a refuted C is exhausted)",
                "nodes": proof.nodes,
                "finished": proof.finished,
            }
    cert = Certificate(value=value, source=source, bounds=bounds, evidence=evidence, exact=exact)
    extras["auto" if method == "auto" else "exact"] = info
    # ran out: the budget ended the search; otherwise it ended by itself (a local
    # optimum no move or swap improves)
    ran_out = budget.expired() or budget.remaining() <= _reserve(inst)
    stop = budget.stop_reason(proven=_closed(best, exact), ran_out=ran_out)
    if progress is not None:
        progress(Progress(budget.elapsed(), best.makespan, value))
    return PlanResult(
        schedule=best,
        method=method,
        certificate=cert,
        worst_case_ratio=ratio,
        stop_reason=stop,
        solve_seconds=budget.elapsed(),
        extras=extras,
    )
