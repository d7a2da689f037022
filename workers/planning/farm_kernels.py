"""Compiled inner loops of the farm rules (numba, through :func:`.kernels.jit`).

Nodes are grouped in classes of one speed and one eligibility (``farm.node_classes``):
inside a class the node that frees first is where a job ends first, which is what makes
earliest finish O(classes + log m) a job and the local search's moves cheap. Like every
kernel, each is written in the subset of Python that numba compiles, so
:func:`.kernels.pure` gives its pure-Python twin (what the tests compare against, and what
``farm`` runs on instances too small to be worth loading compiled code).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from .kernels import Farm, jit, place_job


@jit
def _sift_down(
    heap: npt.NDArray[np.int64], lo: int, size: int, i: int, load: npt.NDArray[np.float64]
) -> None:
    """Restore the min-heap on (load, node index) of ``heap[lo:lo+size]`` from ``i``."""
    k = heap[lo + i]
    while True:
        c = 2 * i + 1
        if c >= size:
            break
        r = c + 1
        a = heap[lo + c]
        if r < size:
            b = heap[lo + r]
            if load[b] < load[a] or (load[b] == load[a] and b < a):
                c = r
                a = b
        if load[a] < load[k] or (load[a] == load[k] and a < k):
            heap[lo + i] = a
            i = c
        else:
            break
    heap[lo + i] = k


class NodeClasses(NamedTuple):
    """A farm's nodes grouped by (speed, which job types may run there): the node indices
    class by class (``members``), where each class starts in them (``start``, one more
    entry than classes) and whether class c may run jobs of type t (``eligible[t, c]``)."""

    members: npt.NDArray[np.int64]
    start: npt.NDArray[np.int64]
    eligible: npt.NDArray[np.bool_]


@jit
def earliest_finish_classes(
    order: npt.NDArray[np.intp], durations: npt.NDArray[np.float64], farm: Farm, nodes: NodeClasses
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """``kernels.earliest_finish`` for nodes in classes of one speed and one eligibility:
    inside a class the node that frees first is where a job ends first, so one heap per
    class gives the answer in O(classes + log m) a job instead of O(m). Ties go to the
    lowest node index among the nodes that free first."""
    speeds, free_at, job_type = farm.speeds, farm.free_at, farm.job_type
    members, class_start, class_eligible = nodes
    n = order.shape[0]
    nc = class_start.shape[0] - 1
    load = free_at.copy()
    heap = members.copy()
    for c in range(nc):
        lo = class_start[c]
        size = class_start[c + 1] - lo
        for i in range(size // 2 - 1, -1, -1):
            _sift_down(heap, lo, size, i, load)
    node_of = np.full(durations.shape[0], -1, dtype=np.int32)
    start = np.zeros(durations.shape[0], dtype=np.float64)
    for t in range(n):
        j = order[t]
        row = job_type[j]
        best_c = -1
        best_k = -1
        best_end = np.inf
        for c in range(nc):
            if class_eligible[row, c]:
                k = heap[class_start[c]]
                e = load[k] + durations[j] / speeds[k]
                if e < best_end or (e == best_end and k < best_k):
                    best_end = e
                    best_k = k
                    best_c = c
        if best_c >= 0:
            place_job(j, best_k, best_end, node_of, start, load)
            lo = class_start[best_c]
            _sift_down(heap, lo, class_start[best_c + 1] - lo, 0, load)
    return node_of, start


@jit
def improve(
    node_of: npt.NDArray[np.int32],
    durations: npt.NDArray[np.float64],
    farm: Farm,
    order: npt.NDArray[np.intp],
    nodes: NodeClasses,
    max_steps: int,
) -> tuple[int, bool]:
    """Local search on ``node_of`` (changed in place): move a job off the node that finishes
    last, or swap it with a shorter one elsewhere, whenever both nodes then finish strictly
    before the current makespan. ``order`` lists the jobs longest first. Returns (steps
    taken, True if no step helps any more).

    A move costs O(n + m + jobs on the critical node x classes): inside a class of nodes
    with one speed and one eligibility the node that finishes first is the best place.
    Before a swap search the jobs of every node are listed longest first (one pass over
    the jobs in longest-first order), so a partner is found by binary search in the window
    of durations that would help: O(n + jobs on the critical node x m x log n).
    """
    speeds, free_at, job_type, eligible = farm
    members, class_start, class_eligible = nodes
    n = durations.shape[0]
    m = speeds.shape[0]
    load = np.zeros(m)
    for j in range(n):
        load[node_of[j]] += durations[j]
    first = np.zeros(m + 1, dtype=np.int64)
    fill = np.zeros(m, dtype=np.int64)
    seg = np.empty(n, dtype=np.int64)
    nc = class_start.shape[0] - 1
    class_best = np.zeros(nc, dtype=np.int64)
    steps = 0
    while steps < max_steps:
        c = 0
        cmax = -1.0
        for k in range(m):
            e = free_at[k] + load[k] / speeds[k]
            if e > cmax:
                cmax = e
                c = k
        tol = 1e-12 * max(1.0, cmax)
        limit = cmax - tol
        moved = False
        # the node of every class (one speed, one eligibility) that finishes first
        for cl in range(nc):
            bk = -1
            bf = np.inf
            for q in range(class_start[cl], class_start[cl + 1]):
                k = members[q]
                e = free_at[k] + load[k] / speeds[k]
                if e < bf:
                    bf = e
                    bk = k
            class_best[cl] = bk
        # moves: the best destination for some job of the critical node
        for j in range(n):
            if node_of[j] != c or durations[j] <= 0:
                continue
            row = job_type[j]
            best = -1
            best_end = limit
            for cl in range(nc):
                k = class_best[cl]
                if k != c and class_eligible[row, cl]:
                    e = free_at[k] + (load[k] + durations[j]) / speeds[k]
                    if e < best_end:
                        best_end = e
                        best = k
            if best >= 0:
                node_of[j] = best
                load[c] -= durations[j]
                load[best] += durations[j]
                moved = True
                break
        if moved:
            steps += 1
            continue
        # every node's jobs, longest first (for the swap search)
        first[:] = 0
        for j in range(n):
            first[node_of[j] + 1] += 1
        for k in range(m):
            first[k + 1] += first[k]
        for k in range(m):
            fill[k] = first[k]
        for t in range(n):
            j = order[t]
            k = node_of[j]
            seg[fill[k]] = j
            fill[k] += 1
        # swaps: job j of the critical node against a shorter job i on node k, with
        # delta = p_j - p_i in (need_c, room_k): both nodes then end before the makespan.
        # For the longest j that has one, take the pair that balances the two nodes best.
        need_c = load[c] - (limit - free_at[c]) * speeds[c]
        for q in range(first[c], first[c + 1]):
            j = seg[q]
            rj = job_type[j]
            best_i = -1
            best_k = -1
            best_end = limit
            for k in range(m):
                if k == c or not eligible[rj, k] or first[k] == first[k + 1]:
                    continue
                room = (limit - free_at[k]) * speeds[k] - load[k]
                if room <= need_c:
                    continue
                hi_d = durations[j] - need_c  # p_i must be < hi_d ...
                lo_d = durations[j] - room  # ... and > lo_d
                # the delta that would make both nodes end together
                even = (free_at[c] - free_at[k] + load[c] / speeds[c] - load[k] / speeds[k]) / (
                    1.0 / speeds[c] + 1.0 / speeds[k]
                )
                want = min(max(durations[j] - even, lo_d), hi_d)
                # first position in node k's list (longest first) with p_i < want
                lo = first[k]
                hi = first[k + 1]
                while lo < hi:
                    mid = (lo + hi) // 2
                    if durations[seg[mid]] < want:
                        hi = mid
                    else:
                        lo = mid + 1
                # look a few places either side for an allowed partner in the window
                for r in range(max(first[k], lo - 4), min(first[k + 1], lo + 4)):
                    i = seg[r]
                    if not (lo_d < durations[i] < hi_d and eligible[job_type[i], c]):
                        continue
                    delta = durations[j] - durations[i]
                    e = max(
                        free_at[c] + (load[c] - delta) / speeds[c],
                        free_at[k] + (load[k] + delta) / speeds[k],
                    )
                    if e < best_end:
                        best_end = e
                        best_i = i
                        best_k = k
            if best_i >= 0:
                delta = durations[j] - durations[best_i]
                node_of[j] = best_k
                node_of[best_i] = c
                load[c] -= delta
                load[best_k] += delta
                moved = True
                break
        if not moved:
            return steps, True
        steps += 1
    return steps, False
