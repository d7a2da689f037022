"""Deadline confidence of a stage plan: its makespan when durations spread (issue 17, point 5).

Each job's actual duration is drawn as :mod:`.spread` says (``D_j = d_j exp(sigma_j Z_j -
shift_j)``) from the random streams of :mod:`.streams`, cut into the same chunks of
samples as :func:`.simulation.simulate` (:data:`.simulation.CHUNK_DRAWS` draws each, one
stream per chunk, normals job by job in batch order), so a stage plan and a plain plan of
the same batch and seed share their normals. A job on node ``k`` runs ``D_j / s_k``
seconds. Two execution policies, both taking the jobs in **plan order** (planned start,
ties by topological order, so a job always comes after what it waits for):

``static``   each job stays on its planned node; the node's jobs start in plan order
             (none before the one ahead of it on that node), each on the node's slot that
             frees first, once everything it waits for has ended and each limit it uses
             has room;
``dynamic``  a dispatcher hands the jobs out in plan order (the priority), each to the
             eligible slot of any node that frees first (ties: the lowest slot), starting
             once that slot is free, its waits have ended and its limits have room.

"Room" in a limit of capacity ``c``: fewer than ``c`` of the jobs handed out before it that
use the limit are still running, i.e. the job starts no earlier than the ``c``-th latest
end among them (the limit's ``c`` places are lanes, each taken in turn). Every sample is
therefore a feasible run: no slot runs two jobs, no limit more than ``c`` (for jobs that
overlap, the one handed out later counted the other), no job before its waits. Both are
serial recurrences over the jobs, vectorised across the samples (numpy, no compiled code
of their own): about ``n`` steps of a few array operations over the samples, some
0.1 s for 1,000 jobs x 1,000 samples.

Nodes start free at their stated ``free_at``; a graph carried into a re-plan
(:mod:`..stages.carried`) starts with its slots kept, jobs released and limit places held
until the carried jobs' exact ends (as floats never below them).

Zero spread: every factor is exactly 1 (``exp(0)``), and the static run repeats the plan:
each job starts when its planned slot, waits and limits allow, which is its planned start
when the plan's times are whole ticks (a list schedule starts each job as soon as they
allow it); so the makespan is the plan's and the deadline probability exactly 0 or 1.
Where ticks rounded a time up, jobs may start earlier than planned, never later.

The block (:func:`stage_confidence_block`) has the shape of
:func:`.simulation.confidence_block`: the static policy's numbers, the deadline
probability with its Wilson score interval (Wilson, J. Amer. Statist. Assoc. 22:209-212,
1927), makespan quantiles, and ``dynamic`` with the dynamic policy's.
"""

from __future__ import annotations

from collections.abc import Iterator
from typing import Any, Unpack

import numpy as np
import numpy.typing as npt

from ..model import FloatArray
from ..stages.listing import rank_of
from ..stages.plan import StagePlan
from ..stages.result import StageResult
from .simulation import (
    CHUNK_DRAWS,
    ConfidenceResult,
    SimulationOptions,
    _check_args,
    block_of,
)
from .spread import SpreadModel
from .streams import fill_normals, ziggurat_tables

I64 = npt.NDArray[np.int64]


