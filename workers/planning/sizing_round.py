"""A packing at the LP bound from the LP's own fractional solution (residual rounding).

When the column generation of :mod:`.sizing_lp` on the lengths as they are ends with its
master problem at most ``m`` nodes, its basis is a fractional packing into ``m`` nodes:
pattern ``p`` used ``x_p`` times. Each pattern is used ``floor(x_p)`` times as it is
(every place takes a job of its length, or, once that length is used up, the longest
shorter job left, as the dual-optimal-inequality columns of :mod:`.exact.lpbound`
allow), and the few jobs left -- those of the fractional parts, a few hundred at most
-- are packed into the nodes left by the perfect packing search of
:mod:`workers.planning.perfect`. This is the residual rounding heuristic of cutting
stock (e.g. Wascher and Gau 1996; Belov and Scheithauer 2006; from memory): with few
jobs per node the LP is nearly always tight, and at the bound almost every node must be
full to the tick, which the LP's patterns are and greedy rules are not.

Only for lengths in whole ticks that are the jobs' own (rounded neither way): then a
pattern that fits the LP's capacity fits the deadline, and the caller checks the plan
again on the true durations.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np
import numpy.typing as npt

from .exact import lpbound
from .perfect import perfect_fill

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]


def _patterns(lp: lpbound.LPBound) -> list[tuple[float, list[tuple[int, int]]]]:
    """The patterns of the master's basis with their values, largest value first: (x,
    [(length index, count), ...])."""
    r = lp.r
    basis, cols = lp.cg.basis, lp.cg.cols
    first = 2 * r - 1  # column ids below are surplus and dual-optimal-inequality columns
    out = []
    for k in range(r):
        t = int(basis.head[k]) - first
        x = float(basis.xb[k])
        if t >= 0 and x >= 1.0 - 1e-9:
            places = [(int(cols.idx[t, e]), int(cols.cnt[t, e])) for e in range(int(cols.nnz[t]))]
            out.append((x, places))
    out.sort(key=lambda p: -p[0])
    return out


def round_packing(
    lp: lpbound.LPBound,
    q: I64,
    cap: int,
    seconds: float,
    should_stop: Callable[[], bool] | None = None,
) -> I32 | None:
    """A packing of ``q`` (whole ticks; the lengths of ``lp``, which ended NOT_REFUTED at
    ``lp.m`` nodes of ``cap`` ticks) into ``lp.m`` nodes, or None (the node of every
    job)."""
    t_end = time.perf_counter() + seconds
    m, s = lp.m, lp.s
    r = int(s.size)
    pos = np.flatnonzero(q > 0)
    order = pos[np.argsort(-q[pos], kind="stable")]  # longest first, as s is
    left = lp.d0.copy()
    if not np.array_equal(np.repeat(s, left), q[order]):
        return None  # not this batch's lengths
    nxt = np.concatenate(([0], np.cumsum(left)[:-1])).astype(np.int64)  # next job of each
    node_of = np.full(q.size, -1, dtype=np.int32)
    node_of[q <= 0] = 0  # zero-length jobs: node 0
    nodes = 0
    for x, places in _patterns(lp):
        for _ in range(int(x + 1e-9)):
            if nodes >= m:
                break
            took = False
            for i, cnt in places:
                for _ in range(cnt):
                    j = i
                    while j < r and left[j] == 0:
                        j += 1
                    if j == r:
                        break
                    node_of[order[nxt[j]]] = nodes
                    nxt[j] += 1
                    left[j] -= 1
                    took = True
            nodes += int(took)
    rest = np.flatnonzero(node_of < 0)
    if rest.size == 0:
        return node_of
    room = m - nodes
    if room <= 0 or time.perf_counter() >= t_end:
        return None
    fill = perfect_fill(q[rest], cap, room, t_end - time.perf_counter(), should_stop=should_stop)
    if fill is None or not fill.reached:
        return None
    node_of[rest] = nodes + fill.bin_of.astype(np.int32)
    return node_of
