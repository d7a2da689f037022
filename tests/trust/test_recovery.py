"""The API-side recovery of ``JobQueue.reap`` on fakeredis, one crash at a time.

Each test builds the Redis state that a crash leaves behind, as RQ 3.0 writes it (rq
``registry.py``/``intermediate_queue.py``: a ``{job}:{execution}`` entry in the started
registry, the worker's hash with ``hostname``/``pid``, or a job id left in the
``:intermediate`` list), runs the reaper, and checks that a worker then completes the
plan. The real-process version is tests/trust/test_crash.py.

A worker killed on another host is noticed when its job's started-registry entry
expires; the last tests check that ``spanwright worker`` (LeanWorker) keeps that entry
short-lived and refreshed while a job runs, as RQ's forking worker does (RQ 3.0
``BaseWorker.get_heartbeat_ttl`` and ``maintain_heartbeats``).
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import threading
import time
from typing import Any

import fakeredis
from rq import Queue
from rq.job import JobStatus
from rq.registry import StartedJobRegistry
from rq.serializers import JSONSerializer

from service.embedded import ThreadWorker
from service.worker import JOB_MONITORING_INTERVAL, LeanWorker
from tests.trust.conftest import bearer, small_batch


def submit(app: Any) -> tuple[str, str]:
    r = app.test_client().post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
    assert r.status_code == 202
    return r.headers["Location"], r.headers["Location"].rsplit("/", 1)[1]


def dead_pid() -> int:
    """The pid of a process that has exited and been waited for."""
    p = subprocess.Popen([sys.executable, "-c", "pass"])
    p.wait()
    return p.pid


def test_dead_worker_on_this_host_is_reaped_at_once(keyed_app: Any, drain_queue: Any) -> None:
    """A started job whose worker (this host, pid gone) holds an entry valid for another
    90 s is handed back now: RQ's Retry re-queues it, our record returns to ``queued``
    with the crash noted, and a worker then finishes it."""
    svc = keyed_app.extensions["spanwright"]
    loc, rid = submit(keyed_app)
    conn, q = svc.store.conn, svc.queue
    job = q.queue.fetch_job(f"plan-{rid}")
    q.queue.remove(job.id)  # a worker took it off the queue ...
    svc.store.mark_solving("plan", rid)  # ... and started solving
    job.set_status(JobStatus.STARTED)
    conn.hset(job.key, "worker_name", "w-dead")
    conn.hset("rq:worker:w-dead", mapping={"hostname": socket.gethostname(), "pid": dead_pid()})
    conn.zadd(f"rq:wip:{q.queue.name}", {f"{job.id}:exec1": time.time() + 90})
    assert q.reap() >= 1
    rec = svc.store.get("plan", rid)
    assert rec.status == "queued" and "AbandonedJobError" in rec.fields["last_crash"]
    drain_queue()
    doc = keyed_app.test_client().get(loc, headers=bearer("quillfernvale")).get_json()
    assert doc["status"] == "done"


def test_live_worker_is_left_alone(keyed_app: Any) -> None:
    """The same state with the worker alive (this test's own pid): nothing is touched."""
    svc = keyed_app.extensions["spanwright"]
    _, rid = submit(keyed_app)
    conn, q = svc.store.conn, svc.queue
    job = q.queue.fetch_job(f"plan-{rid}")
    q.queue.remove(job.id)
    svc.store.mark_solving("plan", rid)
    job.set_status(JobStatus.STARTED)
    conn.hset(job.key, "worker_name", "w-live")
    conn.hset("rq:worker:w-live", mapping={"hostname": socket.gethostname(), "pid": os.getpid()})
    conn.zadd(f"rq:wip:{q.queue.name}", {f"{job.id}:exec1": time.time() + 90})
    assert q.reap() == 0
    assert svc.store.get("plan", rid).status == "solving"
    assert conn.zcard(f"rq:wip:{q.queue.name}") == 1


def test_job_stranded_between_dequeue_and_start_is_put_back(
    keyed_app: Any, drain_queue: Any
) -> None:
    """A job id moved to ``{queue}:intermediate`` by a worker that died before starting
    it: seen twice (here with no wait), it goes back to the front of the queue, and a
    worker finishes the plan (RQ itself would fail it after a minute)."""
    svc = keyed_app.extensions["spanwright"]
    loc, rid = submit(keyed_app)
    conn, q = svc.store.conn, svc.queue
    ikey = q.queue.key + ":intermediate"
    assert conn.lmove(q.queue.key, ikey, "LEFT", "RIGHT") == f"plan-{rid}".encode()
    assert q._rescue_stranded(after=0) == 0  # first look: only noted
    assert q._rescue_stranded(after=0) == 1
    assert conn.llen(ikey) == 0 and conn.lrange(q.queue.key, 0, -1) == [f"plan-{rid}".encode()]
    drain_queue()
    doc = keyed_app.test_client().get(loc, headers=bearer("quillfernvale")).get_json()
    assert doc["status"] == "done"


def entry_expiries(conn: Any, queue: Queue) -> list[float]:
    """Seconds until each started-registry entry of ``queue`` expires (its score is the
    expiry time, RQ ``registry.py``)."""
    now = time.time()
    key = StartedJobRegistry(queue=queue).key
    return [score - now for _, score in conn.zrange(key, 0, -1, withscores=True)]


def test_started_entry_lives_at_most_interval_plus_60_s() -> None:
    """Whatever the job timeout (here 65 s: a 60 s budget + 5 s margin), LeanWorker's
    started-registry entry lives at most ``job_monitoring_interval`` + 60 s (RQ's rule for
    a worker that beats during the job), not SimpleWorker's timeout + 60 = 125 s; so a
    worker killed on another host is seen within 70 s by default."""
    conn = fakeredis.FakeRedis()
    queue = Queue("ttl", connection=conn, serializer=JSONSerializer)
    job = queue.enqueue("time.sleep", args=[0], job_timeout=65)
    worker = LeanWorker([queue], connection=conn, serializer=JSONSerializer)
    assert worker.job_monitoring_interval == JOB_MONITORING_INTERVAL == 10
    worker.prepare_execution(job)
    (left,) = entry_expiries(conn, queue)
    assert 60 < left <= JOB_MONITORING_INTERVAL + 60


def test_running_job_entry_is_refreshed_and_gone_after() -> None:
    """A job of 2.6 s on a worker beating every 1 s: its entry never lives more than
    1 + 60 s ahead and is pushed forward while the job runs (so it does not expire under
    a live worker); once the job is done the entry is gone (no late beat restores it)."""
    conn = fakeredis.FakeRedis()
    queue = Queue("beat", connection=conn, serializer=JSONSerializer)
    queue.enqueue("time.sleep", args=[2.6], job_timeout=65, result_ttl=0)
    worker = ThreadWorker(
        [queue], connection=conn, serializer=JSONSerializer, job_monitoring_interval=1
    )
    thread = threading.Thread(target=worker.work, kwargs={"burst": True}, daemon=True)
    thread.start()
    expiries: list[float] = []  # absolute expiry times seen while the job ran
    while thread.is_alive():
        for left in entry_expiries(conn, queue):
            assert left <= 1 + 60 + 0.5
            expiries.append(time.time() + left)
        time.sleep(0.1)
    thread.join(5)
    assert expiries, "the job was never seen running"
    assert max(expiries) - min(expiries) >= 1.5  # refreshed at least twice
    assert entry_expiries(conn, queue) == []
