"""Reading a ``POST /v1/sizings`` body into core objects, and sizing from it.

:func:`read_sizing_request` reads and checks a body without sizing it (the API answers
its 422s at once); :func:`size_from_request` reads and sizes (the worker, the CLI).
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from .errors import InvalidInstance, Issue
from .model import Instance, Node
from .rational import array_sum, ticks
from .sizing import (
    DEFAULT_BILLING,
    DEFAULT_MAX_NODES,
    SizingProgressHook,
    SizingResult,
    _check_feasible,
    _check_lower,
    _check_options,
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


def read_sizing_request(body: Mapping[str, Any]) -> SizingArgs:
    """Read a ``POST /v1/sizings`` body (see :func:`size_from_request`) without sizing.

    Every problem found is raised together as one :class:`InvalidInstance` whose issues
    carry JSON Pointers into ``body``.
    """
    if not isinstance(body, Mapping):
        raise InvalidInstance(
            "the request body must be a JSON object", [Issue("", "not an object")]
        )
    issues: list[Issue] = []
    raw_node = body.get("node", {})
    if raw_node is None:
        raw_node = {}
    if not isinstance(raw_node, Mapping):
        issues.append(Issue("/node", "must be an object"))
        raw_node = {}
    if "id" in raw_node and not isinstance(raw_node["id"], str):
        issues.append(Issue("/node/id", "must be a string"))
    if "free_at" in raw_node:
        issues.append(Issue("/node/free_at", "not used by sizing: every node starts at 0"))
    if body.get("deadline") is None:
        issues.append(Issue("/deadline", "required: the time by which every job must be done"))
    for key in ("nodes", "node_count"):
        if key in body:
            issues.append(Issue(f"/{key}", "not used by sizing: the answer is the node count"))
    max_nodes = body.get("max_nodes", DEFAULT_MAX_NODES)
    node_hour_cost = body.get("node_hour_cost")
    billing = body.get("billing", DEFAULT_BILLING)
    curve_nodes = body.get("curve_nodes", [])
    issues.extend(
        _check_options(max_nodes, node_hour_cost, billing, curve_nodes, body.get("time_budget"))
    )
    node_id = raw_node.get("id") if isinstance(raw_node.get("id"), str) else "node"
    plan_body = {
        "jobs": body.get("jobs"),
        "nodes": [
            {
                "id": node_id or "node",
                "speed": raw_node.get("speed", 1.0),
                "provides": raw_node.get("provides"),
            }
        ],
        "deadline": body.get("deadline"),
        "resolution": body.get("resolution"),
    }
    try:
        base = Instance.from_request(plan_body)
    except InvalidInstance as exc:
        moved = [Issue(_node_pointer(i.pointer), i.detail) for i in exc.issues]
        raise InvalidInstance(
            f"{len(issues) + len(moved)} problem(s) in the request", issues + moved
        ) from None
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the request", issues)
    return SizingArgs(
        base=base,
        max_nodes=int(max_nodes),
        node_hour_cost=None if node_hour_cost is None else float(node_hour_cost),
        billing=str(billing),
        curve_nodes=tuple(int(k) for k in curve_nodes),
    )


def size_from_request(
    body: Mapping[str, Any],
    *,
    time_budget: float,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingResult:
    """Size from a ``POST /v1/sizings`` body; ``time_budget`` (seconds) wins over the body's.

    Body: ``jobs`` (as for plans), ``deadline`` (required), ``node`` ({speed, provides}),
    ``max_nodes`` (default 2000), ``time_budget``, ``node_hour_cost``, ``billing``
    (second | minute | hour, default second), ``curve_nodes`` (extra node counts),
    ``resolution`` (default 1); read by :func:`read_sizing_request`.
    """
    args = read_sizing_request(body)
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


def _node_pointer(pointer: str) -> str:
    """Issues about the one node of the plan body point at ``/node`` of the sizing body."""
    if pointer.startswith("/nodes/0"):
        return "/node" + pointer[len("/nodes/0") :]
    return pointer
