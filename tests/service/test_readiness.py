"""``/readyz`` counts only live workers: a worker killed with kill -9 leaves its RQ key
behind until the key's TTL ends, and a probe must not call a farm with no live worker
ready. Reference: RQ's worker model (a worker hash with ``last_heartbeat``, refreshed by
every heartbeat) and the readiness contract in openapi/openapi.yaml (503 when not ready).
"""

from __future__ import annotations

from datetime import UTC, datetime, timedelta
from typing import Any

from rq import Queue, Worker
from rq.serializers import JSONSerializer
from rq.utils import utcformat

from service.settings import Settings


def _worker(conn: Any, settings: Settings, beat_age: float) -> Worker:
    q = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
    w = Worker([q], connection=conn, serializer=JSONSerializer, name=f"w{beat_age:g}")
    w.register_birth()
    stamp = datetime.now(UTC) - timedelta(seconds=beat_age)
    conn.hset(w.key, "last_heartbeat", utcformat(stamp))
    return w


def test_a_worker_whose_heartbeat_stopped_is_not_counted(
    idle_app: Any, conn: Any, settings: Settings
) -> None:
    """A registered worker whose last beat is 10 minutes old (its process was killed, its
    key not yet expired): /readyz fails with 0 workers."""
    _worker(conn, settings, beat_age=600)
    r = idle_app.test_client().get("/readyz")
    assert r.status_code == 503
    assert r.get_json()["checks"]["workers"] == 0


def test_a_worker_that_beats_is_counted(idle_app: Any, conn: Any, settings: Settings) -> None:
    """The same with a beat 5 s old: ready, one worker (the control case)."""
    _worker(conn, settings, beat_age=5)
    r = idle_app.test_client().get("/readyz")
    assert r.status_code == 200
    assert r.get_json()["checks"]["workers"] == 1
