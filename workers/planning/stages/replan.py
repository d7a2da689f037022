"""Re-planning a stage graph mid-run: what is left, as a stage graph whose time 0 is now.

The inputs are those of the core's :mod:`workers.planning.replan` (the original graph,
the original plan's node per job, and an :class:`~workers.planning.replan.Events`), and
every time in the events counts from the start of the original plan. Rules (issue 17,
point 5):

- finished jobs are dropped, and every wait for one of them is met;
- a running job on a node that is still there is **carried** (:mod:`.carried`): it is not
  planned again, keeps one slot of its node until it ends (``started_at + duration /
  speed``, at least now), keeps the places of the limits it uses until then, and the jobs
  that wait for it may start only after it ends;
- jobs on lost nodes (running or not) and every job not started are planned again, with
  the waits among them kept;
- added nodes join (free from their ``free_at``, or now; ``slots`` as given, else 1).

Every job of the original graph is in exactly one of: finished, carried, planned again
(:attr:`RemainingStages.work` accounts for them in the core's shape). Events that contradict
the graph are refused, each by its field path: a running or finished job whose wait is not
finished, more running jobs on a node than it has slots, more running jobs using a limit
than its capacity, and everything the core refuses (unknown ids, a job both running and
finished, ...).

Times: time 0 of the new graph is ``elapsed`` after the original start. Node start times
and carried ends are kept as exact fractions (:class:`.carried.Carried`), rounded to ticks
up for plans and down for bounds, so the certificate holds for the numbers stated; the
makespan of the new plan counts until every node is done, carried jobs included.
"""

from __future__ import annotations

import functools
from collections.abc import Mapping
from dataclasses import dataclass
from fractions import Fraction
from functools import cached_property
from typing import Any

import numpy as np
import numpy.typing as npt

from ..budget import Budget
from ..errors import Infeasible, InvalidInstance, Issue
from ..model import Instance, Node
from ..rational import down, up
from ..replan import Events, RemainingWork, first_failed, subset, unrunnable_left
from .carried import Carried
from .problem import StageProblem, gather
from .result import StageResult
from .search import solve_stages

I64 = npt.NDArray[np.int64]


@dataclass(frozen=True, eq=False)
class RemainingStages:
    """What is left of a stage graph (time 0 is the re-planning moment), and how every
    original job and wait was accounted for."""

    problem: StageProblem
    #: the accounting in the core's shape (``work.instance`` is ``problem.instance``)
    work: RemainingWork
    #: waits of the jobs planned again on finished jobs (met, dropped)
    waits_met: int
    #: waits of the jobs planned again on carried jobs (now releases)
    waits_on_running: int

    def info(self) -> dict[str, Any]:
        """The ``extras["replan"]`` object: the core's (``RemainingWork.info``) and the
        graph's own counts under ``stages``."""
        carried = self.problem.carried
        held: dict[str, int] = {}
        if carried is not None:
            for lim in carried.uses_idx.tolist():
                name = self.problem.limit_names[lim]
                held[name] = held.get(name, 0) + 1
        return {
            **self.work.info(),
            "stages": {
                "waits_met_by_finished": self.waits_met,
                "waits_on_running": self.waits_on_running,
                "limits_held_by_running": held,
            },
        }


