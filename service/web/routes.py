"""``GET /``, ``/plans/{id}``, ``/sizings/{id}``: the pages, thin over the store."""

from __future__ import annotations

import json
from typing import Any

from flask import Blueprint, Response, render_template, request

from ..problems import NotFound
from ..routes.jobs import ID_RE, status_document
from ..services import may_read, services, tenant
from . import pages
from .stage_svg import StageRequest

blueprint = Blueprint("pages", __name__, template_folder="templates")

#: above this many jobs the page shows the certificate but not every bar
MAX_TIMELINE_JOBS = 20_000


def _banner() -> str | None:
    settings = services().settings
    return None if settings.keys_file else "keyless demo on a loopback address"


def _record(kind: str, rid: str) -> tuple[dict[str, Any], bytes | None]:
    if not ID_RE.fullmatch(rid):
        raise NotFound(f"no {kind} {rid!r}")
    store = services().store
    owner, _ = store.version(kind, rid)  # the owner first: "not yours" costs "not there"
    rec = store.get(kind, rid) if may_read(owner) else None
    if rec is None or not may_read(rec.tenant):
        raise NotFound(f"no {kind} {rid!r} (it may have expired)")
    doc = json.loads(status_document(rec, f"/v1/{kind}s"))
    history = store.progress_history(kind, rid) if kind == "plan" else []
    if history:
        doc["progress_history"] = history
    return doc, store.load_request(kind, rid)


def _html(body: str) -> Response:
    return Response(body, 200, mimetype="text/html")


@blueprint.get("/")
def plan_list() -> Response:
    cursor = request.args.get("cursor")
    if cursor is not None and not ID_RE.fullmatch(cursor):
        cursor = None
    items, nxt = services().store.list(tenant(), "plan", limit=50, cursor=cursor)
    return _html(
        render_template(
            "list.html",
            title="recent plans",
            rows=pages.list_rows(items),
            next_href=f"/?cursor={nxt}" if nxt else None,
            banner=_banner(),
            refresh=pages.REFRESH_SECONDS
            if any(i.get("status") in ("queued", "solving") for i in items)
            else None,
        )
    )


@blueprint.get("/plans/<rid>")
def plan_page(rid: str) -> Response:
    doc, raw = _record("plan", rid)
    groups: dict[str, str] = {}
    graph = None
    result = doc.get("result")
    if raw is not None and (result is None or result.get("jobs", 0) <= MAX_TIMELINE_JOBS):
        body = json.loads(raw)
        groups = {j["id"]: j["group"] for j in body.get("jobs", []) if j.get("group")}
        if result is not None and "stages" in result:
            graph = StageRequest.from_body(body)
    if result is not None and result.get("jobs", 0) > MAX_TIMELINE_JOBS:
        result = dict(result, assignment=[])
        doc = dict(doc, result=result)
    ctx = pages.plan_context(doc, groups, graph)
    return _html(render_template("plan.html", banner=_banner(), **ctx))


@blueprint.get("/sizings/<rid>")
def sizing_page(rid: str) -> Response:
    doc, _ = _record("sizing", rid)
    ctx = pages.sizing_context(doc)
    return _html(render_template("sizing.html", banner=_banner(), **ctx))
