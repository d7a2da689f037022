"""The API-side recovery of ``JobQueue.reap`` on fakeredis, one crash at a time.

Each test builds the Redis state that a crash leaves behind, as RQ 3.0 writes it (rq
``registry.py``/``intermediate_queue.py``: a ``{job}:{execution}`` entry in the started
registry, the worker's hash with ``hostname``/``pid``, or a job id left in the
``:intermediate`` list), runs the reaper, and checks that a worker then completes the
plan. The real-process version is tests/trust/test_crash.py.
"""

from __future__ import annotations

import os
import socket
import subprocess
import sys
import time
from typing import Any

from rq.job import JobStatus

from tests.trust.conftest import bearer, small_batch


def submit(app: Any) -> tuple[str, str]:
    r = app.test_client().post("/v1/plans", json=small_batch(), headers=bearer("lanternhill"))
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
    doc = keyed_app.test_client().get(loc, headers=bearer("lanternhill")).get_json()
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
    doc = keyed_app.test_client().get(loc, headers=bearer("lanternhill")).get_json()
    assert doc["status"] == "done"
