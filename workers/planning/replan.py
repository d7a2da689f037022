"""Re-planning mid-run: what is left of a batch, on the farm as it is now.

The inputs are the original request (the ``POST /v1/plans`` body), the original result
(the contract's ``result`` object, for the assignment) and an events body::

    {"elapsed": 5400,                                   # seconds since the plan started
     "finished": ["ep3_sc02_0010", ...],                 # job ids done
     "running": [{"job": "ep3_sc02_0011", "node": "blade-07", "started_at": 5100}],
     "lost_nodes": ["blade-12"],                         # node ids gone
     "added_nodes": [{"id": "blade-40", "speed": 1.5, "provides": ["gpu"]}]}

Every time in the events body (``elapsed``, ``started_at``, an added node's ``free_at``)
counts from the start of the original plan. Rules:

- finished jobs are dropped;
- a running job stays on its node, which is busy until ``started_at + duration / speed``
  (at least until now); the job is not planned again;
- jobs on lost nodes, running or queued, are planned again, like every job not started;
- added nodes join the farm (free from their ``free_at``, or now).

Every job of the original batch is in exactly one of: finished, kept running, planned
again; none is lost or duplicated. If the nodes left cannot run some job (the only GPU
nodes were lost, say), :class:`Infeasible` names those jobs at once.

Decision: the new plan is an ordinary request (``replan_from_request`` returns a
``POST /v1/plans`` body) whose time origin is the re-planning moment: time 0 of the new
plan is ``elapsed`` seconds after the original start, node ``free_at`` and the deadline are
shifted by ``elapsed``, and running jobs appear as the ``free_at`` of their node. So the
HTTP layer can submit it like any plan, and the makespan of the new plan is the time from
now until the last node (including the ones finishing running jobs) is done.
``replan`` solves it at once and records the kept running jobs and what was moved in
``extras["replan"]``.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Mapping
from dataclasses import dataclass, field
from typing import Any, TypeGuard

from .budget import DEFAULT_SECONDS
from .errors import Infeasible, InvalidInstance, Issue
from .farm_bounds import eligibility
from .model import Instance, Node
from .progress import ProgressHook
from .result import PlanResult
from .solve import solve


@dataclass(frozen=True, slots=True)
class Running:
    """A job that is running now on ``node`` since ``started_at`` (original plan time)."""

    job: str
    node: str
    started_at: float


@dataclass(frozen=True)
class Events:
    """What happened since the plan started (see the module doc)."""

    elapsed: float
    finished: tuple[str, ...] = ()
    running: tuple[Running, ...] = ()
    lost_nodes: tuple[str, ...] = ()
    added_nodes: tuple[Node, ...] = ()
    method: str | None = None
    time_budget: float | None = None


@dataclass(frozen=True)
class RemainingWork:
    """The request for what is left, and how every original job was accounted for."""

    request: dict[str, Any]
    time_origin: float
    kept_running: list[dict[str, Any]] = field(default_factory=list)
    replanned_from_lost: list[str] = field(default_factory=list)
    finished: list[str] = field(default_factory=list)
    to_plan: list[str] = field(default_factory=list)
    lost_nodes: list[str] = field(default_factory=list)
    added_nodes: list[str] = field(default_factory=list)
    deadline_passed: bool = False
    #: the request above as an Instance (already validated)
    instance: Instance | None = None

    def info(self) -> dict[str, Any]:
        """The ``extras["replan"]`` object of a re-planned result."""
        return {
            "time_origin": self.time_origin,
            "running": self.kept_running,
            "replanned_from_lost_nodes": self.replanned_from_lost,
            "finished": len(self.finished),
            "planned": len(self.to_plan),
            "lost_nodes": self.lost_nodes,
            "added_nodes": self.added_nodes,
            "deadline_passed": self.deadline_passed,
        }


def _num(x: object) -> TypeGuard[int | float]:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _ids(body: Mapping[str, Any], key: str, issues: list[Issue]) -> tuple[str, ...]:
    raw = body.get(key) or []
    if not isinstance(raw, list):
        issues.append(Issue(f"/{key}", "must be a list of ids"))
        return ()
    out: list[str] = []
    seen: set[str] = set()
    for i, x in enumerate(raw):
        if not isinstance(x, str) or not x:
            issues.append(Issue(f"/{key}/{i}", "must be a non-empty string"))
        elif x in seen:
            issues.append(Issue(f"/{key}/{i}", f"{x!r} is listed twice"))
        else:
            seen.add(x)
            out.append(x)
    return tuple(out)


def read_events(body: Mapping[str, Any]) -> Events:
    """Validate an events body; every problem is reported with a JSON Pointer into it."""
    if not isinstance(body, Mapping):
        raise InvalidInstance("the events body must be a JSON object", [Issue("", "not an object")])
    issues: list[Issue] = []
    raw_elapsed = body.get("elapsed")
    elapsed = 0.0
    if _num(raw_elapsed) and raw_elapsed >= 0:
        elapsed = float(raw_elapsed)
    else:
        issues.append(Issue("/elapsed", "required: seconds since the plan started, >= 0"))
    finished = _ids(body, "finished", issues)
    lost = _ids(body, "lost_nodes", issues)
    running: list[Running] = []
    raw = body.get("running") or []
    if not isinstance(raw, list):
        issues.append(Issue("/running", "must be a list of {job, node, started_at}"))
        raw = []
    for i, r in enumerate(raw):
        ptr = f"/running/{i}"
        if not isinstance(r, Mapping):
            issues.append(Issue(ptr, "must be an object"))
            continue
        job, node, at = r.get("job"), r.get("node"), r.get("started_at")
        if not isinstance(job, str) or not job:
            issues.append(Issue(f"{ptr}/job", "must be a job id"))
        if not isinstance(node, str) or not node:
            issues.append(Issue(f"{ptr}/node", "must be a node id"))
        started = 0.0
        if _num(at) and 0 <= at <= elapsed:
            started = float(at)
        else:
            issues.append(Issue(f"{ptr}/started_at", "must be a number between 0 and elapsed"))
        if isinstance(job, str) and isinstance(node, str):
            running.append(Running(job, node, started))
    added: list[Node] = []
    raw = body.get("added_nodes") or []
    if not isinstance(raw, list):
        issues.append(Issue("/added_nodes", "must be a list of nodes"))
        raw = []
    for k, nd in enumerate(raw):
        ptr = f"/added_nodes/{k}"
        if not isinstance(nd, Mapping) or not isinstance(nd.get("id"), str) or not nd["id"]:
            issues.append(Issue(f"{ptr}/id", "must be a node with a non-empty string id"))
            continue
        speed, free = nd.get("speed", 1.0), nd.get("free_at", 0.0)
        tags = nd.get("provides") or []
        if not _num(speed) or speed <= 0:
            issues.append(Issue(f"{ptr}/speed", "must be a finite number > 0"))
            speed = 1.0
        if not _num(free) or free < 0:
            issues.append(Issue(f"{ptr}/free_at", "must be a finite number >= 0"))
            free = 0.0
        if not isinstance(tags, list) or not all(isinstance(t, str) and t for t in tags):
            issues.append(Issue(f"{ptr}/provides", "must be a list of non-empty strings"))
            tags = []
        added.append(Node(nd["id"], float(speed), frozenset(tags), float(free)))
    method = body.get("method")
    if method is not None and not isinstance(method, str):
        issues.append(Issue("/method", "must be a string"))
        method = None
    budget = body.get("time_budget")
    if budget is not None and (not _num(budget) or budget < 0):
        issues.append(Issue("/time_budget", "must be a number >= 0"))
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


def _planned_nodes(original_result: Mapping[str, Any] | None) -> dict[str, str]:
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


def remaining_work(
    original_request: Mapping[str, Any],
    original_result: Mapping[str, Any] | None,
    events: Events,
) -> RemainingWork:
    """Account for every original job and build the request for what is left."""
    inst = Instance.from_request(original_request)
    index = {jid: j for j, jid in enumerate(inst.job_ids)}
    issues: list[Issue] = []
    for i, jid in enumerate(events.finished):
        if jid not in index:
            issues.append(Issue(f"/finished/{i}", f"no job {jid!r} in the original batch"))
    lost = set(events.lost_nodes)
    node_ids = {nd.id for nd in inst.nodes}
    for i, nid in enumerate(events.lost_nodes):
        if nid not in node_ids:
            issues.append(Issue(f"/lost_nodes/{i}", f"no node {nid!r} in the original farm"))
    nodes: dict[str, Node] = {nd.id: nd for nd in inst.nodes if nd.id not in lost}
    for k, nd in enumerate(events.added_nodes):
        if nd.id in nodes:
            issues.append(Issue(f"/added_nodes/{k}/id", f"node {nd.id!r} is already in the farm"))
        else:
            nodes[nd.id] = nd
    finished = set(events.finished)
    t0 = events.elapsed
    busy_until: dict[str, float] = {}
    kept: list[dict[str, Any]] = []
    kept_ids: set[str] = set()
    from_lost: list[str] = []
    for i, r in enumerate(events.running):
        if r.job not in index:
            issues.append(Issue(f"/running/{i}/job", f"no job {r.job!r} in the original batch"))
            continue
        if r.job in finished:
            issues.append(Issue(f"/running/{i}/job", f"{r.job!r} is also listed as finished"))
            continue
        if r.job in kept_ids or r.job in from_lost:
            issues.append(Issue(f"/running/{i}/job", f"{r.job!r} is listed as running twice"))
            continue
        if r.node in lost:
            from_lost.append(r.job)  # its run is lost with the node: plan it again
            continue
        if r.node not in nodes:
            issues.append(Issue(f"/running/{i}/node", f"no node {r.node!r} in the farm"))
            continue
        if r.node in busy_until:
            issues.append(Issue(f"/running/{i}/node", f"node {r.node!r} already runs a job"))
            continue
        end = r.started_at + float(inst.durations[index[r.job]]) / nodes[r.node].speed
        busy_until[r.node] = end
        kept_ids.add(r.job)
        kept.append(
            {
                "job": r.job,
                "node": r.node,
                "start": r.started_at - t0,
                "end": max(end, t0) - t0,
                "overdue": end < t0,
            }
        )
    if not nodes:
        issues.append(Issue("/lost_nodes", "no node is left in the farm"))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the events", issues)
    planned_on = _planned_nodes(original_result)
    from_lost += [
        jid
        for jid in inst.job_ids
        if planned_on.get(jid) in lost
        and jid not in finished
        and jid not in kept_ids
        and jid not in from_lost
    ]
    to_plan = [
        j for j, jid in enumerate(inst.job_ids) if jid not in finished and jid not in kept_ids
    ]
    if not to_plan:
        raise InvalidInstance(
            "nothing is left to plan: every job is finished or running",
            [Issue("/finished", "every job of the batch is finished or running")],
        )
    jobs_in = original_request.get("jobs") or []
    node_rows = []
    for nid, nd in nodes.items():
        free = max(0.0, nd.free_at - t0, busy_until.get(nid, t0) - t0)
        node_rows.append(
            {"id": nid, "speed": nd.speed, "provides": sorted(nd.provides), "free_at": free}
        )
    request: dict[str, Any] = {
        key: value
        for key, value in original_request.items()
        if key not in ("jobs", "nodes", "node_count", "deadline")
    }
    request["jobs"] = [dict(jobs_in[j]) for j in to_plan]
    request["nodes"] = node_rows
    if events.method is not None:
        request["method"] = events.method
    if events.time_budget is not None:
        request["time_budget"] = events.time_budget
    passed = False
    if inst.deadline is not None:
        if inst.deadline > t0:
            request["deadline"] = inst.deadline - t0
        else:
            passed = True
    left = Instance.from_request(request)
    try:
        eligibility(left)
    except Infeasible as exc:
        names = ", ".join(exc.jobs[:10]) + (" ..." if len(exc.jobs) > 10 else "")
        raise Infeasible(
            f"{len(exc.jobs)} job(s) left require tags that no remaining node provides",
            jobs=exc.jobs,
            issues=[Issue("/lost_nodes", f"the nodes left cannot run: {names}")],
        ) from exc
    return RemainingWork(
        request=request,
        time_origin=t0,
        kept_running=kept,
        replanned_from_lost=from_lost,
        finished=sorted(finished),
        to_plan=[inst.job_ids[j] for j in to_plan],
        lost_nodes=list(events.lost_nodes),
        added_nodes=[nd.id for nd in events.added_nodes],
        deadline_passed=passed,
        instance=left,
    )


def replan_from_request(
    original_request: Mapping[str, Any],
    original_result: Mapping[str, Any] | None,
    body: Mapping[str, Any],
) -> dict[str, Any]:
    """The ``POST /v1/plans`` body for what is left (time 0 = the re-planning moment)."""
    return remaining_work(original_request, original_result, read_events(body)).request


def replan(
    original_request: Mapping[str, Any],
    original_result: Mapping[str, Any] | None,
    body: Mapping[str, Any],
    *,
    method: str | None = None,
    time_budget: float | None = None,
    progress: ProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> PlanResult:
    """Plan what is left now; ``extras["replan"]`` lists kept running jobs and moves.

    ``method`` / ``time_budget`` override the events body's, which override the original
    request's (default ``longest_first`` and 5 s, as ``spanwright solve``).
    """
    work = remaining_work(original_request, original_result, read_events(body))
    req = work.request
    chosen = method or req.get("method") or "longest_first"
    budget = time_budget if time_budget is not None else req.get("time_budget", DEFAULT_SECONDS)
    if not _num(budget) or budget < 0:
        raise InvalidInstance("bad time budget", [Issue("/time_budget", "must be a number >= 0")])
    inst = work.instance if work.instance is not None else Instance.from_request(req)
    res = solve(
        inst, str(chosen), time_budget=float(budget), progress=progress, should_stop=should_stop
    )
    extras = dict(res.extras)
    extras["replan"] = work.info()
    return PlanResult(
        schedule=res.schedule,
        method=res.method,
        certificate=res.certificate,
        worst_case_ratio=res.worst_case_ratio,
        stop_reason=res.stop_reason,
        solve_seconds=res.solve_seconds,
        extras=extras,
    )
