"""Shared test configuration.

- ``tests/reference.py``, ``tests/live.py`` and ``tests/stack.py`` are importable as
  ``reference``, ``live`` and ``stack``.
- Once per session, before any test starts a worker process, the compiled kernels are
  loaded (and on a fresh clone compiled and cached on disk), so no worker pays numba's
  compile time inside a solve's time budget.
- ``redis_server``: one real redis-server for the session, for the tests that need one.
"""

from __future__ import annotations

import sys
from collections.abc import Iterator
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))
# the project's own packages before tests/service (a folder without __init__.py), so
# `pytest` finds them as `python -m pytest` does, whatever installed the project
sys.path.insert(1, str(Path(__file__).parent.parent))


@pytest.fixture(scope="session", autouse=True)
def compiled_kernels() -> None:
    """Compile (or load from the on-disk cache) every numba kernel the solvers use."""
    from service.embedded import warm_up

    warm_up()


@pytest.fixture(scope="session")
def redis_server(tmp_path_factory: pytest.TempPathFactory) -> Iterator[str]:
    """A real redis-server (deploy/redis.conf) on a free loopback port; yields its URL.
    Without redis-server the test skips, unless SPANWRIGHT_REQUIRE_SERVERS=1."""
    from live import RedisServer

    server = RedisServer(tmp_path_factory.mktemp("redis"))
    server.start()
    try:
        yield server.url
    finally:
        server.stop()
