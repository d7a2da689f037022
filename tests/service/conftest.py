"""Fixtures of the service tests: settings, fakeredis apps, and a real redis-server.

Unit tests share one fakeredis ``FakeServer`` per test between the API and a worker (two
``FakeRedis`` clients only share data through a common server). Integration tests start a
real ``redis-server`` on a free 127.0.0.1 port in a temporary directory with
``deploy/redis.conf``, and real ``spanwright worker`` processes; every process started here
is stopped here. Without ``redis-server`` those tests skip, unless
``SPANWRIGHT_REQUIRE_SERVERS=1`` says that they must run.
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import time
from collections.abc import Iterator
from dataclasses import replace
from pathlib import Path
from typing import Any

import fakeredis
import pytest
import redis

from service.app import create_app
from service.embedded import EmbeddedWorker
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[2]

#: A sizing checked by hand: jobs of 3600, 1800 and 1800 s with a 3600 s deadline need 2
#: nodes (7200 s of work over 3600 s per node is 2, the total-work bound; {3600} and
#: {1800, 1800} is a plan with 2 nodes); at 1.80 per node-hour billed per second the
#: 2-node plan (makespan 3600 s) costs 2 * 3600 / 3600 * 1.80 = 3.60.
PRICED_SIZING: dict[str, Any] = {
    "jobs": [
        {"id": "lh_sq010_beauty", "duration": 3600},
        {"id": "lh_sq010_fx", "duration": 1800},
        {"id": "lh_sq020_fx", "duration": 1800},
    ],
    "deadline": 3600,
    "node_hour_cost": 1.8,
}


@pytest.fixture
def settings() -> Settings:
    """Small limits so the limit checks are cheap to reach."""
    return Settings(
        max_jobs=500,
        max_nodes=50,
        max_time_budget=2.0,
        default_time_budget=0.5,
        max_wait=5.0,
        max_request_bytes=200_000,
        retention=600,
        key_prefix="swtest",
        queue_name="swtest",
    )


@pytest.fixture
def server() -> fakeredis.FakeServer:
    return fakeredis.FakeServer()


@pytest.fixture
def conn(server: fakeredis.FakeServer) -> fakeredis.FakeRedis:
    return fakeredis.FakeRedis(server=server)


@pytest.fixture
def idle_app(settings: Settings, conn: fakeredis.FakeRedis):  # type: ignore[no-untyped-def]
    """The API with no worker: plans stay queued until a test drains the queue."""
    return create_app(settings, connection=conn)


@pytest.fixture
def worker(server: fakeredis.FakeServer, settings: Settings) -> Iterator[EmbeddedWorker]:
    """The embedded worker thread (the one ``spanwright serve`` runs)."""
    w = EmbeddedWorker(server, settings).start()
    yield w
    w.stop(timeout=0)  # the daemon thread ends within a second, on its own server


@pytest.fixture
def app(idle_app, worker):  # type: ignore[no-untyped-def]
    """The API with the embedded worker running."""
    return idle_app


@pytest.fixture
def client(app):  # type: ignore[no-untyped-def]
    return app.test_client()


@pytest.fixture
def drain(server: fakeredis.FakeServer, settings: Settings):  # type: ignore[no-untyped-def]
    """A function that runs every queued job now, in this thread (SimpleWorker, burst)."""
    from rq import Queue, SimpleWorker
    from rq.serializers import JSONSerializer

    def run() -> None:
        c = fakeredis.FakeRedis(server=server)
        q = Queue(settings.queue_name, connection=c, serializer=JSONSerializer)
        SimpleWorker([q], connection=c, serializer=JSONSerializer).work(
            burst=True, logging_level="WARNING"
        )

    return run


# -- real servers ------------------------------------------------------------------------
def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def _require_servers() -> bool:
    return os.environ.get("SPANWRIGHT_REQUIRE_SERVERS") == "1"


@pytest.fixture(scope="session")
def redis_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A real redis-server (deploy/redis.conf) on a free loopback port; yields its URL."""
    exe = shutil.which("redis-server")
    if exe is None:
        if _require_servers():
            pytest.fail("redis-server is not installed and SPANWRIGHT_REQUIRE_SERVERS=1")
        pytest.skip("redis-server is not installed")
    port = free_port()
    data = tmp_path_factory.mktemp("redis")
    proc = subprocess.Popen(
        [exe, str(ROOT / "deploy" / "redis.conf"), "--port", str(port), "--dir", str(data)],
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    url = f"redis://127.0.0.1:{port}/0"
    try:
        client = redis.Redis.from_url(url)
        for _ in range(200):
            try:
                client.ping()
                break
            except redis.exceptions.ConnectionError:
                time.sleep(0.02)
        else:
            pytest.fail("redis-server did not answer")
        yield url
    finally:
        proc.terminate()
        try:
            proc.wait(5)
        except subprocess.TimeoutExpired:
            proc.kill()
            proc.wait()


class WorkerProcs:
    """``spanwright worker`` subprocesses against one Redis; stopped at teardown."""

    def __init__(self, env: dict[str, str]) -> None:
        self.env = env
        self.procs: list[subprocess.Popen[bytes]] = []

    def start(self, *extra: str) -> subprocess.Popen[bytes]:
        p = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "worker", "--log-level", "WARNING", *extra],
            cwd=ROOT,
            env=self.env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            start_new_session=True,
        )
        self.procs.append(p)
        return p

    def stop(self) -> None:
        for p in self.procs:
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGCONT)
                p.terminate()
        for p in self.procs:
            try:
                p.wait(10)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait()
        self.procs.clear()


class RealStack:
    """The API in-process against a real Redis, with worker subprocesses."""

    def __init__(self, url: str, prefix: str, retention: int) -> None:
        self.settings = replace(
            Settings(redis_url=url, retention=retention, max_wait=10.0, max_time_budget=10.0),
            key_prefix=prefix,
            queue_name=prefix,
        )
        env = dict(os.environ)
        env.update(
            REDIS_URL=url,
            SPANWRIGHT_KEY_PREFIX=prefix,
            SPANWRIGHT_QUEUE_NAME=prefix,
            SPANWRIGHT_RETENTION=str(retention),
            PYTHONPATH=str(ROOT),
        )
        self.workers = WorkerProcs(env)
        self.redis = redis.Redis.from_url(url)
        self.app = create_app(self.settings)
        self.client = self.app.test_client()

    def wait_for_workers(self, n: int, timeout: float = 30.0) -> None:
        from service.queue import JobQueue

        q = JobQueue(self.redis, self.settings)
        end = time.monotonic() + timeout
        while q.workers() < n:
            if time.monotonic() > end:
                raise AssertionError(f"fewer than {n} workers registered")
            time.sleep(0.05)


@pytest.fixture
def real_stack(redis_server: str, request: pytest.FixtureRequest) -> Iterator[RealStack]:
    """A fresh key prefix and queue on the session's redis-server; workers stop after."""
    prefix = "it" + format(abs(hash(request.node.nodeid)) % 10**8, "08d")
    stack = RealStack(redis_server, prefix, retention=int(getattr(request, "param", 600)))
    try:
        yield stack
    finally:
        stack.workers.stop()
