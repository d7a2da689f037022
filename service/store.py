"""Plans (and sizings) in Redis, under our own key prefix, with a retention time.

Keys, for a record of ``kind`` (``plan`` | ``sizing``) and id ``I`` owned by tenant ``T``::

    {prefix}:{kind}:{I}            hash: tenant, status, timestamps, progress, version, ...
    {prefix}:{kind}:{I}:request    the request body as received (bytes)
    {prefix}:{kind}:{I}:work       what the API's checks made of the body, for the worker
                                   (``service/workform.py``; plain jobs in columns)
    {prefix}:{kind}:{I}:result     the result object as JSON, once finished
    {prefix}:{kind}:{I}:done       a one-token list pushed when the record finishes (wakes waiters)
    {prefix}:index:{T}:{kind}      sorted set of the tenant's ids (all score 0, ordered by id)
    {prefix}:idem:{T}:{kind}:{H}   Idempotency-Key record: {fingerprint, id}; H = sha256(key)

Ids start with the submission time in milliseconds (hex), so the index is ordered by
submission and lists newest first with ``ZREVRANGEBYLEX``; the cursor is the last id sent.
A record waiting in the queue expires ``2 * retention`` after submission (so a backlog
does not eat it); once finished, every key of it expires ``retention`` after it finished:
the result is kept that long after it is computed. Status changes are
Lua scripts (atomic), and every visible change bumps ``version`` (the ETag).

Round trips per plan: the API stores and enqueues in one transaction (:meth:`Store.create`
with ``enqueue``), or stores a plan it solved itself in one script that counts the request
too (:meth:`Store.create_finished`), and answers from what it wrote (:meth:`Store.written`),
or waits with one ``BLPOP`` plus one read (:meth:`Store.wait_for`); the worker claims a
record and reads its
body in one script (:meth:`Store.claim`, inside the transaction that starts its job:
:meth:`Store.claim_in`) and stores the outcome, refreshes every expiry, wakes the waiters
and counts the metrics in another (:meth:`Store.finish`).
"""

from __future__ import annotations

import builtins
import hashlib
import json
import math
import secrets
import time
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from datetime import UTC, datetime
from typing import Any

import redis
from redis.client import Pipeline

from workers.planning.budget import DEFAULT_SECONDS

from .store_lua import CANCEL, CLAIM, CREATE_FINISHED, FINISH, TRANSITION, WHILE_SOLVING

KINDS = ("plan", "sizing")
STATUSES = ("queued", "solving", "done", "failed", "cancelled")
FINISHED = frozenset({"done", "failed", "cancelled"})
#: hash fields that are JSON documents
_JSON_FIELDS = ("progress", "error", "summary")
#: fields a list item shows
_ITEM_FIELDS = (
    "tenant",
    "status",
    "submitted_at",
    "started_at",
    "finished_at",
    "name",
    "method",
    "summary",
)


#: the last whole second :func:`rfc3339` wrote, and its text (a record's times share it)
_SECOND: tuple[int, str] = (-1, "")


def rfc3339(t: float) -> str:
    """UTC timestamp with milliseconds, e.g. ``2026-12-01T23:59:00.123Z``: what
    ``datetime.fromtimestamp(t, UTC)`` writes (microseconds rounded half to even, then
    cut to milliseconds), with the whole second's text kept from the last call."""
    global _SECOND
    if not t >= 0:  # before 1970 (or not a number): the standard library's own way
        return datetime.fromtimestamp(t, UTC).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"
    frac, whole = math.modf(t)
    sec, us = int(whole), round(frac * 1e6)
    if us >= 1_000_000:
        sec, us = sec + 1, us - 1_000_000
    seen = _SECOND
    if seen[0] != sec:
        seen = _SECOND = (sec, datetime.fromtimestamp(sec, UTC).strftime("%Y-%m-%dT%H:%M:%S"))
    return f"{seen[1]}.{us // 1000:03d}Z"


def _now_text() -> str:
    return rfc3339(time.time())


