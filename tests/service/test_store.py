"""The Redis store: time-ordered ids, per-tenant listing with cursors, retention, transitions."""

from __future__ import annotations

import math
import random

import fakeredis
import pytest

from service.store import Store, new_id


@pytest.fixture
def store() -> Store:
    return Store(fakeredis.FakeRedis(), prefix="t", retention=300)


def test_ids_sort_like_their_times() -> None:
    """Lexicographic order of ids equals submission order (checked by brute force)."""
    rnd = random.Random(4)
    times = [1.7e9 + rnd.uniform(0, 1e8) for _ in range(200)]
    ids = {new_id(t): t for t in times}
    assert [ids[i] for i in sorted(ids)] == sorted(times)


def test_listing_pages_newest_first_with_status_filter(store: Store) -> None:
    """Every page, concatenated, is the brute-force newest-first list, filtered; no repeats."""
    rnd = random.Random(7)
    made = []
    for _ in range(40):
        t = 1.8e9 + rnd.uniform(0, 500)  # within the retention
        rid = store.create("plan", "local", b"{}", {"method": "list"}, now=t)
        status = rnd.choice(["queued", "done", "cancelled"])
        if status != "queued":
            store.request_cancel("plan", rid) if status == "cancelled" else (
                store.mark_solving("plan", rid),
                store.finish("plan", rid, "done", result_json="{}"),
            )
        made.append((t, rid, status))
    store.create("plan", "other-tenant", b"{}", {}, now=1.8e9 + 50)
    for status in (None, "done", "queued"):
        want = [rid for t, rid, s in sorted(made, reverse=True) if status in (None, s)]
        got, cursor = [], None
        while True:
            items, cursor = store.list("local", "plan", status=status, limit=7, cursor=cursor)
            assert len(items) <= 7
            got += [it["id"] for it in items]
            if cursor is None:
                break
        assert got == want


def test_expired_records_leave_the_listing(store: Store) -> None:
    """A record whose keys expired is no longer listed (and its index entry is dropped)."""
    a = store.create("plan", "local", b"{}", {})
    b = store.create("plan", "local", b"{}", {})
    store.conn.delete(store.key("plan", a))
    items, _ = store.list("local", "plan", limit=10)
    assert [i["id"] for i in items] == [b]
    assert store.conn.zscore(store.index_key("local", "plan"), a) is None


def test_every_key_has_the_retention(store: Store) -> None:
    """Records, requests, the worker's copies, results and idempotency records expire after
    the retention."""
    rid = new_id()
    made = store.create_keyed(
        "plan", "local", b'{"jobs": []}', {}, key="k", fingerprint="f", rid=rid, work=b"copy"
    )
    assert made is None
    assert 300 < store.conn.ttl(store.key("plan", rid)) <= 600  # queued: twice the retention
    store.mark_solving("plan", rid)
    store.finish("plan", rid, "done", result_json="{}")
    for key in (*store._all_keys("plan", rid), store.idem_key("local", "plan", "k")):
        assert 0 < store.conn.ttl(key) <= 300


def test_idempotency_binding_is_first_come(store: Store) -> None:
    """The first request binds the key; a second gets the first binding and stores
    nothing; another tenant's key of the same name is its own."""

    def keyed(tenant: str, fingerprint: str, rid: str) -> dict[str, str] | None:
        return store.create_keyed(
            "plan", tenant, b"{}", {}, key="key-1", fingerprint=fingerprint, rid=rid
        )

    a, b, c = new_id(), new_id(), new_id()
    assert keyed("local", "fp-a", a) is None
    assert keyed("local", "fp-b", b) == {"fingerprint": "fp-a", "id": a}
    assert store.get("plan", b) is None
    assert keyed("other", "fp-b", c) is None


def test_transitions_are_guarded(store: Store) -> None:
    """Status only moves forward: no finish before solving, no solving after cancel."""
    rid = store.create("plan", "local", b"{}", {})
    assert not store.finish("plan", rid, "done")
    assert store.request_cancel("plan", rid) == "queued"
    assert store.status("plan", rid) == "cancelled"
    assert not store.mark_solving("plan", rid)
    assert store.request_cancel("plan", rid) == "cancelled"  # finished: the caller says 409


def test_version_changes_with_every_visible_change(store: Store) -> None:
    """The ETag (RFC 9110 section 8.8.3) must change whenever the document changes."""
    rid = store.create("plan", "local", b"{}", {})
    seen = {store.version("plan", rid)[1]}
    store.mark_solving("plan", rid)
    seen.add(store.version("plan", rid)[1])
    store.publish_progress("plan", rid, {"elapsed": 0.1})
    seen.add(store.version("plan", rid)[1])
    store.finish("plan", rid, "done", result_json="{}")
    seen.add(store.version("plan", rid)[1])
    assert len(seen) == 4


