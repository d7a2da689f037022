"""Local search off the critical node: moves and swaps that lower the longest load, optimal
two-node repartitions (:func:`pair_balance`) and a large neighbourhood search.

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
def _move_off(q: I64, node_of: I32, load: I64, c: int, top: int) -> bool:
    """Move a job from node ``c`` to another node where it ends below ``top``; True if
    one moved (the first such job, to the first such node)."""
    for a in range(q.shape[0]):
        if node_of[a] != c:
            continue
        for k in range(load.shape[0]):
            if k != c and load[k] + q[a] < top:
                load[k] += q[a]
                load[c] -= q[a]
                node_of[a] = k
                return True
    return False


@jit
def _swap_off(q: I64, node_of: I32, load: I64, c: int, top: int) -> bool:
    """Swap a job on node ``c`` with a shorter one on another node, both nodes ending
    below ``top``; True if a pair was swapped (the first such pair)."""
    for a in range(q.shape[0]):
        if node_of[a] != c:
            continue
        for b in range(q.shape[0]):
            k = node_of[b]
            if k == c or q[b] >= q[a]:
                continue
            d = q[a] - q[b]
            if load[k] + d < top:
                load[k] += d
                load[c] -= d
                node_of[a] = k
                node_of[b] = c
                return True
    return False


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
            # a move off a critical node c, else a swap
            if load[c] == top and (
                _move_off(q, node_of, load, c, top) or _swap_off(q, node_of, load, c, top)
            ):
                improved = True
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


#: the two-node repartition is skipped when its subset-sum table would exceed this many words
SPLIT_MAX_WORDS = 2_000_000


@jit
def best_split(
    w: I64, target: int, bits: npt.NDArray[np.uint64], take: npt.NDArray[np.uint8]
) -> int:
    """The largest subset sum of ``w`` that is at most ``target``; ``take`` marks a subset.

    Bitset dynamic programming (row i: the sums reachable with the first i lengths), then a
    walk back through the rows to recover the subset.
    """
    n = w.shape[0]
    nw = target // 64 + 1
    top_bits = target % 64 + 1
    last_mask = (
        np.uint64(0xFFFFFFFFFFFFFFFF)
        if top_bits == 64
        else (np.uint64(1) << np.uint64(top_bits)) - np.uint64(1)
    )
    for k in range(nw):
        bits[0, k] = np.uint64(0)
    bits[0, 0] = np.uint64(1)
    for i in range(n):
        ws = w[i] // 64
        bs = np.uint64(w[i] % 64)
        inv = np.uint64(64) - bs
        for k in range(nw):
            v = bits[i, k]
            src = k - ws
            if src >= 0:
                v |= bits[i, src] << bs
                if bs > np.uint64(0) and src >= 1:
                    v |= bits[i, src - 1] >> inv
            bits[i + 1, k] = v
        bits[i + 1, nw - 1] &= last_mask
    # the largest reachable sum
    best = 0
    for k in range(nw - 1, -1, -1):
        v = bits[n, k]
        if v != np.uint64(0):
            b = 63
            while (v >> np.uint64(b)) & np.uint64(1) == np.uint64(0):
                b -= 1
            best = k * 64 + b
            break
    s = best
    for i in range(n - 1, -1, -1):
        if (bits[i, s // 64] >> np.uint64(s % 64)) & np.uint64(1) == np.uint64(1):
            take[i] = 0
        else:
            take[i] = 1
            s -= w[i]
    return best


def pair_balance(
    q: I64,
    node_of: I32,
    m: int,
    lb: int,
    seconds: float,
    *,
    should_stop: Callable[[], bool] | None = None,
    compiled: bool = True,
) -> bool:
    """Lower the largest load by repartitioning two nodes at a time, optimally.

    Take a node with the largest load and, trying partners from the least loaded up, split
    the jobs of both as evenly as possible (an exact subset sum: the largest sum of their
    jobs not above half their total); keep the split if the larger side is below the
    largest load. Repeat until no pair helps, the load reaches ``lb`` or the time is up.
    With many jobs per node the subset sums are dense and this balances the loads almost
    perfectly (the two-way step of the pairwise-interchange heuristics for P||Cmax and
    number partitioning, e.g. Karmarkar and Karp 1982; from memory). Improves ``node_of``
    in place; True if it did.
    """
    split = best_split if compiled else best_split.py_func  # type: ignore[attr-defined]
    t_end = time.perf_counter() + seconds
    load = np.bincount(node_of, weights=q, minlength=m).astype(np.int64)
    improved = False
    while time.perf_counter() < t_end and (should_stop is None or not should_stop()):
        a = int(np.argmax(load))
        top = int(load[a])
        if top <= lb:
            break
        found = False
        for b in np.argsort(load, kind="stable").tolist():
            if b == a:
                continue
            lo = int(load[b])
            if top - lo < 2:  # the best split cannot beat the larger load
                break
            jobs = np.flatnonzero((node_of == a) | (node_of == b))
            target = (top + lo) // 2
            if (jobs.size + 1) * (target // 64 + 1) > SPLIT_MAX_WORDS:
                continue
            bits = np.empty((jobs.size + 1, target // 64 + 1), dtype=np.uint64)
            take = np.zeros(jobs.size, dtype=np.uint8)
            got = int(split(q[jobs], target, bits, take))
            if got > lo:
                mine = take.astype(bool)
                node_of[jobs[mine]] = b
                node_of[jobs[~mine]] = a
                load[b] = got
                load[a] = top + lo - got
                found = improved = True
                break
            if time.perf_counter() >= t_end:
                break
        if not found:
            break
    return improved
