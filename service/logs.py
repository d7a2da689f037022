"""Structured logs: one JSON object per line on stdout, with request and record ids.

:func:`configure_logging` installs :class:`JsonFormatter` on the root logger (RQ's loggers
then propagate to it instead of adding their own handlers). :func:`init_request_logging`
gives every request an id (the caller's ``X-Request-Id`` when it is sane, else a new one),
echoes it in the response header, and writes one access line per request. Ids travel in
context variables, so every line logged while a request (or an RQ job) runs carries them.

What is never logged: request or response headers (so no ``Authorization``), bodies, query
strings (a cursor is harmless but a key pasted into a URL is not), or any secret.
"""

from __future__ import annotations

import contextvars
import json
import logging
import re
import secrets
import sys
import time
from datetime import UTC, datetime
from typing import Any, TextIO

from flask import Flask, Response, g, request

REQUEST_ID_HEADER = "X-Request-Id"
_REQUEST_ID_RE = re.compile(r"[A-Za-z0-9._:-]{1,128}")
_PLAN_ID_RE = re.compile(r"^/v1/(plan|sizing)s/([0-9a-f]{21})$")
#: RQ's messages name the job as ``plan-<id>`` (service/queue.py ``rq_job_id``)
_RQ_JOB_RE = re.compile(r"\b(plan|sizing)-([0-9a-f]{21})\b")

request_id_var: contextvars.ContextVar[str | None] = contextvars.ContextVar(
    "spanwright_request_id", default=None
)
record_id_var: contextvars.ContextVar[str | None] = contextvars.ContextVar(
    "spanwright_record_id", default=None
)

#: attributes every LogRecord has; anything else passed via ``extra=`` is emitted
_STANDARD = frozenset(
    vars(logging.LogRecord("", 0, "", 0, "", None, None)).keys() | {"message", "asctime"}
)
#: extra keys that are dropped even if a caller passes them
_SECRET_KEYS = frozenset({"authorization", "api_key", "key", "password", "token", "headers"})


def _current_job_record() -> str | None:
    """The record id of the RQ job running in this process, if any (``plan-<id>``)."""
    try:
        from rq import get_current_job

        job = get_current_job()
    except Exception:  # no job context, or rq not importable: no id
        return None
    if job is None:
        return None
    _, _, rid = str(job.id).partition("-")
    return rid or None


class JsonFormatter(logging.Formatter):
    """``{"ts", "level", "logger", "msg", "request_id"?, "plan_id"?, ...extra}`` per line."""

    def format(self, record: logging.LogRecord) -> str:
        doc: dict[str, Any] = {
            "ts": datetime.fromtimestamp(record.created, UTC).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3]
            + "Z",
            "level": record.levelname,
            "logger": record.name,
            "msg": record.getMessage(),
        }
        rid = request_id_var.get()
        if rid:
            doc["request_id"] = rid
        plan = getattr(record, "plan_id", None) or record_id_var.get() or _current_job_record()
        if not plan and record.name.startswith("rq."):
            m = _RQ_JOB_RE.search(doc["msg"])
            plan = m.group(2) if m else None
        if plan:
            doc["plan_id"] = plan
        for k, v in vars(record).items():
            if k in _STANDARD or k in doc or k.lower() in _SECRET_KEYS:
                continue
            doc[k] = v if isinstance(v, str | int | float | bool | type(None)) else repr(v)
        if record.exc_info:
            doc["exc"] = self.formatException(record.exc_info)
        return json.dumps(doc, ensure_ascii=False, separators=(",", ":"))


def configure_logging(level: str | int = "INFO", stream: TextIO | None = None) -> logging.Handler:
    """Send every log line through one JSON handler on ``stream`` (stdout by default)."""
    handler = logging.StreamHandler(stream if stream is not None else sys.stdout)
    handler.setFormatter(JsonFormatter())
    root = logging.getLogger()
    for old in list(root.handlers):
        if isinstance(old.formatter, JsonFormatter):
            root.removeHandler(old)
    root.addHandler(handler)
    root.setLevel(level.upper() if isinstance(level, str) else level)
    return handler


def request_id_from(header: str | None) -> str:
    """The caller's id if it is 1-128 safe characters, else a fresh 32-hex-digit one."""
    if header and _REQUEST_ID_RE.fullmatch(header.strip()):
        return header.strip()
    return secrets.token_hex(16)


def init_request_logging(app: Flask, logger_name: str = "spanwright.access") -> None:
    """Request ids in and out, and one access line per request on ``logger_name``."""
    log = logging.getLogger(logger_name)

    @app.before_request
    def _bind_ids() -> None:
        rid = request_id_from(request.headers.get(REQUEST_ID_HEADER))
        g.spanwright_request_id = rid
        g.spanwright_log_t0 = time.perf_counter()
        g.spanwright_tokens = (
            request_id_var.set(rid),
            record_id_var.set((request.view_args or {}).get("rid")),
        )

    @app.after_request
    def _access(resp: Response) -> Response:
        rid = g.get("spanwright_request_id")
        if rid is None:  # before_request did not run (should not happen)
            return resp
        resp.headers[REQUEST_ID_HEADER] = rid
        plan = record_id_var.get()
        if plan is None:  # a POST learns its id only from the answer
            m = _PLAN_ID_RE.match(resp.headers.get("Location", ""))
            plan = m.group(2) if m else None
        t0 = g.get("spanwright_log_t0", time.perf_counter())
        extra: dict[str, Any] = {
            "method": request.method,
            "path": request.path,
            "route": request.url_rule.rule if request.url_rule is not None else None,
            "status": resp.status_code,
            "duration_ms": round((time.perf_counter() - t0) * 1000, 3),
        }
        if plan:
            extra["plan_id"] = plan
        log.info("%s %s %d", request.method, request.path, resp.status_code, extra=extra)
        return resp

    @app.teardown_request
    def _unbind(_exc: BaseException | None) -> None:
        tokens = g.pop("spanwright_tokens", None)
        if tokens is not None:
            try:
                request_id_var.reset(tokens[0])
                record_id_var.reset(tokens[1])
            except ValueError:  # another context: the values die with it anyway
                pass
