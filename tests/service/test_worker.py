"""``service.worker.LeanWorker``: RQ's bookkeeping, the same keys, fewer round trips.

The reference is RQ's own ``SimpleWorker`` running the same jobs: while a plan solves
(what a reaper of dead workers reads) and after it finished, the RQ keys and their fields
must be those RQ writes itself. Round trips are counted on a real redis-server, where each
``send_packed_command`` of redis-py is one (a pipeline counts once).
"""

from __future__ import annotations

import json
import re
import threading
import time
from collections.abc import Iterator
from typing import Any

import fakeredis
import pytest
import redis
from rq import Queue, SimpleWorker
from rq.serializers import JSONSerializer

from service.app import create_app
from service.settings import Settings
from service.worker import LeanWorker
from workers import tasks

BODY = {"jobs": [{"id": f"sh{i:03d}", "duration": 60 + 7 * i} for i in range(40)], "node_count": 4}
_UUID = re.compile(rb"[0-9a-f]{32}")
_RID = re.compile(rb"[0-9a-f]{21}")
_STATE_FIELDS = {b"status", b"state", b"worker_name", b"origin", b"retries_left"}


def snapshot(conn: Any, worker_name: str) -> dict[str, Any]:
    """RQ's keys with their members, or field names and state values; ids and times out."""
    out: dict[str, Any] = {}
    for key in sorted(conn.keys("rq:*")):
        norm = _RID.sub(b"<rid>", _UUID.sub(b"<uuid>", key.replace(worker_name.encode(), b"<w>")))
        kind = conn.type(key)
        if kind == b"hash":  # field names; the values that say what state things are in
            fields = conn.hgetall(key)
            value: Any = sorted((k, fields[k] if k in _STATE_FIELDS else b"") for k in fields)
        elif kind == b"zset":
            value = sorted(conn.zrange(key, 0, -1))
        elif kind == b"set":
            value = sorted(conn.smembers(key))
        elif kind == b"list":
            value = conn.lrange(key, 0, -1)
        else:
            value = kind
        text = json.dumps(value, default=lambda b: b.decode())
        text = _RID.sub(b"<rid>", _UUID.sub(b"<uuid>", text.encode())).decode()
        out[norm.decode()] = text.replace(worker_name, "<w>")
    return out


def run_one(worker_class: type[SimpleWorker], monkeypatch: pytest.MonkeyPatch) -> Any:
    """Submit one plan, run it with ``worker_class``; RQ's keys while solving and after."""
    settings = Settings(key_prefix="lw", queue_name="lw", retention=600)
    server = fakeredis.FakeServer()
    app = create_app(settings, connection=fakeredis.FakeRedis(server=server))
    conn = fakeredis.FakeRedis(server=server)
    queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
    worker = worker_class([queue], connection=conn, serializer=JSONSerializer, name="wref")
    during: list[dict[str, Any]] = []
    solve = tasks.RUNNERS["plan"]

    def watched(body: Any, **kw: Any) -> Any:  # the real core, with a look at RQ's keys
        during.append(snapshot(fakeredis.FakeRedis(server=server), "wref"))
        return solve(body, **kw)

    monkeypatch.setitem(tasks.RUNNERS, "plan", watched)
    loc = app.test_client().post("/v1/plans", json=BODY).headers["Location"]
    worker.work(burst=True, logging_level="WARNING")
    doc = app.test_client().get(loc).get_json()
    return during[0], snapshot(conn, "wref"), doc


def test_rq_keys_are_those_rq_writes(monkeypatch: pytest.MonkeyPatch) -> None:
    """While solving (the started registry, the execution, the job's status and worker, the
    worker's state: what crash recovery reads) and after the plan is done (job and
    execution gone), LeanWorker leaves exactly the keys and fields RQ's SimpleWorker
    leaves, and the plan's document is the same."""
    ref_during, ref_after, ref_doc = run_one(SimpleWorker, monkeypatch)
    got_during, got_after, got_doc = run_one(LeanWorker, monkeypatch)
    assert got_during == ref_during
    assert got_after == ref_after
    assert any("rq:wip:" in k for k in got_during)  # the started registry held the job
    for doc in (ref_doc, got_doc):
        for key in ("id", "submitted_at", "started_at", "finished_at", "links"):
            doc.pop(key)
        doc["result"].pop("solve_seconds")
        doc["progress"].pop("elapsed")
    assert got_doc == ref_doc and got_doc["status"] == "done"


