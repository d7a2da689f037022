"""Reading a ``POST /v1/sizings`` body into the core's :class:`SizingArgs`."""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from workers.planning.errors import InvalidInstance, Issue, Path
from workers.planning.rental import RentalArgs
from workers.planning.sizing import DEFAULT_BILLING, DEFAULT_MAX_NODES, check_options
from workers.planning.sizing_request import SizingArgs
from workers.planning.stage_sizing import StageSizingArgs
from workers.planning.stages.problem import StageProblem
from workers.planning.usecases import FrontierArgs

from .clock import in_seconds
from .plan import read_instance
from .rental import is_rental, read_rental
from .stages import is_staged, names_of


def read_sizing_request(
    body: Mapping[str, Any],
) -> SizingArgs | StageSizingArgs | RentalArgs | FrontierArgs:
    """Read a ``POST /v1/sizings`` body (fields: ``openapi/openapi.yaml``) without sizing.

    Every problem found is raised together as one :class:`InvalidInstance` whose issues
    carry field paths into ``body``.
    """
    if not isinstance(body, Mapping):
        raise InvalidInstance(
            "the request body must be a JSON object", [Issue((), "not an object")]
        )
    body = in_seconds(body)  # deadline_at, a farm's free_at_time: seconds from here on
    if is_rental(body):
        return read_rental(body)
    issues: list[Issue] = []
    raw_node = body.get("node", {})
    if raw_node is None:
        raw_node = {}
    if not isinstance(raw_node, Mapping):
        issues.append(Issue(("node",), "must be an object"))
        raw_node = {}
    if "id" in raw_node and not isinstance(raw_node["id"], str):
        issues.append(Issue(("node", "id"), "must be a string"))
    if "free_at" in raw_node:
        issues.append(Issue(("node", "free_at"), "not used by sizing: every node starts at 0"))
    if body.get("deadline") is None:
        issues.append(Issue(("deadline",), "required: the time by which every job must be done"))
    for key in ("nodes", "node_count"):
        if key in body:
            issues.append(Issue((key,), "not used by sizing: the answer is the node count"))
    if "deadlines" in body:
        issues.append(Issue(("deadlines",), "a frontier is for rentals: give farm or kinds"))
    max_nodes = body.get("max_nodes", DEFAULT_MAX_NODES)
    node_hour_cost = body.get("node_hour_cost")
    billing = body.get("billing", DEFAULT_BILLING)
    curve_nodes = body.get("curve_nodes", [])
    issues.extend(
        check_options(max_nodes, node_hour_cost, billing, curve_nodes, body.get("time_budget"))
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
        base = read_instance(plan_body)
    except InvalidInstance as exc:
        moved = [Issue(_node_path(i.path), i.detail) for i in exc.issues]
        raise InvalidInstance(
            f"{len(issues) + len(moved)} problem(s) in the request", issues + moved
        ) from None
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the request", issues)
    slots = raw_node.get("slots", 1)
    if is_staged(body) or slots != 1:
        jobs = body.get("jobs") or []
        template = StageProblem.build(
            base,
            after=[names_of(job, "after") for job in jobs],
            uses=[names_of(job, "uses") for job in jobs],
            limits=dict(body.get("limits") or {}),
            slots=[int(slots)],
        )
        return StageSizingArgs(
            template=template,
            max_nodes=int(max_nodes),
            node_hour_cost=None if node_hour_cost is None else float(node_hour_cost),
            billing=str(billing),
        )
    return SizingArgs(
        base=base,
        max_nodes=int(max_nodes),
        node_hour_cost=None if node_hour_cost is None else float(node_hour_cost),
        billing=str(billing),
        curve_nodes=tuple(int(k) for k in curve_nodes),
    )


def _node_path(path: Path) -> Path:
    """Issues about the one node of the plan body point at ``node`` of the sizing body."""
    if path[:2] == ("nodes", 0):
        return ("node", *path[2:])
    return path
