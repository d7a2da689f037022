"""The machinery shared by every asynchronous resource (plans, sizings).

A resource of kind ``K`` at ``/v1/Ks`` gets: ``POST`` (validate, store, enqueue; 202, or the
finished record within ``Prefer: wait=N``; ``Idempotency-Key``), ``GET /{id}`` (ETag and
``If-None-Match``), ``DELETE /{id}`` (cancel) and ``GET`` (the tenant's records, newest
first, ``status``/``limit``/``cursor``). Only the validation differs between kinds.

A small longest-first plan of plain jobs is solved in the request while the queue has a
worker (:func:`_solve_here`), whether its client waits or not: it is stored finished,
listed, counted and bound to its Idempotency-Key as a worker's plan, in one transaction,
and costs no queue entry (issue 20: the queue and the worker cost more than the plan). A
client that did not ask to wait still gets 202 (201 only answers a wait), with the record
already finished.
"""

from __future__ import annotations

import dataclasses
import hashlib
import io
import json
import re
import shutil
import threading
import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import TYPE_CHECKING, Any

from flask import Blueprint, Response, request

from workers.planning.errors import Issue

from .. import jobscan, limits, workform
from ..auth import current
from ..gate import GATE
from ..metrics import finish_counters
from ..payload import Columns
from ..problems import (
    AlreadyFinished,
    BadRequest,
    IdempotencyKeyInFlight,
    IdempotencyKeyReused,
    LimitExceeded,
    NotFound,
    StoreUnavailable,
    UnsupportedMediaType,
)
from ..queue import simulation_allowance
from ..reading import clock
from ..services import may_read, services, tenant
from ..settings import Settings
from ..store import FINISHED, STATUSES, Record, new_id, rfc3339
from ..workform import Work

if TYPE_CHECKING:
    from workers.tasks import Finished

ID_RE = re.compile(r"[0-9a-f]{21}")
_KEY_RE = re.compile(r"[\x20-\x21\x23-\x5b\x5d-\x7e]{1,255}")  # printable ASCII but " and \


class _Waiters:
    """How many requests of this process hold a thread in ``Prefer: wait`` (a counter with
    a lock: the limit comes from the settings at each call)."""

    def __init__(self) -> None:
        self._lock = threading.Lock()
        self.count = 0

    def acquire(self, limit: int) -> bool:
        with self._lock:
            if self.count >= limit:
                return False
            self.count += 1
            return True

    def release(self) -> None:
        with self._lock:
            self.count -= 1


_WAITERS = _Waiters()

_WAIT_RE = re.compile(r"^\s*wait\s*=\s*\"?(\d+(?:\.\d+)?)\"?\s*$", re.IGNORECASE)


@dataclass(frozen=True, slots=True)
class Validated:
    """A checked request body: the loaded body, and what the checks made of it."""

    data: dict[str, Any]
    #: the core objects the checks made, stored for the worker next to the raw body
    #: (``service/workform.py``); None: the worker reads the raw body
    work: Work | None = None
    #: a plan of plain jobs: the body in columns (``work`` is all but its jobs) and the
    #: core problem the checks made of it (what a plan solved in the request is solved
    #: from; None past the size solved here)
    columns: Columns | None = None
    problem: Any = None

    def stored_work(self) -> bytes | bytearray | None:
        """The stored form of ``work`` (with the jobs in columns for a plain plan), made
        only when the record is queued (a plan solved in the request needs none)."""
        if self.work is None:
            return None
        if self.columns is not None:
            return workform.encode_plain(self.work, self.columns)
        return workform.encode(self.work)

    def solvable(self) -> Work:
        """``work`` with the checked problem of a plain plan (what :func:`_solve_here`
        solves)."""
        assert self.work is not None and self.problem is not None
        return dataclasses.replace(self.work, core=self.problem, plain=None, stages=None)


#: validate a body: shape (marshmallow) then semantics (the core)
Validator = Callable[[Any, Settings], Validated]


@dataclass(frozen=True, slots=True)
class Resource:
    kind: str  # "plan" | "sizing"
    path: str  # "/v1/plans"
    validate: Validator
    #: the validator takes a body of plain jobs as ``payload.Columns`` (``read_json_body``)
    columns: bool = False


def _reject_constant(name: str) -> float:
    raise ValueError(f"{name} is not a JSON number")


