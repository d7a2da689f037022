"""``GET /``, ``/plans/{id}``, ``/sizings``, ``/sizings/{id}``: the pages, thin over the store."""

from __future__ import annotations

import json
from collections.abc import Callable
from typing import Any

from flask import Blueprint, Response, render_template, request

from ..problems import NotFound
from ..routes.jobs import ID_RE, status_document
from ..services import may_read, services, tenant
from . import pages, sizings
from .stage_svg import StageRequest
from .svg import FarmNode

#: static/live.js, the script a working record's page follows its event stream with
blueprint = Blueprint(
    "pages",
    __name__,
    template_folder="templates",
    static_folder="static",
    static_url_path="/static/web",
)

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


def _cursor() -> str | None:
    cursor = request.args.get("cursor")
    return cursor if cursor is not None and ID_RE.fullmatch(cursor) else None


def _refresh(items: list[dict[str, Any]]) -> int | None:
    working = any(i.get("status") in ("queued", "solving") for i in items)
    return pages.REFRESH_SECONDS if working else None


#: what a sizing's list row shows, read from its result when the stored summary lacks it
_SIZING_ROW_KEYS = (
    "deadline", "nodes_needed", "nodes_lower_bound", "estimated_cost", "proven_optimal",
    "rent", "cost", "cost_lower_bound",
)  # fmt: skip


def _with_results(kind: str, items: list[dict[str, Any]]) -> list[dict[str, Any]]:
    """``items``, each finished one whose stored summary lacks the deadline or the answer
    (a rental's, or one stored before the summary carried them) given the row's fields of
    its result under ``result``: read in one round trip, for those rows only."""
    store = services().store
    want = []
    for item in items:
        summary = item.get("summary") or {}
        if item.get("status") == "done" and (
            summary.get("deadline") is None or summary.get("nodes_needed") is None
        ):
            want.append(item)
    if not want:
        return items
    pipe = store.conn.pipeline(transaction=False)
    for item in want:
        pipe.get(store.key(kind, item["id"], "result"))
    for item, raw in zip(want, pipe.execute(), strict=True):
        if raw is not None:
            res = json.loads(raw)
            item["result"] = {k: res[k] for k in _SIZING_ROW_KEYS if k in res}
    return items


def _list_page(
    kind: str,
    template: str,
    path: str,
    rows: Callable[[list[dict[str, Any]]], list[dict[str, str]]],
) -> Response:
    """One page of the caller's records of ``kind``, newest first, with a link to the next
    (older) page at ``path?cursor=...``."""
    items, nxt = services().store.list(tenant(), kind, limit=50, cursor=_cursor())
    return _html(
        render_template(
            template,
            title=f"recent {kind}s",
            rows=rows(items),
            next_href=f"{path}?cursor={nxt}" if nxt else None,
            banner=_banner(),
            refresh=_refresh(items),
        )
    )


@blueprint.get("/")
def plan_list() -> Response:
    return _list_page("plan", "list.html", "/", pages.list_rows)


@blueprint.get("/sizings")
def sizing_list() -> Response:
    """The caller's sizings, newest first, like the plans at ``GET /`` (issue 19 point 3)."""
    return _list_page(
        "sizing",
        "sizings.html",
        "/sizings",
        lambda items: sizings.sizing_list_rows(_with_results("sizing", items)),
    )


@blueprint.get("/plans/<rid>")
def plan_page(rid: str) -> Response:
    doc, raw = _record("plan", rid)
    groups: dict[str, str] = {}
    graph = None
    farm: dict[str, FarmNode] = {}
    result = doc.get("result")
    if raw is not None and (result is None or result.get("jobs", 0) <= MAX_TIMELINE_JOBS):
        body = json.loads(raw)
        groups = {j["id"]: j["group"] for j in body.get("jobs", []) if j.get("group")}
        farm = FarmNode.from_request(body)
        if result is not None and "stages" in result:
            graph = StageRequest.from_body(body)
    if result is not None and result.get("jobs", 0) > MAX_TIMELINE_JOBS:
        result = dict(result, assignment=[])
        doc = dict(doc, result=result)
    ctx = pages.plan_context(doc, groups, graph, farm)
    return _html(render_template("plan.html", banner=_banner(), **ctx))


@blueprint.get("/sizings/<rid>")
def sizing_page(rid: str) -> Response:
    doc, _ = _record("sizing", rid)
    ctx = sizings.sizing_context(doc)
    return _html(render_template("sizing.html", banner=_banner(), **ctx))
