"""Crash safety with a real redis-server (deploy/redis.conf) and real ``spanwright worker``
processes: workers killed with SIGKILL mid-solve, and redis-server killed and restarted
mid-stream.

What is checked, and against what:

* kill -9 (10 repetitions): the worker process group solving an ``exact`` plan is killed
  (no clean-up code can run). RQ's documented behaviour (ecosystem notes, rq 3.0
  ``StartedJobRegistry.cleanup``) is that the job is "abandoned" and, with ``Retry(max=1)``,
  re-queued. Each plan must end ``done`` (re-run by another worker, ``attempts`` 2) or
  ``failed`` with a reason, within 90 s: 0 lost (404), 0 stuck in ``solving``.
* redis-server SIGKILL + restart with AOF ``appendfsync everysec`` (the Redis docs: at most
  about one second of writes lost): every plan whose 202 was sent more than a second before
  the kill still exists afterwards and finishes.
"""

from __future__ import annotations

import os
import random
import signal
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import redis
from live import RedisServer
from stack import UNTHROTTLED, RealStack

FINISHED = ("done", "failed", "cancelled")
#: the real stack of both tests: results kept 15 min, a 5 s crash-guard margin, no throttling
STACK: dict[str, Any] = {"retention": 900, "job_timeout_margin": 5, **UNTHROTTLED}


def hard_exact_plan(seed: int, budget: float) -> dict[str, Any]:
    """200 jobs of 100,000-999,999 s on 37 identical nodes: the exact search does not prove
    optimality within its budget on these (measured beforehand for the seeds used here:
    0-9 and 99, each stopped on its 1 s budget), so it is mid-solve when killed. The
    former 47 jobs on 12 nodes became too easy for the improved search. The episode naming
    is invented."""
    rng = random.Random(seed)
    return {
        "name": f"ep{seed:02d} finals",
        "jobs": [
            {"id": f"ep{seed:02d}_f{i:03d}", "duration": rng.randint(100_000, 999_999)}
            for i in range(200)
        ],
        "node_count": 37,
        "method": "exact",
        "time_budget": budget,
    }


def wait_workers(conn: redis.Redis, queue: str, n: int, timeout: float = 60.0) -> None:
    from rq import Queue, Worker

    q = Queue(queue, connection=conn)
    end = time.monotonic() + timeout
    while Worker.count(connection=conn, queue=q) < n:
        assert time.monotonic() < end, f"fewer than {n} workers registered"
        time.sleep(0.1)


def kill_solver(conn: redis.Redis, client: Any, loc: str) -> None:
    """SIGKILL the process group of the worker that is solving plan ``loc`` now."""
    rid = loc.rsplit("/", 1)[1]
    name = conn.hget(f"rq:job:plan-{rid}", "worker_name")
    pid = int(conn.hget(b"rq:worker:" + name, "pid"))
    assert client.get(loc).get_json()["status"] == "solving"
    os.killpg(pid, signal.SIGKILL)


def wait_status(client: Any, loc: str, want: tuple[str, ...], timeout: float) -> dict[str, Any]:
    end = time.monotonic() + timeout
    while True:
        doc: dict[str, Any] = client.get(loc).get_json()
        if doc["status"] in want:
            return doc
        assert time.monotonic() < end, f"{loc} stuck in {doc['status']}"
        time.sleep(0.05)


@pytest.mark.slow
def test_kill9_worker_mid_solve_ten_times(redis_server: str) -> None:
    """10 times: kill -9 the process group of the worker solving an exact plan (3 s budget),
    start a replacement; every plan ends done (re-run) or failed with a reason within 90 s;
    none lost, none stuck. Then one plan whose both attempts are killed ends ``failed``
    naming RQ's AbandonedJobError. The recovery times are printed."""
    prefix = f"kill{os.getpid()}"
    stack = RealStack(redis_server, prefix, **STACK)
    conn, client, workers = stack.redis, stack.client, stack.workers
    recoveries: list[float] = []
    outcomes: list[dict[str, Any]] = []
    try:
        for _ in range(3):
            workers.start()
        wait_workers(conn, prefix, 3)
        for rep in range(10):
            r = client.post("/v1/plans", json=hard_exact_plan(rep, 3.0))
            assert r.status_code == 202, r.get_data(as_text=True)
            loc, rid = r.headers["Location"], r.headers["Location"].rsplit("/", 1)[1]
            end = time.monotonic() + 60
            while client.get(loc).get_json()["status"] != "solving":
                assert time.monotonic() < end, "never started"
                time.sleep(0.02)
            time.sleep(0.5)  # well inside the 3 s search
            kill_solver(conn, client, loc)
            t_kill = time.monotonic()
            workers.start()  # keep capacity (a replacement, as systemd would)
            while True:
                doc = client.get(loc).get_json()
                if doc["status"] in FINISHED:
                    break
                assert time.monotonic() - t_kill < 90, f"plan {rid} stuck in {doc['status']}"
                time.sleep(0.1)
            recoveries.append(time.monotonic() - t_kill)
            fields = {
                k.decode(): v.decode() for k, v in conn.hgetall(f"{prefix}:plan:{rid}").items()
            }
            outcomes.append(
                {
                    "status": doc["status"],
                    "attempts": fields.get("attempts"),
                    "error": doc["error"],
                    "result": doc["result"],
                }
            )
        # killed on both attempts (Retry(max=1) used up): failed, with the reason
        loc = client.post("/v1/plans", json=hard_exact_plan(99, 3.0)).headers["Location"]
        record = f"{prefix}:plan:{loc.rsplit('/', 1)[1]}"
        for attempt in (b"1", b"2"):
            end = time.monotonic() + 90
            while conn.hget(record, "attempts") != attempt:  # this attempt has started
                assert time.monotonic() < end, "the second attempt never started"
                client.get(loc)  # polling is what runs the reaper
                time.sleep(0.05)
            time.sleep(0.5)
            kill_solver(conn, client, loc)
            workers.start()
        twice = wait_status(client, loc, FINISHED, 90)
    finally:
        workers.stop()
    assert twice["status"] == "failed", twice
    assert "AbandonedJobError" in twice["error"]["detail"]
    print(
        "\nkill -9 recoveries (s, kill -> finished incl. the 3 s re-solve):",
        [round(t, 1) for t in recoveries],
    )
    assert len(outcomes) == 10
    done = [o for o in outcomes if o["status"] == "done"]
    # the first run was killed, the second finished, with a certificate that holds
    assert all(o["attempts"] == "2" for o in done), [(o["status"], o["attempts"]) for o in outcomes]
    assert all(o["result"]["makespan"] >= o["result"]["lower_bound"] > 0 for o in done)
    # the others failed with a reason
    assert all(o["status"] == "failed" and o["error"]["detail"] for o in outcomes if o not in done)
    assert max(recoveries) <= 90