def test_wait_returns_when_finished(store: Store) -> None:
    """A waiter returns at once for a finished record and after the timeout for a queued one."""
    import time

    rid = store.create("plan", "local", b"{}", {})
    t0 = time.monotonic()
    assert store.wait("plan", rid, 0.2) == "queued"
    assert time.monotonic() - t0 >= 0.19
    store.mark_solving("plan", rid)
    store.finish("plan", rid, "failed", error={"title": "x"})
    assert store.wait("plan", rid, 5) == "failed"


def test_claim_hands_over_the_copy_or_the_body(store: Store) -> None:
    """A claim moves queued -> solving, counts the attempt and returns the worker's copy
    when one was stored, else the raw body; a cancelled record cannot be claimed."""
    a = store.create("plan", "local", b'{"raw": 1}', {"method": "list", "time_budget": "2.5"})
    b = store.create("plan", "local", b'{"raw": 2}', {}, work=b"copy")
    got = store.claim("plan", a)
    assert got is not None and (got.body, got.columns) == (b'{"raw": 1}', False)
    assert (got.method, got.time_budget) == ("list", 2.5)
    assert store.status("plan", a) == "solving"
    again = store.claim("plan", a)  # a crash retry claims a solving record once more
    assert again is not None and store.conn.hget(store.key("plan", a), "attempts") == b"2"
    got = store.claim("plan", b)
    assert got is not None and (got.body, got.columns) == (b"copy", True)
    c = store.create("plan", "local", b"{}", {})
    store.request_cancel("plan", c)
    assert store.claim("plan", c) is None and store.status("plan", c) == "cancelled"


def test_finish_writes_all_or_nothing(store: Store) -> None:
    """A refused finish writes nothing (no result, no count); an allowed one stores the
    result, wakes a waiter and applies the counters exactly once."""
    counters = ("t:metrics:plan", [("i", "finished:done", 1), ("f", "solve_seconds:sum", 0.25)])
    rid = store.create("plan", "local", b"{}", {})
    assert not store.finish("plan", rid, "done", result_json='{"a":1}', counters=counters)
    assert store.conn.get(store.key("plan", rid, "result")) is None
    assert store.conn.hgetall("t:metrics:plan") == {}
    store.mark_solving("plan", rid)
    assert store.finish("plan", rid, "done", result_json='{"a":1}', counters=counters)
    assert not store.finish("plan", rid, "done", result_json='{"a":2}', counters=counters)
    assert store.conn.hgetall("t:metrics:plan") == {
        b"finished:done": b"1",
        b"solve_seconds:sum": b"0.25",
    }
    rec = store.wait_for("plan", rid, 5)
    assert rec is not None and rec.status == "done" and rec.result_json == '{"a":1}'


def test_claim_in_a_transaction_is_the_same_claim(store: Store) -> None:
    """``claim_in`` (the claim added to a worker's transaction) moves the record and reads
    its body as ``claim`` does, as read back from the store; a record cancelled while
    queued gives None; with the script unknown to Redis the reply is an error and the
    record is left as it was (the task then claims it itself)."""
    a = store.create("plan", "local", b'{"raw": 1}', {"method": "list"}, work=b"copy")
    c = store.create("plan", "local", b"{}", {})
    store.request_cancel("plan", c)
    store.claim("plan", c)  # the script is loaded into Redis
    pipe = store.conn.pipeline()
    store.claim_in(pipe, "plan", a)
    store.claim_in(pipe, "plan", c)
    got, none = pipe.execute()
    claim = Store.claimed(got)
    assert claim is not None and (claim.body, claim.columns, claim.method) == (
        b"copy",
        True,
        "list",
    )
    assert store.status("plan", a) == "solving" and Store.claimed(none) is None
    assert store.conn.hget(store.key("plan", a), "attempts") == b"1"
    b = store.create("plan", "local", b"{}", {})
    store.conn.script_flush()
    pipe = store.conn.pipeline()
    store.claim_in(pipe, "plan", b)
    (reply,) = pipe.execute(raise_on_error=False)
    assert isinstance(reply, Exception) and store.status("plan", b) == "queued"


def test_the_queued_record_is_what_was_stored(store: Store) -> None:
    """``queued`` (the answer to a submit without a wait, built without a read) equals the
    record read back from Redis right after ``create`` and ``create_keyed``."""
    meta = {"method": "longest_first", "time_budget": "2.5", "name": "ep01 shot 010"}
    rid = store.create("plan", "local", b"{}", meta, now=1.8e9 + 0.125)
    assert store.written("plan", "local", rid, meta, 1.8e9 + 0.125) == store.get("plan", rid)
    kid = new_id()
    assert (
        store.create_keyed(
            "plan", "local", b"{}", {}, key="k", fingerprint="f", rid=kid, now=1.8e9 + 1
        )
        is None
    )
    got = store.get("plan", kid)
    assert got is not None
    made = store.written("plan", "local", kid, {}, 1.8e9 + 1)
    assert made.fields == {k: v for k, v in got.fields.items() if k != "idem_key"}


