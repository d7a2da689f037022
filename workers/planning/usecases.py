"""The use-cases: what one request body asks for, answered the same way everywhere.

The worker (``workers/tasks.py``) and the command line (``spanwright solve``, ``size`` and
``confidence``) call these with what the service's edge read from one body
(``service/reading``), so one body gives one answer (timings aside), its ``confidence``
block included. Arguments are core objects; nothing here reads a request body.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any, Generic, TypeVar

from .budget import Budget
from .confidence.request import SpreadRequest
from .errors import InvalidInstance, Issue
from .model import Instance
from .progress import ProgressHook
from .rental import RentalArgs, RentalResult
from .result import PlanResult
from .sizing import SizingProgressHook, SizingResult
from .sizing_request import SizingArgs
from .stage_sizing import StageSizingArgs, StageSizingResult, size_stages
from .stages.problem import StageProblem
from .stages.result import StageResult

#: what an answer wraps: a plan (of a batch or of a stage graph) or a sizing
R = TypeVar(
    "R",
    PlanResult,
    PlanResult | StageResult,
    SizingResult,
    SizingResult | StageSizingResult | RentalResult,
)


@dataclass(frozen=True, eq=False)
class Answer(Generic[R]):
    """A result and, when the request gave estimate spread, its ``confidence`` block (a
    sizing's ``confidence_sizing`` too)."""

    result: R
    extra: dict[str, Any] = field(default_factory=dict)

    def to_dict(self, **options: bool) -> dict[str, Any]:
        """The ``result`` object of the API contract (``options``: the result's own, such
        as ``with_assignment`` of a plan or ``with_plan`` of a sizing)."""
        out = self.result.to_dict(**options)
        out.update(self.extra)
        return out


class PlanAnswer(Answer[PlanResult | StageResult]):
    """A plan and, when the request gave estimate spread, its ``confidence`` block."""

    def to_json(self) -> str:
        """:meth:`to_dict` as compact JSON, written fast (``PlanResult.to_json``)."""
        return self.result.to_json(self.extra)


class SizingAnswer(Answer[SizingResult | StageSizingResult | RentalResult]):
    """A sizing and, with estimate spread, its ``confidence`` (and ``confidence_sizing``)."""


def plan(
    inst: Instance | StageProblem,
    *,
    method: str,
    time_budget: float,
    spread: SpreadRequest | None = None,
    progress: ProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> PlanAnswer:
    """``POST /v1/plans``: plan ``inst``, then, when the request gave estimate spread
    (``spread``: what it asks the simulation for), simulate the plan."""
    from .solve import solve

    res = solve(inst, method, time_budget=time_budget, progress=progress, should_stop=should_stop)
    extra: dict[str, Any] = {}
    if spread is not None:
        from .confidence import confidence_block

        if not isinstance(res, PlanResult):  # a stage graph: waits, limits and slots
            from .confidence.stages import stage_confidence_block

            extra["confidence"] = stage_confidence_block(
                res,
                spread=spread.spread,
                samples=spread.samples,
                seed=spread.seed,
                deadline=res.problem.instance.deadline,
            )
            return PlanAnswer(res, extra)
        extra["confidence"] = confidence_block(
            res.schedule,
            spread=spread.spread,
            samples=spread.samples,
            seed=spread.seed,
            deadline=res.schedule.instance.deadline,
        )
    return PlanAnswer(res, extra)


def size(
    args: SizingArgs | StageSizingArgs | RentalArgs,
    *,
    time_budget: float,
    spread: SpreadRequest | None = None,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingAnswer:
    """``POST /v1/sizings``: the fewest nodes meeting the deadline; with spread inputs or a
    target ``confidence`` (``spread``), the ``confidence`` of the answer's plan and, with
    the target, ``confidence_sizing``. A cancelled sizing skips the simulation."""
    from .confidence import sizing_confidence
    from .sizing_request import size_request

    if isinstance(args, RentalArgs):
        if spread is not None:
            raise InvalidInstance(
                "the confidence simulation does not handle rentals yet",
                [Issue(("spread",), "not supported with farm and kinds yet")],
            )
        from .rental import rent

        return SizingAnswer(rent(args, Budget(time_budget, should_stop)))
    if isinstance(args, StageSizingArgs):
        if spread is not None:
            raise InvalidInstance(
                "the confidence simulation does not handle stage graphs yet",
                [Issue(("spread",), "not supported with after, uses, limits or slots yet")],
            )
        return SizingAnswer(size_stages(args, Budget(time_budget, should_stop)))
    if spread is not None:  # a q out of reach fails before the search
        spread.check(args.base, args.node.speed)
    res = size_request(args, time_budget=time_budget, progress=progress, should_stop=should_stop)
    extra: dict[str, Any] = {}
    if spread is not None and res.stop_reason != "cancelled":
        extra = sizing_confidence(res.schedule, spread)
    return SizingAnswer(res, extra)