@pytest.fixture
def own_redis(tmp_path: Path) -> Iterator[RedisServer]:
    """A redis-server of its own (it is killed on purpose), deploy/redis.conf, AOF on."""
    r = RedisServer(tmp_path)
    r.start()
    try:
        yield r
    finally:
        r.stop()


def small_plan(i: int) -> dict[str, Any]:
    return {
        "name": f"dailies {i}",
        "jobs": [{"id": f"d{i}_{k}", "duration": 20.0 + (i * 7 + k * 13) % 50} for k in range(30)],
        "node_count": 4,
        "method": "longest_first",
        "time_budget": 1,
    }


@pytest.mark.slow
def test_redis_restart_mid_stream_loses_no_accepted_plan(own_redis: RedisServer) -> None:
    """4 clients submit plans for ~6 s; at ~3 s redis-server is killed with SIGKILL and
    restarted from its AOF. Every plan whose 202 was sent more than 1 s before the kill
    exists afterwards (0 lost) and every existing plan finishes within 90 s. A worker that
    exits on the lost connection is restarted, as the systemd unit's ``Restart=always``
    does in the deployment."""
    prefix = "rst"
    stack = RealStack(own_redis.url, prefix, **STACK)
    app, workers = stack.app, stack.workers
    accepted: list[tuple[str, float]] = []
    refused = [0]
    lock = threading.Lock()
    stop = threading.Event()

    def submitter(k: int) -> None:
        c = app.test_client()
        i = 0
        while not stop.is_set():
            i += 1
            r = c.post("/v1/plans", json=small_plan(k * 100_000 + i))
            with lock:
                if r.status_code == 202:
                    accepted.append((r.headers["Location"], time.monotonic()))
                else:
                    assert r.status_code == 503, r.get_data(as_text=True)
                    refused[0] += 1
            time.sleep(0.01)

    restarts = [0]

    def supervise() -> None:
        """What systemd's ``Restart=always`` does for deploy/spanwright-worker@.service."""
        while not done.is_set():
            for p in list(workers.procs):
                if p.poll() is not None:
                    workers.procs.remove(p)
                    workers.start()
                    restarts[0] += 1
            time.sleep(0.5)

    done = threading.Event()
    supervisor = threading.Thread(target=supervise)
    try:
        workers.start()
        workers.start()
        wait_workers(stack.redis, prefix, 2)
        supervisor.start()
        threads = [threading.Thread(target=submitter, args=(k,)) for k in range(4)]
        for t in threads:
            t.start()
        time.sleep(3.0)
        t_kill = time.monotonic()
        own_redis.kill()
        time.sleep(0.5)
        own_redis.start()
        time.sleep(2.5)
        stop.set()
        for t in threads:
            t.join()
        c = app.test_client()
        lost, early, statuses = [], 0, {}
        end = time.monotonic() + 90
        for loc, t_sent in accepted:
            while True:
                try:
                    r = c.get(loc)
                except redis.exceptions.ConnectionError:
                    time.sleep(0.2)
                    continue
                if r.status_code == 404:
                    break
                doc = r.get_json()
                if doc is not None and doc.get("status") in FINISHED:
                    break
                assert time.monotonic() < end, f"{loc} not finished: {doc}"
                time.sleep(0.05)
            if r.status_code == 404:
                lost.append((loc, t_kill - t_sent))
            else:
                statuses[doc["status"]] = statuses.get(doc["status"], 0) + 1
            if t_sent < t_kill - 1.0:
                early += 1
        print(
            f"\nredis restart: {len(accepted)} accepted, {early} of them >1 s before the kill, "
            f"{refused[0]} refused with 503 while down, lost {len(lost)}, final {statuses}, "
            f"workers restarted by the supervisor: {restarts[0]}"
        )
        assert early > 20
        assert not [x for x in lost if x[1] > 1.0], lost
    finally:
        stop.set()
        done.set()
        if supervisor.is_alive():
            supervisor.join()
        workers.stop()