def remaining_stages(
    problem: StageProblem,
    planned_on: Mapping[str, str],
    events: Events,
    *,
    added_slots: Mapping[str, int] | None = None,
) -> RemainingStages:
    """Account for every job of ``problem`` and build what is left (module docstring).

    ``planned_on`` maps job id -> node id in the original plan (jobs planned on a lost
    node are reported as moved from it); ``added_slots`` gives an added node's slots by
    id (1 when not given). Raises :class:`InvalidInstance` (by field path) for events that
    contradict the graph and :class:`Infeasible` when the nodes left cannot run a job.
    """
    inst = problem.instance
    n = inst.n
    index = {jid: j for j, jid in enumerate(inst.job_ids)}
    issues: list[Issue] = []
    issues += [
        Issue(("finished", i), f"no job {jid!r} in the original batch")
        for i, jid in enumerate(events.finished)
        if jid not in index
    ]
    lost = set(events.lost_nodes)
    slots_of = {nd.id: int(c) for nd, c in zip(inst.nodes, problem.slots.tolist(), strict=True)}
    issues += [
        Issue(("lost_nodes", i), f"no node {nid!r} in the original farm")
        for i, nid in enumerate(events.lost_nodes)
        if nid not in slots_of
    ]
    nodes: dict[str, Node] = {nd.id: nd for nd in inst.nodes if nd.id not in lost}
    added = {nd.id for nd in events.added_nodes}
    for k, nd in enumerate(events.added_nodes):
        if nd.id in nodes:
            issues.append(Issue(("added_nodes", k, "id"), f"node {nd.id!r} is already in the farm"))
            continue
        nodes[nd.id] = nd
        c = (added_slots or {}).get(nd.id, 1)
        if isinstance(c, bool) or not isinstance(c, int | np.integer) or c < 1:
            issues.append(Issue(("added_nodes", k, "slots"), "must be a whole number >= 1"))
        slots_of[nd.id] = int(c) if isinstance(c, int | np.integer) and c >= 1 else 1
    issues += [
        Issue(("added_nodes",), f"slots given for {nid!r}, which is not an added node")
        for nid in (added_slots or {})
        if nid not in added
    ]
    finished = {index[jid] for jid in events.finished if jid in index}
    t0 = Fraction(events.elapsed)
    kept: list[tuple[int, str, Fraction]] = []  # (job, node, end after time 0)
    kept_rows: list[dict[str, Any]] = []
    seen: set[int] = set()
    from_lost: list[str] = []
    on_node: dict[str, int] = {}
    for i, r in enumerate(events.running):
        j = index.get(r.job, -1)
        bad_job = first_failed(
            (j < 0, f"no job {r.job!r} in the original batch"),
            (j in finished, f"{r.job!r} is also listed as finished"),
            (j in seen, f"{r.job!r} is listed as running twice"),
            (_waits_unfinished(problem, j, finished), f"{r.job!r} waits for an unfinished job"),
        )
        if bad_job is not None:
            issues.append(Issue(("running", i, "job"), bad_job))
            continue
        seen.add(j)
        if r.node in lost:
            from_lost.append(r.job)  # its run is lost with the node: plan it again
            continue
        count = on_node.get(r.node, 0) + 1
        bad_node = first_failed(
            (r.node not in nodes, f"no node {r.node!r} in the farm"),
            (
                count > slots_of.get(r.node, 1),
                f"node {r.node!r} runs more jobs than its {slots_of.get(r.node, 1)} slot(s)",
            ),
        )
        if bad_node is not None:
            issues.append(Issue(("running", i, "node"), bad_node))
            continue
        on_node[r.node] = count
        end = (
            Fraction(r.started_at)
            + Fraction(float(inst.durations[j])) / Fraction(nodes[r.node].speed)
            - t0
        )
        kept.append((j, r.node, max(end, Fraction(0))))
        kept_rows.append(
            {
                "job": r.job,
                "node": r.node,
                "start": float(Fraction(r.started_at) - t0),
                "end": up(max(end, Fraction(0))),
                "overdue": end < 0,
            }
        )
    for i, jid in enumerate(events.finished):
        if jid in index and _waits_unfinished(problem, index[jid], finished):
            issues.append(Issue(("finished", i), f"{jid!r} waits for an unfinished job"))
    issues += _over_capacity(problem, [j for j, _, end in kept if end > 0])
    if not nodes:
        issues.append(Issue(("lost_nodes",), "no node is left in the farm"))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the events", issues)
    kept_ids = {j for j, _, _ in kept}
    from_lost += [
        jid
        for j, jid in enumerate(inst.job_ids)
        if planned_on.get(jid) in lost
        and j not in finished
        and j not in kept_ids
        and jid not in from_lost
    ]
    status = np.full(n, 2, dtype=np.int64)  # 0 finished, 1 carried, 2 planned again
    status[list(finished)] = 0
    status[list(kept_ids)] = 1
    to_plan = np.flatnonzero(status == 2)
    if not to_plan.size:
        raise InvalidInstance(
            "nothing is left to plan: every job is finished or running",
            [Issue(("finished",), "every job of the batch is finished or running")],
        )
    node_ids = list(nodes)
    node_free = tuple(max(Fraction(0), Fraction(nodes[k].free_at) - t0) for k in node_ids)
    passed = inst.deadline is not None and Fraction(inst.deadline) <= t0
    keep = to_plan.tolist()
    left = Instance(
        job_ids=tuple(inst.job_ids[j] for j in keep),
        durations=inst.durations[to_plan],
        nodes=tuple(
            Node(k, nodes[k].speed, nodes[k].provides, up(f))
            for k, f in zip(node_ids, node_free, strict=True)
        ),
        requires=subset(inst.requires, keep),
        groups=subset(inst.groups, keep),
        deadline=None if inst.deadline is None or passed else down(Fraction(inst.deadline) - t0),
        resolution=inst.resolution,
        duration_p90=subset(inst.duration_p90, keep),
    )
    left.validate()
    new_of = np.full(n, -1, dtype=np.int64)
    new_of[to_plan] = np.arange(to_plan.size)
    carried_of = np.full(n, -1, dtype=np.int64)
    kept_jobs = np.asarray([j for j, _, _ in kept], dtype=np.int64)
    carried_of[kept_jobs] = np.arange(kept_jobs.size)
    preds, counts = gather(problem.after_ptr, problem.after_idx, to_plan)
    owner = np.repeat(np.arange(to_plan.size, dtype=np.int64), counts)
    after = _rows(owner[status[preds] == 2], new_of[preds[status[preds] == 2]], to_plan.size)
    waits = _rows(owner[status[preds] == 1], carried_of[preds[status[preds] == 1]], to_plan.size)
    uses = gather(problem.uses_ptr, problem.uses_idx, to_plan)
    held = gather(problem.uses_ptr, problem.uses_idx, kept_jobs)
    position = {k: i for i, k in enumerate(node_ids)}
    carried = Carried(
        job_ids=tuple(inst.job_ids[j] for j in kept_jobs.tolist()),
        node_free=node_free,
        node=np.asarray([position[k] for _, k, _ in kept], dtype=np.int64),
        end=tuple(end for _, _, end in kept),
        uses_ptr=_ptr(held[1]),
        uses_idx=held[0],
        wait_ptr=waits[0],
        wait_idx=waits[1],
    )
    try:
        out = StageProblem.from_indices(
            left,
            after,
            (_ptr(uses[1]), uses[0]),
            problem.limit_names,
            problem.capacities.tolist(),
            [slots_of[k] for k in node_ids],
            carried,
        )
    except Infeasible as exc:
        raise unrunnable_left(exc) from exc
    work = RemainingWork(
        instance=left,
        to_plan_index=tuple(keep),
        time_origin=events.elapsed,
        kept_running=kept_rows,
        replanned_from_lost=from_lost,
        finished=sorted(inst.job_ids[j] for j in finished),
        to_plan=list(left.job_ids),
        lost_nodes=list(events.lost_nodes),
        added_nodes=[nd.id for nd in events.added_nodes],
        deadline_passed=passed,
    )
    met = int(np.count_nonzero(status[preds] == 0))
    return RemainingStages(out, work, met, int(waits[1].size))


