"""The compiled column generation of the LP bound (:mod:`.lpbound`): pricing rounds,
columns, dives, and the scalars they share in one int64 array (``st``).

:class:`.lpbound.LPBound` owns the state and the exact certificate; this module holds the
numba kernels that run a column generation (or a dive) on it. Each kernel keeps its
pure-Python twin (``kernels.pure``), tested against it in tests/workers/test_lpbound.py.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from ..kernels import jit
from .pricing import Pricing, _chunks, _completion, _knapsack
from .simplex import (
    GAVE_UP,
    SPENT,
    Basis,
    Columns,
    basic_solution,
    dual,
    objective,
    primal,
    refactor,
)

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]
F64 = npt.NDArray[np.float64]

#: kernel status codes
REFUTED, NOT_REFUTED, PAUSED, PACKED, DIVE_FAILED, OPTIMAL = 1, 0, -1, 2, 3, 4

#: a pattern priced above 1 + EPS_PRICE is added
EPS_PRICE = 1e-9
#: at most this many more columns per pricing round (best patterns under other longest jobs)
EXTRA_COLUMNS = 8
#: random bonus (at most this) on the LP values when a randomised dive picks a pattern
DIVE_NOISE = 0.5
#: a dive stops when the LP of what is left exceeds the nodes left by this much
EPS_DIVE = 1e-6

# st layout: the scalars of the column generation
(
    _NCOLS,
    _ITERS,
    _STATUS,
    _NUM,
    _K,
    _NCH,
    _MLEFT,
    _NFIX,
    _NBINS,
    _DIRTY,
    _CAP,
    _REFCAP,
    _RNG,
    _DPCAP,
    _YMAX,
) = range(15)
ST_SIZE = 15

#: what a pricing round found besides REFUTED and DIVE_FAILED (see _price)
_NO_ROUND, _MORE, _NOTHING = 10, 11, 12


class CGState(NamedTuple):
    """What the column generation keeps between calls, besides ``s``, ``d`` and ``st``."""

    rhs: F64  # the right-hand side of the master problem (the jobs left, as floats)
    cols: Columns
    basis: Basis
    price: Pricing
    fix_len: I32  # the jobs a dive placed: length index ...
    fix_bin: I32  # ... and node
    value: F64  # the master's value when a call ended (one entry)


@jit
def _add_column(pat: I64, r: int, cols: Columns, st: I64) -> None:
    """Append a pattern (counts per length) to the master's columns."""
    t = st[_NCOLS]
    nz = 0
    for i in range(r):
        if pat[i] > 0:
            cols.idx[t, nz] = i
            cols.cnt[t, nz] = pat[i]
            nz += 1
    cols.nnz[t] = nz
    st[_NCOLS] += 1


@jit
def _add_columns(r: int, s: I64, cap: int, y: F64, pr: Pricing, cols: Columns, st: I64) -> bool:
    """Add the priced pattern ``pr.pat`` if its reduced cost (duals ``y``) is negative,
    and then up to EXTRA_COLUMNS more from the same knapsack table: the best pattern under
    each of the longest jobs with the highest candidate values. True if ``pr.pat`` was
    added.
    """
    maxc = cols.idx.shape[0]
    cnt = pr.pat
    cand = pr.cand
    cbuf = pr.cbuf
    v = 0.0
    for i in range(r):
        v += cnt[i] * y[i]
    if v <= 1.0 + EPS_PRICE or st[_NCOLS] >= maxc:
        return False
    _add_column(cnt, r, cols, st)
    for _ in range(EXTRA_COLUMNS):
        top = -1
        for i in range(r):
            if cand[i] > 0 and (top < 0 or cand[i] > cand[top]):
                top = i
        if top < 0 or st[_NCOLS] >= maxc:
            break
        cand[top] = -1
        _completion(top, s, cap, st[_NCH], pr)
        v = 0.0
        same = True
        for i in range(r):
            v += cbuf[i] * y[i]
            if cbuf[i] != cnt[i]:
                same = False
        if v > 1.0 + EPS_PRICE and not same:
            _add_column(cbuf, r, cols, st)
    return True


