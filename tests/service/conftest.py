"""Fixtures of the service tests: settings, fakeredis apps, and a real redis-server.

Unit tests share one fakeredis ``FakeServer`` per test between the API and a worker (two
``FakeRedis`` clients only share data through a common server). Integration tests use the
session's real ``redis-server`` (``redis_server`` in tests/conftest.py) and real
``spanwright worker`` processes (tests/stack.py); every process started here is stopped
here.
"""

from __future__ import annotations

from collections.abc import Callable, Iterator
from typing import Any

import fakeredis
import pytest
from stack import RealStack, run_queue, small_settings

from service.app import create_app
from service.embedded import EmbeddedWorker
from service.settings import Settings

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
    return small_settings("swtest", max_wait=5.0)


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
def drain(server: fakeredis.FakeServer, settings: Settings) -> Callable[[], None]:
    """A function that runs every queued job now, in this thread (SimpleWorker, burst)."""
    return lambda: run_queue(server, settings.queue_name)


@pytest.fixture
def real_stack(redis_server: str, request: pytest.FixtureRequest) -> Iterator[RealStack]:
    """A fresh key prefix and queue on the session's redis-server; workers stop after."""
    prefix = "it" + format(abs(hash(request.node.nodeid)) % 10**8, "08d")
    stack = RealStack(redis_server, prefix, retention=int(getattr(request, "param", 600)))
    try:
        yield stack
    finally:
        stack.workers.stop()