def new_id(now: float | None = None) -> str:
    """A time-ordered id: 11 hex digits of milliseconds, then 10 random hex digits."""
    return id_time(time.time() if now is None else now) + secrets.token_hex(5)


def id_time(t: float) -> str:
    """The first 11 hex digits (the milliseconds) of the ids made at ``t``."""
    return f"{int(t * 1000):011x}"


@dataclass(frozen=True, slots=True)
class Record:
    """One stored record, decoded."""

    kind: str
    id: str
    fields: dict[str, Any]
    result_json: str | None

    @property
    def status(self) -> str:
        return str(self.fields["status"])

    @property
    def tenant(self) -> str:
        return str(self.fields["tenant"])

    @property
    def version(self) -> int:
        return int(self.fields.get("version", 0))


@dataclass(frozen=True, slots=True)
class Claim:
    """A record a worker moved to ``solving``: what it needs to solve it."""

    time_budget: float
    method: str
    body: bytes
    #: True when ``body`` is the stored form of the checked request (``service/workform.py``,
    #: or from an older API ``service/payload.py``'s columns), False for the raw body
    columns: bool


#: a metric increment for :meth:`Store.finish`: (hash key, [(op 'i'|'f', field, amount)])
Counters = tuple[str, list[tuple[str, str, float]]]


def _triples(counters: Counters) -> list[tuple[str, str, Any]]:
    """The increments of ``counters`` as (op, field, amount) the scripts read: a float's
    amount as its repr, a count's as an integer."""
    return [
        (op, name, repr(float(amount)) if op == "f" else int(amount))
        for op, name, amount in counters[1]
    ]


def _increments(counters: Counters) -> list[Any]:
    """The increments of ``counters`` as the scripts' (op, field, amount) arguments."""
    return [a for triple in _triples(counters) for a in triple]


@dataclass(frozen=True, slots=True)
class RateCount:
    """A request still to count against its tenant's rate, in the script that stores its
    record (``service/limits.py``): the window's counter, the limit, the counter's expiry."""

    key: str
    limit: int
    expiry: int


