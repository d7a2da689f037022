"""One entry point: ``solve(instance, method, ...) -> PlanResult``."""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable
from typing import Any, TypedDict, Unpack, overload

from . import bounds, greedy
from .budget import DEFAULT_SECONDS, Budget
from .errors import InvalidInstance, Issue
from .model import Instance
from .progress import Progress as Progress
from .progress import ProgressHook
from .result import PlanResult, Schedule
from .stages.problem import StageProblem
from .stages.result import StageResult

METHODS = ("list", "longest_first", "exact", "auto")


class SolveOptions(TypedDict, total=False):
    """The keyword options of :func:`solve`, the same whatever it plans."""

    time_budget: float
    progress: ProgressHook | None
    should_stop: Callable[[], bool] | None


@overload
def solve(inst: Instance, method: str = ..., **options: Unpack[SolveOptions]) -> PlanResult: ...


@overload
def solve(
    inst: StageProblem, method: str = ..., **options: Unpack[SolveOptions]
) -> PlanResult | StageResult: ...


def solve(
    inst: Instance | StageProblem,
    method: str = "longest_first",
    *,
    time_budget: float = DEFAULT_SECONDS,
    progress: ProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> PlanResult | StageResult:
    """Plan ``inst`` with ``method`` and certify how far the plan may be from optimal.

    ``time_budget`` (seconds) and ``should_stop`` (a cancel check) only matter to the
    search methods; the greedy ones take milliseconds. A stage graph whose jobs wait for
    none, use no limit and run on single-slot nodes is planned as its plain batch.
    """
    if method not in METHODS:
        raise InvalidInstance(
            f"unknown method {method!r}",
            [Issue(("method",), f"must be one of {', '.join(METHODS)}")],
        )
    if not (time_budget >= 0):
        raise InvalidInstance("bad time budget", [Issue(("time_budget",), "must be >= 0")])
    budget = Budget(time_budget, should_stop)
    if isinstance(inst, StageProblem):
        if inst.arcs or inst.has_limits or not inst.single_slot:
            from .stages.search import solve_stages

            return solve_stages(inst, method, budget)
        inst = inst.instance
    if inst.identical:
        return _solve_identical(inst, method, budget, progress)
    from . import farm  # heterogeneous farms: speeds, tags, nodes still busy
    from .farm_bounds import eligibility

    elig = eligibility(inst)  # raises Infeasible naming the jobs no node may run
    if farm.identical_in_effect(inst, elig):
        plain = dataclasses.replace(inst, requires=None)
        return farm.as_farm_result(inst, _solve_identical(plain, method, budget, progress))
    return farm.solve_farm(inst, elig, method, budget, progress)


def _solve_identical(
    inst: Instance, method: str, budget: Budget, progress: ProgressHook | None
) -> PlanResult:
    """Identical nodes: the greedy rules, or the exact search of :mod:`.exact`."""
    if method in ("exact", "auto"):
        from .exact import solve_exact

        return solve_exact(inst, budget, progress=progress, auto=(method == "auto"))
    return solve_greedy(inst, method, budget.started)


def solve_greedy(inst: Instance, method: str, started: float | None = None) -> PlanResult:
    """``list`` or ``longest_first`` with its certificate."""
    t0 = time.perf_counter() if started is None else started
    extras: dict[str, Any] = {}
    sched: Schedule
    if method == "list":
        sched = greedy.list_schedule(inst)
        ratio = greedy.list_ratio(inst.m)
    else:
        sched = greedy.longest_first_schedule(inst)
        ratio = greedy.lpt_ratio(inst.m)
        post, k = greedy.a_posteriori_ratio(sched)
        extras["a_posteriori_ratio"] = post
        extras["a_posteriori"] = {"rule": "coffman_sethi_1976", "k": k}
    cert = bounds.lower_bounds(inst, upper=sched.makespan)
    return PlanResult(
        schedule=sched,
        method=method,
        certificate=cert,
        worst_case_ratio=ratio,
        # the one rule: a plan that meets its bound says so, whatever the method
        stop_reason=Budget(0.0).stop_reason(
            proven=cert.exact_value >= sched.makespan_exact, ran_out=False
        ),
        solve_seconds=time.perf_counter() - t0,
        extras=extras,
    )
