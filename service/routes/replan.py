"""``POST /v1/plans/{id}/replan``: a new plan for what is left of a finished plan.

The events body (elapsed, finished, running, lost and added nodes) and the stored request
and result go through the core's ``replan.remaining_work``; the remaining work becomes an
ordinary plan request, validated like any other and queued. Time 0 of the new plan is the
re-planning moment; running jobs stay on their nodes (busy until they end).
"""

from __future__ import annotations

import json
from typing import Any

from flask import Blueprint, Response

from workers.planning.replan import read_events, remaining_work

from ..problems import NotFinished, NotFound
from ..store import new_id as new_record_id
from . import services, tenant
from .jobs import ID_RE, etag_of, read_json_body, status_document
from .plans import RESOURCE, read_plan

blueprint = Blueprint("replan", __name__)


@blueprint.post(RESOURCE.path + "/<rid>/replan")
def replan(rid: str) -> Response:
    svc = services()
    store, who = svc.store, tenant()
    if not ID_RE.fullmatch(rid):
        raise NotFound(f"no plan {rid!r}")
    old = store.get("plan", rid)
    if old is None or old.tenant != who:
        raise NotFound(f"no plan {rid!r} (it may have expired)")
    raw_request = store.load_request("plan", rid)
    if old.status != "done" or old.result_json is None or raw_request is None:
        raise NotFinished(f"plan {rid} is {old.status}; only a finished plan can be re-planned")
    _, events = read_json_body()
    work = remaining_work(json.loads(raw_request), json.loads(old.result_json), read_events(events))
    checked = read_plan(work.request, svc.settings)
    data = checked.data
    raw = json.dumps(work.request, allow_nan=False).encode()
    meta: dict[str, Any] = {
        "method": data.get("method"),
        "time_budget": repr(float(data["time_budget"])),
        "name": f"replan of {rid}",
    }
    budget = float(data["time_budget"])
    new_id = new_record_id()

    def enqueue(pipe: Any) -> None:
        svc.queue.enqueue("plan", new_id, budget, pipeline=pipe)

    store.create("plan", who, raw, meta, rid=new_id, work=checked.work, enqueue=enqueue)
    rec = store.get("plan", new_id)
    if rec is None:  # pragma: no cover - expired within the request
        raise NotFound(f"plan {new_id} vanished")
    doc = json.loads(status_document(rec, RESOURCE.path))
    doc["replan"] = {"of": rid, **work.info()}
    resp = Response(json.dumps(doc, allow_nan=False), 202, mimetype="application/json")
    resp.headers["Location"] = f"{RESOURCE.path}/{new_id}"
    resp.headers["ETag"] = etag_of(rec.version)
    resp.headers["Retry-After"] = "1"
    return resp
