"""What every answer of spanwright says about itself: the one result family.

A plan (:class:`~.result.PlanResult`: a makespan), a sizing
(:class:`~.sizing_result.SizingResult`: a node count) and whatever later answers minimise
(a cost) all state a value, a proven lower bound on the best value with the rule that
proved it and every bound with its evidence, the gap between them, whether the value is
proven optimal, why the search stopped and how long it ran. This base holds the part that
must be the same everywhere: the flags are decided here, once, in exact arithmetic.
"""

from __future__ import annotations

import math
from abc import ABC, abstractmethod
from fractions import Fraction

from .budget import StopReason


class Certified(ABC):
    """A value, a proven lower bound on the best possible value, and how the search ended.

    Subclasses give :attr:`exact_value` and :attr:`exact_lower_bound` (exact: ints or
    fractions of the stated numbers), :attr:`bound_source`, :attr:`stop_reason` and
    :attr:`solve_seconds`; :attr:`proven_optimal` and :attr:`gap` follow from them.
    """

    #: the name of the rule that proved :attr:`exact_lower_bound`
    bound_source: str
    stop_reason: StopReason
    solve_seconds: float

    @property
    @abstractmethod
    def exact_value(self) -> Fraction:
        """The value of the answer (makespan, node count, cost), exactly."""

    @property
    @abstractmethod
    def exact_lower_bound(self) -> Fraction:
        """The best proven lower bound on the best possible value, exactly."""

    @property
    def proven_optimal(self) -> bool:
        """The proven bound meets the value exactly (no tolerance)."""
        return self.exact_lower_bound >= self.exact_value

    @property
    def gap(self) -> float:
        """(value - lower bound) / lower bound in exact arithmetic, then rounded; 0 exactly
        when proven optimal and never 0 otherwise; inf with no positive bound."""
        if self.proven_optimal:
            return 0.0
        lb = self.exact_lower_bound
        if lb <= 0:
            return math.inf
        return max(float((self.exact_value - lb) / lb), math.ulp(0.0))

    def check_certificate(self) -> None:
        """Refuse what would be a lie: a bound above the value, a negative time, a stop
        reason outside the contract."""
        StopReason(self.stop_reason)
        if self.solve_seconds < 0:
            raise ValueError("negative solve time not understood")
        if self.exact_lower_bound > self.exact_value:
            raise ValueError("lower bound above the value: a bound is wrong")
