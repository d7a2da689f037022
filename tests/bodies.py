"""Body-level shortcuts for tests: the service's readers (``service/reading``) composed with
the core's use-cases, as the worker and the CLI compose them. No expected values here."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from service import reading
from workers.planning.budget import DEFAULT_SECONDS
from workers.planning.replan import RemainingWork, remaining_work, replan
from workers.planning.result import PlanResult
from workers.planning.sizing import SizingResult
from workers.planning.sizing_request import size_request


def size_body(body: Mapping[str, Any], **kw: Any) -> SizingResult:
    """Size a ``POST /v1/sizings`` body."""
    return size_request(reading.read_sizing_request(body), **kw)


def remaining_of(
    request: Mapping[str, Any], result: Mapping[str, Any] | None, events: Mapping[str, Any]
) -> RemainingWork:
    """What is left of ``request`` (planned as ``result``) after ``events`` (a body)."""
    return remaining_work(
        reading.read_instance(request),
        reading.planned_nodes(result),
        reading.read_events(events),
    )


def replan_request(
    request: Mapping[str, Any], result: Mapping[str, Any] | None, events: Mapping[str, Any]
) -> dict[str, Any]:
    """The ``POST /v1/plans`` body the API queues for a re-plan."""
    ev = reading.read_events(events)
    work = remaining_work(reading.read_instance(request), reading.planned_nodes(result), ev)
    return reading.replan_body(request, work, ev)


def replan_bodies(
    request: Mapping[str, Any],
    result: Mapping[str, Any] | None,
    events: Mapping[str, Any],
    *,
    method: str | None = None,
    time_budget: float | None = None,
) -> PlanResult:
    """Re-plan as ``spanwright replan`` does: the method and budget of the call, else of
    the events, else of the original request."""
    ev = reading.read_events(events)
    chosen = method or ev.method or request.get("method") or "longest_first"
    budget = time_budget if time_budget is not None else ev.time_budget
    if budget is None:
        budget = request.get("time_budget", DEFAULT_SECONDS)
    return replan(
        reading.read_instance(request),
        reading.planned_nodes(result),
        ev,
        method=str(chosen),
        time_budget=float(budget),
    )
