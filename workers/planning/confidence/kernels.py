"""The compiled simulation kernels: many samples of one plan under one execution policy.

Execution policies
------------------
* ``static``: each node runs its own jobs of the plan, in plan order, back to back. Its
  finish is its planned finish plus the sum of its jobs' slips ``(D_j - d_j) / speed``; for
  a plan without idle time (every plan the core makes) that is
  ``free_at + sum(D_j) / speed``. Only the per-node sums matter, so the kernel keeps one
  accumulator per node and never materialises the samples x jobs matrix.
* ``dynamic``: a dispatcher keeps one queue, the jobs in plan order (by planned start, ties
  by node index); whenever a node frees up it takes the first job left in the queue that
  it may run (``requires`` within its ``provides``). With zero spread on identical nodes
  and a plan made by list scheduling (``list``, ``longest_first``) this reproduces the plan
  exactly; on heterogeneous farms the plan may have put a job on a node that frees later
  but finishes it sooner, and dispatch then differs from the plan even at zero spread.

Every kernel is written with ``kernels.jit``, so ``.py_func`` is its pure-Python twin
(the helpers it calls stay compiled there).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from ..kernels import jit
from ..model import FloatArray
from .streams import U64Array, fill_normals

#: job or node indices, and offsets into lists of them
IndexArray = npt.NDArray[np.int64]

#: EXP_NOTE: the lognormal factor exp(sigma z - shift) is computed in float32 (expf), about
#: 2 ns a draw cheaper than float64 on the benchmark machine. Its relative error is about
#: |a| 2^-24 (rounding the argument a) plus one float32 ulp: below 1e-6 for |a| < 10, and
#: 1.9e-7 at most on the benchmark's draws (bench/confidence.py measures it), far under the
#: Monte-Carlo error; exp(0) is still exactly 1, so zero spread stays exact. Sums are float64.


@jit
def _record_last(
    finish: FloatArray, s: int, makespan: FloatArray, critical: npt.NDArray[np.int32]
) -> None:
    """Sample ``s``: the makespan (latest node finish) and the node (lowest index on ties)."""
    best = finish[0]
    arg = 0
    for i in range(1, finish.shape[0]):
        if finish[i] > best:
            best = finish[i]
            arg = i
    makespan[s] = best
    critical[s] = arg


class Draws(NamedTuple):
    """What both policies draw each sample's durations from: job j's duration is its
    estimate times ``exp(sigma[j] z - shift[j])``, z a standard normal made from the SFC64
    ``state`` (advanced in place) with the ziggurat tables ``x``, ``k``, ``f``
    (:func:`.streams.fill_normals`)."""

    state: U64Array
    sigma: FloatArray
    shift: FloatArray
    x: FloatArray
    k: FloatArray
    f: FloatArray


@jit
def static_rows(
    draws: Draws,
    node_of: npt.NDArray[np.int32],
    weight: FloatArray,
    base: FloatArray,
    makespan: FloatArray,
    critical: npt.NDArray[np.int32],
) -> None:
    """Static policy, one sample per entry of ``makespan``.

    Node finish = ``base[node]`` (planned finish) + sum of ``weight_j (exp(sigma_j z_j -
    shift_j) - 1)`` over its jobs, with ``weight_j = d_j / speed``; one accumulator per node.
    """
    state, sigma, shift, x, k, f = draws
    n = weight.shape[0]
    m = base.shape[0]
    z = np.empty(n)
    acc = np.empty(m)
    for s in range(makespan.shape[0]):
        fill_normals(state, z, x, k, f)
        acc[:] = 0.0
        for j in range(n):
            e = np.exp(np.float32(sigma[j] * z[j] - shift[j]))  # float32: see EXP_NOTE
            acc[node_of[j]] += weight[j] * (float(e) - 1.0)
        for i in range(m):
            acc[i] += base[i]  # the node's finish: planned finish plus its slips
        _record_last(acc, s, makespan, critical)


@jit
def _sift_down(hfree: FloatArray, hnode: IndexArray, size: int, i: int, t: float, nd: int) -> None:
    """Put (``t``, ``nd``) in slot ``i`` of the min-heap on (free time, node index) of
    ``size`` entries and sift it down to its place."""
    while True:
        c = 2 * i + 1
        if c >= size:
            break
        r = c + 1
        if r < size and (hfree[r] < hfree[c] or (hfree[r] == hfree[c] and hnode[r] < hnode[c])):
            c = r
        if hfree[c] < t or (hfree[c] == t and hnode[c] < nd):
            hfree[i] = hfree[c]
            hnode[i] = hnode[c]
            i = c
        else:
            break
    hfree[i] = t
    hnode[i] = nd


class Dispatch(NamedTuple):
    """What dynamic dispatch reads of a plan: the plan's job order, and which jobs each node
    may take (:func:`.simulation.dispatch_tables` builds it).

    Jobs of each type (a distinct ``requires`` set) are listed in plan order in
    ``type_jobs[type_start[t]:type_start[t+1]]``; ``node_types[node_types_start[k]:
    node_types_start[k+1]]`` are the types node k may run.
    """

    rank: IndexArray  # every job's place in the plan order
    type_start: IndexArray
    type_jobs: IndexArray
    node_types_start: IndexArray
    node_types: IndexArray


@jit
def dispatch_row(
    dur: FloatArray, speed: FloatArray, free_at: FloatArray, plan: Dispatch, finish: FloatArray
) -> int:
    """Dynamic dispatch of one sample; fills ``finish`` per node, returns jobs run.

    A min-heap on (free time, node index) picks the node that frees first; it takes the job
    of smallest plan rank among the heads of its types (:class:`Dispatch`), or retires when
    none is left for it. (Node indices make the heap's order strict, so which node comes
    out first does not depend on how the heap was built.)
    """
    rank, type_start, type_jobs, node_types_start, node_types = plan
    m = speed.shape[0]
    head = type_start[:-1].copy()
    hfree = np.empty(m)
    hnode = np.empty(m, dtype=np.int64)
    for i in range(m):
        finish[i] = free_at[i]
        hfree[i] = free_at[i]
        hnode[i] = i
    for i in range(m // 2 - 1, -1, -1):  # heapify bottom-up (Floyd)
        _sift_down(hfree, hnode, m, i, hfree[i], hnode[i])
    size = m
    ran = 0
    n = dur.shape[0]
    while size > 0 and ran < n:
        nd = hnode[0]
        t = hfree[0]
        best = -1
        best_type = -1
        for q in range(node_types_start[nd], node_types_start[nd + 1]):
            ty = node_types[q]
            h = head[ty]
            if h < type_start[ty + 1]:
                j = type_jobs[h]
                if best < 0 or rank[j] < rank[best]:
                    best = j
                    best_type = ty
        if best < 0:
            # nothing left this node may run: drop it from the heap
            size -= 1
            t = hfree[size]
            nd = hnode[size]
            if size == 0:
                break
        else:
            head[best_type] += 1
            t = t + dur[best] / speed[nd]
            finish[nd] = t
            ran += 1
        _sift_down(hfree, hnode, size, 0, t, nd)
    return ran


@jit
def _group_min(vals: FloatArray, lo: int, group: int) -> tuple[float, int]:
    """The least of the ``group`` values from slot ``lo`` on, and its slot (lowest on ties).

    (Returned, not stored through arrays: stores cost the grouped dispatch 10%.)"""
    b = vals[lo]
    a = lo
    for i in range(lo + 1, lo + group):
        if vals[i] < b:
            b = vals[i]
            a = i
    return b, a


@jit
def dispatch_row_plain(
    dur: FloatArray,
    speed: FloatArray,
    free_at: FloatArray,
    order: IndexArray,
    group: int,
    finish: FloatArray,
) -> int:
    """Dynamic dispatch of one sample when every node may run every job.

    The jobs in ``order`` go each to the node that frees first (ties: lowest index). The
    nodes sit in groups of ``group`` with each group's minimum kept, so a step scans the
    group minima and then the one group it changed: about 2 sqrt(m) compares without
    unpredictable branches; about twice as fast as a binary heap for 200 nodes (measured
    42 against 81 ns a job on the benchmark machine). Same answers as :func:`dispatch_row`.
    """
    m = speed.shape[0]
    ng = (m + group - 1) // group
    vals = np.full(ng * group, np.inf)
    for i in range(m):
        vals[i] = free_at[i]
        finish[i] = free_at[i]
    gmin = np.empty(ng)
    garg = np.empty(ng, dtype=np.int64)
    for g in range(ng):
        gmin[g], garg[g] = _group_min(vals, g * group, group)
    for q in range(order.shape[0]):
        j = order[q]
        bg = 0
        bv = gmin[0]
        for g in range(1, ng):
            if gmin[g] < bv:
                bv = gmin[g]
                bg = g
        nd = garg[bg]
        t = bv + dur[j] / speed[nd]
        vals[nd] = t
        finish[nd] = t
        gmin[bg], garg[bg] = _group_min(vals, bg * group, group)
    return int(order.shape[0])


@jit
def dynamic_rows(
    draws: Draws,
    durations: FloatArray,
    speed: FloatArray,
    free_at: FloatArray,
    plan: Dispatch,
    makespan: FloatArray,
    critical: npt.NDArray[np.int32],
) -> None:
    """Dynamic policy, one sample per entry of ``makespan`` (same draws as static).

    With one job type that every node may run, ``plan.type_jobs`` is the plan order and the
    grouped :func:`dispatch_row_plain` does the dispatch; otherwise :func:`dispatch_row`.
    """
    state, sigma, shift, x, k, f = draws
    n = durations.shape[0]
    m = speed.shape[0]
    z = np.empty(n)
    dur = np.empty(n)
    finish = np.empty(m)
    plain = plan.type_start.shape[0] == 2 and plan.node_types.shape[0] == m
    group = max(4, int(math.sqrt(m)))
    for s in range(makespan.shape[0]):
        fill_normals(state, z, x, k, f)
        for j in range(n):
            dur[j] = durations[j] * float(np.exp(np.float32(sigma[j] * z[j] - shift[j])))
        if plain:
            dispatch_row_plain(dur, speed, free_at, plan.type_jobs, group, finish)
        else:
            dispatch_row(dur, speed, free_at, plan, finish)
        _record_last(finish, s, makespan, critical)
