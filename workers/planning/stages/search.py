"""Planning a stage graph: the rules, and an anytime improver within a time budget.

:func:`solve_stages` is the entry point. ``list`` and ``longest_first`` run one priority
rule of :mod:`.listing`; ``exact`` and ``auto`` run :func:`improve`: every rule of
:data:`.listing.RULES`, then, until the budget is spent or the plan meets the best lower
bound (a proof of optimality), rounds of

* **justification** (Valls, Ballestin and Quintanilla 2005, "Justification and RCPSP: a
  technique that pays", from memory), done with our list scheduler: a backward pass
  plans the reversed graph with the jobs that end latest first; its mirror image is a
  plan of the same length (every wait, slot and limit mirrors); a forward pass then
  plans the jobs in the order of the mirror's starts. Only when every node is free at
  the same tick (else the mirror could start a job before its node is free);
* **priority perturbation**: the bottom level, or the best plan's starts, with random
  noise (a seeded generator, so a run with a round limit is reproducible).

Every plan is a list schedule of the tick-rounded problem (:mod:`.timing`) and is
checked against its rules (:meth:`.plan.StagePlan.violations`) before it is returned.

``worst_case_ratio``: ``2 - 1/m`` (Graham 1966) where it is proven: every plan here is a
list schedule that never leaves a slot idle while a job it may run is ready, and on
identical single-slot nodes, all free at 0, with no limits and no tags, Graham's
argument bounds such a plan by ``(2 - 1/m)`` times the optimum (of the tick-rounded
problem, whose running times are the same on every node). ``None`` elsewhere: with
limits, slots of mixed use, speeds or tags no published guarantee is used here.
"""

from __future__ import annotations

import dataclasses
import time

import numpy as np
import numpy.typing as npt

from ..budget import DEFAULT_SECONDS, Budget, StopReason
from .bounds import StageBounds, stage_bounds
from .listing import RULES, Lister, by_keys, priority
from .paths import Paths, longest_paths
from .plan import StagePlan
from .problem import StageProblem
from .result import StageResult

I64 = npt.NDArray[np.int64]

METHODS = ("list", "longest_first", "exact", "auto")
#: noise levels of the bottom-level perturbation, used in turn
NOISE = (0.05, 0.15, 0.4)


def worst_case_ratio(problem: StageProblem) -> float | None:
    """``2 - 1/m`` on identical single-slot nodes without limits (see the module doc)."""
    if problem.plain_nodes and not problem.has_limits:
        return 2.0 - 1.0 / problem.m
    return None


def _plan(problem: StageProblem, lister: Lister, rank: I64) -> StagePlan:
    got = lister.schedule(rank)
    return StagePlan(problem, got.node, got.slot, got.start)


def justify(problem: StageProblem, lister: Lister, plan: StagePlan) -> list[StagePlan]:
    """The mirror of a backward pass and the forward pass after it (module doc); empty
    when the nodes are not all free at the same tick."""
    free = problem.timing.free
    if not (free == free[0]).all():
        return []
    f0 = int(free[0])
    back = lister.schedule(by_keys(-plan.end, plan.start), reverse=True)
    mirror = StagePlan(problem, back.node, back.slot, back.start)  # only its ends are used
    horizon = int(mirror.end.max())
    starts = f0 + horizon - mirror.end
    mirrored = StagePlan(problem, back.node, back.slot, starts)
    forward = _plan(problem, lister, by_keys(starts, -plan.end))
    return [mirrored, forward]


def improve(
    problem: StageProblem,
    budget: Budget,
    *,
    seed: int = 0,
    max_rounds: int | None = None,
    paths: Paths | None = None,
) -> tuple[StagePlan, StageBounds, str, bool, int]:
    """Best plan found, the bounds, the rule that found it, whether time ran out, rounds.

    Stops when the plan meets the best bound, the budget is spent, or ``max_rounds``
    rounds of improvement were made (for reproducible runs).
    """
    paths = paths or longest_paths(problem)
    lister = Lister(problem)
    best: StagePlan | None = None
    rule = ""
    for name in RULES:
        cand = _plan(problem, lister, priority(paths, name))
        if best is None or cand.makespan_ticks < best.makespan_ticks:
            best, rule = cand, name
    assert best is not None
    bounds = stage_bounds(problem, paths, upper=best.makespan_ticks)
    target = bounds.ticks
    rng = np.random.default_rng(seed)
    rounds = 0
    ran_out = False
    span = float(max(int(paths.d.max()), 1))
    while best.makespan_ticks > target:
        if budget.expired():
            ran_out = True
            break
        if max_rounds is not None and rounds >= max_rounds:
            break
        rounds += 1
        cands = justify(problem, lister, best)
        noise = NOISE[rounds % len(NOISE)]
        key = paths.bottom * (1.0 + noise * rng.uniform(-1.0, 1.0, problem.n))
        cands.append(_plan(problem, lister, by_keys(-key, -paths.d.astype(np.float64))))
        key = best.start + noise * span * rng.uniform(0.0, 1.0, problem.n)
        cands.append(_plan(problem, lister, by_keys(key, -paths.bottom.astype(np.float64))))
        for cand in cands:
            if cand.makespan_ticks < best.makespan_ticks:
                best, rule = cand, "search"
    return best, bounds, rule, ran_out, rounds


def solve_stages(
    problem: StageProblem,
    method: str = "longest_first",
    budget: Budget | None = None,
    *,
    seed: int = 0,
    max_rounds: int | None = None,
) -> StageResult:
    """Plan ``problem`` with ``method`` (one of :data:`METHODS`) and certify the plan.

    ``list`` and ``longest_first`` are one pass of their rule; ``exact`` and ``auto`` run
    :func:`improve` within ``budget`` (default :data:`~workers.planning.budget.
    DEFAULT_SECONDS`). The plan is checked before it is returned.
    """
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; expected one of {METHODS}")
    t0 = time.perf_counter()
    budget = budget or Budget(DEFAULT_SECONDS)
    paths = longest_paths(problem)
    rounds, ran_out = 0, False
    if method in ("list", "longest_first"):
        rule = method
        plan = _plan(problem, Lister(problem), priority(paths, method))
        bounds = stage_bounds(problem, paths, upper=plan.makespan_ticks)
    else:
        plan, bounds, rule, ran_out, rounds = improve(
            problem, budget, seed=seed, max_rounds=max_rounds, paths=paths
        )
    plan.check()
    if bounds.ticks > plan.makespan_ticks:  # pragma: no cover - a bound is never above a plan
        raise AssertionError("a lower bound above a feasible plan: a bound is wrong")
    if problem.rounded:  # bounds that hold for the times as given (see .result)
        low = problem.relaxed()
        bounds = stage_bounds(low, longest_paths(low), upper=plan.makespan_ticks)
    out = StageResult(
        plan=plan,
        bounds=bounds,
        method=method,
        rule=rule,
        stop_reason=StopReason.HEURISTIC,
        worst_case_ratio=worst_case_ratio(problem),
        rounds=rounds,
        solve_seconds=0.0,
    )
    stop = budget.stop_reason(proven=out.proven_optimal, ran_out=ran_out)
    return dataclasses.replace(out, stop_reason=stop, solve_seconds=time.perf_counter() - t0)