def sample_factors(model: SpreadModel, samples: int, seed: int) -> Iterator[tuple[int, FloatArray]]:
    """The duration factors ``exp(sigma_j Z_j - shift_j)``, a chunk of samples at a time:
    ``(first sample, factors[rows, n])``, drawn as :func:`.simulation.simulate` draws them
    (same chunks, streams and normals; the exponential in float32 as its kernels do)."""
    n = model.sigma.size
    x, k, f = ziggurat_tables()
    rows_per_chunk = max(1, CHUNK_DRAWS // max(1, n))
    starts = list(range(0, samples, rows_per_chunk))
    streams = np.random.SeedSequence(seed).spawn(len(starts))
    for lo, stream in zip(starts, streams, strict=True):
        rows = min(samples, lo + rows_per_chunk) - lo
        if model.deterministic:  # exp(0) is exactly 1: no draw changes anything
            yield lo, np.ones((rows, n))
            continue
        state = np.array(np.random.SFC64(stream).state["state"]["state"], dtype=np.uint64)
        z = np.empty(rows * n)
        fill_normals(state, z, x, k, f)
        arg = (model.sigma[None, :] * z.reshape(rows, n) - model.shift[None, :]).astype(np.float32)
        yield lo, np.exp(arg).astype(np.float64)


def plan_order(plan: StagePlan) -> I64:
    """The jobs in plan order: by planned start, ties by the graph's topological order."""
    topo = rank_of(plan.problem.order)
    out: I64 = np.lexsort((topo, plan.start))
    return out


def run_samples(
    plan: StagePlan, durations: FloatArray, policy: str
) -> tuple[FloatArray, npt.NDArray[np.int32]]:
    """Makespans (and the node that finished last) of ``plan`` run under ``policy`` with
    ``durations[s, j]`` seconds at speed 1 in sample ``s`` (module docstring)."""
    p = plan.problem
    t = p.timing
    rows = durations.shape[0]
    speed = np.array([nd.speed for nd in p.instance.nodes], dtype=np.float64)
    slot_node = np.repeat(np.arange(p.m), np.diff(t.slot_base))
    if p.carried is None:
        free = np.array([nd.free_at for nd in p.instance.nodes], dtype=np.float64)
        slot0 = np.repeat(free, np.diff(t.slot_base))
        release = np.zeros(p.n)
        held_limit, held_end = t.held_limit, np.zeros(0)
    else:  # the exact carried times, as floats never below them
        free, ends = p.carried.seconds()
        slot0 = p.carried.slot_free(free, p.slots, ends)
        release = p.carried.release(ends)
        held_limit, held_end = p.carried.held(ends)
    slots = np.tile(slot0, (rows, 1))
    lanes = []
    for lim, cap in enumerate(p.capacities.tolist()):
        lane = np.zeros((rows, cap))
        held = np.sort(held_end[held_limit == lim])[::-1][:cap]
        lane[:, : held.size] = held
        lanes.append(lane)
    end = np.zeros((rows, p.n))
    last = np.full(rows, float(slots.max()) if slots.size else 0.0)
    crit = np.zeros(rows, dtype=np.int32)
    crit[:] = slot_node[int(np.argmax(slot0))] if slot0.size else 0
    static = policy == "static"
    prev = np.zeros((rows, p.m))  # static: the latest start on each node so far
    eligible_slots = [
        np.flatnonzero(t.eligible[ty, slot_node]) for ty in range(t.eligible.shape[0])
    ]
    every = np.arange(rows)
    for j in plan_order(plan).tolist():
        ready = np.full(rows, release[j])
        preds = p.predecessors_of(j)
        if preds.size:
            ready = np.maximum(ready, end[:, preds].max(axis=1))
        for lim in p.limits_of(j).tolist():
            ready = np.maximum(ready, lanes[lim].min(axis=1))
        if static:  # static: its planned node, in the node's order
            k = int(plan.node[j])
            cols = np.arange(t.slot_base[k], t.slot_base[k + 1])
            ready = np.maximum(ready, prev[:, k])
        else:
            cols = eligible_slots[int(t.job_type[j])]
        pick = np.argmin(slots[:, cols], axis=1)
        col = cols[pick]
        start = np.maximum(ready, slots[every, col])
        node = slot_node[col]
        stop = start + durations[:, j] / speed[node]
        slots[every, col] = stop
        end[:, j] = stop
        if static:
            prev[:, int(plan.node[j])] = start
        for lim in p.limits_of(j).tolist():
            lane = lanes[lim]
            lane[every, np.argmin(lane, axis=1)] = stop
        later = stop > last
        last = np.where(later, stop, last)
        crit = np.where(later, node.astype(np.int32), crit)
    return last, crit


def simulate_stages(
    plan: StagePlan | StageResult,
    *,
    spread: float | None = None,
    samples: int = 1000,
    seed: int = 0,
    deadline: float | None = None,
    policy: str = "static",
) -> ConfidenceResult:
    """Monte-Carlo makespans of a stage plan under ``policy`` (module docstring).

    ``spread`` is the batch coefficient of variation for jobs without ``duration_p90``;
    ``deadline`` defaults to the instance's. ``planned_makespan`` in the answer is the
    result's makespan (with the stated durations) when given a :class:`StageResult`,
    else the plan's makespan in ticks."""
    sp = plan.plan if isinstance(plan, StageResult) else plan
    inst = sp.problem.instance
    if deadline is None:
        deadline = inst.deadline
    _check_args(samples, policy, deadline)
    model = SpreadModel.from_instance(inst, spread)
    makespan = np.empty(samples)
    critical = np.empty(samples, dtype=np.int32)
    for lo, factors in sample_factors(model, samples, seed):
        hi = lo + factors.shape[0]
        makespan[lo:hi], critical[lo:hi] = run_samples(
            sp, inst.durations[None, :] * factors, policy
        )
    return ConfidenceResult(
        policy=policy,
        samples=samples,
        seed=seed,
        deadline=deadline,
        planned_makespan=plan.makespan if isinstance(plan, StageResult) else sp.makespan,
        makespans=makespan,
        critical=critical,
        node_ids=tuple(nd.id for nd in inst.nodes),
        model=model,
    )


def stage_confidence_block(
    plan: StagePlan | StageResult, **options: Unpack[SimulationOptions]
) -> dict[str, Any]:
    """The ``confidence`` block of a stage plan result: the static policy, with
    ``dynamic`` inside (the shape of :func:`.simulation.confidence_block`)."""
    static = simulate_stages(plan, policy="static", **options)
    dynamic = simulate_stages(plan, policy="dynamic", **options)
    return block_of(static, dynamic)
