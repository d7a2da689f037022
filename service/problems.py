"""The one place where errors become RFC 9457 problem documents (application/problem+json).

Every error spanwright raises on purpose derives from
:class:`workers.planning.errors.SpanwrightError` and carries its ``kind`` and ``title``;
the HTTP status of each kind is decided here (:func:`http_status`: the core knows no HTTP),
and the field paths of its issues become JSON Pointers (RFC 6901) here. werkzeug's HTTP
errors (unknown route, wrong method, body too large) and an unreachable Redis are mapped
here too, so the app has exactly one error handler.
"""

from __future__ import annotations

import json
import logging
from typing import Any
from urllib.parse import quote

import redis
from flask import Response, request
from werkzeug.exceptions import HTTPException
from werkzeug.wrappers import Response as BaseResponse

from workers.planning.errors import Infeasible, InvalidInstance, Issue, Path, SpanwrightError

from .settings import SettingsError

log = logging.getLogger("spanwright.api")

MEDIA_TYPE = "application/problem+json"
#: problem ``type`` URIs are relative references to ``GET /problems/{kind}``
TYPE_BASE = "/problems/"


def _problem(name: str, kind: str, status: int, title: str, doc: str = "") -> type[SpanwrightError]:
    """An error class of the service that differs from the others only in its kind, HTTP
    status, title and documentation (served at ``GET /problems/{kind}``)."""
    attrs = {"kind": kind, "status": status, "title": title, "__module__": __name__}
    return type(name, (SpanwrightError,), {**attrs, "__doc__": doc or None})


BadRequest = _problem(
    "BadRequest",
    "bad-request",
    400,
    "The request cannot be read",
    "The request cannot be read at all (not JSON, a malformed header).",
)
UnsupportedMediaType = _problem(
    "UnsupportedMediaType", "unsupported-media-type", 415, "Send the body as application/json"
)
PayloadTooLarge = _problem(
    "PayloadTooLarge", "payload-too-large", 413, "The request body is too large"
)
LimitExceeded = _problem(
    "LimitExceeded",
    "limit-exceeded",
    422,
    "The request exceeds a limit of this service",
    "A configured limit (jobs per batch, nodes, time budget) is exceeded.",
)
NotFound = _problem("NotFound", "not-found", 404, "No such resource")
MethodNotAllowed = _problem(
    "MethodNotAllowed", "method-not-allowed", 405, "Method not allowed on this resource"
)
AlreadyFinished = _problem(
    "AlreadyFinished",
    "already-finished",
    409,
    "The plan has already finished",
    "Cancelling a plan that has already finished.",
)
NotFinished = _problem(
    "NotFinished",
    "not-finished",
    409,
    "The plan has not finished",
    "Re-planning a plan that has not finished (there is no plan to start from yet).",
)
IdempotencyKeyInFlight = _problem(
    "IdempotencyKeyInFlight",
    "idempotency-key-in-flight",
    409,
    "A request with this key is in flight",
)
IdempotencyKeyReused = _problem(
    "IdempotencyKeyReused",
    "idempotency-key-reused",
    422,
    "Idempotency-Key reused with another body",
    "The same Idempotency-Key was sent before with a different body.",
)


class Unauthorized(SpanwrightError):
    """No API key, or one this service does not know: send ``Authorization: Bearer <key>``.

    Without a keys file the service runs keyless for loopback callers only; any other
    caller gets this answer too. The response carries ``WWW-Authenticate: Bearer``.
    """

    kind, status, title = "unauthorized", 401, "An API key is required"

    def __init__(self, detail: str, issues: list[Issue] | None = None) -> None:
        super().__init__(detail, issues)
        self.headers = {"WWW-Authenticate": 'Bearer realm="spanwright"'}


class TooManyRequests(SpanwrightError):
    """A request-rate or queue-depth limit is reached (RFC 6585); retry after ``Retry-After``
    seconds. Nothing already accepted is dropped: the refused request was never queued."""

    kind, status, title = "too-many-requests", 429, "Too many requests; retry later"

    def __init__(self, detail: str, retry_after: int, issues: list[Issue] | None = None) -> None:
        super().__init__(detail, issues)
        self.retry_after = max(1, int(retry_after))
        self.headers = {"Retry-After": str(self.retry_after)}


StoreUnavailable = _problem(
    "StoreUnavailable", "store-unavailable", 503, "The plan store is unavailable"
)
InternalError = _problem("InternalError", "internal-error", 500, "Internal error")


#: every problem kind the API can answer with, for ``GET /problems/{kind}`` and the spec
KINDS: dict[str, type[SpanwrightError]] = {
    cls.kind: cls
    for cls in (
        BadRequest,
        UnsupportedMediaType,
        PayloadTooLarge,
        LimitExceeded,
        NotFound,
        MethodNotAllowed,
        AlreadyFinished,
        NotFinished,
        IdempotencyKeyInFlight,
        IdempotencyKeyReused,
        StoreUnavailable,
        InternalError,
        Unauthorized,
        TooManyRequests,
        InvalidInstance,
        Infeasible,
        SettingsError,
    )
}

