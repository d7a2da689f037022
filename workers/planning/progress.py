"""What a long solve reports while it runs (the worker publishes it)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass


@dataclass(frozen=True, slots=True)
class Progress:
    """The best plan and the best proven bound so far, ``elapsed`` seconds in."""

    elapsed: float
    best_makespan: float
    best_lower_bound: float


ProgressHook = Callable[[Progress], None]
