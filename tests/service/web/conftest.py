"""Shared inputs of the page tests."""

from __future__ import annotations

from typing import Any

import pytest


@pytest.fixture
def priced_sizing() -> dict[str, Any]:
    """The hand-checked sizing of tests/service/test_sizings.py with a price: 3600 + 1800 +
    1800 s of jobs and a 3600 s deadline need 2 nodes (7200 s of work over 3600 s per node;
    {3600} and {1800, 1800} is such a plan); at 1.80 per node-hour billed per second the
    2-node plan (makespan 3600 s) costs 2 * 3600 / 3600 * 1.80 = 3.60."""
    return {
        "jobs": [
            {"id": "lh_sq010_beauty", "duration": 3600},
            {"id": "lh_sq010_fx", "duration": 1800},
            {"id": "lh_sq020_fx", "duration": 1800},
        ],
        "deadline": 3600,
        "node_hour_cost": 1.8,
    }
