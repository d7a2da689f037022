"""Fixtures of the trust tests: apps with a keys file on fakeredis, and the real-process
fixtures of ``tests/service/conftest.py`` (redis-server, ``spanwright worker``) re-used.

The tenants are productions of an invented studio: ``lanternhill`` and ``brightwater``;
``ops`` holds the operators' admin key.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import fakeredis
import pytest

from service.app import create_app
from service.settings import Settings
from tests.service.conftest import RealStack, WorkerProcs, free_port, redis_server  # noqa: F401

KEYS = {
    "lanternhill": "lh-7f3a9c0e5b2d4a1f8e6c",
    "brightwater": "bw-2c8e4f6a0b1d3e5f7a9c",
    "ops": "ops-9e8d7c6b5a4f3e2d1c0b",
}


def bearer(tenant: str) -> dict[str, str]:
    return {"Authorization": f"Bearer {KEYS[tenant]}"}


def write_keys(path: Path) -> Path:
    lines = ["# tenant  sha256(key)  [admin]"]
    for tenant, key in KEYS.items():
        digest = hashlib.sha256(key.encode()).hexdigest()
        lines.append(f"{tenant} {digest}" + (" admin" if tenant == "ops" else ""))
    path.write_text("\n".join(lines) + "\n", encoding="utf-8")
    return path


@pytest.fixture
def keys_file(tmp_path: Path) -> Path:
    return write_keys(tmp_path / "keys")


@pytest.fixture
def trust_settings(keys_file: Path) -> Settings:
    """Small limits so each one is cheap to reach."""
    return Settings(
        keys_file=str(keys_file),
        max_jobs=500,
        max_nodes=50,
        max_time_budget=2.0,
        default_time_budget=0.5,
        max_wait=2.0,
        max_request_bytes=200_000,
        retention=600,
        key_prefix="swtrust",
        queue_name="swtrust",
        max_queued_per_tenant=5,
        max_queued_total=8,
        rate_limit=40,
        rate_window=60,
    )


@pytest.fixture
def fake_server() -> fakeredis.FakeServer:
    return fakeredis.FakeServer()


@pytest.fixture
def keyed_app(trust_settings: Settings, fake_server: fakeredis.FakeServer) -> Any:
    """The API with keys and no worker: plans stay queued until ``drain_queue`` runs."""
    return create_app(trust_settings, connection=fakeredis.FakeRedis(server=fake_server))


@pytest.fixture
def drain_queue(fake_server: fakeredis.FakeServer, trust_settings: Settings) -> Any:
    """Run every queued job now, in this thread (SimpleWorker, burst)."""
    from rq import Queue, SimpleWorker
    from rq.serializers import JSONSerializer

    def run() -> None:
        c = fakeredis.FakeRedis(server=fake_server)
        q = Queue(trust_settings.queue_name, connection=c, serializer=JSONSerializer)
        SimpleWorker([q], connection=c, serializer=JSONSerializer).work(
            burst=True, logging_level="WARNING"
        )

    return run


def small_batch(n: int = 4, name: str = "ep01 shot 010") -> dict[str, Any]:
    """A small batch of an invented episode: ``n`` frames-range jobs on two nodes."""
    return {
        "name": name,
        "jobs": [{"id": f"sh010_f{i:03d}", "duration": 30.0 + 7 * i} for i in range(n)],
        "nodes": [{"id": "node-a"}, {"id": "node-b"}],
        "method": "longest_first",
    }
