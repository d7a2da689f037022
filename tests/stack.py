"""The service assembled for tests: settings, the queue run in the test's thread, the
embedded worker, and the real stack (the API in-process against a real redis-server, with
``spanwright worker`` processes).

Unit tests share one fakeredis ``FakeServer`` between the API and a worker (two
``FakeRedis`` clients only share data through a common server).
"""

from __future__ import annotations

import os
import time
from collections.abc import Iterator
from contextlib import contextmanager
from typing import Any

import fakeredis
import redis
from live import ROOT, WorkerProcs

from service.app import create_app
from service.embedded import EmbeddedWorker
from service.settings import Settings

#: limits far above what a test sends, so that none of them throttles it
UNTHROTTLED: dict[str, Any] = {
    "rate_limit": 1_000_000,
    "max_queued_per_tenant": 100_000,
    "max_queued_total": 100_000,
}


def small_settings(name: str, **more: Any) -> Settings:
    """Small limits, so that each limit is cheap to reach; ``name`` is the key prefix and
    the queue name."""
    small: dict[str, Any] = {
        "max_jobs": 500,
        "max_nodes": 50,
        "max_time_budget": 2.0,
        "default_time_budget": 0.5,
        "max_request_bytes": 200_000,
        "retention": 600,
    }
    return Settings(**(small | {"key_prefix": name, "queue_name": name} | more))


def run_queue(server: fakeredis.FakeServer, queue_name: str) -> None:
    """Run every job queued on ``server`` now, in this thread (SimpleWorker, burst)."""
    from rq import Queue, SimpleWorker
    from rq.serializers import JSONSerializer

    c = fakeredis.FakeRedis(server=server)
    q = Queue(queue_name, connection=c, serializer=JSONSerializer)
    SimpleWorker([q], connection=c, serializer=JSONSerializer).work(
        burst=True, logging_level="WARNING"
    )


@contextmanager
def embedded_app(settings: Settings) -> Iterator[tuple[Any, fakeredis.FakeRedis]]:
    """The API on a fresh fakeredis server with the embedded worker thread (the one
    ``spanwright serve`` runs); yields the app and its connection."""
    server = fakeredis.FakeServer()
    worker = EmbeddedWorker(server, settings).start()
    conn = fakeredis.FakeRedis(server=server)
    try:
        yield create_app(settings, connection=conn), conn
    finally:
        worker.stop(timeout=0)  # the daemon thread ends within a second, on its own server


class RealStack:
    """The API in-process against a real Redis, with worker subprocesses (none started
    yet); ``more`` are further settings of the API."""

    def __init__(self, url: str, prefix: str, retention: int, **more: Any) -> None:
        self.settings = Settings(
            redis_url=url,
            key_prefix=prefix,
            queue_name=prefix,
            retention=retention,
            max_wait=10.0,
            max_time_budget=10.0,
            **more,
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
