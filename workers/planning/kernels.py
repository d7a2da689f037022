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
from types import ModuleType
from typing import Any, NamedTuple, TypeVar, cast

import numpy as np
import numpy.typing as npt

F = TypeVar("F", bound=Callable[..., Any])

numba: ModuleType | None
try:  # pragma: no cover - exercised by whichever environment runs the tests
    if os.environ.get("SPANWRIGHT_NO_JIT"):
        raise ImportError("SPANWRIGHT_NO_JIT is set")
    import numba
except ImportError:  # pragma: no cover
    numba = None

HAVE_JIT = numba is not None


def jit(func: F) -> F:
    """Compile ``func`` with numba (cached on disk) when available.

    The plain-Python function stays reachable through :func:`pure`.
    """
    if numba is None:
        return func
    return cast(F, numba.njit(cache=True, nogil=True)(func))


def inline(func: F) -> F:
    """A helper of the kernels: compiled into each :func:`jit` function that calls it
    (numba's ``register_jitable``, inlined there), plain Python when called from Python, so
    a kernel's pure-Python twin stays plain Python through its helpers (numpy scalars keep
    their types and wrapping arithmetic)."""
    if numba is None:
        return func
    from numba.extending import register_jitable

    return register_jitable(inline="always")(func)


def pure(func: F) -> F:
    """The pure-Python source of a :func:`jit` function (itself when not compiled)."""
    return cast(F, getattr(func, "py_func", func))


@jit
def assign_in_order(
    durations: npt.NDArray[np.float64], m: int
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """Give each job, in array order, to the node that is free first.

    Ties between nodes go to the lowest node index. Returns (node, start) per position.
    A tournament (winner) tree over the m nodes carries each subtree's least load and its
    node; preferring the left subtree on equal loads is exactly "lowest index wins",
    because every index on the left is smaller. O(n log m), and the jobs are read in
    order (no random access), which is what makes it fast on a million jobs.
    """
    n = durations.shape[0]
    node = np.empty(n, dtype=np.int32)
    start = np.empty(n, dtype=np.float64)
    size = 1
    while size < m:
        size *= 2
    tv = np.full(2 * size, np.inf)  # least load in the subtree of each slot
    tk = np.zeros(2 * size, dtype=np.int64)  # ... and the node that has it
    for k in range(size):
        tk[size + k] = k
        if k < m:
            tv[size + k] = 0.0
    for i in range(size - 1, 0, -1):
        a = 2 * i
        if tv[a + 1] < tv[a]:
            a += 1
        tv[i] = tv[a]
        tk[i] = tk[a]
    for t in range(n):
        k = tk[1]
        v = tv[1]
        node[t] = np.int32(k)
        start[t] = v
        v += durations[t]
        i = size + k
        tv[i] = v
        while i > 1:
            s = i ^ 1
            sv = tv[s]
            # the sibling wins when lighter, or equally light and on the left (i odd);
            # written without a branch: the outcome is unpredictable, a select is not
            c = np.int64(sv < v) | (np.int64(sv == v) & (i & 1))
            k = k + (tk[s] - k) * c
            v = min(v, sv)
            i >>= 1
            tv[i] = v
            tk[i] = k
    return node, start


@inline
def place_job(
    j: int,
    k: int,
    end: float,
    node_of: npt.NDArray[np.int32],
    start: npt.NDArray[np.float64],
    load: npt.NDArray[np.float64],
) -> None:
    """Job ``j`` on node ``k``: it starts at the node's load, which becomes ``end``."""
    node_of[j] = k
    start[j] = load[k]
    load[k] = end


class Farm(NamedTuple):
    """A farm as the kernels read it: each node's speed and the time it is free, each job's
    type (a distinct ``requires`` set) and whether node k may run jobs of type t
    (``eligible[t, k]``)."""

    speeds: npt.NDArray[np.float64]
    free_at: npt.NDArray[np.float64]
    job_type: npt.NDArray[np.int32]
    eligible: npt.NDArray[np.bool_]


@jit
def earliest_finish(
    order: npt.NDArray[np.intp], durations: npt.NDArray[np.float64], farm: Farm
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """Give each job, in ``order``, to the eligible node of ``farm`` where it would finish
    first. Ties go to the lowest node index. O(n m). Raises nothing: a job with no eligible
    node gets node -1.
    """
    speeds, free_at, job_type, eligible = farm
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
            place_job(j, best, best_end, node_of, start, load)
    return node_of, start


def least_loaded(
    order: npt.NDArray[np.intp], durations: npt.NDArray[np.float64], m: int
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """Give each job, in ``order``, to the node that is free first (lowest index on ties).

    Returns (node of each job, start of each job) indexed by job. Jobs not in ``order``
    keep node 0 and start 0.
    """
    node_in_order, start_in_order = assign_in_order(durations[order], m)
    node_of = np.zeros(durations.shape[0], dtype=np.int32)
    start = np.zeros(durations.shape[0], dtype=np.float64)
    node_of[order] = node_in_order
    start[order] = start_in_order
    return node_of, start


@jit
def chain_starts(
    order: npt.NDArray[np.intp],
    node_of: npt.NDArray[np.int32],
    run: npt.NDArray[np.float64],
    free_at: npt.NDArray[np.float64],
) -> npt.NDArray[np.float64]:
    """Start of every job when each node runs its jobs back to back, in ``order``, from
    its ``free_at``; ``run[j]`` is job j's running time on its node.

    Each node's clock is its own running sum (``start + run`` is the next start, the
    same floating-point addition that gives a job's end), so the first job of a node
    starts exactly at ``free_at`` and a job never starts before the previous one ends,
    at any scale. (One running sum across all nodes, minus offsets, does not have that
    property.)
    """
    clock = free_at.copy()
    start = np.zeros(run.shape[0], dtype=np.float64)
    for t in range(order.shape[0]):
        j = order[t]
        k = node_of[j]
        start[j] = clock[k]
        clock[k] = clock[k] + run[j]
    return start
