"""What a long solve reports while it runs (the worker publishes it)."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass
from typing import Any, Protocol


class Report(Protocol):
    """What every running search reports (a plan's :class:`Progress`, a sizing's
    ``SizingProgress``): seconds in, and the fields the service publishes as they are."""

    elapsed: float

    def to_dict(self) -> dict[str, Any]: ...


@dataclass(frozen=True, slots=True)
class Reported:
    """What every report of a running search starts with: ``elapsed`` seconds in. Its
    :meth:`to_dict` publishes every field of the report, in order (``elapsed`` to 0.1 ms)."""

    elapsed: float

    def to_dict(self) -> dict[str, Any]:
        return {**asdict(self), "elapsed": round(self.elapsed, 4)}


@dataclass(frozen=True, slots=True)
class Progress(Reported):
    """The best plan and the best proven bound so far, ``elapsed`` seconds in."""

    best_makespan: float
    best_lower_bound: float


ProgressHook = Callable[[Progress], None]
