"""Pricing for the LP bound of bin packing (:mod:`.lpbound`): an exact bounded knapsack.

Column generation asks, given duals ``y`` rounded down to non-negative integers, for the
pattern of largest value sum a_i y_i that fits a node: a bounded knapsack (at most
min(d_i, C // s_i) jobs of length s_i). :func:`_knapsack` solves it by dynamic programming
over every capacity up to ``dpcap`` on the binary split of the bounds (:func:`_chunks`),
exactly in integers, so the same table serves Farley's bound at every capacity at once
(see :mod:`.lpbound`); on the way it notes the best pattern under each longest length
(:func:`_completion`), candidates for more columns. Written in the subset of Python numba
compiles (``.py_func``: the same code as plain Python).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from ..kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]
U8 = npt.NDArray[np.uint8]


class Pricing(NamedTuple):
    """The exact knapsack that prices patterns, and the integer duals it prices with."""

    ch_own: I32  # the chunks of the binary split (see _chunks): length index ...
    ch_cnt: I32  # ... and jobs in the chunk
    dp: I64  # the best value at every capacity up to dpcap
    take: U8  # chunk x capacity: the chunk is in the optimum there
    pat: I64  # the priced pattern (jobs per length)
    cand: I64  # the best value under each longest length (see _knapsack)
    cbuf: I64  # scratch: a pattern
    yint: I64  # the duals rounded down to integers
    best_y: I64  # the integer duals of the largest refutation so far: the certificate


@jit
def _chunks(s: I64, d: I64, cap: int, ch_own: I32, ch_cnt: I32) -> int:
    """Split every bound u_i = min(d_i, cap // s_i) into chunks of 1, 2, 4, ... jobs."""
    t = 0
    for i in range(s.shape[0]):
        left = d[i]
        fit = cap // s[i]
        if fit < left:
            left = fit
        chunk = 1
        while left > 0:
            c = chunk if chunk < left else left
            ch_own[t] = i
            ch_cnt[t] = c
            t += 1
            left -= c
            chunk *= 2
    return t


@jit
def _knapsack(
    s: I64,
    val: I64,
    dpcap: int,
    cap: int,
    ch_own: I32,
    ch_cnt: I32,
    nch: int,
    dp: I64,
    take: U8,
    cnt: I64,
    cand: I64,
) -> int:
    """Exact bounded knapsack: max sum a_i val_i, sum a_i s_i <= c, 0 <= a_i <= u_i.

    Dynamic programming over every capacity c <= ``dpcap`` on the chunks of
    :func:`_chunks`, shortest length first: afterwards ``dp[c]`` is the optimum for
    capacity c (values are non-negative integers, so it is exact). Returns ``dp[cap]``
    and puts an optimal pattern for ``cap`` in ``cnt``. On the way, ``cand[i]`` gets the
    best value at ``cap`` of a pattern whose longest job has length index i (one job of it
    plus shorter ones; -1 if none): candidates for more columns (see :func:`_completion`).
    """
    for c in range(dpcap + 1):
        dp[c] = 0
    for i in range(s.shape[0]):
        cand[i] = -1
    for t in range(nch - 1, -1, -1):
        i = ch_own[t]
        if (t == nch - 1 or ch_own[t + 1] != i) and s[i] <= cap and val[i] > 0:
            cand[i] = val[i] + dp[cap - s[i]]
        w = ch_cnt[t] * s[i]
        v = ch_cnt[t] * val[i]
        row = take[t]
        if v > 0 and w <= dpcap:
            for c in range(w):
                row[c] = 0
            for c in range(dpcap, w - 1, -1):
                nv = dp[c - w] + v
                if nv > dp[c]:
                    dp[c] = nv
                    row[c] = 1
                else:
                    row[c] = 0
        else:
            for c in range(dpcap + 1):
                row[c] = 0
    for i in range(s.shape[0]):
        cnt[i] = 0
    c = cap
    for t in range(nch):
        if take[t, c] == 1:
            i = ch_own[t]
            cnt[i] += ch_cnt[t]
            c -= ch_cnt[t] * s[i]
    return int(dp[cap])


@jit
def _completion(i: int, s: I64, cap: int, nch: int, pr: Pricing) -> None:
    """The pattern behind ``cand[i]`` of :func:`_knapsack`, into ``pr.cbuf``: one job of
    length index i and the best completion by shorter ones (the DP rows of the shorter
    lengths are final)."""
    out = pr.cbuf
    for k in range(s.shape[0]):
        out[k] = 0
    out[i] = 1
    c = cap - s[i]
    t = 0
    while t < nch and pr.ch_own[t] <= i:
        t += 1
    while t < nch:
        if pr.take[t, c] == 1:
            k = pr.ch_own[t]
            out[k] += pr.ch_cnt[t]
            c -= pr.ch_cnt[t] * s[k]
        t += 1
