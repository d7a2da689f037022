"""The use-cases: what one request body asks for, answered the same way everywhere.

The worker (``workers/tasks.py``) and the command line (``spanwright solve`` and ``size``)
call these, so one body gives one answer (timings aside), its ``confidence`` block
included. The bodies given here have passed the service's shape check
(``service/schemas.py``: unknown fields, types and ranges) wherever they came from; these
functions read them into core objects (the semantic checks: duplicate ids, a job no node
can run, ...) and solve.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any

from .model import Instance
from .progress import ProgressHook
from .result import PlanResult
from .sizing import SizingProgressHook, SizingResult


@dataclass(frozen=True, eq=False)
class PlanAnswer:
    """A plan and, when the request gave estimate spread, its ``confidence`` block."""

    result: PlanResult
    extra: dict[str, Any] = field(default_factory=dict)

    def to_dict(self, *, with_assignment: bool = True) -> dict[str, Any]:
        """The ``result`` object of the API contract."""
        out = self.result.to_dict(with_assignment=with_assignment)
        out.update(self.extra)
        return out

    def to_json(self) -> str:
        """:meth:`to_dict` as compact JSON, written fast (``PlanResult.to_json``)."""
        return self.result.to_json(self.extra)


@dataclass(frozen=True, eq=False)
class SizingAnswer:
    """A sizing and, with estimate spread, its ``confidence`` (and ``confidence_sizing``)."""

    result: SizingResult
    extra: dict[str, Any] = field(default_factory=dict)

    def to_dict(self, *, with_plan: bool = True) -> dict[str, Any]:
        out = self.result.to_dict(with_plan=with_plan)
        out.update(self.extra)
        return out


def wants_confidence(body: Mapping[str, Any], inst: Instance) -> bool:
    """Whether a plan request gave estimate spread (a job's p90, ``spread`` or samples)."""
    return inst.duration_p90 is not None or "spread" in body or "confidence_samples" in body


def plan(
    inst: Instance,
    options: Mapping[str, Any],
    *,
    method: str,
    time_budget: float,
    progress: ProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> PlanAnswer:
    """``POST /v1/plans``: plan ``inst`` (read from the body), then simulate it when the
    body (``options``: everything but the jobs) gave estimate spread."""
    from .solve import solve

    res = solve(inst, method, time_budget=time_budget, progress=progress, should_stop=should_stop)
    extra: dict[str, Any] = {}
    if wants_confidence(options, inst):
        from .confidence import confidence_block

        extra["confidence"] = confidence_block(
            res.schedule,
            spread=options.get("spread"),
            samples=int(options.get("confidence_samples", 1000)),
            seed=int(options.get("confidence_seed", 0)),
            deadline=inst.deadline,
        )
    return PlanAnswer(res, extra)


def plan_body(
    body: Mapping[str, Any],
    *,
    time_budget: float,
    progress: ProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> PlanAnswer:
    """:func:`plan` for a whole body (jobs as objects)."""
    inst = Instance.from_request(body)
    method = str(body.get("method", "longest_first"))
    return plan(
        inst,
        body,
        method=method,
        time_budget=time_budget,
        progress=progress,
        should_stop=should_stop,
    )


def size_body(
    body: Mapping[str, Any],
    *,
    time_budget: float,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingAnswer:
    """``POST /v1/sizings``: the fewest nodes meeting the deadline; with spread inputs or a
    target ``confidence``, the ``confidence`` of the answer's plan and, with the target,
    ``confidence_sizing``. A cancelled sizing skips the simulation."""
    from .confidence import SpreadRequest, sizing_confidence
    from .sizing_request import size_from_request

    asked = SpreadRequest.from_body(body)  # bad spread inputs fail before the search
    res = size_from_request(
        body, time_budget=time_budget, progress=progress, should_stop=should_stop
    )
    extra: dict[str, Any] = {}
    if asked is not None and res.stop_reason != "cancelled":
        extra = sizing_confidence(res.schedule, asked)
    return SizingAnswer(res, extra)
