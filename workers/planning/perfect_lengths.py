"""What both kernels of the perfect packing search share: the distinct lengths of a batch,
looked up by exact remainder, and a small random generator.

Items are whole ticks sorted longest first; items of equal length are one block
(:func:`distinct_lengths`). A remainder is looked up through a table from a length to its
index when the capacity is at most ``TABLE_LIMIT`` ticks (:func:`length_table`), else by
binary search (:func:`find_length`). See :mod:`workers.planning.perfect`.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .binpacking import first_at_most
from .kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: the random generator of both kernels: 48-bit linear congruential (the constants of
#: POSIX drand48); the top bits are used, so draws do not alternate like low bits do
RNG_A, RNG_C, RNG_MASK = 0x5DEECE66D, 11, (1 << 48) - 1
#: capacities (ticks) up to this get a direct table from a length to its index
TABLE_LIMIT = 1 << 20


@jit
def rng_next(state: int) -> int:
    """One step of the 48-bit generator (exact in int64: the product wraps mod 2**64)."""
    return (state * RNG_A + RNG_C) & RNG_MASK


@jit
def rng_below(state: int, m: int) -> int:
    """A draw in 0 .. m - 1 from the top bits of ``state``."""
    return (state >> 17) % m


@jit
def distinct_lengths(q: I64) -> tuple[I64, I64, I64, I64]:
    """Distinct lengths of ``q`` (sorted longest first): values, counts, first item, the
    value index of each item."""
    n = q.shape[0]
    vid = np.empty(n, dtype=np.int64)
    d = 0
    for i in range(n):
        if i == 0 or q[i] != q[i - 1]:
            d += 1
        vid[i] = d - 1
    vals = np.empty(d, dtype=np.int64)
    cnt = np.zeros(d, dtype=np.int64)
    first = np.empty(d, dtype=np.int64)
    for i in range(n):
        v = vid[i]
        if cnt[v] == 0:
            vals[v] = q[i]
            first[v] = i
        cnt[v] += 1
    return vals, cnt, first, vid


@jit
def length_table(vals: I64, cap: int) -> I32:
    """Index of each length 0 .. cap in ``vals`` (-1: absent); empty above TABLE_LIMIT."""
    if cap > TABLE_LIMIT:
        return np.empty(0, dtype=np.int32)
    tab = np.full(cap + 1, -1, dtype=np.int32)
    for v in range(vals.shape[0]):
        if vals[v] <= cap:
            tab[vals[v]] = v
    return tab


@jit
def find_length(vals: I64, tab: I32, x: int) -> int:
    """The index of length ``x`` in ``vals`` (through ``tab`` when it is not empty), or -1."""
    if x <= 0:
        return -1
    if tab.shape[0] > 0:
        return tab[x] if x < tab.shape[0] else -1
    i = first_at_most(vals, 0, x)
    if i < vals.shape[0] and vals[i] == x:
        return i
    return -1
