"""Fast constructions that give the exact search its first upper bound.

``multifit``   Coffman, Garey and Johnson (1978): binary search on a capacity C with
               first-fit decreasing (FFD) as the test "do the jobs fit in m bins of size C?",
               between max(S/m, p_1) and max(2S/m, p_1); here on whole ticks, run until the
               interval closes (at most ``iterations`` halvings).
``ldm``        Karmarkar and Karp (1982) largest differencing for m-way partitioning: keep
               partial partitions (m subset sums each), repeatedly merge the two whose
               spread (largest minus smallest sum) is largest, pairing the largest sums of
               one with the smallest of the other.

Both work on integer ticks and return the node of every job (indices into ``q``).
"""

from __future__ import annotations

import heapq
from collections.abc import Callable

import numpy as np
import numpy.typing as npt

from ..kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: LDM costs about n*m element operations in Python: skip it beyond this
LDM_MAX_WORK = 2_000_000


@jit
def first_fit_decreasing(q: I64, m: int, cap: int, node_of: I32) -> bool:
    """FFD of ``q`` (longest first) into ``m`` bins of size ``cap``; fills ``node_of``.

    Returns False as soon as a job fits in no bin. First fit finds the leftmost bin with
    room in O(log m): a tree over the bins holds the largest room below each node (bins
    not opened yet have all of ``cap``, so the leftmost of them is the next one to open).
    """
    n = q.shape[0]
    size = 1
    while size < m:
        size *= 2
    room = np.full(2 * size, -1, dtype=np.int64)
    for k in range(m):
        room[size + k] = cap
    for v in range(size - 1, 0, -1):
        room[v] = max(room[2 * v], room[2 * v + 1])
    for j in range(n):
        w = q[j]
        if room[1] < w:
            return False
        v = 1
        while v < size:
            v = 2 * v if room[2 * v] >= w else 2 * v + 1
        node_of[j] = v - size
        room[v] -= w
        v //= 2
        while v >= 1:
            room[v] = max(room[2 * v], room[2 * v + 1])
            v //= 2
    return True


def multifit(
    q: I64,
    m: int,
    iterations: int = 30,
    compiled: bool = True,
    should_stop: Callable[[], bool] | None = None,
) -> I32 | None:
    """MULTIFIT on ticks (``q`` longest first); the best FFD packing found, or None.

    ``should_stop`` is asked between two halvings (the best packing so far is returned)."""
    ffd = first_fit_decreasing if compiled else first_fit_decreasing.py_func  # type: ignore[attr-defined]
    total = int(q.sum())
    lo = max(-(-total // m), int(q[0])) - 1  # FFD fails here or below (by the bounds)
    hi = max(-(-2 * total // m), int(q[0]))
    node_of = np.zeros(q.size, dtype=np.int32)
    best: I32 | None = None
    if ffd(q, m, hi, node_of):
        best = node_of.copy()
    else:  # pragma: no cover - FFD always fits at 2S/m (Coffman et al. 1978)
        return None
    for _ in range(iterations):
        if hi - lo <= 1 or (should_stop is not None and should_stop()):
            break
        mid = (lo + hi) // 2
        if ffd(q, m, mid, node_of):
            hi = mid
            best = node_of.copy()
        else:
            lo = mid
    return best


def ldm(q: I64, m: int, should_stop: Callable[[], bool] | None = None) -> I32 | None:
    """Largest differencing method (m-way Karmarkar-Karp); None when too large to run, or
    when ``should_stop`` (asked every few merges) says so.

    A partition is m subset sums (sorted descending) and the subset each one is; subsets
    are kept as a merge forest (a new subset is the union of two older ones), so a merge
    costs O(m log m) and the jobs are collected once at the end.
    """
    n = int(q.size)
    if n * m > LDM_MAX_WORK:
        return None
    left: list[int] = []  # subset n + t is the union of left[t] and right[t]
    right: list[int] = []
    heap: list[tuple[int, int, I64, I64]] = []
    for j in range(n):
        sums = np.zeros(m, dtype=np.int64)
        sums[0] = q[j]
        ids = np.full(m, -1, dtype=np.int64)
        ids[0] = j
        heap.append((-int(q[j]), j, sums, ids))
    heapq.heapify(heap)
    tie = n
    while len(heap) > 1:
        if should_stop is not None and tie % 64 == 0 and should_stop():
            return None
        _, _, sa, ia = heapq.heappop(heap)
        _, _, sb, ib = heapq.heappop(heap)
        sums = sa + sb[::-1]  # largest of one with smallest of the other
        ib_rev = ib[::-1]
        ids = np.maximum(ia, ib_rev)
        both = (ia >= 0) & (ib_rev >= 0)
        count = int(both.sum())
        if count:
            ids[both] = np.arange(n + len(left), n + len(left) + count)
            left.extend(ia[both].tolist())
            right.extend(ib_rev[both].tolist())
        order = np.argsort(-sums, kind="stable")
        sums, ids = sums[order], ids[order]
        heapq.heappush(heap, (-int(sums[0] - sums[-1]), tie, sums, ids))
        tie += 1
    node_of = np.zeros(n, dtype=np.int32)
    for k, g in enumerate(heap[0][3].tolist()):
        stack = [g] if g >= 0 else []
        while stack:
            x = stack.pop()
            if x < n:
                node_of[x] = k
            else:
                stack.append(left[x - n])
                stack.append(right[x - n])
    return node_of


def makespan_ticks(q: I64, node_of: I32, m: int) -> int:
    """Largest node load of an assignment, in ticks."""
    return int(np.bincount(node_of, weights=q, minlength=m).max())
