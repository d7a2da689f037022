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

Decision: what is left is an ordinary batch (:attr:`RemainingWork.instance`) whose time
origin is the re-planning moment: time 0 of the new plan is ``elapsed`` seconds after the
original start, node ``free_at`` and the deadline are shifted by ``elapsed``, and running
jobs appear as the ``free_at`` of their node. So the service can write it as a plan
request and submit it like any plan (``service/reading/events.py``), and the makespan of
the new plan is the time from now until the last node (including the ones finishing
running jobs) is done. :func:`replan` solves it at once and records the kept running jobs
and what was moved in ``extras["replan"]``. The events body is read by the service.
"""

from __future__ import annotations

from collections.abc import Callable, Mapping
from dataclasses import dataclass, field, replace
from typing import Any, TypeVar

import numpy as np

from .budget import DEFAULT_SECONDS
from .errors import Infeasible, InvalidInstance, Issue
from .farm_bounds import eligibility
from .model import Instance, Node
from .progress import ProgressHook
from .result import PlanResult
from .solve import solve

T = TypeVar("T")


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
    """What is left (a batch whose time 0 is the re-planning moment), and how every
    original job was accounted for."""

    instance: Instance
    #: positions in the original batch of the jobs of ``instance``, in its order
    to_plan_index: tuple[int, ...]
    time_origin: float
    kept_running: list[dict[str, Any]] = field(default_factory=list)
    replanned_from_lost: list[str] = field(default_factory=list)
    finished: list[str] = field(default_factory=list)
    to_plan: list[str] = field(default_factory=list)
    lost_nodes: list[str] = field(default_factory=list)
    added_nodes: list[str] = field(default_factory=list)
    deadline_passed: bool = False

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


def remaining_work(inst: Instance, planned_on: Mapping[str, str], events: Events) -> RemainingWork:
    """Account for every job of the original batch ``inst`` and build what is left.

    ``planned_on`` maps job id -> node id in the original plan (jobs planned on a lost
    node are reported as moved from it).
    """
    index = {jid: j for j, jid in enumerate(inst.job_ids)}
    issues: list[Issue] = []
    for i, jid in enumerate(events.finished):
        if jid not in index:
            issues.append(Issue(("finished", i), f"no job {jid!r} in the original batch"))
    lost = set(events.lost_nodes)
    node_ids = {nd.id for nd in inst.nodes}
    for i, nid in enumerate(events.lost_nodes):
        if nid not in node_ids:
            issues.append(Issue(("lost_nodes", i), f"no node {nid!r} in the original farm"))
    nodes: dict[str, Node] = {nd.id: nd for nd in inst.nodes if nd.id not in lost}
    for k, nd in enumerate(events.added_nodes):
        if nd.id in nodes:
            issues.append(Issue(("added_nodes", k, "id"), f"node {nd.id!r} is already in the farm"))
        else:
            nodes[nd.id] = nd
    finished = set(events.finished)
    t0 = events.elapsed
    busy_until: dict[str, float] = {}
    kept: list[dict[str, Any]] = []
    kept_ids: set[str] = set()
    from_lost: list[str] = []
    for i, r in enumerate(events.running):
        bad_job = first_failed(
            (r.job not in index, f"no job {r.job!r} in the original batch"),
            (r.job in finished, f"{r.job!r} is also listed as finished"),
            (r.job in kept_ids or r.job in from_lost, f"{r.job!r} is listed as running twice"),
        )
        if bad_job is not None:
            issues.append(Issue(("running", i, "job"), bad_job))
            continue
        if r.node in lost:
            from_lost.append(r.job)  # its run is lost with the node: plan it again
            continue
        bad_node = first_failed(
            (r.node not in nodes, f"no node {r.node!r} in the farm"),
            (r.node in busy_until, f"node {r.node!r} already runs a job"),
        )
        if bad_node is not None:
            issues.append(Issue(("running", i, "node"), bad_node))
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
        issues.append(Issue(("lost_nodes",), "no node is left in the farm"))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the events", issues)
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
            [Issue(("finished",), "every job of the batch is finished or running")],
        )
    node_list: list[Node] = []
    for nid, nd in nodes.items():
        free = max(0.0, nd.free_at - t0, busy_until.get(nid, t0) - t0)
        node_list.append(Node(nid, nd.speed, nd.provides, free))
    passed = inst.deadline is not None and inst.deadline <= t0
    keep = np.asarray(to_plan, dtype=np.intp)
    left = Instance(
        job_ids=tuple(inst.job_ids[j] for j in to_plan),
        durations=inst.durations[keep],
        nodes=tuple(node_list),
        requires=subset(inst.requires, to_plan),
        groups=subset(inst.groups, to_plan),
        deadline=None if inst.deadline is None or passed else inst.deadline - t0,
        resolution=inst.resolution,
        duration_p90=subset(inst.duration_p90, to_plan),
    )
    left.validate()
    try:
        eligibility(left)
    except Infeasible as exc:
        raise unrunnable_left(exc) from exc
    return RemainingWork(
        instance=left,
        to_plan_index=tuple(to_plan),
        time_origin=t0,
        kept_running=kept,
        replanned_from_lost=from_lost,
        finished=sorted(finished),
        to_plan=[inst.job_ids[j] for j in to_plan],
        lost_nodes=list(events.lost_nodes),
        added_nodes=[nd.id for nd in events.added_nodes],
        deadline_passed=passed,
    )


def replan(
    inst: Instance,
    planned_on: Mapping[str, str],
    events: Events,
    *,
    method: str,
    time_budget: float = DEFAULT_SECONDS,
    progress: ProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> PlanResult:
    """Plan what is left of ``inst`` now; ``extras["replan"]`` lists kept running jobs
    and moves (see :func:`remaining_work`)."""
    work = remaining_work(inst, planned_on, events)
    res = solve(
        work.instance, method, time_budget=time_budget, progress=progress, should_stop=should_stop
    )
    extras = dict(res.extras)
    extras["replan"] = work.info()
    return replace(res, extras=extras)


def first_failed(*checks: tuple[bool, str]) -> str | None:
    """The message of the first check that failed (``True``), if any."""
    return next((message for failed, message in checks if failed), None)


def subset(column: tuple[T, ...] | None, keep: list[int]) -> tuple[T, ...] | None:
    """The rows ``keep`` of an optional per-job column (None stays None)."""
    if column is None:
        return None
    out = tuple(column[j] for j in keep)
    return out if any(x for x in out) else None


def unrunnable_left(exc: Infeasible) -> Infeasible:
    """The refusal when the nodes left cannot run some jobs (``exc`` names them), placed
    at ``lost_nodes`` of the events."""
    names = ", ".join(exc.jobs[:10]) + (" ..." if len(exc.jobs) > 10 else "")
    return Infeasible(
        f"{len(exc.jobs)} job(s) left require tags that no remaining node provides",
        jobs=exc.jobs,
        issues=[Issue(("lost_nodes",), f"the nodes left cannot run: {names}")],
    )