def _parse_int(text: str) -> int | float:
    """JSON integers longer than any count or time we accept read as floats (so ``1`` with
    400 zeros is ``inf`` and meets the finiteness checks, instead of overflowing a float
    conversion deep in validation); Python refuses to parse over 4300 digits anyway."""
    return int(text) if len(text) <= 30 else float(text)


#: every digit to "0": a run of 31 zeros in the copy is a run of 31 digits in the body
_DIGITS_TO_ZERO = bytes.maketrans(b"123456789", b"000000000")
_LONG_RUN = b"0" * 31
#: bytes translated at a time (so the copy costs a megabyte, not the body again)
_SLICE = 1 << 20


def _int_parser(raw: bytes) -> Callable[[str], int | float] | None:
    """:func:`_parse_int`, which costs a Python call per integer, or None (``int``) where it
    changes nothing: a UTF-8 body without a run of 31 digits has no integer it would
    change, so the C parser reads the integers alone, with the same result (the check is
    two C passes over the bytes, a megabyte at a time, the slices overlapping by 30)."""
    if json.detect_encoding(raw) == "utf-8" and not any(
        _LONG_RUN in raw[i : i + _SLICE + 30].translate(_DIGITS_TO_ZERO)
        for i in range(0, len(raw), _SLICE)
    ):
        return None
    return _parse_int


def _read_body() -> bytes:
    """``request.get_data(cache=False)`` (413 beyond MAX_CONTENT_LENGTH) at the cost of the
    body once: werkzeug collects it in a bytearray and copies that into bytes, where a
    BytesIO hands over its own buffer (``getvalue`` of an unshared buffer is no copy)."""
    buf = io.BytesIO()
    shutil.copyfileobj(request.stream, buf)
    return buf.getvalue()


def read_json_body(columns: bool = False) -> tuple[bytes, Any]:
    """The raw body and its JSON value; 415 for another media type, 400 for bad JSON.

    With ``columns``, a body (of ``jobscan.MIN_BYTES`` or more) whose jobs are all plain
    comes back as ``payload.Columns``, read from the bytes without a Python object per
    job (``service/jobscan.py``); any other body as its JSON value."""
    raw = read_raw_body()
    return raw, parse_json_body(raw, columns)


def read_raw_body() -> bytes:
    """The body's bytes, received (415 for a media type other than JSON)."""
    mt = request.mimetype or ""
    if not (mt == "application/json" or (mt.startswith("application/") and mt.endswith("+json"))):
        raise UnsupportedMediaType(
            f"the body must be application/json, not {mt or 'unspecified'}",
        )
    return _read_body()


def parse_json_body(raw: bytes, columns: bool = False) -> Any:
    """:func:`read_json_body` of a body received already: its JSON value or columns."""
    _check_elements(raw, services().settings)  # before a Python object is made for each
    parse_int = _int_parser(raw)
    big = columns and len(raw) >= jobscan.MIN_BYTES
    keep = services().settings.max_jobs  # past it, the count alone refuses the batch
    plain = jobscan.read_plain(raw, parse_int, keep) if big else None
    if plain is not None:
        return plain
    try:
        return json.loads(raw, parse_constant=_reject_constant, parse_int=parse_int)
    except (ValueError, RecursionError) as exc:
        raise BadRequest(f"the body is not valid JSON: {exc}", [Issue((), str(exc))]) from None


_STRING = re.compile(rb'"(?:[^"\\]|\\.)*"')


def element_limit(settings: Settings) -> int:
    """Most JSON values (objects, arrays, numbers, strings) a body may hold: a job or a
    node takes at most about eight (itself, its fields, its tag lists), plus the rest of
    the body. A body past it is refused before it is parsed, so a few megabytes of
    ``[{},{},...]`` cannot cost a gigabyte of Python objects."""
    return 8 * (settings.max_jobs + settings.max_nodes) + 10_000


def _check_elements(raw: bytes, settings: Settings) -> None:
    """422 ``limit-exceeded`` when the body holds more JSON values than
    :func:`element_limit` (as for more jobs than ``max_jobs``).

    Values are counted by their separators (``,`` and ``:``) and openers (``{``, ``[``);
    the quick count over the raw bytes may include ones inside strings, so only a body
    over the limit is counted again with its strings removed."""
    limit = element_limit(settings)
    if len(raw) <= limit:  # each value counted takes a byte of its own: none to count
        return
    if sum(map(raw.count, (b",", b":", b"{", b"["))) <= limit:
        return
    bare = _STRING.sub(b'""', raw)
    if sum(map(bare.count, (b",", b":", b"{", b"["))) <= limit:
        return
    raise LimitExceeded(
        f"the body holds more than {limit} JSON values; this service plans at most "
        f"{settings.max_jobs} jobs on {settings.max_nodes} nodes",
        [Issue((), "too many JSON values")],
    )


