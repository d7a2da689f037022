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
from collections.abc import Mapping
from fractions import Fraction
from typing import Any

from .budget import StopReason
from .rational import down


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

    def __post_init__(self) -> None:
        """(Dataclass subclasses) the stop reason as the enum, then :meth:`check_certificate`."""
        object.__setattr__(self, "stop_reason", StopReason(self.stop_reason))
        self.check_certificate()

    def check_certificate(self) -> None:
        """Refuse what would be a lie: a bound above the value, a negative time, a stop
        reason outside the contract."""
        StopReason(self.stop_reason)
        if self.solve_seconds < 0:
            raise ValueError("negative solve time not understood")
        if self.exact_lower_bound > self.exact_value:
            raise ValueError("lower bound above the value: a bound is wrong")


class NodeCountAnswer(Certified):
    """A :class:`Certified` sizing: its value is a whole number of nodes."""

    nodes_needed: int
    nodes_lower_bound: int

    @property
    def exact_value(self) -> Fraction:
        return Fraction(self.nodes_needed)

    @property
    def exact_lower_bound(self) -> Fraction:
        return Fraction(self.nodes_lower_bound)

    def contract_head(self, bounds: Mapping[str, int], gap: float | None) -> dict[str, Any]:
        """The keys every sizing ``result`` object starts with, in the contract's order:
        the count, its proven bound, the rule and every bound (``bounds``), the flag, the
        ``gap`` as the result reports it, the stop reason and the time."""
        return {
            "nodes_needed": self.nodes_needed,
            "nodes_lower_bound": self.nodes_lower_bound,
            "bound_source": self.bound_source,
            "bounds": dict(bounds),
            "proven_optimal": self.proven_optimal,
            "gap": gap,
            "stop_reason": self.stop_reason,
            "solve_seconds": self.solve_seconds,
        }


class MakespanAnswer(Certified):
    """A :class:`Certified` plan: its value is a makespan in seconds. Holds what every plan
    says the same way (the deadline verdict, the summary for people); subclasses give
    ``method``, ``worst_case_ratio``, :attr:`deadline` and :meth:`scale`."""

    method: str
    worst_case_ratio: float | None

    @property
    @abstractmethod
    def deadline(self) -> float | None:
        """The request's deadline in seconds, if any."""

    @abstractmethod
    def scale(self) -> str:
        """What was planned, for people: ``3 node(s), 40 job(s)``."""

    @property
    def makespan(self) -> float:
        """The plan's makespan: its exact value, rounded to the nearest float."""
        return float(self.exact_value)

    @property
    def lower_bound(self) -> float:
        """The best proven bound, rounded down (never above the proof)."""
        return down(self.exact_lower_bound)

    def contract_head(self, bounds: Mapping[str, float], gap: float | None) -> dict[str, Any]:
        """The keys every plan ``result`` object starts with, in the contract's order: the
        makespan, its proven bound, the rule and every bound (``bounds``), the ``gap`` as
        the result reports it, the flag, the method and its ratio, the stop reason, the
        time and the deadline verdict."""
        return {
            "makespan": self.makespan,
            "lower_bound": self.lower_bound,
            "bound_source": self.bound_source,
            "bounds": dict(bounds),
            "gap": gap,
            "proven_optimal": self.proven_optimal,
            "method": self.method,
            "worst_case_ratio": self.worst_case_ratio,
            "stop_reason": self.stop_reason,
            "solve_seconds": self.solve_seconds,
            "deadline": self.deadline_dict(),
        }

    def deadline_dict(self) -> dict[str, Any] | None:
        """The contract's ``deadline`` object: met, slack, provably unreachable (exact)."""
        d = self.deadline
        if d is None:
            return None
        return {
            "deadline": d,
            "met": self.exact_value <= Fraction(d),
            "slack": float(Fraction(d) - self.exact_value),
            "provably_unreachable": self.exact_lower_bound > Fraction(d),
        }

    def summary(self) -> str:
        """A few human-readable lines."""
        lines = [
            f"method          {self.method} (stopped: {self.stop_reason})",
            f"makespan        {self.makespan:.6g} s on {self.scale()}",
            f"lower bound     {self.lower_bound:.6g} s ({self.bound_source})",
            "gap             "
            + ("0 (proven optimal)" if self.proven_optimal else f"{100 * self.gap:.3f} %"),
        ]
        if self.worst_case_ratio is not None:
            lines.append(f"a-priori ratio  {self.worst_case_ratio:.6g}")
        dl = self.deadline_dict()
        if dl is not None:
            verdict = "met" if dl["met"] else "missed"
            if dl["provably_unreachable"]:
                verdict += " (no plan can meet it)"
            lines.append(
                f"deadline        {dl['deadline']:.6g} s: {verdict}, slack {dl['slack']:.6g} s"
            )
        lines.append(f"solve time      {self.solve_seconds:.4f} s")
        return "\n".join(lines)
