"""The clock a solver stops on: a wall-clock budget checked by the solver itself.

The queue's job timeout is only a crash guard; the search looks at a :class:`Budget`
between steps and returns its best plan and proven bound when the time is spent.
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from enum import StrEnum

#: seconds of search when a request gives no ``time_budget`` (the one default: the service's
#: ``Settings.default_time_budget`` starts from it, the library and the CLI use it)
DEFAULT_SECONDS = 5.0


class StopReason(StrEnum):
    """Why a solver stopped (the contract's ``stop_reason``)."""

    HEURISTIC = "heuristic"  # a rule that ends by itself, or a search with nothing left
    PROVED_OPTIMAL = "proved_optimal"  # the bound meets the plan
    TIME_BUDGET = "time_budget"  # the budget ran out first
    CANCELLED = "cancelled"  # the caller asked it to stop


@dataclass
class Budget:
    """``seconds`` of wall-clock time from construction, plus an optional cancel check.

    ``should_stop`` is polled at most every ``poll_interval`` seconds (it may ask Redis);
    once it has answered True the budget stays stopped.
    """

    seconds: float
    should_stop: Callable[[], bool] | None = None
    poll_interval: float = 0.25
    started: float = field(default_factory=time.perf_counter)
    cancelled: bool = False
    _next_poll: float = 0.0

    def elapsed(self) -> float:
        """Seconds since the budget started."""
        return time.perf_counter() - self.started

    def remaining(self) -> float:
        """Seconds left (never negative)."""
        return max(0.0, self.seconds - self.elapsed())

    def expired(self) -> bool:
        """True once the time is spent or a cancel was seen."""
        now = time.perf_counter()
        if self.should_stop is not None and not self.cancelled and now >= self._next_poll:
            self._next_poll = now + self.poll_interval
            self.cancelled = bool(self.should_stop())
        return self.cancelled or now - self.started >= self.seconds

    def child(self, fraction: float) -> Budget:
        """A budget for a sub-step: ``fraction`` of what is left, sharing the cancel check."""
        sub = Budget(self.remaining() * fraction, self.should_stop, self.poll_interval)
        sub.cancelled = self.cancelled
        return sub

    def stop_reason(self, *, proven: bool, ran_out: bool) -> StopReason:
        """The one rule: proven wins; then a cancel; then a search that ``ran_out`` of
        time; else the search ended by itself (``heuristic``)."""
        if proven:
            return StopReason.PROVED_OPTIMAL
        if self.cancelled:
            return StopReason.CANCELLED
        if ran_out:
            return StopReason.TIME_BUDGET
        return StopReason.HEURISTIC
