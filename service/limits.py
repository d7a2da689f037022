"""Back-pressure: per-tenant request rate and queue depth, and a global queue depth.

Both answer 429 problem+json with ``Retry-After`` (RFC 6585 section 4; Retry-After is
RFC 9110 section 10.2.3). A refused request is refused before anything is stored or queued;
nothing already accepted is ever removed to make room.

* **Request rate**: a fixed window per tenant, ``{prefix}:rate:{tenant}:{window number}``
  (``INCR``, and ``EXPIRE`` on the window's first request, in one script): at most
  ``SPANWRIGHT_RATE_LIMIT`` requests per ``SPANWRIGHT_RATE_WINDOW`` seconds;
  ``Retry-After`` is the time to the next window.
  Open paths (health, spec, problem pages) are not counted. A new plan may be counted in
  the script that stores it instead (one round trip less, :data:`DEFER_MARGIN`), which
  refuses past the limit the same way before writing anything.
* **Queue depth**: each accepted record is a member of ``{prefix}:active:{tenant}`` and of
  ``{prefix}:active`` (sorted sets scored by submission time). Admission is one Lua script:
  add to both unless either is at its limit (``SPANWRIGHT_MAX_QUEUED_PER_TENANT``,
  ``SPANWRIGHT_MAX_QUEUED_TOTAL``), so concurrent submits cannot overshoot. A record that
  finishes through ``Store.finish`` leaves both sets in the same script. What that misses
  (a record cancelled while queued, one whose worker died, one that expired) is pruned
  lazily, only when a set looks full, with one pipelined ``HGET status`` per member: the
  common path costs one script call.
"""

from __future__ import annotations

import contextlib
import math
import time
import weakref
from typing import Any

import redis
from flask import g

from .problems import TooManyRequests
from .services import services
from .store import FINISHED, RateCount

# KEYS[1] tenant set, KEYS[2] global set; ARGV: member, score, tenant limit, global limit, ttl.
# Returns 0 when admitted, 1 when the tenant is full, 2 when the service is full.
_ADMIT = """
if redis.call('ZCARD', KEYS[1]) >= tonumber(ARGV[3]) then return 1 end
if redis.call('ZCARD', KEYS[2]) >= tonumber(ARGV[4]) then return 2 end
redis.call('ZADD', KEYS[1], ARGV[2], ARGV[1])
redis.call('ZADD', KEYS[2], ARGV[2], ARGV[1])
redis.call('EXPIRE', KEYS[1], ARGV[5])
redis.call('EXPIRE', KEYS[2], ARGV[5])
return 0
"""


# KEYS[1] the tenant's counter of this window; ARGV[1] its expiry. One round trip.
_COUNT = """
local n = redis.call('INCR', KEYS[1])
if n == 1 then redis.call('EXPIRE', KEYS[1], ARGV[1]) end
return n
"""


_SCRIPTS: weakref.WeakKeyDictionary[Any, dict[str, Any]] = weakref.WeakKeyDictionary()


def _script(conn: Any, source: str) -> Any:
    """The registered script ``source`` on ``conn``, made once per client."""
    made = _SCRIPTS.setdefault(conn, {})
    if source not in made:
        made[source] = conn.register_script(source)
    return made[source]


def _active_key(prefix: str, tenant: str | None) -> str:
    return f"{prefix}:active:{tenant}" if tenant is not None else f"{prefix}:active"