@dataclass(frozen=True, eq=False)
class StageReplanResult(StageResult):
    """A re-planned stage graph's result: its makespan counts the carried jobs' ends and
    the nodes' exact start times, and ``to_dict`` carries ``replan`` (the accounting)."""

    remaining: RemainingStages

    @cached_property
    def exact_value(self) -> Fraction:
        """The latest of the plan's own makespan with the stated durations
        (:attr:`StageResult.exact_value`) and every carried end and node start, exactly."""
        carried = self.problem.carried
        extra = [] if carried is None else [*carried.end, *carried.node_free]
        own: Fraction = StageResult.exact_value.func(self)  # type: ignore[attr-defined]
        return max([own, *extra])

    def to_dict(self, *, with_assignment: bool = True) -> dict[str, Any]:
        """The plan contract's ``result`` object with ``replan`` (:meth:`RemainingStages.info`)."""
        out = super().to_dict(with_assignment=with_assignment)
        out["replan"] = self.remaining.info()
        return out


def replan_stages(
    problem: StageProblem,
    planned_on: Mapping[str, str],
    events: Events,
    *,
    method: str,
    budget: Budget | None = None,
    added_slots: Mapping[str, int] | None = None,
    seed: int = 0,
    max_rounds: int | None = None,
) -> StageReplanResult:
    """Plan what is left of ``problem`` now (:func:`remaining_stages`, then
    :func:`.search.solve_stages` with ``method`` and ``budget``); the result's
    ``remaining`` and ``to_dict()["replan"]`` hold the accounting."""
    rest = remaining_stages(problem, planned_on, events, added_slots=added_slots)
    answer = functools.partial(StageReplanResult, remaining=rest)
    res = solve_stages(
        rest.problem, method, budget, seed=seed, max_rounds=max_rounds, answer=answer
    )
    assert isinstance(res, StageReplanResult)
    return res


# -- helpers ----------------------------------------------------------------------------
def _waits_unfinished(problem: StageProblem, j: int, finished: set[int]) -> bool:
    """Whether job ``j`` (if any) waits for a job that is not finished."""
    return j >= 0 and any(i not in finished for i in problem.predecessors_of(j).tolist())


def _over_capacity(problem: StageProblem, running: list[int]) -> list[Issue]:
    """A limit used by more running jobs than its capacity, by name."""
    counts = np.zeros(len(problem.limit_names), dtype=np.int64)
    for j in running:
        counts[problem.limits_of(j)] += 1
    return [
        Issue(
            ("running",),
            f"{int(counts[lim])} running jobs use limit {name!r}, above its capacity "
            f"{int(problem.capacities[lim])}",
        )
        for lim, name in enumerate(problem.limit_names)
        if counts[lim] > problem.capacities[lim]
    ]


def _ptr(counts: I64) -> I64:
    """CSR row pointers from row lengths."""
    return np.concatenate(([0], np.cumsum(counts))).astype(np.int64)


def _rows(owner: I64, values: I64, n: int) -> tuple[I64, I64]:
    """CSR ``(ptr, idx)`` of ``n`` rows from entries (owner row, value), owners sorted."""
    return _ptr(np.bincount(owner, minlength=n).astype(np.int64)), values.astype(np.int64)


__all__ = ["RemainingStages", "StageReplanResult", "remaining_stages", "replan_stages"]
