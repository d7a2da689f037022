"""``POST /v1/plans/{id}/replan``: a new plan for what is left of a finished plan.

The events body (elapsed, finished, running, lost and added nodes) is checked for shape
(``ReplanRequestSchema``: unknown fields refused, JSON Pointers), then it and the stored
request and result go through the core's ``replan.remaining_work``; the remaining work
becomes an ordinary plan request (``reading.replan_body``), validated like any other and
queued through the same protocol as ``POST /v1/plans`` (:func:`.jobs.queue_record`:
queue-depth admission, ``Idempotency-Key``, ``Prefer: wait``; the per-tenant request rate
is counted for every keyed request by ``service/auth.py``). Time 0 of the new plan is the
re-planning moment; running jobs stay on their nodes (busy until they end).
"""

from __future__ import annotations

import hashlib
import json
from typing import Any

from flask import Blueprint, Response

from workers.planning.replan import remaining_work
from workers.planning.stages.problem import StageProblem
from workers.planning.stages.replan import remaining_stages

from ..problems import NotFinished, NotFound
from ..reading import (
    clock,
    planned_nodes,
    read_events,
    read_instance,
    read_problem,
    replan_body,
)
from ..reading.stages import is_staged
from ..schemas import load_replan_request
from ..services import services, tenant
from ..workform import Work, resolution_of
from .jobs import ID_RE, Validated, queue_record, read_json_body
from .plans import RESOURCE, read_plan

blueprint = Blueprint("replan", __name__)


@blueprint.post(RESOURCE.path + "/<rid>/replan")
def replan(rid: str) -> Response:
    svc = services()
    store, who = svc.store, tenant()
    if not ID_RE.fullmatch(rid):
        raise NotFound(f"no plan {rid!r}")
    owner, _ = store.version("plan", rid)  # the owner first: "not yours" costs "not there"
    old = store.get("plan", rid) if owner == who else None
    if old is None or old.tenant != who:
        raise NotFound(f"no plan {rid!r} (it may have expired)")
    raw_request = store.load_request("plan", rid)
    if old.status != "done" or old.result_json is None or raw_request is None:
        raise NotFinished(f"plan {rid} is {old.status}; only a finished plan can be re-planned")
    raw_events, body = read_json_body()
    events = read_events(load_replan_request(body))
    original = json.loads(raw_request)
    planned_on = planned_nodes(json.loads(old.result_json))
    if is_staged(original):  # waits, limits and slots: running jobs carried into the plan
        return _replan_stages(rid, original, planned_on, body, raw_events)
    work = remaining_work(read_instance(original), planned_on, events)
    request = replan_body(original, work, events)
    checked = read_plan(request, svc.settings)
    data = checked.data
    raw = json.dumps(request, allow_nan=False).encode()
    meta: dict[str, Any] = {
        "method": data.get("method"),
        "time_budget": repr(float(data["time_budget"])),
        "name": f"replan of {rid}",
    }
    # the same events for another plan are another request (keys are per tenant and kind)
    fingerprint = hashlib.sha256(f"replan {rid}\n".encode() + raw_events).hexdigest()
    return queue_record(
        RESOURCE, raw, checked, meta, fingerprint, more={"replan": {"of": rid, **work.info()}}
    )


def _replan_stages(
    rid: str,
    original: dict[str, Any],
    planned_on: dict[str, str],
    events_body: dict[str, Any],
    raw_events: bytes,
) -> Response:
    """A stage graph's re-plan: checked here (422 for events the graph contradicts), then
    queued as a record whose stored request names the original, the original plan's
    nodes and the events (``stage_replan``; the worker rebuilds what is left from them:
    running jobs' slots, held limits and waits are not plan-request fields)."""
    svc = services()
    events = read_events(load_replan_request(events_body))
    problem = read_problem(original)
    assert isinstance(problem, StageProblem)  # is_staged said so
    left = remaining_stages(problem, planned_on, events)
    method = events.method or str(original.get("method") or "longest_first")
    budget = events.time_budget
    if budget is None:
        budget = float(original.get("time_budget", svc.settings.default_time_budget))
    request = {
        "stage_replan": {"request": original, "planned_on": planned_on, "events": events_body},
        "method": method,
        "time_budget": budget,
    }
    work = Work(problem, None, clock.echo(request), resolution_of(request), planned_on, events)
    checked = Validated({"method": method, "time_budget": budget}, work)
    meta: dict[str, Any] = {
        "method": method,
        "time_budget": repr(float(budget)),
        "name": f"replan of {rid}",
    }
    fingerprint = hashlib.sha256(f"replan {rid}\n".encode() + raw_events).hexdigest()
    raw = json.dumps(request, allow_nan=False).encode()
    return queue_record(
        RESOURCE, raw, checked, meta, fingerprint, more={"replan": {"of": rid, **left.info()}}
    )
