"""A sizing request in core objects (:class:`SizingArgs`), and sizing from it.

The service reads a ``POST /v1/sizings`` body into :class:`SizingArgs` at its edge
(``service/reading/sizing.py``); :meth:`SizingArgs.check` runs the checks that need no
search (the API answers those 422s at once); :func:`size_request` sizes.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from fractions import Fraction

from .errors import InvalidInstance
from .model import Instance, Node
from .rational import array_sum, ticks
from .sizing import (
    SizingProgressHook,
    SizingResult,
    _check_feasible,
    _check_lower,
    _lower_bound,
    _size,
    _tick_limit,
    capacity_ticks,
)


@dataclass(frozen=True, eq=False)
class SizingArgs:
    """A sizing request read into core objects: the jobs on one node of the kind to rent
    (``base``, with the deadline and resolution) and the options."""

    base: Instance
    max_nodes: int
    node_hour_cost: float | None
    billing: str
    curve_nodes: tuple[int, ...]

    @property
    def node(self) -> Node:
        return self.base.nodes[0]

    def check(self) -> None:
        """The checks that need no search (tens of microseconds a job): a job no node of
        the kind can run or finish in time, a resolution too fine, more nodes needed than
        ``max_nodes`` by the lower bound alone. Raises what :func:`size` would."""
        base, node = self.base, self.node
        deadline = float(base.deadline)  # type: ignore[arg-type]
        _check_feasible(base, node, base.durations / node.speed, deadline)
        limit = Fraction(deadline) * Fraction(node.speed)
        too_fine = _tick_limit(base.durations, limit, base.resolution)
        if too_fine:
            raise InvalidInstance("the resolution is too fine for these times", too_fine)
        q_lo, _ = ticks(base.durations, base.resolution)
        cap = capacity_ticks(deadline, node.speed, base.resolution)
        lower, source, _, _ = _lower_bound(q_lo, cap, array_sum(base.durations), limit)
        _check_lower(lower, source, self.max_nodes)


def size_request(
    args: SizingArgs,
    *,
    time_budget: float,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingResult:
    """Size ``args`` (the fewest nodes of its kind meeting its deadline) within
    ``time_budget`` seconds."""
    return _size(
        args.base,
        args.node,
        time_budget=float(time_budget),
        max_nodes=args.max_nodes,
        node_hour_cost=args.node_hour_cost,
        billing=args.billing,
        curve_nodes=list(args.curve_nodes),
        progress=progress,
        should_stop=should_stop,
    )
