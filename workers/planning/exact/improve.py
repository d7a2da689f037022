"""Local search off the critical node: moves and swaps that lower the longest load.

Repeatedly take a node with the largest load and look for a job to move to another node,
or a pair of jobs to swap with another node, such that both nodes end strictly below the
current largest load; stop when no such step exists for any critical node (a standard
descent for P||Cmax, common practice; e.g. the "interchange" neighbourhood of Finn and
Horowitz 1979, from memory). Works on integer ticks.
"""

from __future__ import annotations

import time
from collections.abc import Callable

import numpy as np
import numpy.typing as npt

from ..kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]


@jit
def descend(q: I64, node_of: I32, m: int, max_steps: int) -> int:
    """Improve ``node_of`` in place; returns the number of steps taken."""
    n = q.shape[0]
    load = np.zeros(m, dtype=np.int64)
    for j in range(n):
        load[node_of[j]] += q[j]
    steps = 0
    while steps < max_steps:
        top = load.max()
        improved = False
        for c in range(m):
            if load[c] != top:
                continue
            # move a job a from c to k
            for a in range(n):
                if node_of[a] != c:
                    continue
                for k in range(m):
                    if k != c and load[k] + q[a] < top:
                        load[k] += q[a]
                        load[c] -= q[a]
                        node_of[a] = k
                        improved = True
                        break
                if improved:
                    break
            if improved:
                break
            # swap a (on c) with a shorter b (on another node)
            for a in range(n):
                if node_of[a] != c:
                    continue
                for b in range(n):
                    k = node_of[b]
                    if k == c or q[b] >= q[a]:
                        continue
                    d = q[a] - q[b]
                    if load[k] + d < top:
                        load[k] += d
                        load[c] -= d
                        node_of[a] = k
                        node_of[b] = c
                        improved = True
                        break
                if improved:
                    break
            if improved:
                break
        if not improved:
            break
        steps += 1
    return steps


def neighbourhood_search(
    q: I64,
    node_of: I32,
    m: int,
    lb: int,
    seconds: float,
    rng: np.random.Generator,
    *,
    group: int = 8,
    node_limit: int = 10_000,
    shake: float = 0.5,
    should_stop: Callable[[], bool] | None = None,
) -> bool:
    """Large neighbourhood search with the exact decision search as the repair step.

    Repeatedly take a node with the largest load and ``group - 1`` other nodes at random,
    and ask the bin-completion search (:mod:`.decision`) to repack all their jobs onto
    those nodes with every load below the current largest one (a capped number of search
    nodes per try). Each success lowers the number of nodes at the largest load, or the
    largest load itself (common practice for P||Cmax: re-optimising a few machines at a
    time, e.g. the multi-exchange neighbourhoods of Frangioni, Necciari and Scutellà 2004,
    from memory). Improves ``node_of`` in place; True if it did.
    """
    from .decision import FEASIBLE, CompletionSearch

    if m <= group:  # the neighbourhood would be the whole batch
        return False
    t_end = time.perf_counter() + seconds
    load = np.bincount(node_of, weights=q, minlength=m).astype(np.int64)
    improved = False
    while time.perf_counter() < t_end and (should_stop is None or not should_stop()):
        top = int(load.max())
        if top <= lb:
            break
        crit = np.flatnonzero(load == top)
        c = int(rng.choice(crit))
        rest = np.flatnonzero(load < top)
        if rest.size == 0:
            break
        # half of the partners are the least loaded nodes (they have the room), half random
        k = min(group - 1, rest.size)
        low = rest[np.argsort(load[rest], kind="stable")[: (k + 1) // 2]]
        pool = np.setdiff1d(rest, low)
        extra = rng.choice(pool, size=min(k - low.size, pool.size), replace=False)
        others = np.concatenate((low, extra))
        nodes = np.concatenate(([c], others)).astype(np.int32)
        jobs = np.flatnonzero(np.isin(node_of, nodes))
        jobs = jobs[np.argsort(-q[jobs], kind="stable")]
        cap = top - 1
        if int(q[jobs].sum()) > cap * nodes.size or int(q[jobs[0]]) > cap:
            continue
        srch = CompletionSearch(q[jobs], int(nodes.size), cap, memo_bits=10)
        if srch.run(node_limit) == FEASIBLE:
            improved = True
        elif rng.random() < shake:
            # no improvement: repack the same nodes fullest-first at the current largest
            # load instead (a sideways step that changes which jobs share a node)
            srch = CompletionSearch(q[jobs], int(nodes.size), top, memo_bits=10)
            if srch.run(node_limit) != FEASIBLE:
                continue
        else:
            continue
        packing = srch.packing()
        node_of[jobs] = nodes[packing]
        load[nodes] = np.bincount(packing, weights=q[jobs], minlength=nodes.size)
    return improved