def idempotency_key() -> str | None:
    """The ``Idempotency-Key`` header (a Structured Field string, quotes optional)."""
    raw = request.headers.get("Idempotency-Key")
    if raw is None:
        return None
    key = raw.strip()
    if len(key) >= 2 and key[0] == key[-1] == '"':
        key = key[1:-1]
    if not _KEY_RE.fullmatch(key):
        raise BadRequest(
            "Idempotency-Key must be 1 to 255 printable ASCII characters (a quoted string)"
        )
    return key


def preferences() -> tuple[float | None, bool]:
    """(wait seconds or None, respond-async) from ``Prefer`` (RFC 7240); junk is ignored."""
    wait: float | None = None
    is_async = False
    for header in request.headers.getlist("Prefer"):
        for token in header.split(","):
            pref = token.split(";", 1)[0]
            m = _WAIT_RE.match(pref)
            if m:
                wait = float(m.group(1))
            elif pref.strip().lower() == "respond-async":
                is_async = True
    return wait, is_async


def status_document(rec: Record, path: str, more: dict[str, Any] | None = None) -> str:
    """The JSON of ``GET {path}/{id}``; the stored result JSON is spliced in, not re-parsed.
    ``more`` adds fields after ``result`` (the ``replan`` block of a re-plan's answer)."""
    f = rec.fields
    doc: dict[str, Any] = {
        "id": rec.id,
        "status": rec.status,
        "name": f.get("name"),
        "method": f.get("method"),
        "submitted_at": f.get("submitted_at"),
        "started_at": f.get("started_at"),
        "finished_at": f.get("finished_at"),
        "cancel_requested": f.get("cancel") == "1",
        "progress": f.get("progress"),
        "error": f.get("error"),
        "links": {"self": f"{path}/{rec.id}"},
    }
    if doc["progress"] is None and rec.status in ("queued", "solving"):
        tb = f.get("time_budget")
        doc["progress"] = {
            "elapsed": 0.0,
            "time_budget": float(tb) if tb is not None else None,
            "best_makespan": None,
            "best_lower_bound": None,
        }
    head = json.dumps(doc, allow_nan=False, separators=(",", ":"))
    tail = ""
    if more:
        tail = "," + json.dumps(more, allow_nan=False, separators=(",", ":"))[1:-1]
    return head[:-1] + ',"result":' + (rec.result_json or "null") + tail + "}"


def etag_of(version: int) -> str:
    return f'"v{version}"'


def _respond(
    rec: Record,
    res: Resource,
    status: int,
    extra: dict[str, str] | None = None,
    more: dict[str, Any] | None = None,
) -> Response:
    resp = Response(status_document(rec, res.path, more), status, mimetype="application/json")
    resp.headers["ETag"] = etag_of(rec.version)
    resp.headers["Location"] = f"{res.path}/{rec.id}"
    if rec.status not in FINISHED:
        resp.headers["Retry-After"] = "1"
    for k, v in (extra or {}).items():
        resp.headers[k] = v
    return resp


def _owned(res: Resource, rid: str) -> int:
    """The record's version if it exists and belongs to the caller; else 404."""
    if not ID_RE.fullmatch(rid):
        raise NotFound(f"no {res.kind} {rid!r}")
    owner, version = services().store.version(res.kind, rid)
    if not may_read(owner):  # another tenant's id reads as a missing one
        raise NotFound(f"no {res.kind} {rid!r} (it may have expired)")
    return version


def list_tenant(asked: str | None) -> str:
    """Whose records a list shows: the caller's; an admin key may name any ``?tenant=``."""
    if asked is None or asked == tenant():
        return tenant()
    who = current()
    if who is None or not who.admin:
        raise BadRequest("only an admin key may list another tenant's records")
    return asked


def _key_reused() -> IdempotencyKeyReused:
    return IdempotencyKeyReused(
        "this Idempotency-Key was used with a different body; use a new key",
        [Issue((), "body differs from the first request with this key")],
    )