_HTTP: dict[int, type[SpanwrightError]] = {
    400: BadRequest,
    404: NotFound,
    405: MethodNotAllowed,
    413: PayloadTooLarge,
    415: UnsupportedMediaType,
}


#: the HTTP status of the core's error kinds (the service's own errors carry theirs)
CORE_STATUS: dict[type[SpanwrightError], int] = {
    InvalidInstance: 422,
    Infeasible: 422,
    SpanwrightError: 500,
}


def http_status(exc: SpanwrightError | type[SpanwrightError]) -> int:
    """The HTTP status of an error (or error class)."""
    cls = exc if isinstance(exc, type) else type(exc)
    for base in cls.__mro__:
        if base in CORE_STATUS:
            return CORE_STATUS[base]
        own = base.__dict__.get("status")
        if isinstance(own, int):
            return own
    return 500


def json_pointer(path: Path) -> str:
    """A field path as a JSON Pointer (RFC 6901: ``~`` as ``~0``, ``/`` as ``~1``)."""
    return "".join("/" + str(p).replace("~", "~0").replace("/", "~1") for p in path)


def issue_dict(issue: Issue) -> dict[str, str]:
    """One entry of a problem document's ``errors``: where (a JSON Pointer) and what."""
    return {"pointer": json_pointer(issue.path), "detail": issue.detail}


def problem_dict(exc: SpanwrightError, instance: str | None = None) -> dict[str, Any]:
    """The problem document of ``exc`` (also stored as a failed plan's ``error``)."""
    out: dict[str, Any] = {
        "type": TYPE_BASE + exc.kind,
        "title": exc.title,
        "status": http_status(exc),
        "detail": exc.detail,
    }
    if instance is not None:
        out["instance"] = instance
    if exc.issues:
        out["errors"] = [issue_dict(i) for i in exc.issues]
    if isinstance(exc, Infeasible):
        out["jobs"] = list(exc.jobs)
    return out


def problem_response(exc: SpanwrightError, headers: dict[str, str] | None = None) -> Response:
    instance = quote(request.path, safe="/:@!$&'()*+,;=-._~")  # a URI reference
    body = json.dumps(problem_dict(exc, instance), allow_nan=False)
    status = http_status(exc)
    resp = Response(body, status, mimetype=MEDIA_TYPE)
    if status == 405:
        resp.headers["Allow"] = ", ".join(sorted(getattr(exc, "allow", ())))
    if status == 503:
        resp.headers["Retry-After"] = "1"
    for k, v in getattr(exc, "headers", {}).items():  # WWW-Authenticate, Retry-After
        resp.headers[k] = v
    for k, v in (headers or {}).items():
        resp.headers[k] = v
    return resp


def to_spanwright(exc: BaseException) -> SpanwrightError:
    """Map any exception to a :class:`SpanwrightError` (unknown ones become 500)."""
    if isinstance(exc, SpanwrightError):
        return exc
    if isinstance(exc, HTTPException):
        cls = _HTTP.get(exc.code or 500, InternalError)
        out = cls(exc.description or cls.title)
        if isinstance(exc, HTTPException) and exc.code == 405:
            allow = exc.valid_methods if hasattr(exc, "valid_methods") else None
            out.allow = tuple(allow or ())  # type: ignore[attr-defined]
        if exc.code == 413:
            out = PayloadTooLarge(
                "the request body exceeds the limit of this service",
                [Issue((), "body too large (limit: SPANWRIGHT_MAX_REQUEST_BYTES)")],
            )
        return out
    if isinstance(exc, redis.exceptions.OutOfMemoryError):
        # noeviction at maxmemory: writes are refused until retention frees memory
        full = StoreUnavailable("the plan store is full; try again later")
        full.headers = {"Retry-After": "30"}  # type: ignore[attr-defined]
        return full
    if isinstance(exc, redis.exceptions.ConnectionError | redis.exceptions.TimeoutError):
        # the reason is logged (status >= 500); the caller is not told hosts or ports
        return StoreUnavailable("cannot reach the plan store; try again shortly")
    return InternalError("an unexpected error occurred; it has been logged")


def handle(exc: BaseException) -> BaseResponse:
    """The app's only error handler."""
    err = to_spanwright(exc)
    if isinstance(exc, HTTPException) and exc.code == 304:  # pragma: no cover - not raised
        return exc.get_response()
    if http_status(err) >= 500:
        log.error("%s %s failed: %s", request.method, request.path, exc, exc_info=exc)
    return problem_response(err)


def describe(kind: str) -> str | None:
    """Plain-text documentation of a problem type, served at ``/problems/{kind}``."""
    cls = KINDS.get(kind)
    if cls is None:
        return None
    doc = (cls.__doc__ or "").strip()
    return f"{cls.title}\n\nHTTP status: {http_status(cls)}\n\n{doc}\n"
