"""Shared test configuration.

- ``tests/reference.py`` and ``tests/live.py`` are importable as ``reference`` / ``live``.
- Once per session, before any test starts a worker process, the compiled kernels are
  loaded (and on a fresh clone compiled and cached on disk), so no worker pays numba's
  compile time inside a solve's time budget.
"""

from __future__ import annotations

import sys
from pathlib import Path

import pytest

sys.path.insert(0, str(Path(__file__).parent))


@pytest.fixture(scope="session", autouse=True)
def compiled_kernels() -> None:
    """Compile (or load from the on-disk cache) every numba kernel the solvers use."""
    from service.embedded import warm_up

    warm_up()