def replayed(who: str, kind: str, key: str, fingerprint: str) -> Record | None:
    """The record ``key`` is already bound to, for a retry of the same request; else None.

    Read-only and before any queue slot is taken: a retry gets its own record back even
    when the tenant is at its queue-depth limit. The same key with another body is a 422.
    A key whose record has expired counts as free (``Store.claim_idempotency`` re-binds
    it). A concurrent first request that binds the key after this look is caught by the
    claim in :func:`queue_record`, as before.
    """
    store = services().store
    raw = store.conn.get(store.idem_key(who, kind, key))
    if raw is None:
        return None
    bound: dict[str, str] = json.loads(raw)
    if bound.get("fingerprint") != fingerprint:
        raise _key_reused()
    old = store.get(kind, bound.get("id", ""))
    if old is None or old.tenant != who:
        return None
    return old


def queue_record(
    res: Resource,
    raw: bytes,
    checked: Validated,
    meta: dict[str, Any],
    fingerprint: str,
    more: dict[str, Any] | None = None,
    extra_seconds: float = 0.0,
) -> Response:
    """Store and queue a validated request of ``res.kind``, the protocol of every
    ``POST`` that queues work: ``Idempotency-Key`` (a retry returns its record without a
    queue slot), queue-depth admission (429 before anything is stored), ``Prefer: wait``
    and ``respond-async``. ``raw`` is what the worker solves, ``fingerprint`` identifies
    the request for its idempotency key, ``more`` adds fields to the answer."""
    settings = services().settings
    key = idempotency_key()
    wait, is_async = preferences()
    who = tenant()
    extra: dict[str, str] = {}
    if wait is not None and not _WAITERS.acquire(settings.max_waiters):
        wait = None  # every waiting slot is taken: answer at once, the client polls
    try:
        if wait is not None:
            wait = min(wait, settings.max_wait)
            extra["Preference-Applied"] = f"wait={wait:g}"
        elif is_async:
            extra["Preference-Applied"] = "respond-async"
        return _queue_record(
            res, raw, checked, meta, fingerprint, more, extra_seconds, key, wait, who, extra
        )
    finally:
        if wait is not None:
            _WAITERS.release()


def _queue_record(
    res: Resource,
    raw: bytes,
    checked: Validated,
    meta: dict[str, Any],
    fingerprint: str,
    more: dict[str, Any] | None,
    extra_seconds: float,
    key: str | None,
    wait: float | None,
    who: str,
    extra: dict[str, str],
) -> Response:
    """:func:`queue_record` once the wait is settled."""
    svc = services()
    store, settings = svc.store, svc.settings

    def replay(old: Record) -> Response:
        if wait and old.status not in FINISHED:
            with GATE.released():
                old = store.wait_for(res.kind, old.id, wait) or old
        code = 200 if old.status in FINISHED else 202
        return _respond(old, res, code, {**extra, "Idempotent-Replayed": "true"}, more)

    if key is not None:
        old = replayed(who, res.kind, key, fingerprint)
        if old is not None:
            return replay(old)
    rid = new_id()
    budget = float(checked.data["time_budget"])
    if store.memory_share() >= settings.store_high_water:
        full = StoreUnavailable(
            "the plan store is nearly full; new work is refused until finished records "
            "expire (reads and cancels go on)"
        )
        full.headers = {"Retry-After": "30"}  # type: ignore[attr-defined]
        raise full
    now = time.time()
    if _solve_here(res, checked, meta, extra_seconds, more, settings):
        from workers.tasks import plan_now

        solved = plan_now(checked.solvable(), str(meta["method"]), budget)
        if solved is not None:
            rec = _store_solved(res, raw, meta, fingerprint, rid, now, key, solved, replay)
            if isinstance(rec, Response):  # the key's record, for a retry
                return rec
            return _respond(rec, res, 201 if wait else 202, extra, more)  # 201 answers a wait
    limits.settle()  # a count that waited for the store: made now, before a queue slot
    limits.admit(who, res.kind, rid)  # 429 before anything is stored
    work = checked.stored_work()  # the worker's copy, made only for a queued record

    def enqueue(pipe: Any) -> None:
        svc.queue.enqueue(res.kind, rid, budget, pipeline=pipe, extra_seconds=extra_seconds)

    try:
        if key is None:  # record and queue entry in one transaction, one round trip
            store.create(res.kind, who, raw, meta, rid=rid, now=now, work=work, enqueue=enqueue)
        else:  # the same, with the key claimed in that transaction too
            for _ in range(2):
                bound = store.create_keyed(
                    res.kind,
                    who,
                    raw,
                    meta,
                    key=key,
                    fingerprint=fingerprint,
                    rid=rid,
                    now=now,
                    work=work,
                    enqueue=enqueue,
                )
                old = None if bound is None else _bound_record(res, who, key, fingerprint, bound)
                if old is not None:
                    limits.release(who, res.kind, rid)
                    return replay(old)
                if bound is None:
                    break
            else:  # pragma: no cover - needs two expiries in a row
                raise IdempotencyKeyInFlight("the key is being re-bound; retry in a moment")
    except BaseException:
        limits.release(who, res.kind, rid)  # nothing was stored: free the slot it held
        raise
    if not wait:  # as written: no read back (a worker may have it now)
        return _respond(store.written(res.kind, who, rid, meta, now), res, 202, extra, more)
    with GATE.released():
        rec = store.wait_for(res.kind, rid, wait)
    if rec is None:  # pragma: no cover - expired within the request
        raise NotFound(f"{res.kind} {rid} vanished")
    # 201 only answers a wait (the spec's promise)
    return _respond(rec, res, 201 if rec.status in FINISHED else 202, extra, more)


