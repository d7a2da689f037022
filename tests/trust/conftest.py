"""Fixtures of the trust tests: apps with a keys file on fakeredis (the real redis-server
is the session's, ``redis_server`` in tests/conftest.py).

The tenants are productions of an invented studio: ``quillfernvale`` and ``brightwater``;
``ops`` holds the operators' admin key.
"""

from __future__ import annotations

import hashlib
from pathlib import Path
from typing import Any

import fakeredis
import pytest
from stack import run_queue, small_settings

from service.app import create_app
from service.settings import Settings

KEYS = {
    "quillfernvale": "lh-7f3a9c0e5b2d4a1f8e6c",
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
    return small_settings(
        "swtrust",
        keys_file=str(keys_file),
        max_wait=2.0,
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
    return lambda: run_queue(fake_server, trust_settings.queue_name)


def small_batch(n: int = 4, name: str = "ep01 shot 010") -> dict[str, Any]:
    """A small batch of an invented episode: ``n`` frames-range jobs on two nodes."""
    return {
        "name": name,
        "jobs": [{"id": f"sh010_f{i:03d}", "duration": 30.0 + 7 * i} for i in range(n)],
        "nodes": [{"id": "node-a"}, {"id": "node-b"}],
        "method": "longest_first",
    }
