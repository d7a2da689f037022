"""Fixtures of the deploy tests; puts ``spanwright_topology`` (the launcher) on the path."""

from __future__ import annotations

import logging
import sys
from collections.abc import Iterator
from pathlib import Path

import fakeredis
import pytest

sys.path.insert(0, str(Path(__file__).parent))

from service.settings import Settings


@pytest.fixture
def fake_conn() -> fakeredis.FakeRedis:
    """A fresh in-process Redis (responses stay bytes, as RQ needs)."""
    return fakeredis.FakeRedis(server=fakeredis.FakeServer())


@pytest.fixture
def settings() -> Settings:
    return Settings(redis_url="redis://127.0.0.1:1/0")


@pytest.fixture
def root_logging() -> Iterator[None]:
    """Restore the root logger's handlers and level after a test that configures logging."""
    root = logging.getLogger()
    handlers, level = list(root.handlers), root.level
    yield
    root.handlers[:] = handlers
    root.setLevel(level)
