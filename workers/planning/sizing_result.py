"""What a deadline sizing answers: the result, its curve rows, progress and cost.

See :mod:`.sizing` for how the answer is found.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import asdict, dataclass, field
from fractions import Fraction
from typing import Any

from .budget import StopReason
from .certified import NodeCountAnswer
from .progress import Reported
from .rational import ceil_div
from .result import Schedule

BILLING = {"second": 1.0, "minute": 60.0, "hour": 3600.0}
DEFAULT_BILLING = "second"
#: at most this many extra node counts may be listed in ``curve_nodes``
MAX_CURVE_NODES = 50
COST_MODEL = (
    "nodes * ceil(makespan / unit) * unit / 3600 * node_hour_cost "
    "(every node rented from 0 to the makespan; unit = the billing granularity in seconds)"
)


@dataclass(frozen=True, slots=True)
class SizingProgress(Reported):
    """What a running sizing reports: the interval so far, ``elapsed`` seconds in."""

    nodes_needed: int
    nodes_lower_bound: int


SizingProgressHook = Callable[[SizingProgress], None]


@dataclass(frozen=True, slots=True)
class CurveRow:
    """One node count of the trade-off curve."""

    nodes: int
    makespan: float
    lower_bound: float
    cost: float | None
    meets_deadline: bool
    #: fewer nodes than the proven lower bound: no plan with this many meets the deadline
    provably_misses: bool

    def to_dict(self) -> dict[str, Any]:
        return asdict(self)


@dataclass(frozen=True, eq=False)
class SizingResult(NodeCountAnswer):
    """The fewest nodes that meet the deadline, proven from both sides, and the curve.

    The value is the node count; :class:`~.certified.Certified` decides
    ``proven_optimal`` and ``gap`` from it and the node lower bound."""

    schedule: Schedule
    deadline: float
    nodes_needed: int
    nodes_lower_bound: int
    bound_source: str
    bounds: dict[str, int]
    evidence: dict[str, Any]
    stop_reason: StopReason
    solve_seconds: float
    first_answer_seconds: float
    method: str
    plan_method: str
    upper_bounds: dict[str, int]
    node_hour_cost: float | None
    billing: str
    curve: tuple[CurveRow, ...] = field(default=())

    def __post_init__(self) -> None:
        super().__post_init__()
        if self.schedule.instance.m != self.nodes_needed:
            raise ValueError("the plan does not use nodes_needed nodes")

    @property
    def makespan(self) -> float:
        return self.schedule.makespan

    @property
    def ffd_excess(self) -> int:
        """How many nodes more first fit decreasing alone would have asked for."""
        return self.upper_bounds["ffd"] - self.nodes_needed

    @property
    def cost(self) -> float | None:
        return cost_of(self.nodes_needed, self.makespan, self.node_hour_cost, self.billing)

    def to_dict(self, *, with_plan: bool = True) -> dict[str, Any]:
        """The sizing result object (``POST /v1/sizings``, ``spanwright size --json``)."""
        inst = self.schedule.instance
        node = inst.nodes[0]
        out: dict[str, Any] = {
            **self.contract_head(self.bounds, self.gap if self.gap != float("inf") else None),
            "first_answer_seconds": self.first_answer_seconds,
            "method": self.method,
            "plan_method": self.plan_method,
            "upper_bounds": dict(self.upper_bounds),
            "ffd_excess": self.ffd_excess,
            "deadline": self.deadline,
            "makespan": self.makespan,
            "slack": self.deadline - self.makespan,
            "node": {"speed": node.speed, "provides": sorted(node.provides)},
            "jobs": inst.n,
            "resolution": inst.resolution,
            "certificate": dict(self.evidence),
            "estimated_cost": self.cost,
            "node_hour_cost": self.node_hour_cost,
            "billing": self.billing,
            "cost_model": COST_MODEL,
            "curve": [row.to_dict() for row in self.curve],
        }
        if with_plan:
            out["plan"] = self.schedule.to_assignment()
        return out

    def summary(self) -> str:
        """A few human-readable lines."""
        verdict = "proven optimal" if self.proven_optimal else "not proven optimal"
        lines = [
            f"nodes needed    {self.nodes_needed} ({self.method}; {verdict}, "
            f"stopped: {self.stop_reason})",
            f"lower bound     {self.nodes_lower_bound} node(s) ({self.bound_source})",
            f"deadline        {self.deadline:.6g} s; plan makespan {self.makespan:.6g} s "
            f"({self.plan_method})",
            f"first fit dec.  {self.upper_bounds['ffd']} node(s)",
        ]
        if self.cost is not None:
            lines.append(f"estimated cost  {self.cost:.2f} (billed per {self.billing})")
        lines.append("curve           nodes  makespan  lower_bound  cost")
        for row in self.curve:
            cost = "-" if row.cost is None else f"{row.cost:.2f}"
            mark = "*" if row.nodes == self.nodes_needed else " "
            lines.append(
                f"              {mark}{row.nodes:6d}  {row.makespan:8.6g}  "
                f"{row.lower_bound:11.6g}  {cost}"
            )
        lines.append(f"solve time      {self.solve_seconds:.4f} s")
        return "\n".join(lines)


# -- cost ------------------------------------------------------------------------------
def cost_of(
    nodes: int, makespan: float, node_hour_cost: float | None, billing: str = DEFAULT_BILLING
) -> float | None:
    """``nodes * ceil(makespan / unit) * unit / 3600 * node_hour_cost`` (None without a price)."""
    if node_hour_cost is None:
        return None
    unit = BILLING[billing]
    billed = ceil_div(Fraction(makespan), Fraction(unit)) * unit
    return nodes * billed / 3600.0 * node_hour_cost