def _bound_record(
    res: Resource, who: str, key: str, fingerprint: str, bound: dict[str, str]
) -> Record | None:
    """The record a key found bound at write time is bound to, for a retry of the same
    request (422 for another body); None when that record has expired (the key is then
    released, for the caller to bind it again)."""
    store = services().store
    if bound.get("fingerprint") != fingerprint:
        raise _key_reused()
    old = store.get(res.kind, bound.get("id", ""))
    if old is None or old.tenant != who:
        store.release_idempotency(who, res.kind, key)  # its record expired
        return None
    return old


def _store_solved(
    res: Resource,
    raw: bytes,
    meta: dict[str, Any],
    fingerprint: str,
    rid: str,
    now: float,
    key: str | None,
    solved: Finished,
    replay: Callable[[Record], Response],
) -> Record | Response:
    """Store a plan solved in the request, finished, in one script (``Store.create_finished``:
    the request's rate count if it waited, the key, the record, its result and metrics),
    and return the record as written (no read back). Never queued, it takes no queue
    slot. A key found bound to a live record gets ``replay`` of that record."""
    store = services().store
    who = tenant()
    meta = {
        **meta,
        "status": solved.status,
        "started_at": rfc3339(now),
        "finished_at": rfc3339(time.time()),
        "attempts": 1,
        "summary": solved.summary,
        "progress": solved.progress,
    }
    counters = finish_counters(store.prefix, res.kind, solved.result)
    for _ in range(2):
        verdict, got = store.create_finished(
            res.kind,
            who,
            raw,
            meta,
            rid=rid,
            now=now,
            result=(solved.result_json, counters),
            rate=limits.take_deferred(),
            keyed=None if key is None else (key, fingerprint),
        )
        if verdict == "rate":
            limits.refuse_past(who, got)  # nothing was written
        if verdict == "ok":
            break
        assert key is not None  # "bound" answers a key only
        old = _bound_record(res, who, key, fingerprint, got)
        if old is not None:
            return replay(old)
    else:  # pragma: no cover - needs two expiries in a row
        raise IdempotencyKeyInFlight("the key is being re-bound; retry in a moment")
    return store.written(res.kind, who, rid, meta, now, solved.result_json)


def _solve_here(
    res: Resource,
    checked: Validated,
    meta: dict[str, Any],
    extra: float,
    more: Any,
    settings: Settings,
) -> bool:
    """Whether to solve a request in the API rather than queue it: a plan (not a re-plan)
    of plain jobs read in columns (``checked.columns``), longest first, no simulation, at
    most ``settings.solve_here_max_jobs`` jobs, while the queue has a worker (a service
    with none queues everything, as before: its work waits for the workers). Whether the
    client waits does not matter: a longest-first plan of that size costs less than the
    queue's own bookkeeping (bench/RESULTS.md, issue 20)."""
    return (
        res.kind == "plan"
        and more is None
        and extra == 0
        and checked.columns is not None
        and checked.problem is not None
        and meta.get("method") == "longest_first"
        and len(checked.columns.ids) <= settings.solve_here_max_jobs
        and services().queue.has_workers()
    )


