"""A full Redis (``maxmemory`` with ``noeviction``, as deploy/redis.conf ships) seen from
the API: new work is refused with 503 and Retry-After before Redis refuses writes, reads
and cancels go on, and a submit refused for memory leaves no idempotency key bound, so
the same request retried later makes a plan that is really queued.

Reference: Redis's documented ``noeviction`` policy (writes answer an OOM error, reads and
deletes still work) on a real redis-server, and RFC 9110's Retry-After for 503.
"""

from __future__ import annotations

import os
import shutil
import subprocess
import sys
import time
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import redis
from live import ROOT, free_port, stop

from service.app import create_app
from service.settings import Settings

pytestmark = pytest.mark.slow

BODY = {"jobs": [{"id": "lh_kiln_001", "duration": 30}], "node_count": 1}


@pytest.fixture
def small_redis(tmp_path: Path) -> Iterator[redis.Redis]:
    """A redis-server of its own (deploy/redis.conf, AOF off here) whose maxmemory the
    test moves; the shared session server is left alone."""
    exe = shutil.which("redis-server")
    if exe is None:
        pytest.fail("redis-server is not installed")  # CI installs it (.ci/run)
    port = free_port()
    conf = ROOT / "deploy" / "redis.conf"
    args = [exe, str(conf), "--port", str(port), "--dir", str(tmp_path), "--appendonly", "no"]
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    conn = redis.Redis(port=port)
    try:
        for _ in range(200):
            try:
                conn.ping()
                break
            except redis.exceptions.ConnectionError:
                time.sleep(0.02)
        yield conn
    finally:
        stop(proc, 5)


def _app(conn: redis.Redis, high_water: float) -> Any:
    settings = Settings(key_prefix="swfull", queue_name="swfull", store_high_water=high_water)
    return create_app(settings, connection=conn).test_client()


def _squeeze(conn: redis.Redis, share: float) -> None:
    """Set maxmemory so that Redis now uses ``share`` of it (after 16 MB of other data,
    so that 5 % of headroom is room for a cancel, as 10 % of a real store is)."""
    conn.set("swfull:filler", b"x" * 16_000_000)
    time.sleep(0.3)  # the request's own buffer is freed after the command
    used = int(conn.info("memory")["used_memory"])
    conn.config_set("maxmemory", int(used / share))


def test_nearly_full_refuses_new_work_but_reads_and_cancels_go_on(
    small_redis: redis.Redis,
) -> None:
    """At 95 % of maxmemory (high-water 90 %): POST is 503 with Retry-After, GET and DELETE
    of an existing plan still work."""
    api = _app(small_redis, 0.9)
    r = api.post("/v1/plans", json=BODY)
    assert r.status_code == 202
    loc = r.headers["Location"]
    _squeeze(small_redis, 0.95)
    time.sleep(1.1)  # the API reads Redis memory at most once a second
    refused = api.post("/v1/plans", json=BODY)
    assert refused.status_code == 503 and refused.headers["Retry-After"] == "30"
    assert refused.get_json()["type"].endswith("store-unavailable")
    assert api.get(loc).status_code == 200
    assert api.delete(loc).status_code in (200, 202)


def test_a_submit_refused_for_memory_binds_no_key(small_redis: redis.Redis) -> None:
    """Past maxmemory (back-pressure off, so Redis itself refuses): the keyed POST is 503,
    a GET still answers, and once memory is freed the same POST with the same key is a
    new plan (not a replay) whose job is in the queue."""
    api = _app(small_redis, 2.0)
    first = api.post("/v1/plans", json=BODY)
    assert first.status_code == 202
    _squeeze(small_redis, 2.0)  # used is twice maxmemory: every write is refused
    key = {"Idempotency-Key": '"a3f1c9e2-5b7d-4e0a-9c8b-6d2f1e0a7b35"'}
    r = api.post("/v1/plans", json=BODY, headers=key)
    assert r.status_code == 503, r.get_json()
    assert api.get(first.headers["Location"]).status_code == 200
    small_redis.config_set("maxmemory", 0)
    again = api.post("/v1/plans", json=BODY, headers=key)
    assert again.status_code == 202
    assert "Idempotent-Replayed" not in again.headers
    rid = again.get_json()["id"]
    queued = [j.decode() for j in small_redis.lrange("rq:queue:swfull", 0, -1)]
    assert any(rid in j for j in queued), queued


def _redis_proc(port: int, data: Path) -> subprocess.Popen[bytes]:
    exe = shutil.which("redis-server")
    assert exe is not None
    conf = ROOT / "deploy" / "redis.conf"
    args = [exe, str(conf), "--port", str(port), "--dir", str(data), "--appendonly", "no"]
    proc = subprocess.Popen(args, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL)
    conn = redis.Redis(port=port)
    for _ in range(250):
        try:
            conn.ping()
            return proc
        except redis.exceptions.ConnectionError:
            time.sleep(0.02)
    raise AssertionError("redis-server did not answer")


def test_worker_rides_out_a_redis_restart(tmp_path: Path) -> None:
    """A real ``spanwright worker`` whose Redis restarts (and, AOF off here, forgets every
    key, the worker's registration included) keeps running: a plan submitted afterwards is
    solved, and /readyz counts the worker again."""
    if shutil.which("redis-server") is None:
        pytest.fail("redis-server is not installed")
    port = free_port()
    url = f"redis://127.0.0.1:{port}/0"
    proc = _redis_proc(port, tmp_path)
    env = dict(os.environ, REDIS_URL=url, PYTHONPATH=str(ROOT))
    worker = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "worker", "--log-level", "WARNING"],
        cwd=ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        api = create_app(Settings(redis_url=url), connection=redis.Redis.from_url(url))
        client = api.test_client()
        deadline = time.monotonic() + 60
        while client.get("/readyz").status_code != 200:  # the worker is up
            assert time.monotonic() < deadline, "the worker never became ready"
            time.sleep(0.2)
        stop(proc, 5)
        time.sleep(1.0)  # Redis is down for a second
        proc = _redis_proc(port, tmp_path)
        body = {"jobs": [{"id": "lh_gale_001", "duration": 40}], "node_count": 1}
        r = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"})
        assert r.status_code == 201, r.get_json()
        assert worker.poll() is None  # still running
        deadline = time.monotonic() + 60
        while client.get("/readyz").status_code != 200:  # registered again
            assert time.monotonic() < deadline, "the worker was never counted again"
            time.sleep(0.5)
    finally:
        stop(worker)
        stop(proc, 5)
