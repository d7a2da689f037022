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
from .rental_plan import Market
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
    """A sizing and, with estimate spread, its ``confidence`` (and ``confidence_sizing``);
    a rental asked at several deadlines, its ``frontier``."""


@dataclass(frozen=True, eq=False)
class FrontierArgs:
    """A rental asked at several deadlines (issue 18 point 3): the answer is ``rental`` at
    its own deadline; ``deadlines`` are the frontier's points, distinct, in ascending
    order, the answer's deadline among them (the reader adds it when a request's list
    lacks it)."""

    rental: RentalArgs
    deadlines: tuple[float, ...]

    def check(self) -> Market:
        """The answer's checks (:meth:`RentalArgs.check` at its deadline): a point at
        another deadline that no plan meets is a point without a plan, not a refusal."""
        return self.rental.check()

    @property
    def answer_deadline(self) -> float:
        return float(self.rental.instance.deadline)  # type: ignore[arg-type]


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


#: the sizings the confidence simulation does not handle yet: (kind, its name, its fields)
_UNSIMULATED: tuple[tuple[type, str, str], ...] = (
    (StageSizingArgs, "stage graphs", "after, uses, limits or slots"),
)


#: what ``POST /v1/sizings`` may ask, as core objects
SizingAsk = SizingArgs | StageSizingArgs | RentalArgs | FrontierArgs


def refuse_spread(args: SizingAsk) -> None:
    """Refuse estimate spread on a sizing the confidence simulation does not handle yet (a
    stage graph); on the others, do nothing (a rental's spread inputs are checked by
    :func:`check_spread`)."""
    for kind, name, fields in _UNSIMULATED:
        if isinstance(args, kind):
            raise InvalidInstance(
                f"the confidence simulation does not handle {name} yet",
                [Issue(("spread",), f"not supported with {fields} yet")],
            )


def check_spread(args: SizingAsk, spread: SpreadRequest) -> None:
    """The checks of a sizing's spread inputs that need no sampling (a q out of reach fails
    here, before any search): :meth:`SpreadRequest.check` for the single kind,
    :func:`.confidence.rental.check_rental_spread` for a rental; a stage graph is refused
    (:func:`refuse_spread`)."""
    refuse_spread(args)
    if isinstance(args, RentalArgs | FrontierArgs):
        from .confidence.rental import check_rental_spread

        check_rental_spread(args.rental if isinstance(args, FrontierArgs) else args, spread)
    elif isinstance(args, SizingArgs):
        spread.check(args.base, args.node.speed)


def size(
    args: SizingAsk,
    *,
    time_budget: float,
    spread: SpreadRequest | None = None,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingAnswer:
    """``POST /v1/sizings``: the fewest nodes meeting the deadline; with spread inputs or a
    target ``confidence`` (``spread``), the ``confidence`` of the answer's plan and, with
    the target, ``confidence_sizing`` (a rental: ``confidence_rental``); a rental at
    several deadlines, its ``frontier`` (:func:`rental_frontier`). A cancelled sizing
    skips the simulation."""
    from .confidence import sizing_confidence
    from .sizing_request import size_request

    if spread is not None:  # a q out of reach fails before the search
        check_spread(args, spread)
    if isinstance(args, RentalArgs | FrontierArgs):
        return rental_answer(args, Budget(time_budget, should_stop), spread)
    if isinstance(args, StageSizingArgs):
        return SizingAnswer(size_stages(args, Budget(time_budget, should_stop)))
    res = size_request(args, time_budget=time_budget, progress=progress, should_stop=should_stop)
    extra: dict[str, Any] = {}
    if spread is not None and res.stop_reason != "cancelled":
        extra = sizing_confidence(res.schedule, spread)
    return SizingAnswer(res, extra)


#: share of the time budget the rental answer may use when a target confidence asks
#: for more rentals after it (:func:`.confidence.rental.rent_to_confidence`)
ANSWER_SHARE = 0.5


def rental_answer(
    args: RentalArgs | FrontierArgs, budget: Budget, spread: SpreadRequest | None = None
) -> SizingAnswer:
    """A rental (:func:`.rental.rent`) or a rental at several deadlines
    (:func:`rental_frontier`); with spread inputs, the ``confidence`` block of the
    answer's plan and, with a target q, ``confidence_rental``
    (:func:`.confidence.rental.rental_confidence`). With a target, the answer (and its
    frontier) has :data:`ANSWER_SHARE` of the budget and the search to q what is left;
    the answer at the deadline is that search's first candidate. A cancelled rental
    skips the simulation."""
    from .rental import rent

    one = args.rental if isinstance(args, FrontierArgs) else args
    first = budget.child(ANSWER_SHARE) if spread is not None and spread.target else budget
    if isinstance(args, FrontierArgs):
        answer = rental_frontier(args, first)
    else:
        answer = SizingAnswer(rent(args, first))
    res = answer.result
    if spread is None or not isinstance(res, RentalResult) or res.stop_reason == "cancelled":
        return answer
    from .confidence.rental import rental_confidence

    extra = rental_confidence(res, one, spread, budget)
    return SizingAnswer(res, {**answer.extra, **extra})


#: what a frontier point states, as :func:`.rental_frontier.frontier` gives it
POINT_FIELDS = ("rent", "cost", "cost_lower_bound", "proven_optimal", "gap")


def rental_frontier(args: FrontierArgs, budget: Budget) -> SizingAnswer:
    """The rental at its deadline and the cheapest cost found at each of ``deadlines``.

    The budget is split evenly over the points: the answer's deadline is searched first
    (:func:`.rental.rent`, with ``1 / len(deadlines)`` of the budget: its plan, its
    certificate and the single-kind answers), then the others by
    :func:`.rental_frontier.frontier` with what is left, which gives each, in ascending
    order, an equal share of the time still left (a point that finishes early leaves its
    time to the later ones). Each point states what its own search proved, in exact
    arithmetic, as the library computes it: ``cost`` (a plan meeting that deadline
    costs this), ``cost_lower_bound`` (no plan meeting it costs less),
    ``proven_optimal``; or, when no plan meets that deadline, ``feasible: false`` and
    the ``reason``. ``answer`` marks the point at the answer's deadline, whose values
    are the answer's own.
    """
    from .rental import rent
    from .rental_frontier import frontier

    res = rent(args.rental, budget.child(1.0 / len(args.deadlines)))
    at = args.answer_deadline
    others = [d for d in args.deadlines if d != at]
    found = iter(frontier(args.rental, others, budget) if others else [])
    points: list[dict[str, Any]] = []
    for d in args.deadlines:
        if d == at:
            mine = res.to_dict(with_plan=False)
            points.append(
                {"deadline": d, "answer": True, "feasible": True}
                | {k: mine[k] for k in POINT_FIELDS}
            )
            continue
        pt = next(found)
        head = {"deadline": pt["deadline"], "answer": False, "feasible": pt["feasible"]}
        if pt["feasible"]:
            points.append(head | {k: pt[k] for k in POINT_FIELDS})
        else:
            points.append(head | {"reason": str(pt["reason"])})
    return SizingAnswer(res, {"frontier": points})