def _counter(tenant: str) -> RateCount:
    """The tenant's request counter of the current window."""
    s = services().settings
    window = int(time.time() // s.rate_window)
    return RateCount(f"{s.key_prefix}:rate:{tenant}:{window}", s.rate_limit, s.rate_window + 1)


def check_rate(tenant: str) -> None:
    """Count one request of ``tenant``; 429 beyond the window's limit."""
    rate = _counter(tenant)
    try:
        count = int(_script(services().store.conn, _COUNT)(keys=[rate.key], args=[rate.expiry]))
    except redis.exceptions.OutOfMemoryError:
        # Redis at maxmemory refuses the count (a write): let the request through, so
        # reads and cancels go on; a write it makes is refused with 503 where it happens
        return
    refuse_past(tenant, count)


def refuse_past(tenant: str, count: int) -> None:
    """Remember the count of ``tenant``'s window; 429 when it is past the limit."""
    s = services().settings
    now = time.time()
    window = int(now // s.rate_window)
    _SEEN[(s.key_prefix, tenant)] = (window, count)
    if count > s.rate_limit:
        retry = math.ceil((window + 1) * s.rate_window - now)
        raise TooManyRequests(
            f"more than {s.rate_limit} requests in {s.rate_window} s for this tenant",
            retry,
        )


#: a request that brings new work is counted in the script that stores its record
#: (``Store.create_finished``, one round trip less) while its tenant's count of the
#: window, as this process last saw it, is at least this far below the limit; nearer (or
#: not seen yet this window) it is counted before its body is read, as any request. A
#: count in the store's script refuses past the limit all the same, before anything is
#: written: only the early refusal is given up, never the limit.
DEFER_MARGIN = 64

#: (key prefix, tenant) -> (window number, the last count seen in it), per process
_SEEN: dict[tuple[str, str], tuple[int, int]] = {}


def defer_rate(tenant: str) -> bool:
    """Whether this request's count may wait for the script that stores its record (see
    :data:`DEFER_MARGIN`); when it may, it is pending until :func:`take_deferred` or
    :func:`settle` counts it."""
    s = services().settings
    window, count = _SEEN.get((s.key_prefix, tenant), (-1, 0))
    if window != int(time.time() // s.rate_window) or count + DEFER_MARGIN > s.rate_limit:
        return False
    g.rate_pending = tenant
    return True


def take_deferred() -> RateCount | None:
    """The count pending for this request, handed to the script that stores its record
    (which refuses past the limit), or None when there is none (counted already)."""
    tenant = g.pop("rate_pending", None)
    return None if tenant is None else _counter(tenant)


def settle(*, refuse: bool = True) -> None:
    """Count a pending request now (a request that queues its work, before its queue slot;
    ``refuse=False``: one already answered, an error or a replay, counted afterwards)."""
    tenant = g.pop("rate_pending", None)
    if tenant is None:
        return
    if refuse:
        check_rate(tenant)
        return
    with contextlib.suppress(TooManyRequests, redis.exceptions.RedisError):
        check_rate(tenant)  # answered already: only the count matters


#: a member with no record yet is a submit between admission and its first store write;
#: only after this many seconds is a missing record taken to have expired
_UNWRITTEN_GRACE = 60.0


def _prune(conn: object, prefix: str, key: str) -> None:
    """Drop members whose record is finished, or gone for longer than a fresh submit takes.

    A member is added before its record is stored (admission comes first, so a refused
    request stores nothing), so a missing record may only mean "not written yet": pruning
    it would let concurrent submits overshoot the limit.
    """
    members = conn.zrange(key, 0, -1, withscores=True)  # type: ignore[attr-defined]
    if not members:
        return
    pipe = conn.pipeline(transaction=False)  # type: ignore[attr-defined]
    for m, _ in members:
        kind, _, rid = m.decode().partition(":")
        pipe.hget(f"{prefix}:{kind}:{rid}", "status")
    stale = time.time() - _UNWRITTEN_GRACE
    gone = [
        m
        for (m, score), st in zip(members, pipe.execute(), strict=True)
        if (st is None and score < stale) or (st is not None and st.decode() in FINISHED)
    ]
    if gone:
        conn.zrem(key, *gone)  # type: ignore[attr-defined]


def admit(tenant: str, kind: str, rid: str) -> None:
    """Reserve a queue slot for a new record, or refuse with 429 (nothing stored yet)."""
    svc = services()
    s, store = svc.settings, svc.store
    conn = store.conn
    keys = [_active_key(s.key_prefix, tenant), _active_key(s.key_prefix, None)]
    member = f"{kind}:{rid}"
    args: list[str | int] = [member, repr(time.time()), s.max_queued_per_tenant]
    args += [s.max_queued_total, 2 * s.retention]
    script = _script(conn, _ADMIT)
    verdict = int(script(keys=keys, args=args))
    if verdict == 0:
        return
    _prune(conn, s.key_prefix, keys[verdict - 1])  # it looked full: forget finished records
    verdict = int(script(keys=keys, args=args))
    if verdict == 0:
        return
    retry = max(1, math.ceil(s.default_time_budget))
    if verdict == 1:
        raise TooManyRequests(
            f"this tenant already has {s.max_queued_per_tenant} plans or sizings queued or "
            "solving; retry when some have finished",
            retry,
        )
    raise TooManyRequests(
        f"the service already has {s.max_queued_total} plans or sizings queued or solving; "
        "retry when some have finished",
        retry,
    )


def release(tenant: str, kind: str, rid: str) -> None:
    """Give a slot back (the record was discarded before being queued)."""
    svc = services()
    prefix = svc.settings.key_prefix
    member = f"{kind}:{rid}"
    pipe = svc.store.conn.pipeline(transaction=False)
    pipe.zrem(_active_key(prefix, tenant), member)
    pipe.zrem(_active_key(prefix, None), member)
    pipe.execute()


def depth(tenant: str | None = None) -> int:
    """Queued + solving records of ``tenant`` (or of everyone), after pruning."""
    svc = services()
    key = _active_key(svc.settings.key_prefix, tenant)
    _prune(svc.store.conn, svc.settings.key_prefix, key)
    return int(svc.store.conn.zcard(key))
