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

from collections.abc import Callable
from dataclasses import dataclass
from functools import cached_property
from itertools import pairwise

import numpy as np
import numpy.typing as npt

from ..kernels import HAVE_JIT
from .list_kernel import heads_tails, use_kernel
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
        head, d, tail = self.head, self.d, self.tail
        back = _follow(j, p.predecessors_of, lambda h, i: head[h] + d[h] == head[i])
        on = _follow(j, p.successors_of, lambda s, i: d[s] + tail[s] == tail[i])
        return best, [*back[::-1], j, *on]


def _follow(start: int, step: Callable[[int], I64], tight: Callable[[int, int], bool]) -> list[int]:
    """From ``start``, the walk that moves each time to the first of ``step(i)`` (its
    predecessors or successors) for which ``tight(next, i)`` holds, until none does; the
    jobs walked to, in order (``start`` left out)."""
    out: list[int] = []
    i = start
    while True:
        nxt = next((h for h in step(i).tolist() if tight(h, i)), -1)
        if nxt < 0:
            return out
        out.append(nxt)
        i = nxt


def _level_max(ptr: I64, idx: I64, rows: I64, a: I64, b: I64) -> tuple[I64, I64]:
    """For the ``rows`` with at least one entry: those rows and ``max a[i] + b[i]`` over
    their entries ``i``."""
    rows = rows[ptr[rows + 1] > ptr[rows]]
    if not rows.size:
        return rows, rows
    vals, counts = gather(ptr, idx, rows)
    starts = np.concatenate(([0], np.cumsum(counts)[:-1]))
    return rows, np.maximum.reduceat(a[vals] + b[vals], starts)


def longest_paths(problem: StageProblem, *, compiled: bool | None = None) -> Paths:
    """Heads and tails (see the module docstring) over the fastest eligible times; by
    the compiled kernel :func:`.list_kernel.heads_tails` where
    :func:`.list_kernel.use_kernel` says so (or ``compiled`` asks), else
    :func:`longest_paths_numpy`."""
    use = use_kernel(problem.n) if compiled is None else compiled and HAVE_JIT
    if not use:
        return longest_paths_numpy(problem)
    d = problem.timing.dmin
    head, tail = heads_tails(
        problem.order,
        problem.after_ptr,
        problem.after_idx,
        problem.succ_ptr,
        problem.succ_idx,
        np.ascontiguousarray(d, dtype=np.int64),
        release_ticks(problem),
    )
    return Paths(problem, d, head, tail)


def longest_paths_numpy(problem: StageProblem) -> Paths:
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
        _relax(rest, ap.tolist(), ai.tolist(), dl, hl)
        head = np.asarray(hl, dtype=np.int64)
        tl = [0] * n
        _relax(rest[::-1], sp.tolist(), si.tolist(), dl, tl)
        tail = np.asarray(tl, dtype=np.int64)
    for a, b in zip(levels[-2::-1], levels[:0:-1], strict=True):
        rows, top = _level_max(sp, si, order[a:b], d, tail)
        tail[rows] = np.maximum(tail[rows], top)
    return Paths(problem, d, head, tail)


def _relax(jobs: list[int], ptr: list[int], idx: list[int], d: list[int], out: list[int]) -> None:
    """For each of ``jobs`` in turn, ``out[j] = max(out[j], out[i] + d[i])`` over its
    neighbours ``i`` (``idx[ptr[j]:ptr[j + 1]]``): heads along predecessors in
    topological order, tails along successors in reverse."""
    for j in jobs:
        best = out[j]
        for i in idx[ptr[j] : ptr[j + 1]]:
            v = out[i] + d[i]
            if v > best:
                best = v
        out[j] = best
