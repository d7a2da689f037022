"""Heads and tails of a stage graph: longest paths, in whole ticks.

With ``d_j`` a job's running time on its fastest eligible node (``Timing.dmin``) and
``R_j`` the earliest tick a slot it may run on is free, or its release if later (a job
waiting for a job carried in, :mod:`.carried`, starts no earlier than that job's end):

* the **head** ``r_j = max(R_j, max_{i in after(j)} r_i + d_i)`` is a time before which
  job ``j`` cannot start in any plan (its predecessors run one after another along any
  path, each for at least ``d_i``; it cannot start before an eligible node is free);
* the **tail** ``q_j = max_{i waits for j} d_i + q_i`` (0 for a job nothing waits for)
  is a time that must follow job ``j``'s end before the plan can end.

Both are computed once, in topological order, in O(n + arcs).
"""

from __future__ import annotations

from dataclasses import dataclass
from functools import cached_property
from itertools import pairwise

import numpy as np
import numpy.typing as npt

from .problem import StageProblem, gather

I64 = npt.NDArray[np.int64]


def release_ticks(problem: StageProblem) -> I64:
    """``R_j``: the earliest tick a slot of a node job ``j`` may run on is free
    (``F_k`` unless carried jobs keep every slot of ``k``), or its release if later."""
    t = problem.timing
    ready = t.node_ready
    per_type = np.where(t.eligible, ready[None, :], np.iinfo(np.int64).max).min(axis=1)
    return np.ascontiguousarray(np.maximum(per_type[t.job_type], t.release))


@dataclass(frozen=True, eq=False)
class Paths:
    """Heads, tails and running times (``d = Timing.dmin``) of a problem, in ticks."""

    problem: StageProblem
    d: I64
    head: I64
    tail: I64

    @cached_property
    def bottom(self) -> I64:
        """``d_j + q_j``: the longest remaining path from job ``j``'s start to the end."""
        return self.d + self.tail

    def critical_path(self) -> tuple[int, list[int]]:
        """``max_j r_j + d_j + q_j`` and the jobs of one path that attains it, in order
        (the first job's head is its release ``R_j``)."""
        p = self.problem
        total = self.head + self.d + self.tail
        j = int(np.argmax(total))
        best = int(total[j])
        back: list[int] = []
        i = j
        while True:  # walk back along heads
            back.append(i)
            nxt = -1
            for h in p.predecessors_of(i).tolist():
                if self.head[h] + self.d[h] == self.head[i]:
                    nxt = h
                    break
            if nxt < 0:
                break
            i = nxt
        path = back[::-1]
        i = j
        while True:  # walk on along tails
            nxt = -1
            for s in p.successors_of(i).tolist():
                if self.d[s] + self.tail[s] == self.tail[i]:
                    nxt = s
                    break
            if nxt < 0:
                break
            path.append(nxt)
            i = nxt
        return best, path


def _level_max(ptr: I64, idx: I64, rows: I64, a: I64, b: I64) -> tuple[I64, I64]:
    """For the ``rows`` with at least one entry: those rows and ``max a[i] + b[i]`` over
    their entries ``i``."""
    rows = rows[ptr[rows + 1] > ptr[rows]]
    if not rows.size:
        return rows, rows
    vals, counts = gather(ptr, idx, rows)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    return rows, np.maximum.reduceat(a[vals] + b[vals], starts)


def longest_paths(problem: StageProblem) -> Paths:
    """Heads and tails (see the module docstring) over the fastest eligible times: whole
    levels of the topological order with numpy, the rest in plain Python."""
    d = problem.timing.dmin
    n = problem.n
    order, levels = problem.order, problem.levels.tolist()
    ap, ai = problem.after_ptr, problem.after_idx
    sp, si = problem.succ_ptr, problem.succ_idx
    head = release_ticks(problem)
    for a, b in pairwise(levels):
        rows, top = _level_max(ap, ai, order[a:b], head, d)
        head[rows] = np.maximum(head[rows], top)
    rest = order[levels[-1] :].tolist()
    tail = np.zeros(n, dtype=np.int64)
    if rest:
        dl = d.tolist()
        hl = head.tolist()
        apl, ail = ap.tolist(), ai.tolist()
        for j in rest:
            best = hl[j]
            for i in ail[apl[j] : apl[j + 1]]:
                v = hl[i] + dl[i]
                if v > best:
                    best = v
            hl[j] = best
        head = np.asarray(hl, dtype=np.int64)
        tl = [0] * n
        spl, sil = sp.tolist(), si.tolist()
        for j in reversed(rest):
            best = 0
            for i in sil[spl[j] : spl[j + 1]]:
                v = dl[i] + tl[i]
                if v > best:
                    best = v
            tl[j] = best
        tail = np.asarray(tl, dtype=np.int64)
    for a, b in zip(levels[-2::-1], levels[:0:-1], strict=True):
        rows, top = _level_max(sp, si, order[a:b], d, tail)
        tail[rows] = np.maximum(tail[rows], top)
    return Paths(problem, d, head, tail)
