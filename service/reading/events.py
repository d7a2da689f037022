"""Reading an events body (``POST /v1/plans/{id}/replan``) into the core's :class:`Events`,
and writing what is left as an ordinary ``POST /v1/plans`` body."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any, TypeGuard

from workers.planning.errors import InvalidInstance, Issue, Path
from workers.planning.model import Node
from workers.planning.replan import Events, RemainingWork, Running

from .clock import NODE_FIELD, parse_time


def _num(x: object) -> TypeGuard[int | float]:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _list(body: Mapping[str, Any], key: str, of: str, issues: list[Issue]) -> list[Any]:
    """The list at ``key`` (absent or null: empty); anything else is refused as not a list
    of ``of``, and read as empty."""
    raw = body.get(key) or []
    if isinstance(raw, list):
        return raw
    issues.append(Issue((key,), f"must be a list of {of}"))
    return []


def _ids(body: Mapping[str, Any], key: str, issues: list[Issue]) -> tuple[str, ...]:
    out: list[str] = []
    seen: set[str] = set()
    for i, x in enumerate(_list(body, key, "ids", issues)):
        if not isinstance(x, str) or not x:
            issues.append(Issue((key, i), "must be a non-empty string"))
        elif x in seen:
            issues.append(Issue((key, i), f"{x!r} is listed twice"))
        else:
            seen.add(x)
            out.append(x)
    return tuple(out)


def _running(r: object, ptr: Path, elapsed: float, issues: list[Issue]) -> Running | None:
    """One entry of ``running`` (at ``ptr``), or None where it names no job and node."""
    if not isinstance(r, Mapping):
        issues.append(Issue(ptr, "must be an object"))
        return None
    job, node, at = r.get("job"), r.get("node"), r.get("started_at")
    if not isinstance(job, str) or not job:
        issues.append(Issue((*ptr, "job"), "must be a job id"))
    if not isinstance(node, str) or not node:
        issues.append(Issue((*ptr, "node"), "must be a node id"))
    started = 0.0
    if _num(at) and 0 <= at <= elapsed:
        started = float(at)
    else:
        issues.append(Issue((*ptr, "started_at"), "must be a number between 0 and elapsed"))
    if isinstance(job, str) and isinstance(node, str):
        return Running(job, node, started)
    return None


def _added_node(nd: object, ptr: Path, issues: list[Issue]) -> Node | None:
    """One entry of ``added_nodes`` (at ``ptr``), or None where it has no id."""
    if not isinstance(nd, Mapping) or not isinstance(nd.get("id"), str) or not nd["id"]:
        issues.append(Issue((*ptr, "id"), "must be a node with a non-empty string id"))
        return None
    if nd.get(NODE_FIELD) is not None:
        issues.append(
            Issue((*ptr, NODE_FIELD), "not used in events: give free_at, seconds from now")
        )
    speed, free = nd.get("speed", 1.0), nd.get("free_at", 0.0)
    tags = nd.get("provides") or []
    if not _num(speed) or speed <= 0:
        issues.append(Issue((*ptr, "speed"), "must be a finite number > 0"))
        speed = 1.0
    if not _num(free) or free < 0:
        issues.append(Issue((*ptr, "free_at"), "must be a finite number >= 0"))
        free = 0.0
    if not isinstance(tags, list) or not all(isinstance(t, str) and t for t in tags):
        issues.append(Issue((*ptr, "provides"), "must be a list of non-empty strings"))
        tags = []
    return Node(nd["id"], float(speed), frozenset(tags), float(free))


def read_events(body: Mapping[str, Any]) -> Events:
    """Validate an events body; every problem is reported with its field path."""
    if not isinstance(body, Mapping):
        raise InvalidInstance("the events body must be a JSON object", [Issue((), "not an object")])
    issues: list[Issue] = []
    raw_elapsed = body.get("elapsed")
    elapsed = 0.0
    if _num(raw_elapsed) and raw_elapsed >= 0:
        elapsed = float(raw_elapsed)
    else:
        issues.append(Issue(("elapsed",), "required: seconds since the plan started, >= 0"))
    finished = _ids(body, "finished", issues)
    lost = _ids(body, "lost_nodes", issues)
    running: list[Running] = []
    for i, r in enumerate(_list(body, "running", "{job, node, started_at}", issues)):
        entry = _running(r, ("running", i), elapsed, issues)
        if entry is not None:
            running.append(entry)
    added: list[Node] = []
    for k, nd in enumerate(_list(body, "added_nodes", "nodes", issues)):
        node = _added_node(nd, ("added_nodes", k), issues)
        if node is not None:
            added.append(node)
    method = body.get("method")
    if method is not None and not isinstance(method, str):
        issues.append(Issue(("method",), "must be a string"))
        method = None
    budget = body.get("time_budget")
    if budget is not None and (not _num(budget) or budget < 0):
        issues.append(Issue(("time_budget",), "must be a number >= 0"))
        budget = None
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the events", issues)
    return Events(
        elapsed,
        finished,
        tuple(running),
        lost,
        tuple(added),
        method,
        None if budget is None else float(budget),
    )


def planned_nodes(original_result: Mapping[str, Any] | None) -> dict[str, str]:
    """job id -> node id from the original result's assignment (empty if none)."""
    out: dict[str, str] = {}
    if not isinstance(original_result, Mapping):
        return out
    res = original_result.get("result", original_result)
    for row in (res.get("assignment") or []) if isinstance(res, Mapping) else []:
        if isinstance(row, Mapping):
            for job in row.get("jobs") or []:
                if isinstance(job, Mapping) and isinstance(job.get("id"), str):
                    out[job["id"]] = str(row.get("node"))
    return out


def replan_body(
    original_request: Mapping[str, Any], work: RemainingWork, events: Events
) -> dict[str, Any]:
    """The ``POST /v1/plans`` body for what is left (time 0 = the re-planning moment).

    Every field of the original body is kept (name, method, spread, ...) but the jobs (the
    original objects of the jobs left, as they were sent), the nodes (as they are now) and
    the deadline (shifted, or dropped once passed); the events' ``method`` and
    ``time_budget`` win over the original's. A clock (``start_at``) moves to the
    re-planning moment, the deadline kept in seconds from there (``deadline_at`` dropped).
    """
    left = work.instance
    request: dict[str, Any] = {
        key: value
        for key, value in original_request.items()
        if key not in ("jobs", "nodes", "node_count", "deadline", "deadline_at", "start_at")
    }
    if original_request.get("start_at") is not None:
        moved = parse_time(original_request["start_at"]).shifted(events.elapsed)
        if moved is not None:  # else past the year 9999: the re-plan runs in seconds only
            request["start_at"] = moved
    jobs_in = original_request.get("jobs") or []
    request["jobs"] = [dict(jobs_in[j]) for j in work.to_plan_index]
    request["nodes"] = [
        {"id": nd.id, "speed": nd.speed, "provides": sorted(nd.provides), "free_at": nd.free_at}
        for nd in left.nodes
    ]
    if left.deadline is not None:
        request["deadline"] = left.deadline
    if events.method is not None:
        request["method"] = events.method
    if events.time_budget is not None:
        request["time_budget"] = events.time_budget
    return request