def test_a_crash_is_retried_once_then_fails(monkeypatch: pytest.MonkeyPatch) -> None:
    """The failure path is RQ's own: ``Retry(max=1)`` runs a crashing job twice, then the
    ``on_failure`` callback fails the plan with a 500 problem (as with SimpleWorker)."""
    calls: list[int] = []

    def broken(body: Any, **kw: Any) -> Any:  # test double: a core that crashes
        calls.append(1)
        raise RuntimeError("disk on fire")

    monkeypatch.setitem(tasks.RUNNERS, "plan", broken)
    settings = Settings(key_prefix="lc", queue_name="lc", retention=600)
    server = fakeredis.FakeServer()
    app = create_app(settings, connection=fakeredis.FakeRedis(server=server))
    loc = app.test_client().post("/v1/plans", json=BODY).headers["Location"]
    conn = fakeredis.FakeRedis(server=server)
    queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
    LeanWorker([queue], connection=conn, serializer=JSONSerializer).work(
        burst=True, logging_level="WARNING"
    )
    doc = app.test_client().get(loc).get_json()
    assert len(calls) == 2 and doc["status"] == "failed"
    assert doc["error"]["status"] == 500 and "disk on fire" in doc["error"]["detail"]


# -- round trips, on a real redis-server ---------------------------------------------------
class Counter:
    """Counts redis-py round trips (``send_packed_command`` calls) of chosen threads."""

    def __init__(self) -> None:
        self.counts: dict[int, int] = {}
        self._orig = redis.connection.AbstractConnection.send_packed_command

    def __enter__(self) -> Counter:
        orig, counts = self._orig, self.counts

        def counted(conn: Any, command: Any, check_health: bool = True) -> Any:
            tid = threading.get_ident()
            counts[tid] = counts.get(tid, 0) + 1
            return orig(conn, command, check_health)

        redis.connection.AbstractConnection.send_packed_command = counted  # type: ignore[method-assign]
        return self

    def __exit__(self, *exc: object) -> None:
        redis.connection.AbstractConnection.send_packed_command = self._orig  # type: ignore[method-assign]


@pytest.fixture
def live(redis_server: str) -> Iterator[tuple[Any, Settings]]:
    """The API on a real Redis and a LeanWorker thread draining its queue."""
    settings = Settings(redis_url=redis_server, key_prefix="rt", queue_name="rt", max_wait=10)
    app = create_app(settings)
    conn = redis.Redis.from_url(redis_server)
    for key in conn.keys("rt:*") + conn.keys("rq:queue:rt*"):
        conn.delete(key)
    from service.embedded import ThreadWorker

    queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
    worker = ThreadWorker([queue], connection=conn, serializer=JSONSerializer, worker_ttl=16)
    thread = threading.Thread(target=worker.work, kwargs={"logging_level": "WARNING"})
    thread.start()
    try:
        yield app, settings
    finally:
        worker.stop_flag = True
        thread.join(20)


@pytest.mark.slow
def test_a_plan_costs_a_few_round_trips(live: tuple[Any, Settings]) -> None:
    """A plan submitted with ``Prefer: wait`` costs its request thread at most 6 round trips
    (rate count, queue-depth admission, record + queue entry in one transaction, BLPOP, one
    read; plus at most one reaper look) and the worker 6 (dequeue, fetch, start with the
    record's claim in the same transaction, finish, end, and a heartbeat or suspension look
    at most every second), counted on a real redis-server; RQ's SimpleWorker and the former
    task needed about 35."""
    app, _ = live
    client = app.test_client()
    for _ in range(3):  # scripts loaded, connections made, heartbeats written
        assert client.post("/v1/plans", json=BODY, headers={"Prefer": "wait=5"}).status_code == 201
    time.sleep(1.1)
    with Counter() as counter:
        me = threading.get_ident()
        plans = 5
        for _ in range(plans):
            r = client.post("/v1/plans", json=BODY, headers={"Prefer": "wait=5"})
            assert r.status_code == 201 and r.get_json()["status"] == "done"
        time.sleep(0.2)  # the worker's end-of-job write follows the wake-up
    api = counter.counts.pop(me, 0)
    worker = sum(counter.counts.values())
    assert api <= 6 * plans, api
    assert worker <= 6 * plans, worker
