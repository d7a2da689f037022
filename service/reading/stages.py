"""Reading the stage-graph fields of a plan body: ``after`` and ``uses`` on jobs, ``limits``
on the body, ``slots`` on nodes (issue 17; the names are part of the contract).

A body that uses none of them is an ordinary batch (an :class:`Instance`); one that uses
any is a :class:`StageProblem` around that instance, whose builder checks references,
self-waits, cycles (naming the jobs of one), unknown limits and capacities.
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from typing import Any

from workers.planning.errors import InvalidInstance, Issue
from workers.planning.model import Instance
from workers.planning.stages.problem import StageProblem

#: the request fields that make a batch a stage graph
JOB_FIELDS = ("after", "uses")
BODY_FIELDS = ("limits",)
NODE_FIELDS = ("slots",)

Problem = Instance | StageProblem


def is_staged(body: Mapping[str, Any]) -> bool:
    """Whether a plan body uses any stage-graph field (cheap: no per-job object made
    when the jobs hold none)."""
    if any(body.get(key) for key in BODY_FIELDS):
        return True
    nodes = body.get("nodes")
    if isinstance(nodes, list) and any(
        isinstance(nd, Mapping) and nd.get("slots") not in (None, 1) for nd in nodes
    ):
        return True
    jobs = body.get("jobs")
    return isinstance(jobs, list) and any(
        isinstance(job, Mapping) and (job.get("after") or job.get("uses")) for job in jobs
    )


def with_stages(inst: Instance, body: Mapping[str, Any]) -> Problem:
    """``inst`` (read from ``body``) as a :class:`StageProblem` when the body asks for one.

    Types were checked by the schema or the per-job reader; what is left is the graph's
    own semantics, each problem with its field path."""
    if not is_staged(body):
        return inst
    jobs = body.get("jobs")  # None: the jobs came as columns, plain ones
    after = [names_of(job, "after") for job in jobs] if isinstance(jobs, list) else None
    uses = [names_of(job, "uses") for job in jobs] if isinstance(jobs, list) else None
    limits = body.get("limits") or {}
    if not isinstance(limits, Mapping):
        raise InvalidInstance("limits must be an object", [Issue(("limits",), "name -> capacity")])
    nodes = body.get("nodes")
    slots: list[int] | None = None
    if isinstance(nodes, list):
        slots = [int(nd.get("slots", 1)) if isinstance(nd, Mapping) else 1 for nd in nodes]
    return StageProblem.build(
        inst,
        after=after,
        uses=uses,
        limits={str(k): v for k, v in limits.items()},
        slots=slots,
    )


def refuse_stages(body: Mapping[str, Any], what: str) -> None:
    """Refuse (422, by field path) a body of ``what`` (a sizing, a simulation, a re-plan)
    that uses a stage-graph field, which ``what`` does not handle yet: a graph is never
    silently planned as independent jobs."""
    if not is_staged(body):
        return
    where: tuple[str | int, ...] = ("limits",)
    jobs = body.get("jobs")
    if isinstance(jobs, list):
        for j, job in enumerate(jobs):
            if isinstance(job, Mapping) and (job.get("after") or job.get("uses")):
                where = ("jobs", j, "after" if job.get("after") else "uses")
                break
    raise InvalidInstance(
        f"{what} does not handle stage graphs (after, uses, limits, slots) yet",
        [Issue(where, f"not supported in {what} yet")],
    )


def names_of(job: Any, key: str) -> Sequence[str] | None:
    if not isinstance(job, Mapping):
        return None
    x = job.get(key)
    return x if isinstance(x, list) and x else None