class Store:
    """Our Redis keys. ``conn`` must not decode responses (RQ shares the client)."""

    def __init__(self, conn: redis.Redis, *, prefix: str, retention: int) -> None:
        self.conn = conn
        self.prefix = prefix
        self.retention = int(retention)
        self._memory: tuple[float, float] | None = None  # (when read, used / maxmemory)
        self._transition = conn.register_script(TRANSITION)
        self._cancel = conn.register_script(CANCEL)
        self._while_solving = conn.register_script(WHILE_SOLVING)
        self._claim = conn.register_script(CLAIM)
        self._finish = conn.register_script(FINISH)
        self._create_finished = conn.register_script(CREATE_FINISHED)

    # -- key names ----------------------------------------------------------------------
    def key(self, kind: str, rid: str, part: str = "") -> str:
        base = f"{self.prefix}:{kind}:{rid}"
        return f"{base}:{part}" if part else base

    def index_key(self, tenant: str, kind: str) -> str:
        return f"{self.prefix}:index:{tenant}:{kind}"

    def idem_key(self, tenant: str, kind: str, key: str) -> str:
        digest = hashlib.sha256(key.encode("utf-8")).hexdigest()
        return f"{self.prefix}:idem:{tenant}:{kind}:{digest}"

    def _all_keys(self, kind: str, rid: str) -> list[str]:
        return [
            self.key(kind, rid),
            self.key(kind, rid, "request"),
            self.key(kind, rid, "result"),
            self.key(kind, rid, "work"),
        ]

    # -- writing ------------------------------------------------------------------------
    def memory_share(self, max_age: float = 1.0) -> float:
        """``used_memory / maxmemory`` of Redis (0 without a maxmemory), read at most every
        ``max_age`` seconds per store."""
        now = time.monotonic()
        if self._memory is not None and now - self._memory[0] < max_age:
            return self._memory[1]
        try:
            info = self.conn.info("memory")
        except redis.exceptions.ResponseError:  # a store without INFO (the embedded one)
            info = {}
        cap = int(info.get("maxmemory", 0) or 0)
        share = int(info.get("used_memory", 0)) / cap if cap > 0 else 0.0
        self._memory = (now, share)
        return share

    def create(
        self,
        kind: str,
        tenant: str,
        request_body: bytes,
        meta: dict[str, Any],
        *,
        rid: str | None = None,
        now: float | None = None,
        work: bytes | bytearray | None = None,
        enqueue: Callable[[Pipeline], object] | None = None,
    ) -> str:
        """Store a new queued record; returns its id.

        ``work`` is the stored form of the checked body (``service/workform.py``), next to
        it. ``enqueue(pipeline)``, when given, adds the queue's own writes to the same
        transaction: the record and its job appear together or not at all, in one round
        trip.
        """
        t = time.time() if now is None else now
        rid = rid or new_id(t)
        fields = self._fields(kind, tenant, meta, t)
        keep = self._keep(fields)
        pipe = self.conn.pipeline(transaction=True)
        pipe.multi()  # explicit: a queue adding its writes finds the transaction open
        self._write_record(pipe, kind, tenant, rid, fields, request_body, work, t, keep)
        if enqueue is not None:
            enqueue(pipe)
        pipe.execute()
        return rid

    def create_keyed(
        self,
        kind: str,
        tenant: str,
        request_body: bytes,
        meta: dict[str, Any],
        *,
        key: str,
        fingerprint: str,
        rid: str,
        now: float | None = None,
        work: bytes | bytearray | None = None,
        enqueue: Callable[[Pipeline], object] | None = None,
    ) -> dict[str, str] | None:
        """:meth:`create` under an ``Idempotency-Key``: the key is claimed in the same
        transaction as the record and its queue entry, so a key is never bound to a record
        that was not queued (a failed write leaves nothing behind). Returns None when the
        record was made; when the key is bound already, nothing is written and its binding
        (``{"fingerprint", "id"}``) is returned."""
        t = time.time() if now is None else now
        fields = self._fields(kind, tenant, meta, t)
        keep = self._keep(fields)
        # claim the key, store the record and queue it in one transaction: a key is never
        # bound to a record that was not queued (a failed write leaves nothing behind)
        ik = self.idem_key(tenant, kind, key)
        fields["idem_key"] = ik
        doc = json.dumps({"fingerprint": fingerprint, "id": rid})
        for _ in range(8):
            with self.conn.pipeline(transaction=True) as pipe:
                try:
                    pipe.watch(ik)
                    raw = pipe.get(ik)
                    if raw is not None:
                        bound: dict[str, str] = json.loads(raw)
                        return bound
                    pipe.multi()
                    self._write_record(pipe, kind, tenant, rid, fields, request_body, work, t, keep)
                    pipe.set(ik, doc, ex=keep)
                    if enqueue is not None:
                        enqueue(pipe)
                    pipe.execute()
                    return None
                except redis.WatchError:  # the key was bound meanwhile: look again
                    continue
        raise redis.WatchError("the idempotency key kept changing")

    def written(
        self,
        kind: str,
        tenant: str,
        rid: str,
        meta: dict[str, Any],
        t: float,
        result_json: str | None = None,
    ) -> Record:
        """The record :meth:`create` (or :meth:`create_keyed`) wrote with ``now=t``, as
        :meth:`get` reads it before a worker touches it, without a round trip."""
        fields = self._fields(kind, tenant, meta, t)
        return Record(kind, rid, _decode({k: str(v) for k, v in fields.items()}), result_json)

    def _keep(self, fields: dict[str, Any]) -> int:
        """Seconds a new record lives: twice the retention while queued, else (written
        finished, see :meth:`create_finished`) the retention."""
        return self.retention if fields["status"] in FINISHED else 2 * self.retention

    @staticmethod
    def _fields(kind: str, tenant: str, meta: dict[str, Any], t: float) -> dict[str, Any]:
        """The hash fields of a new queued record."""
        fields: dict[str, Any] = {
            "kind": kind,
            "tenant": tenant,
            "status": "queued",
            "submitted_at": rfc3339(t),
            "submitted_ts": repr(t),
            "version": 1,
        }
        for k, v in meta.items():
            if v is not None:
                fields[k] = json.dumps(v) if k in _JSON_FIELDS else v
        return fields

    def _write_record(
        self,
        pipe: Pipeline,
        kind: str,
        tenant: str,
        rid: str,
        fields: dict[str, Any],
        request_body: bytes,
        work: bytes | bytearray | None,
        t: float,
        keep: int,
    ) -> None:
        """The writes of a new record, added to an open transaction."""
        pipe.hset(self.key(kind, rid), mapping=fields)  # type: ignore[arg-type]
        pipe.expire(self.key(kind, rid), keep)
        pipe.set(self.key(kind, rid, "request"), request_body, ex=keep)
        if work is not None:
            pipe.set(self.key(kind, rid, "work"), work, ex=keep)
        pipe.zadd(self.index_key(tenant, kind), {rid: 0})
        pipe.expire(self.index_key(tenant, kind), 3 * self.retention)
        # ids older than three retentions can have no record left: drop them
        oldest = id_time(t - 3 * self.retention)
        pipe.zremrangebylex(self.index_key(tenant, kind), "-", "(" + oldest)

    def release_idempotency(self, tenant: str, kind: str, key: str) -> None:
        """Forget a binding whose record has gone (so the key can be used afresh)."""
        self.conn.delete(self.idem_key(tenant, kind, key))

    def mark_solving(self, kind: str, rid: str) -> bool:
        """queued (or solving again after a crash) -> solving; False if not allowed."""
        old = self._transition(
            keys=[self.key(kind, rid)],
            args=["queued,solving", "solving", "started_at", rfc3339(time.time())],
        )
        if old is not None:
            self.conn.hincrby(self.key(kind, rid), "attempts", 1)
        return old is not None

    def claim(self, kind: str, rid: str) -> Claim | None:
        """queued (or solving again after a crash) -> solving, and what solving needs, in
        one round trip; None when the record is not there to solve (cancelled while
        queued, finished, expired)."""
        return self.claimed(self._claim(keys=self._claim_keys(kind, rid), args=[_now_text()]))

    def claim_in(self, pipe: Pipeline, kind: str, rid: str) -> None:
        """:meth:`claim` added to ``pipe`` (a worker's transaction that starts the job), by
        the script's digest: its reply, read with :meth:`claimed`, is a ``NoScriptError``
        when Redis does not hold the script (then nothing was claimed)."""
        pipe.evalsha(self._claim.sha, 3, *self._claim_keys(kind, rid), _now_text())

    def _claim_keys(self, kind: str, rid: str) -> list[str]:
        return [self.key(kind, rid), self.key(kind, rid, "work"), self.key(kind, rid, "request")]

    @staticmethod
    def claimed(got: Any) -> Claim | None:
        """The :class:`Claim` in the claim script's reply (None: nothing to solve)."""
        if not got:
            return None
        _old, budget, method, body, copy = got
        return Claim(
            time_budget=float(_text(budget)) if budget is not None else DEFAULT_SECONDS,
            method=_text(method) if method is not None else "longest_first",
            body=bytes(body),
            columns=int(copy) == 1,
        )

    def requeue(self, kind: str, rid: str, detail: str) -> bool:
        """solving -> queued after a crash, when the queue will retry it."""
        old = self._transition(
            keys=[self.key(kind, rid)], args=["solving", "queued", "last_crash", detail]
        )
        return old is not None

    def publish_progress(self, kind: str, rid: str, progress: dict[str, Any]) -> None:
        self._while_solving(
            keys=[self.key(kind, rid)], args=["progress", json.dumps(progress, allow_nan=False)]
        )

    #: progress points kept per record for the page's chart
    HISTORY_POINTS = 240

    def append_progress_history(self, kind: str, rid: str, point: dict[str, Any]) -> None:
        """Keep the last few progress points of a solve (for the page's chart)."""
        key = self.key(kind, rid, "history")
        pipe = self.conn.pipeline(transaction=False)
        pipe.rpush(key, json.dumps(point, allow_nan=False))
        pipe.ltrim(key, -self.HISTORY_POINTS, -1)
        pipe.expire(key, 2 * self.retention)
        pipe.execute()

    def progress_history(self, kind: str, rid: str) -> list[dict[str, Any]]:
        """The kept progress points, oldest first."""
        raw = self.conn.lrange(self.key(kind, rid, "history"), 0, -1)
        return [json.loads(x) for x in raw]

    def finish(
        self,
        kind: str,
        rid: str,
        status: str,
        *,
        result_json: str | None = None,
        error: dict[str, Any] | None = None,
        summary: dict[str, Any] | None = None,
        progress: dict[str, Any] | None = None,
        allowed_from: str = "solving",
        counters: Counters | None = None,
    ) -> bool:
        """Move to a finished status, store the result, refresh every TTL, wake waiters.

        One script, one round trip; ``counters`` (a metrics hash and its increments) are
        counted by the same script only when the move happened. False when the move is not
        allowed (then nothing is written).
        """
        if status not in FINISHED:
            raise ValueError(f"{status!r} is not a finished status")
        pairs: list[Any] = ["finished_at", rfc3339(time.time())]
        for name, doc in (("error", error), ("summary", summary), ("progress", progress)):
            if doc is not None:
                pairs += [name, json.dumps(doc, allow_nan=False)]
        args: list[Any] = [
            allowed_from,
            status,
            self.retention,
            "0" if result_json is None else "1",
            result_json or "",
            len(pairs) // 2,
            f"{self.prefix}:active:",  # the queue-depth sets of service/limits.py
            f"{kind}:{rid}",
            *pairs,
        ]
        metrics_key = self.key(kind, rid)  # an unused slot when there is nothing to count
        if counters is not None:
            metrics_key = counters[0]
            args += _increments(counters)
        # [record, request, result, work, done, metrics, global queue-depth set]
        keys = [*self._all_keys(kind, rid), self.key(kind, rid, "done"), metrics_key]
        keys.append(f"{self.prefix}:active")
        return self._finish(keys=keys, args=args) is not None

    def create_finished(
        self,
        kind: str,
        tenant: str,
        request_body: bytes,
        meta: dict[str, Any],
        *,
        rid: str,
        now: float,
        result: tuple[str, Counters],
        rate: RateCount | None = None,
        keyed: tuple[str, str] | None = None,
    ) -> tuple[str, Any]:
        """A record written already finished (``meta`` holds its finished fields: a plan
        solved in the request), in one script and one round trip: the record, its
        request, its index entry, its ``result`` (JSON, and the metrics it counts) and the
        done token, with ``keyed`` (an Idempotency-Key and the request's fingerprint)
        claimed first and, with ``rate`` (``limits.take_deferred``), the tenant's request
        counted before anything else.

        Returns ``("ok", None)`` once written; ``("rate", count)`` when the count passed
        the limit and ``("bound", {"fingerprint", "id"})`` when the key was bound already:
        then nothing was written."""
        fields = self._fields(kind, tenant, meta, now)
        result_json, counters = result
        idem, binding = self.key(kind, rid), ""  # an unused slot without a key
        if keyed is not None:
            idem = fields["idem_key"] = self.idem_key(tenant, kind, keyed[0])
            binding = json.dumps({"fingerprint": keyed[1], "id": rid})
        index = self.index_key(tenant, kind)
        keys = [
            self.key(kind, rid),
            self.key(kind, rid, "request"),
            self.key(kind, rid, "result"),
            self.key(kind, rid, "done"),
            index,
            counters[0],
            rate.key if rate is not None else self.key(kind, rid),  # unused slot without
            idem,
        ]
        ttl = self._keep(fields)
        args: list[Any] = [
            ttl,
            rid,
            3 * self.retention,
            id_time(now - 3 * self.retention),  # older ids can have no record left
            rate.limit if rate is not None else "",
            rate.expiry if rate is not None else 0,
            binding,
            json.dumps({k: str(v) for k, v in fields.items()}, ensure_ascii=False),
            json.dumps([[str(a) for a in triple] for triple in _triples(counters)]),
        ]
        got = self._stored_finished(keys, args, request_body, result_json, ttl)
        verdict = _text(got[0])
        if verdict == "bound":
            return verdict, json.loads(got[1])
        return verdict, int(got[1]) if verdict == "rate" else None

    def _stored_finished(
        self, keys: list[str], args: list[Any], body: bytes, result_json: str, ttl: int
    ) -> Any:
        """One MULTI, one round trip: the SETs of the request body (``keys[1]``) and the
        result (``keys[2]``), then the ``CREATE_FINISHED`` script, which deletes the two
        when it refuses. A record is never seen without them: the script runs only after
        both are set, and a MULTI is applied whole (a store too full for it refuses all
        of it; the append-only log replays all of it or none). Should the script fail
        (Redis lost it in a restart), the two are deleted here and it runs again once."""
        script = self._create_finished
        for attempt in range(2):
            pipe = self.conn.pipeline(transaction=True)
            pipe.set(keys[1], body, ex=ttl)
            pipe.set(keys[2], result_json, ex=ttl)
            pipe.evalsha(script.sha, len(keys), *keys, *args)
            *stored, got = pipe.execute(raise_on_error=False)
            for r in stored:
                if isinstance(r, Exception):  # pragma: no cover - a SET cannot fail alone
                    raise r
            if not isinstance(got, Exception):
                return got
            self.conn.delete(keys[1], keys[2])  # no record refers to them
            if isinstance(got, redis.exceptions.NoScriptError) and attempt == 0:
                self.conn.script_load(script.script)
                continue
            raise got
        raise AssertionError("not reached")  # pragma: no cover

    def _refresh_and_notify(self, kind: str, rid: str) -> None:
        idem = self.conn.hget(self.key(kind, rid), "idem_key")
        pipe = self.conn.pipeline()
        for k in self._all_keys(kind, rid):
            pipe.expire(k, self.retention)
        if idem:
            pipe.expire(idem, self.retention)
        done = self.key(kind, rid, "done")
        pipe.rpush(done, b"1")
        pipe.expire(done, 60)
        pipe.execute()

    def request_cancel(self, kind: str, rid: str) -> str | None:
        """Cancel: queued records end now, solving ones get the flag. Returns the old status."""
        old = self._cancel(keys=[self.key(kind, rid)], args=[rfc3339(time.time())])
        if old is None:
            return None
        old_s = old.decode() if isinstance(old, bytes) else str(old)
        if old_s == "queued":
            self._refresh_and_notify(kind, rid)
        return old_s

    def cancel_requested(self, kind: str, rid: str) -> bool:
        return self.conn.hget(self.key(kind, rid), "cancel") == b"1"

    # -- reading ------------------------------------------------------------------------
    def load_request(self, kind: str, rid: str) -> bytes | None:
        raw: Any = self.conn.get(self.key(kind, rid, "request"))
        return bytes(raw) if raw is not None else None

    def get(self, kind: str, rid: str, *, with_result: bool = True) -> Record | None:
        pipe = self.conn.pipeline(transaction=False)
        pipe.hgetall(self.key(kind, rid))
        if with_result:
            pipe.get(self.key(kind, rid, "result"))
        out = pipe.execute()
        raw = out[0]
        if not raw:
            return None
        fields = _decode(raw)
        result = _text(out[1]) if with_result and out[1] is not None else None
        return Record(kind, rid, fields, result)

    def version(self, kind: str, rid: str) -> tuple[str | None, int]:
        """(tenant, version) without reading the body: the cheap ETag check."""
        tenant, version = self.conn.hmget(self.key(kind, rid), ["tenant", "version"])
        return (_text(tenant) if tenant else None, int(version or 0))

    def status(self, kind: str, rid: str) -> str | None:
        s = self.conn.hget(self.key(kind, rid), "status")
        return _text(s) if s else None

    def wait(self, kind: str, rid: str, timeout: float) -> str | None:
        """Block until the record is finished or ``timeout`` seconds pass; returns the status."""
        rec = self.wait_for(kind, rid, timeout, with_result=False)
        return rec.status if rec is not None else None

    def wait_for(
        self, kind: str, rid: str, timeout: float, *, with_result: bool = True
    ) -> Record | None:
        """The record once it is finished, or as it is after ``timeout`` seconds.

        Sleeps in ``BLPOP`` on the record's done list (:meth:`finish` pushes one token,
        kept a minute, so a record finished just before the call answers at once); a
        waiter that takes the token puts it back for the others in the same round trip as
        its read. The common case, a record finished within the wait, costs two round
        trips. Every second without a token the record is read again, so a finish whose
        token is gone is still seen within a second. Callers wait on records they have just
        seen unfinished (the token outlives that by far).
        """
        deadline = time.monotonic() + max(0.0, timeout)
        done = self.key(kind, rid, "done")
        while True:
            left = deadline - time.monotonic()
            got = None
            if left > 0:
                got = self.conn.blpop([done], timeout=max(0.01, min(left, 1.0)))
            pipe = self.conn.pipeline(transaction=False)
            if got is not None:
                pipe.rpush(done, b"1")  # hand the token on to other waiters
            pipe.hgetall(self.key(kind, rid))
            if with_result:
                pipe.get(self.key(kind, rid, "result"))
            out = pipe.execute()[1 if got is not None else 0 :]
            raw = out[0]
            if not raw:
                return None
            fields = _decode(raw)
            if fields.get("status") in FINISHED or deadline - time.monotonic() <= 0:
                result = _text(out[1]) if with_result and out[1] is not None else None
                return Record(kind, rid, fields, result)

    def list(
        self,
        tenant: str,
        kind: str,
        *,
        status: str | None = None,
        limit: int = 50,
        cursor: str | None = None,
    ) -> tuple[list[dict[str, Any]], str | None]:
        """A page of the tenant's records, newest first, and the cursor of the next page."""
        index = self.index_key(tenant, kind)
        items: list[dict[str, Any]] = []
        upper = "(" + cursor if cursor else "+"
        batch = max(limit, 50) if status else limit + 1
        last_seen: str | None = None
        while len(items) <= limit:
            ids = [_text(i) for i in self.conn.zrevrangebylex(index, upper, "-", 0, batch)]
            if not ids:
                return items[:limit], None
            rows = self._rows(kind, ids)
            gone = [rid for rid, row in zip(ids, rows, strict=True) if row is None]
            if gone:
                self.conn.zrem(index, *gone)
            for rid, row in zip(ids, rows, strict=True):
                if row is None or row.get("tenant") != tenant:
                    continue
                if status is None or row["status"] == status:
                    if len(items) == limit:
                        return items, last_seen
                    row.pop("tenant", None)
                    items.append({"id": rid, **row})
                    last_seen = rid
            upper = "(" + ids[-1]
            if len(ids) < batch:
                return items, None
        return items[:limit], last_seen  # pragma: no cover - loop always returns

    def _rows(self, kind: str, ids: Iterable[str]) -> builtins.list[dict[str, Any] | None]:
        pipe = self.conn.pipeline(transaction=False)
        for rid in ids:
            pipe.hmget(self.key(kind, rid), list(_ITEM_FIELDS))
        rows: builtins.list[dict[str, Any] | None] = []
        for vals in pipe.execute():
            if vals[0] is None:
                rows.append(None)
                continue
            raw = {k: v for k, v in zip(_ITEM_FIELDS, vals, strict=True) if v is not None}
            rows.append(_decode(raw))
        return rows


def _text(v: Any) -> str:
    return v.decode() if isinstance(v, bytes) else str(v)


def _decode(raw: dict[Any, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {}
    for k, v in raw.items():
        key = k.decode() if isinstance(k, bytes) else k
        val = v.decode() if isinstance(v, bytes) else v
        out[key] = json.loads(val) if key in _JSON_FIELDS else val
    return out
