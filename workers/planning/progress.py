"""What a long solve reports while it runs (the worker publishes it)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any, Protocol


class Report(Protocol):
    """What every running search reports (a plan's :class:`Progress`, a sizing's
    ``SizingProgress``): seconds in, and the fields the service publishes as they are."""

    elapsed: float

    def to_dict(self) -> dict[str, Any]: ...


@dataclass(frozen=True, slots=True)
class Progress:
    """The best plan and the best proven bound so far, ``elapsed`` seconds in."""

    elapsed: float
    best_makespan: float
    best_lower_bound: float

    def to_dict(self) -> dict[str, Any]:
        return {
            "elapsed": round(self.elapsed, 4),
            "best_makespan": self.best_makespan,
            "best_lower_bound": self.best_lower_bound,
        }


ProgressHook = Callable[[Progress], None]