@jit
def _price(
    s: I64, d: I64, st: I64, y: F64, pr: Pricing, cols: Columns, move: bool, dive: bool
) -> int:
    """One pricing round at capacity ``st[_CAP]`` with the master's duals ``y`` (the
    patterns so far: ``cols``; the knapsack's tables: ``pr``).

    The duals are scaled and rounded down to integers Y, the knapsack is solved exactly in
    integers for every capacity up to ``st[_DPCAP]`` (best value K at the capacity) and
    Farley's bound is checked in integers: ``sum d_i Y_i > m K`` refutes the capacity for
    the ``st[_MLEFT]`` nodes left. Before a dive fixes a node, the largest capacity these
    duals refute is recorded with its certificate (``st[_REFCAP]``, ``st[_NUM]``,
    ``st[_K]``, ``best_y``).

    Returns REFUTED (a dive's capacity, or every capacity up to ``st[_DPCAP]``),
    DIVE_FAILED (the nodes left cannot hold what is left), _MORE (``move``: the capacity
    moved up past the refuted ones; or new columns priced out), _NOTHING (no column prices
    out: the master is optimal) or _NO_ROUND (every dual is zero; nothing was priced).
    """
    r = s.shape[0]
    cap = st[_CAP]
    dpcap = st[_DPCAP]
    mleft = st[_MLEFT]
    ytop = 0.0
    for i in range(r):
        if y[i] > ytop:
            ytop = y[i]
    if not ytop > 0.0:
        return _NO_ROUND
    scale = st[_YMAX] / ytop
    num = 0
    for i in range(r):
        v = y[i] * scale
        pr.yint[i] = int(v) if v > 0.0 else 0
        num += d[i] * pr.yint[i]
    k_best = _knapsack(
        s, pr.yint, dpcap, cap, pr.ch_own, pr.ch_cnt, st[_NCH], pr.dp, pr.take, pr.pat, pr.cand
    )
    st[_ITERS] += 1
    if num > mleft * k_best and st[_NBINS] == 0:
        # refuted: find the largest capacity these duals refute (dp grows with c)
        lo = cap
        hi = dpcap
        while lo < hi:
            mid = (lo + hi + 1) // 2
            if num > mleft * pr.dp[mid]:
                lo = mid
            else:
                hi = mid - 1
        if lo > st[_REFCAP]:
            st[_REFCAP] = lo
            st[_NUM] = num
            st[_K] = pr.dp[lo]
            for i in range(r):
                pr.best_y[i] = pr.yint[i]
        if dive or lo >= dpcap:
            return REFUTED
        if move:
            st[_CAP] = lo + 1
            return _MORE
    elif num > mleft * k_best:  # diving, after a node was fixed
        return DIVE_FAILED
    if _add_columns(r, s, cap, y, pr, cols, st):
        return _MORE
    return _NOTHING


@jit
def _fill(t: int, r: int, s: I64, d: I64, cols: Columns, taken: I64) -> int:
    """The total length :func:`_fix` would put on a node for pattern ``t`` (``taken`` is
    scratch)."""
    for i in range(r):
        taken[i] = 0
    fill = 0
    for e in range(cols.nnz[t]):
        i = cols.idx[t, e]
        for _ in range(cols.cnt[t, e]):
            j = i
            while j < r and d[j] - taken[j] == 0:
                j += 1
            if j == r:
                break
            taken[j] += 1
            fill += s[j]
    return fill


@jit
def _pick(
    s: I64, d: I64, st: I64, head: I32, xb: F64, cols: Columns, cbuf: I64, noise: float
) -> int:
    """The pattern a dive fixes next: of the basis (``head``, values ``xb``) the pattern
    with the largest LP value (with ``noise``, each value gets a random bonus in [0,
    noise): another dive), or -1 (``cbuf`` is scratch).

    What the node would hold (see :func:`_fix`): nothing, or more room left empty than
    all the nodes left can spare, rules the pattern out.
    """
    r = s.shape[0]
    npat0 = 2 * r - 1
    cap = st[_CAP]
    slack = st[_MLEFT] * cap
    for i in range(r):
        slack -= d[i] * s[i]
    pick = -1
    best = 0.0
    for k in range(r):
        t = head[k] - npat0
        if t >= 0 and xb[k] > 1e-9:
            score = xb[k]
            if noise > 0.0:
                # xorshift64 in st[_RNG]
                x = st[_RNG]
                x ^= (x << 13) & 0x7FFFFFFFFFFFFFFF
                x ^= x >> 7
                x ^= (x << 17) & 0x7FFFFFFFFFFFFFFF
                st[_RNG] = x
                score += noise * ((x >> 11) % 1000003) / 1000003.0
            if score <= best:
                continue
            fill = _fill(t, r, s, d, cols, cbuf)
            if fill > 0 and cap - fill <= slack:
                best = score
                pick = t
    return pick