@pytest.fixture(params=["fakeredis", "redis-server"])
def any_store(request: pytest.FixtureRequest) -> Store:
    """The store on fakeredis and on the session's real redis-server (a fresh prefix)."""
    if request.param == "fakeredis":
        return Store(fakeredis.FakeRedis(), prefix="t", retention=300)
    import redis

    url = request.getfixturevalue("redis_server")
    prefix = "cf" + format(abs(hash(request.node.nodeid)) % 10**8, "08d")
    return Store(redis.Redis.from_url(url), prefix=prefix, retention=300)


def _finished(store: Store, rid: str, **kw: object) -> tuple[str, object]:
    counters = (
        f"{store.prefix}:metrics:plan",
        [("i", "finished:done", 1), ("f", "solve_seconds:sum", 0.1)],
    )
    return store.create_finished(
        "plan",
        "local",
        b'{"jobs": []}',
        {
            "method": "longest_first",
            "time_budget": "1.0",
            "status": "done",
            "name": 'Épisode 3 – plan ✨ "night"\n',
            "attempts": 1,
        },
        rid=rid,
        now=1.8e9,
        result=('{"makespan":1.0}', counters),
        **kw,  # type: ignore[arg-type]
    )


def test_a_record_written_finished_has_its_request_and_result_or_nothing(
    any_store: Store,
) -> None:
    """``create_finished`` stores the record, its request and its result together (each
    with the retention); a request over its rate, or with a key bound already, leaves no
    key of its own behind; with the script unknown to Redis (a restart, ``SCRIPT
    FLUSH``) it is loaded again and the record written once. Redis's MULTI semantics
    (redis.io, "Transactions"), checked on fakeredis and on a real redis-server."""
    from service.store import RateCount

    store = any_store
    parts = ("", "request", "result")
    ok = new_id(1.8e9)
    assert _finished(store, ok) == ("ok", None)
    assert store.load_request("plan", ok) == b'{"jobs": []}'
    rec = store.get("plan", ok)
    assert rec is not None and rec.status == "done" and rec.result_json == '{"makespan":1.0}'
    name = 'Épisode 3 – plan ✨ "night"\n'
    assert store.conn.hget(store.key("plan", ok), "name") == name.encode()
    assert store.conn.hget(store.key("plan", ok), "attempts") == b"1"
    assert all(0 < store.conn.ttl(store.key("plan", ok, p)) <= 300 for p in parts)

    counter = f"{store.prefix}:rate:local"
    store.conn.set(counter, 5)
    over = new_id(1.8e9)
    verdict, _count = _finished(store, over, rate=RateCount(counter, 5, 60))
    assert verdict == "rate"
    assert [store.conn.exists(store.key("plan", over, p)) for p in parts] == [0, 0, 0]

    first = new_id(1.8e9)
    assert _finished(store, first, keyed=("k-1", "fp"))[0] == "ok"
    second = new_id(1.8e9)
    assert _finished(store, second, keyed=("k-1", "fp"))[0] == "bound"
    assert [store.conn.exists(store.key("plan", second, p)) for p in parts] == [0, 0, 0]

    store.conn.script_flush()
    again = new_id(1.8e9)
    assert _finished(store, again) == ("ok", None)
    assert store.load_request("plan", again) == b'{"jobs": []}'
    metrics = store.conn.hgetall(f"{store.prefix}:metrics:plan")
    assert metrics[b"finished:done"] == b"3"
    assert float(metrics[b"solve_seconds:sum"]) == pytest.approx(0.3)  # three 0.1 s solves


@pytest.mark.parametrize("seed", range(3))
def test_timestamps_are_what_the_standard_library_writes(seed: int) -> None:
    """``rfc3339`` equals ``datetime.fromtimestamp(t, UTC)`` formatted with milliseconds
    (the standard library as the reference) on random instants, on instants a hair below
    a whole second (where the microseconds round up into the next second) and on times
    that repeat a second (the cached whole-second text)."""
    from datetime import UTC, datetime

    from service.store import rfc3339

    def reference(t: float) -> str:
        return datetime.fromtimestamp(t, UTC).strftime("%Y-%m-%dT%H:%M:%S.%f")[:-3] + "Z"

    rnd = random.Random(seed)
    whole = [float(rnd.randrange(0, 4 * 10**9)) for _ in range(300)]
    times = [rnd.uniform(0, 4e9) for _ in range(2000)]
    times += [w + d for w in whole for d in (0.0, 0.9999994, 0.9999995, 0.9999996, 0.0005)]
    times += [math.nextafter(w, 0.0) for w in whole] + [1.8e9 + k / 1000 for k in range(3000)]
    assert [rfc3339(t) for t in times] == [reference(t) for t in times]
