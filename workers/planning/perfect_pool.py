"""Choosing items from the pool of the ejection walk (:mod:`.perfect_walk`): one item of a
length, the item nearest a target, and one or two items that fill a gap.

numba kernels with their pure-Python twins (``kernels.pure``), as in the walk itself.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .binpacking import first_at_most
from .kernels import jit
from .perfect_lengths import find_length, rng_below, rng_next

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: pool items tried per completion search (all of them in a smaller pool)
TRY_LIMIT = 64
#: distinct lengths tried when a completion may waste some of the slack
NEAR_STEPS = 16


@jit
def _pool_item(v: int, pc: I32, perm: I32, first: I64, e1: int, e2: int, e3: int) -> int:
    """A pool item of length index ``v`` other than e1, e2, e3, or -1."""
    if v < 0:
        return -1
    for t in range(pc[v]):
        c = int(perm[first[v] + t])
        if c != e1 and c != e2 and c != e3:
            return c
    return -1


@jit
def _pool_near(
    hi: int,
    lo: int,
    vals: I64,
    tab: I32,
    pc: I32,
    perm: I32,
    first: I64,
    e1: int,
    e2: int,
    e3: int,
) -> int:
    """A pool item of the longest length in ``lo .. hi`` (other than e1, e2, e3), or -1.

    Exact lengths (``lo == hi``) are looked up; otherwise at most NEAR_STEPS distinct
    lengths are tried, longest first.
    """
    if hi <= 0:
        return -1
    if lo >= hi:
        return _pool_item(find_length(vals, tab, hi), pc, perm, first, e1, e2, e3)
    v = first_at_most(vals, 0, hi)
    for _ in range(NEAR_STEPS):
        if v >= vals.shape[0] or vals[v] < lo:
            break
        c = _pool_item(v, pc, perm, first, e1, e2, e3)
        if c >= 0:
            return c
        v += 1
    return -1


@jit
def _packed_near(hi: int, lo: int, vals: I64, tab: I32, vcnt: I64, pc: I32) -> int:
    """The longest length in ``lo .. hi`` that has an item in a bin (its index), or -1."""
    if hi <= 0:
        return -1
    if lo >= hi:
        v = find_length(vals, tab, hi)
        return v if v >= 0 and vcnt[v] > pc[v] else -1
    v = first_at_most(vals, 0, hi)
    for _ in range(NEAR_STEPS):
        if v >= vals.shape[0] or vals[v] < lo:
            break
        if vcnt[v] > pc[v]:
            return v
        v += 1
    return -1


@jit
def _pool_fill(
    t: int,
    allow: int,
    vals: I64,
    tab: I32,
    q: I64,
    pc: I32,
    perm: I32,
    first: I64,
    pool: I32,
    npool: int,
    e1: int,
    e2: int,
    state: int,
    single: bool,
) -> tuple[int, int, int]:
    """One pool item (if ``single``) or two whose lengths sum to ``t - allow .. t``,
    avoiding e1 and e2; the longest sum of those tried (exact ends the search).

    Returns (item, item or -1, generator state); (-1, -1, state) when none was found
    (at most TRY_LIMIT first items are tried, from a random place in the pool).
    """
    b1, b2, got = -1, -1, -1
    if single:
        c = _pool_near(t, t - allow, vals, tab, pc, perm, first, e1, e2, -1)
        if c >= 0:
            b1, got = c, q[c]
            if got == t:
                return b1, -1, state
    if npool == 0:
        return b1, -1, state
    state = rng_next(state)
    off = rng_below(state, npool)
    for u in range(min(npool, TRY_LIMIT)):
        c1 = int(pool[(u + off) % npool])
        if q[c1] >= t or c1 == e1:
            continue
        if c1 == e2:
            continue
        hi = t - q[c1]
        c2 = _pool_near(hi, hi - allow, vals, tab, pc, perm, first, e1, e2, c1)
        if c2 >= 0 and q[c1] + q[c2] > got:
            b1, b2, got = c1, c2, q[c1] + q[c2]
            if got == t:
                break
    return b1, b2, state
