"""``GET /v1/plans/{id}/events`` and ``GET /v1/sizings/{id}/events``: a record's progress
as Server-Sent Events (the WHATWG HTML standard's ``text/event-stream``).

One ``progress`` event each time the record changes while it is queued or solving (the
worker writes progress at least every 0.5 s while a search runs), then one ``end`` event
with the final status document, and the stream closes. Each event's data is the status
document of ``GET {path}/{id}`` as one line of JSON. A stream holds a web thread, so it
counts against the same per-process cap as ``Prefer: wait`` holders
(``SPANWRIGHT_MAX_WAITERS``; beyond it a 429 with Retry-After) and lasts at most
``SPANWRIGHT_MAX_WAIT`` seconds, after which a ``timeout`` event says to reconnect (the
``retry`` field gives the delay).
"""

from __future__ import annotations

import time
from collections.abc import Iterator

from flask import Blueprint, Response

from ..problems import NotFound, TooManyRequests
from ..services import services
from ..store import FINISHED
from .jobs import _WAITERS, Resource, _owned, status_document

#: seconds between two looks at the record
POLL = 0.25


def _event(name: str, data: str) -> str:
    return f"event: {name}\ndata: {data}\n\n"


def stream(res: Resource, rid: str) -> Response:
    """The event stream of record ``rid`` of ``res.kind`` (404 when not the caller's)."""
    _owned(res, rid)
    svc = services()
    store, settings = svc.store, svc.settings
    if not _WAITERS.acquire(settings.max_waiters):
        raise TooManyRequests("every live-stream slot of this process is taken; poll instead", 1)

    def events() -> Iterator[str]:
        try:
            yield "retry: 1000\n\n"
            seen = -1
            until = time.monotonic() + settings.max_wait
            while True:
                _, version = store.version(res.kind, rid)
                if version != seen:
                    seen = version
                    rec = store.get(res.kind, rid)
                    if rec is None:
                        yield _event("end", '{"status":"expired"}')
                        return
                    doc = status_document(rec, res.path)
                    if rec.status in FINISHED:
                        yield _event("end", doc)
                        return
                    yield _event("progress", doc)
                if time.monotonic() >= until:
                    yield _event("timeout", '{"reconnect":true}')
                    return
                time.sleep(POLL)
        finally:
            _WAITERS.release()

    if store.get(res.kind, rid) is None:  # pragma: no cover - _owned found it just now
        _WAITERS.release()
        raise NotFound(f"no {res.kind} {rid!r}")
    resp = Response(events(), mimetype="text/event-stream")
    resp.headers["Cache-Control"] = "no-cache"
    resp.headers["X-Accel-Buffering"] = "no"  # a buffering proxy would hold every event
    return resp


def add_events(bp: Blueprint, res: Resource) -> Blueprint:
    """Add ``GET {path}/{id}/events`` to the blueprint of ``res``."""

    def events(rid: str) -> Response:
        return stream(res, rid)

    bp.add_url_rule(res.path + "/<rid>/events", "events", events, methods=["GET"])
    return bp