def with_start(raw: bytes, body: Any) -> tuple[bytes, Any]:
    """A body with clock times but no ``start_at`` starts now (``reading/clock.py``): the
    time the request is accepted goes into the body that is checked and stored, so the
    worker and every re-read measure from the same start. The raw body gets the field
    spliced in after its opening brace (no second encoding of a large body)."""
    envelope = body.envelope if isinstance(body, Columns) else body
    if not clock.needs_start(envelope):
        return raw, body
    start = clock.now_text()
    filled = clock.with_start(envelope, start)
    body = dataclasses.replace(body, envelope=filled) if isinstance(body, Columns) else filled
    if json.detect_encoding(raw) in ("utf-8", "utf-8-sig"):
        at = raw.index(b"{") + 1  # an object (it has fields): only blanks before its brace
        field = json.dumps({"start_at": start})[1:-1].encode()
        return raw[:at] + field + b"," + raw[at:], body
    return json.dumps(body, allow_nan=False).encode(), body


def make_blueprint(res: Resource) -> Blueprint:
    bp = Blueprint(f"{res.kind}s", __name__)

    @bp.post(res.path)
    def submit() -> Response:
        raw = read_raw_body()  # received before the gate: a slow client holds no one up
        with GATE.held(len(raw)):  # the CPU work, one request of the process at a time
            body = parse_json_body(raw, res.columns)
            # what the client sent, to tell a retry from another body under the same key
            keyed = "Idempotency-Key" in request.headers
            fingerprint = hashlib.sha256(raw).hexdigest() if keyed else ""
            raw, body = with_start(raw, body)
            checked = res.validate(body, services().settings)
            data = checked.data
            meta = {
                "method": data.get("method"),
                "time_budget": repr(float(data["time_budget"])),
                "name": data.get("name"),
            }
            counted = jobscan.counted(body) if isinstance(body, Columns) else body
            extra = simulation_allowance(res.kind, counted, plain=checked.columns is not None)
            return queue_record(res, raw, checked, meta, fingerprint, extra_seconds=extra)

    @bp.get(res.path + "/<rid>")
    def read(rid: str) -> Response:
        version = _owned(res, rid)
        if etag_of(version).strip('"') in request.if_none_match:
            resp = Response(status=304)
            resp.headers["ETag"] = etag_of(version)
            return resp
        rec = services().store.get(res.kind, rid)
        if rec is None:
            raise NotFound(f"no {res.kind} {rid!r} (it may have expired)")
        return _respond(rec, res, 200)

    @bp.delete(res.path + "/<rid>")
    def cancel(rid: str) -> Response:
        _owned(res, rid)
        store = services().store
        old = store.request_cancel(res.kind, rid)
        if old is None:
            raise NotFound(f"no {res.kind} {rid!r}")
        if old in FINISHED:
            raise AlreadyFinished(f"{res.kind} {rid} is already {old}; nothing to cancel")
        rec = store.get(res.kind, rid)
        if rec is None:  # pragma: no cover
            raise NotFound(f"no {res.kind} {rid!r}")
        return _respond(rec, res, 200 if rec.status in FINISHED else 202)

    @bp.get(res.path)
    def listing() -> Response:
        svc = services()
        args = request.args
        status = args.get("status")
        if status is not None and status not in STATUSES:
            raise BadRequest(f"status must be one of {', '.join(STATUSES)}")
        try:
            limit = int(args.get("limit", "20"))
        except ValueError:
            raise BadRequest("limit must be a whole number") from None
        if not 1 <= limit <= svc.settings.max_page:
            raise BadRequest(f"limit must be between 1 and {svc.settings.max_page}")
        cursor = args.get("cursor")
        if cursor is not None and not ID_RE.fullmatch(cursor):
            raise BadRequest("cursor is not one this service gave out")
        items, nxt = svc.store.list(
            list_tenant(args.get("tenant")), res.kind, status=status, limit=limit, cursor=cursor
        )
        for it in items:
            it["links"] = {"self": f"{res.path}/{it['id']}"}
        body = json.dumps({"items": items, "next": nxt}, allow_nan=False)
        return Response(body, 200, mimetype="application/json")

    return bp
