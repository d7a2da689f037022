"""Compiled inner loops (numba), each with the same code runnable as plain Python.

The greedy rules are a loop of n heap operations: in pure Python that costs about twenty
times a numpy argsort of the same durations; compiled it costs a fraction of one
(``bench/lpt_scale.py``, figures in ``bench/RESULTS.md``). The functions are written in
the subset of Python that numba compiles, so ``*.py_func`` (or running without numba, or
with ``SPANWRIGHT_NO_JIT=1``) gives the pure-Python path that tests compare against.
"""

from __future__ import annotations

import os
from collections.abc import Callable
from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt

F = TypeVar("F", bound=Callable[..., Any])

try:  # pragma: no cover - exercised by whichever environment runs the tests
    if os.environ.get("SPANWRIGHT_NO_JIT"):
        raise ImportError("SPANWRIGHT_NO_JIT is set")
    import numba

    HAVE_JIT = True
except ImportError:  # pragma: no cover
    numba = None
    HAVE_JIT = False


def jit(func: F) -> F:
    """Compile ``func`` with numba (cached on disk) when available; keep ``.py_func``."""
    if numba is None:
        func.py_func = func  # type: ignore[attr-defined]
        return func
    compiled = numba.njit(cache=True, nogil=True)(func)
    return compiled  # type: ignore[no-any-return]


@jit
def least_loaded(
    order: npt.NDArray[np.intp], durations: npt.NDArray[np.float64], m: int
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """Give each job, in ``order``, to the node that is free first.

    Ties between nodes go to the lowest node index. Returns (node of each job, start of
    each job) indexed by job. A binary min-heap on (load, node index) makes it
    O(n log m).
    """
    n = order.shape[0]
    node_of = np.empty(durations.shape[0], dtype=np.int32)
    start = np.empty(durations.shape[0], dtype=np.float64)
    hload = np.zeros(m, dtype=np.float64)  # heap of loads...
    hnode = np.arange(m).astype(np.int32)  # ...and the node each entry belongs to
    for t in range(n):
        j = order[t]
        k = hnode[0]
        ld = hload[0]
        node_of[j] = k
        start[j] = ld
        ld += durations[j]
        # sift the root down with its new load
        i = 0
        while True:
            c = 2 * i + 1
            if c >= m:
                break
            r = c + 1
            if r < m and (hload[r] < hload[c] or (hload[r] == hload[c] and hnode[r] < hnode[c])):
                c = r
            if hload[c] < ld or (hload[c] == ld and hnode[c] < k):
                hload[i] = hload[c]
                hnode[i] = hnode[c]
                i = c
            else:
                break
        hload[i] = ld
        hnode[i] = k
    return node_of, start


@jit
def earliest_finish(
    order: npt.NDArray[np.intp],
    durations: npt.NDArray[np.float64],
    speeds: npt.NDArray[np.float64],
    free_at: npt.NDArray[np.float64],
    job_type: npt.NDArray[np.int32],
    eligible: npt.NDArray[np.bool_],
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """Give each job, in ``order``, to the eligible node where it would finish first.

    ``eligible[t, k]`` says whether node k may run jobs of type t. Ties go to the lowest
    node index. O(n m). Raises nothing: a job with no eligible node gets node -1.
    """
    n = order.shape[0]
    m = speeds.shape[0]
    node_of = np.full(durations.shape[0], -1, dtype=np.int32)
    start = np.zeros(durations.shape[0], dtype=np.float64)
    load = free_at.copy()
    for t in range(n):
        j = order[t]
        row = job_type[j]
        best = -1
        best_end = np.inf
        for k in range(m):
            if eligible[row, k]:
                e = load[k] + durations[j] / speeds[k]
                if e < best_end:
                    best_end = e
                    best = k
        if best >= 0:
            node_of[j] = best
            start[j] = load[best]
            load[best] = best_end
    return node_of, start
