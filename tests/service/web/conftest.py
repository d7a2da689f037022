"""Shared inputs of the page tests."""

from __future__ import annotations

import copy
from typing import Any

import pytest

from tests.service.conftest import PRICED_SIZING


@pytest.fixture
def priced_sizing() -> dict[str, Any]:
    """The hand-checked priced sizing of tests/service/conftest.py (2 nodes, 3.60 for the
    2-node plan), a fresh copy per test."""
    return copy.deepcopy(PRICED_SIZING)