@jit
def _fix(t: int, r: int, d: I64, cg: CGState, st: I64) -> None:
    """Fix the next node to pattern ``t``: each place of the pattern takes the longest job
    left that is no longer than it (a place of a length already used up is what the
    dual-optimal-inequality columns hand down to a shorter job)."""
    cols = cg.cols
    b = st[_NBINS]
    for e in range(cols.nnz[t]):  # lengths in increasing index: longest first
        i = cols.idx[t, e]
        for _ in range(cols.cnt[t, e]):
            j = i
            while j < r and d[j] == 0:
                j += 1
            if j == r:
                break
            cg.fix_len[st[_NFIX]] = j
            cg.fix_bin[st[_NFIX]] = b
            st[_NFIX] += 1
            d[j] -= 1
    st[_NBINS] += 1
    st[_MLEFT] -= 1


@jit
def cg_run(
    s: I64,
    d: I64,
    st: I64,
    cg: CGState,
    max_iters: int,
    stop_below: float,
    move: bool,
    dive: bool,
    max_fixes: int,
    noise: float,
) -> int:
    """Column generation on the bin-packing LP at capacity ``st[_CAP]``, resumable.

    Each iteration solves the master problem over the columns so far (primal simplex from
    the current basis), rounds its duals down to integers, solves the knapsack exactly in
    integers for *every* capacity up to ``st[_DPCAP]`` and checks Farley's bound against
    the ``st[_MLEFT]`` nodes (:func:`_price`): the largest capacity c it refutes is
    recorded (``st[_REFCAP]``, certificate ``best_y`` with ``st[_NUM]`` > m ``st[_K]``),
    and with ``move`` the search moves up to c + 1 (the columns so far still fit there,
    and the basis stays feasible); without, it goes on to the LP optimum at its capacity
    (OPTIMAL, the value in ``cg.value[0]``; NOT_REFUTED if that is at most m).

    Returns REFUTED (every capacity up to ``st[_DPCAP]`` refuted; when diving: the dive's
    own capacity, before any node was fixed), NOT_REFUTED (not diving: the LP at
    ``st[_CAP]`` is at most ``stop_below``, or optimal), PAUSED (``max_iters`` pricing
    rounds, ``cg.basis.ctr[LEFT]`` simplex pivots or ``max_fixes`` fixed nodes) or, when
    ``dive``, PACKED (``fix_len``/``fix_bin`` place every job: length index and node) or
    DIVE_FAILED. When diving, ``d`` is what is left and shrinks as nodes are fixed;
    ``noise`` > 0 randomises which pattern is fixed (see :meth:`LPBound.dive`).
    """
    r = s.shape[0]
    cols = cg.cols
    basis = cg.basis
    it = 0
    fixes = 0
    while it < max_iters:
        if st[_DIRTY] == 1:
            res = dual(r, cg.rhs, cols, st[_NCOLS], basis)
            if res == SPENT:
                break
            st[_DIRTY] = 0
            if res == GAVE_UP:
                # start again from the single-length patterns (always feasible)
                for i in range(r):
                    basis.head[i] = 2 * r - 1 + i
                if not refactor(r, cg.rhs, cols, basis):
                    st[_STATUS] = DIVE_FAILED
                    return DIVE_FAILED
        if primal(r, cg.rhs, cols, st[_NCOLS], basis, stop_below) == SPENT:
            break
        z = objective(r, basis)
        if not dive and z <= stop_below:
            st[_STATUS] = NOT_REFUTED
            return NOT_REFUTED
        priced = _price(s, d, st, basis.y, cg.price, cols, move, dive)
        if priced in (REFUTED, DIVE_FAILED):
            st[_STATUS] = priced
            return priced
        if priced != _NO_ROUND:
            it += 1
        if priced == _MORE:
            continue
        if not dive:
            cg.value[0] = z
            status = NOT_REFUTED if move or z <= st[_MLEFT] + 1e-9 else OPTIMAL
            st[_STATUS] = status
            return status
        # -- dive: the LP of what is left is solved; fix the pattern it uses most
        mleft = st[_MLEFT]
        if z > mleft + EPS_DIVE:
            st[_STATUS] = DIVE_FAILED
            return DIVE_FAILED
        pick = _pick(s, d, st, basis.head, basis.xb, cols, cg.price.cbuf, noise)
        if pick < 0 or mleft == 0:
            st[_STATUS] = DIVE_FAILED
            return DIVE_FAILED
        _fix(pick, r, d, cg, st)
        left = 0
        for i in range(r):
            left += d[i]
        if left == 0:
            st[_STATUS] = PACKED
            return PACKED
        st[_NCH] = _chunks(s, d, st[_DPCAP], cg.price.ch_own, cg.price.ch_cnt)
        for i in range(r):
            cg.rhs[i] = d[i]
        basic_solution(r, cg.rhs, basis)
        st[_DIRTY] = 1
        fixes += 1
        if fixes >= max_fixes:
            break
    st[_STATUS] = PAUSED
    return PAUSED
