"""The linear-programming bound of bin packing, made rigorous with Farley's bound.

Do the jobs fit on ``m`` nodes of capacity ``C`` (ticks)? Group the jobs by length (``r``
distinct lengths ``s_i`` with ``d_i`` jobs each). A *pattern* is a multiset of lengths that
fits in one node (sum a_i s_i <= C, a_i <= d_i). Any packing into m nodes uses m patterns
that together cover every job, so the LP relaxation of the set-cover model of Gilmore and
Gomory (1961),

    z*(C) = min sum_p x_p   subject to   sum_p a_ip x_p >= d_i,  x >= 0,

is at most m whenever C is feasible: ``z*(C) > m`` refutes C (and every smaller
capacity). For jobs that are long relative to C (few jobs per node, the hard region of
P||Cmax) this bound is much stronger than L2 and the dual-feasible functions: on every
public instance we looked at that the bin-completion search could not refute within a
second, z*(OPT - 1) > m.

The LP is solved by column generation: a restricted master problem (RMP) over the
patterns found so far, solved by a small dense revised simplex (explicit basis inverse,
refactorised now and then), and a bounded knapsack (dynamic programming over the capacity)
that prices new patterns: the best one, and from the same table the best pattern under
each of the longest jobs that price well. Standard devices speed it up: the dual-optimal
inequalities y_i >= y_j for s_i >= s_j (Ben Amor, Desrosiers and Valerio de Carvalho
2006; as zero-cost "a longer job's place can hold a shorter job" columns), and the early
exit z(RMP) <= m (the RMP value is an upper bound on z*, so C cannot be refuted by this
bound). The knapsack table covers every capacity up to ``dpcap``, so one set of duals
refutes a whole range of capacities at once, and a column generation can move up to a
larger capacity keeping its columns and its (still feasible) basis.

Rigour. The simplex works in floating point, so its duals are approximate. The verdict
never relies on them directly: at each pricing step the duals are scaled and rounded down
to non-negative integers ``Y`` and the knapsack is solved *exactly* in integers, giving
K = max over patterns of sum a_i Y_i. For every y >= 0, Farley (1990) gives
z* >= sum_i d_i y_i / max_p sum_i a_ip y_i (scale the duals by the largest pattern value
and they are dual feasible); so ``sum d_i Y_i > m K``, checked in exact integer
arithmetic, proves that no m patterns cover the jobs, whatever rounding happened before.

Diving. The same column generation also *finds* packings: solve the LP, fix one node to
the pattern with the largest value in the LP solution (never one that would leave more
room empty than all the nodes left can spare; a place of a length already used up takes
the longest shorter job left, as the dual-optimal-inequality columns allow), take its jobs
out, re-solve the LP of what is left (the basis stays dual feasible when only the
right-hand side changes, so a few dual simplex pivots restore it), and repeat until every
job is placed or the LP of the rest needs more nodes than are left: the classical diving
heuristic for cutting stock (e.g. Vanderbeck 2000; Belov and Scheithauer 2006; from
memory). Restarts add a seeded random bonus to the LP values. For few jobs per node the LP
is nearly always tight (z* rounded up is the optimum) and a dive usually packs the jobs at
the lower bound, which proves the plan optimal; the caller checks every packing.

The kernel :func:`cg_run` is resumable (its state lives in arrays owned by
:class:`LPBound`), so the driver can check its wall clock between slices. It is written in
the subset of Python numba compiles; ``cg_run.py_func`` is the pure-Python twin that the
tests compare against.
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np
import numpy.typing as npt

from ..kernels import jit, pure

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]
F64 = npt.NDArray[np.float64]

#: kernel status codes
REFUTED, NOT_REFUTED, PAUSED, PACKED, DIVE_FAILED, OPTIMAL = 1, 0, -1, 2, 3, 4

#: the knapsack table (binary-split items x capacity) must stay below this many cells
MAX_DP_CELLS = 12_000_000
#: at most this many distinct lengths (the basis inverse is dense: r^2 per pivot)
MAX_LENGTHS = 256
#: at most this many patterns are kept in the master problem
MAX_COLUMNS = 4_000
#: simplex pivots between two refactorisations of the basis inverse
REFACTOR_EVERY = 1000
#: pivots allowed per master solve before pricing goes ahead with the duals at hand
MAX_PIVOTS_PER_SOLVE = 2_000
#: reduced costs below -EPS_RC enter the basis
EPS_RC = 1e-9
#: a pattern priced above 1 + EPS_PRICE is added
EPS_PRICE = 1e-9
#: at most this many more columns per pricing round (best patterns under other longest jobs)
EXTRA_COLUMNS = 8
#: random bonus (at most this) on the LP values when a randomised dive picks a pattern
DIVE_NOISE = 0.5
#: a dive stops when the LP of what is left exceeds the nodes left by this much
EPS_DIVE = 1e-6

# st layout
(
    _NCOLS,
    _ITERS,
    _STATUS,
    _PIVOTS,
    _NUM,
    _K,
    _NCH,
    _MLEFT,
    _NFIX,
    _NBINS,
    _DIRTY,
    _TOTPIV,
    _CAP,
    _REFCAP,
    _RNG,
    _PIVLEFT,
) = range(16)
ST_SIZE = 16


@jit
def _invert(a: F64, out: F64) -> bool:
    """Gauss-Jordan inverse with partial pivoting of the square matrix ``a`` (destroyed)."""
    r = a.shape[0]
    for i in range(r):
        for j in range(r):
            out[i, j] = 1.0 if i == j else 0.0
    for c in range(r):
        p = c
        best = abs(a[c, c])
        for i in range(c + 1, r):
            v = abs(a[i, c])
            if v > best:
                best = v
                p = i
        if best < 1e-12:
            return False
        if p != c:
            for j in range(r):
                t = a[c, j]
                a[c, j] = a[p, j]
                a[p, j] = t
                t = out[c, j]
                out[c, j] = out[p, j]
                out[p, j] = t
        piv = a[c, c]
        for j in range(r):
            a[c, j] /= piv
            out[c, j] /= piv
        for i in range(r):
            if i != c:
                f = a[i, c]
                if f != 0.0:
                    for j in range(r):
                        a[i, j] -= f * a[c, j]
                        out[i, j] -= f * out[c, j]
    return True


@jit
def _column(cid: int, r: int, cidx: I32, ccnt: I32, cnnz: I32, out: F64) -> float:
    """Dense column ``cid`` into ``out``; returns its cost.

    Ids 0..r-1 are surplus columns -e_i, r..2r-2 the dual-optimal-inequality columns
    e_{j+1} - e_j (a longer job's place holds a shorter job), 2r-1.. the patterns.
    """
    for i in range(r):
        out[i] = 0.0
    if cid < r:
        out[cid] = -1.0
        return 0.0
    if cid < 2 * r - 1:
        j = cid - r
        out[j + 1] = 1.0
        out[j] = -1.0
        return 0.0
    t = cid - (2 * r - 1)
    for e in range(cnnz[t]):
        out[cidx[t, e]] = float(ccnt[t, e])
    return 1.0


@jit
def _basic_solution(r: int, d: F64, binv: F64, xb: F64) -> None:
    """x_B = B^-1 d; rounding noise below zero is cleared, real negatives are kept."""
    for i in range(r):
        v = 0.0
        for j in range(r):
            v += binv[i, j] * d[j]
        xb[i] = 0.0 if -1e-9 < v < 0.0 else v


@jit
def _refactor(
    r: int,
    head: I32,
    cidx: I32,
    ccnt: I32,
    cnnz: I32,
    d: F64,
    binv: F64,
    xb: F64,
    work: F64,
    colbuf: F64,
) -> bool:
    """Recompute the basis inverse and the basic solution from scratch."""
    for k in range(r):
        _column(head[k], r, cidx, ccnt, cnnz, colbuf)
        for i in range(r):
            work[i, k] = colbuf[i]
    if not _invert(work, binv):
        return False
    _basic_solution(r, d, binv, xb)
    return True


@jit
def _duals(r: int, head: I32, binv: F64, y: F64) -> None:
    """y = c_B B^-1 (patterns cost 1, the other columns 0)."""
    npat0 = 2 * r - 1
    for j in range(r):
        y[j] = 0.0
    for k in range(r):
        if head[k] >= npat0:
            for j in range(r):
                y[j] += binv[k, j]


@jit
def _ftran(cid: int, r: int, cidx: I32, ccnt: I32, cnnz: I32, binv: F64, wcol: F64) -> None:
    """wcol = B^-1 a for column ``cid`` (see :func:`_column`), using its few nonzeros."""
    for i in range(r):
        wcol[i] = 0.0
    if cid < r:
        for i in range(r):
            wcol[i] = -binv[i, cid]
    elif cid < 2 * r - 1:
        j = cid - r
        for i in range(r):
            wcol[i] = binv[i, j + 1] - binv[i, j]
    else:
        t = cid - (2 * r - 1)
        for e in range(cnnz[t]):
            k = cidx[t, e]
            c = float(ccnt[t, e])
            for i in range(r):
                wcol[i] += c * binv[i, k]


@jit
def _pivot(
    r: int, leave: int, enter: int, theta: float, wcol: F64, binv: F64, xb: F64, head: I32
) -> None:
    """Basis change: column ``enter`` replaces row ``leave``'s, with step ``theta``."""
    for i in range(r):
        xb[i] -= theta * wcol[i]
    xb[leave] = theta
    pv = wcol[leave]
    for j in range(r):
        binv[leave, j] /= pv
    for i in range(r):
        if i != leave:
            f = wcol[i]
            if f != 0.0:
                for j in range(r):
                    binv[i, j] -= f * binv[leave, j]
    head[leave] = enter


@jit
def _primal(
    r: int,
    d: F64,
    cidx: I32,
    ccnt: I32,
    cnnz: I32,
    head: I32,
    binv: F64,
    xb: F64,
    work: F64,
    colbuf: F64,
    wcol: F64,
    y: F64,
    st: I64,
    stop_below: float,
) -> int:
    """Primal simplex over the columns so far from a feasible basis: 0 when optimal or
    when the objective reaches ``stop_below``, 1 when this call's pivots (``st[_PIVLEFT]``)
    are spent (resume later), 2 when it gives up."""
    npat0 = 2 * r - 1
    piv = 0
    _duals(r, head, binv, y)
    while True:
        if st[_PIVOTS] >= REFACTOR_EVERY:
            st[_PIVOTS] = 0
            if not _refactor(r, head, cidx, ccnt, cnnz, d, binv, xb, work, colbuf):
                return 2
            for i in range(r):
                if xb[i] < 0.0:
                    xb[i] = 0.0
            _duals(r, head, binv, y)
        enter = -1
        best_rc = -EPS_RC
        for i in range(r):  # surplus: rc = y_i
            if y[i] < best_rc:
                best_rc = y[i]
                enter = i
        for j in range(r - 1):  # e_{j+1} - e_j: rc = y_j - y_{j+1}
            rc = y[j] - y[j + 1]
            if rc < best_rc:
                best_rc = rc
                enter = r + j
        for t in range(st[_NCOLS]):
            v = 0.0
            for e in range(cnnz[t]):
                v += ccnt[t, e] * y[cidx[t, e]]
            rc = 1.0 - v
            if rc < best_rc:
                best_rc = rc
                enter = npat0 + t
        if enter < 0:
            return 0
        if piv >= MAX_PIVOTS_PER_SOLVE:
            return 2
        if st[_PIVLEFT] <= 0:
            return 1
        _ftran(enter, r, cidx, ccnt, cnnz, binv, wcol)
        # ratio test (ties: the largest pivot element)
        leave = -1
        theta = 0.0
        wbest = 0.0
        for i in range(r):
            if wcol[i] > 1e-9:
                ratio = xb[i] / wcol[i]
                if (
                    leave < 0
                    or ratio < theta - 1e-12
                    or (ratio <= theta + 1e-12 and wcol[i] > wbest)
                ):
                    leave = i
                    theta = ratio
                    wbest = wcol[i]
        if leave < 0:  # unbounded cannot happen (costs >= 0): give up on this solve
            return 2
        _pivot(r, leave, enter, theta, wcol, binv, xb, head)
        for i in range(r):
            if xb[i] < 0.0:
                xb[i] = 0.0
        # the duals move along the new row of the inverse: y += rc_q (B^-1)_p
        for j in range(r):
            y[j] += best_rc * binv[leave, j]
        st[_PIVOTS] += 1
        st[_TOTPIV] += 1
        st[_PIVLEFT] -= 1
        piv += 1
        if stop_below > 0.0:
            z = 0.0
            for k in range(r):
                if head[k] >= npat0:
                    z += xb[k]
            if z <= stop_below:
                return 0


@jit
def _dual(
    r: int,
    d: F64,
    cidx: I32,
    ccnt: I32,
    cnnz: I32,
    head: I32,
    binv: F64,
    xb: F64,
    work: F64,
    colbuf: F64,
    wcol: F64,
    y: F64,
    st: I64,
) -> int:
    """Dual simplex back to a feasible basis after the right-hand side shrank: 0 when
    feasible, 1 when this call's pivots are spent (resume later), 2 when it gives up (no
    entering column or too many pivots)."""
    npat0 = 2 * r - 1
    piv = 0
    while True:
        if st[_PIVOTS] >= REFACTOR_EVERY:
            st[_PIVOTS] = 0
            if not _refactor(r, head, cidx, ccnt, cnnz, d, binv, xb, work, colbuf):
                return 2
        p = -1
        worst = -1e-9
        for i in range(r):
            if xb[i] < worst:
                worst = xb[i]
                p = i
        if p < 0:
            return 0
        if piv >= MAX_PIVOTS_PER_SOLVE:
            return 2
        if st[_PIVLEFT] <= 0:
            return 1
        _duals(r, head, binv, y)
        enter = -1
        best = 0.0
        best_a = 0.0
        for k in range(r + r - 1 + st[_NCOLS]):
            if k < r:
                alpha = -binv[p, k]
                rc = y[k]
            elif k < npat0:
                j = k - r
                alpha = binv[p, j + 1] - binv[p, j]
                rc = y[j] - y[j + 1]
            else:
                t = k - npat0
                alpha = 0.0
                v = 0.0
                for e in range(cnnz[t]):
                    alpha += ccnt[t, e] * binv[p, cidx[t, e]]
                    v += ccnt[t, e] * y[cidx[t, e]]
                rc = 1.0 - v
            if alpha < -1e-9:
                if rc < 0.0:
                    rc = 0.0
                ratio = rc / -alpha
                if enter < 0 or ratio < best - 1e-12 or (ratio <= best + 1e-12 and -alpha > best_a):
                    enter = k
                    best = ratio
                    best_a = -alpha
        if enter < 0:
            return 2
        _ftran(enter, r, cidx, ccnt, cnnz, binv, wcol)
        if wcol[p] > -1e-12:
            return 2
        _pivot(r, p, enter, xb[p] / wcol[p], wcol, binv, xb, head)
        for i in range(r):
            if -1e-9 < xb[i] < 0.0:
                xb[i] = 0.0
        st[_PIVOTS] += 1
        st[_TOTPIV] += 1
        st[_PIVLEFT] -= 1
        piv += 1


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
    take: npt.NDArray[np.uint8],
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
def _completion(
    i: int,
    s: I64,
    cap: int,
    ch_own: I32,
    ch_cnt: I32,
    nch: int,
    take: npt.NDArray[np.uint8],
    out: I64,
) -> None:
    """The pattern behind ``cand[i]`` of :func:`_knapsack`: one job of length index i and
    the best completion by shorter ones (the DP rows of the shorter lengths are final)."""
    for k in range(s.shape[0]):
        out[k] = 0
    out[i] = 1
    c = cap - s[i]
    t = 0
    while t < nch and ch_own[t] <= i:
        t += 1
    while t < nch:
        if take[t, c] == 1:
            k = ch_own[t]
            out[k] += ch_cnt[t]
            c -= ch_cnt[t] * s[k]
        t += 1


@jit
def _add_column(pat: I64, r: int, cidx: I32, ccnt: I32, cnnz: I32, st: I64) -> None:
    """Append a pattern (counts per length) to the master's columns."""
    t = st[_NCOLS]
    nz = 0
    for i in range(r):
        if pat[i] > 0:
            cidx[t, nz] = i
            ccnt[t, nz] = pat[i]
            nz += 1
    cnnz[t] = nz
    st[_NCOLS] += 1


@jit
def _add_columns(
    r: int,
    s: I64,
    cap: int,
    y: F64,
    cnt: I64,
    cand: I64,
    ch_own: I32,
    ch_cnt: I32,
    nch: int,
    take: npt.NDArray[np.uint8],
    cbuf: I64,
    cidx: I32,
    ccnt: I32,
    cnnz: I32,
    st: I64,
) -> bool:
    """Add the priced pattern ``cnt`` if its reduced cost (duals ``y``) is negative, and
    then up to EXTRA_COLUMNS more from the same knapsack table: the best pattern under
    each of the longest jobs with the highest candidate values. True if ``cnt`` was added.
    """
    maxc = cidx.shape[0]
    v = 0.0
    for i in range(r):
        v += cnt[i] * y[i]
    if v <= 1.0 + EPS_PRICE or st[_NCOLS] >= maxc:
        return False
    _add_column(cnt, r, cidx, ccnt, cnnz, st)
    for _ in range(EXTRA_COLUMNS):
        top = -1
        for i in range(r):
            if cand[i] > 0 and (top < 0 or cand[i] > cand[top]):
                top = i
        if top < 0 or st[_NCOLS] >= maxc:
            break
        cand[top] = -1
        _completion(top, s, cap, ch_own, ch_cnt, nch, take, cbuf)
        v = 0.0
        same = True
        for i in range(r):
            v += cbuf[i] * y[i]
            if cbuf[i] != cnt[i]:
                same = False
        if v > 1.0 + EPS_PRICE and not same:
            _add_column(cbuf, r, cidx, ccnt, cnnz, st)
    return True


@jit
def _fill(t: int, r: int, s: I64, d: I64, cidx: I32, ccnt: I32, cnnz: I32, taken: I64) -> int:
    """The total length :func:`_fix` would put on a node for pattern ``t`` (``taken`` is
    scratch)."""
    for i in range(r):
        taken[i] = 0
    fill = 0
    for e in range(cnnz[t]):
        i = cidx[t, e]
        for _ in range(ccnt[t, e]):
            j = i
            while j < r and d[j] - taken[j] == 0:
                j += 1
            if j == r:
                break
            taken[j] += 1
            fill += s[j]
    return fill


@jit
def _fix(
    t: int, r: int, d: I64, cidx: I32, ccnt: I32, cnnz: I32, fix_len: I32, fix_bin: I32, st: I64
) -> None:
    """Fix the next node to pattern ``t``: each place of the pattern takes the longest job
    left that is no longer than it (a place of a length already used up is what the
    dual-optimal-inequality columns hand down to a shorter job)."""
    b = st[_NBINS]
    for e in range(cnnz[t]):  # lengths in increasing index: longest first
        i = cidx[t, e]
        for _ in range(ccnt[t, e]):
            j = i
            while j < r and d[j] == 0:
                j += 1
            if j == r:
                break
            fix_len[st[_NFIX]] = j
            fix_bin[st[_NFIX]] = b
            st[_NFIX] += 1
            d[j] -= 1
    st[_NBINS] += 1
    st[_MLEFT] -= 1


@jit
def cg_run(
    s: I64,
    d: I64,
    dpcap: int,
    ymax: int,
    ch_own: I32,
    ch_cnt: I32,
    cidx: I32,
    ccnt: I32,
    cnnz: I32,
    head: I32,
    binv: F64,
    xb: F64,
    work: F64,
    colbuf: F64,
    wcol: F64,
    y: F64,
    yint: I64,
    best_y: I64,
    dp: I64,
    take: npt.NDArray[np.uint8],
    cnt: I64,
    cand: I64,
    cbuf: I64,
    rhs: F64,
    fix_len: I32,
    fix_bin: I32,
    value: F64,
    st: I64,
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
    integers for *every* capacity up to ``dpcap`` and checks Farley's bound against the
    ``st[_MLEFT]`` nodes: the largest capacity c it refutes is recorded (``st[_REFCAP]``,
    certificate ``best_y`` with ``st[_NUM]`` > m ``st[_K]``), and with ``move`` the
    search moves up to c + 1 (the columns so far still fit there, and the basis stays
    feasible); without, it goes on to the LP optimum at its capacity (OPTIMAL, the value
    in ``value[0]``; NOT_REFUTED if that is at most m).

    Returns REFUTED (every capacity up to ``dpcap`` refuted; when diving: the dive's own
    capacity, before any node was fixed), NOT_REFUTED (not diving: the LP at ``st[_CAP]``
    is at most ``stop_below``, or optimal), PAUSED (``max_iters`` pricing rounds,
    ``st[_PIVLEFT]`` simplex pivots or ``max_fixes`` fixed nodes) or, when ``dive``, PACKED
    (``fix_len``/``fix_bin`` place every job: length index and node) or DIVE_FAILED. When
    diving, ``d`` is what is left and shrinks as nodes are fixed; ``noise`` > 0 randomises
    which pattern is fixed (see :meth:`LPBound.dive`).
    """
    r = s.shape[0]
    npat0 = 2 * r - 1
    it = 0
    fixes = 0
    while it < max_iters:
        cap = st[_CAP]
        if st[_DIRTY] == 1:
            res = _dual(r, rhs, cidx, ccnt, cnnz, head, binv, xb, work, colbuf, wcol, y, st)
            if res == 1:
                break
            st[_DIRTY] = 0
            if res == 2:
                # start again from the single-length patterns (always feasible)
                for i in range(r):
                    head[i] = npat0 + i
                if not _refactor(r, head, cidx, ccnt, cnnz, rhs, binv, xb, work, colbuf):
                    st[_STATUS] = DIVE_FAILED
                    return DIVE_FAILED
        res = _primal(
            r, rhs, cidx, ccnt, cnnz, head, binv, xb, work, colbuf, wcol, y, st, stop_below
        )
        if res == 1:
            break
        z = 0.0
        for k in range(r):
            if head[k] >= npat0:
                z += xb[k]
        if not dive and z <= stop_below:
            st[_STATUS] = NOT_REFUTED
            return NOT_REFUTED
        mleft = st[_MLEFT]
        # -- price: the duals rounded down to integers, the knapsack exact in integers
        optimal = True
        moved = False
        ytop = 0.0
        for i in range(r):
            if y[i] > ytop:
                ytop = y[i]
        if ytop > 0.0:
            scale = ymax / ytop
            num = 0
            for i in range(r):
                v = y[i] * scale
                yint[i] = int(v) if v > 0.0 else 0
                num += d[i] * yint[i]
            k_best = _knapsack(s, yint, dpcap, cap, ch_own, ch_cnt, st[_NCH], dp, take, cnt, cand)
            it += 1
            st[_ITERS] += 1
            if num > mleft * k_best and st[_NBINS] == 0:
                # refuted: find the largest capacity these duals refute (dp grows with c)
                lo = cap
                hi = dpcap
                while lo < hi:
                    mid = (lo + hi + 1) // 2
                    if num > mleft * dp[mid]:
                        lo = mid
                    else:
                        hi = mid - 1
                if lo > st[_REFCAP]:
                    st[_REFCAP] = lo
                    st[_NUM] = num
                    st[_K] = dp[lo]
                    for i in range(r):
                        best_y[i] = yint[i]
                if dive or lo >= dpcap:
                    st[_STATUS] = REFUTED
                    return REFUTED
                if move:
                    st[_CAP] = lo + 1
                    moved = True
            elif num > mleft * k_best:  # diving, after a node was fixed
                st[_STATUS] = DIVE_FAILED
                return DIVE_FAILED
            if not moved and _add_columns(
                r, s, cap, y, cnt, cand, ch_own, ch_cnt, st[_NCH], take, cbuf, cidx, ccnt, cnnz, st
            ):
                optimal = False
        if moved or not optimal:
            continue
        if not dive:
            value[0] = z
            status = NOT_REFUTED if move or z <= st[_MLEFT] + 1e-9 else OPTIMAL
            st[_STATUS] = status
            return status
        # -- dive: the LP of what is left is solved; fix the pattern it uses most
        if z > mleft + EPS_DIVE:
            st[_STATUS] = DIVE_FAILED
            return DIVE_FAILED
        # (with ``noise``, each value gets a random bonus in [0, noise): another dive)
        slack = mleft * cap
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
                # what the node would hold (see _fix): nothing, or more room left empty
                # than all the nodes left can spare, rules the pattern out
                fill = _fill(t, r, s, d, cidx, ccnt, cnnz, cbuf)
                if fill > 0 and cap - fill <= slack:
                    best = score
                    pick = t
        if pick < 0 or mleft == 0:
            st[_STATUS] = DIVE_FAILED
            return DIVE_FAILED
        _fix(pick, r, d, cidx, ccnt, cnnz, fix_len, fix_bin, st)
        left = 0
        for i in range(r):
            left += d[i]
        if left == 0:
            st[_STATUS] = PACKED
            return PACKED
        st[_NCH] = _chunks(s, d, dpcap, ch_own, ch_cnt)
        for i in range(r):
            rhs[i] = d[i]
        _basic_solution(r, rhs, binv, xb)
        st[_DIRTY] = 1
        fixes += 1
        if fixes >= max_fixes:
            break
    st[_STATUS] = PAUSED
    return PAUSED


class LPBound:
    """Resumable column generation: a bound (``run``) or a dive (``dive``).

    ``q`` are the job lengths in ticks (any order); with ``counts`` it is the distinct
    lengths, longest first, and ``counts`` their multiplicities. The bound starts at
    capacity ``cap`` and moves up as capacities are refuted, at most to ``dpcap``
    (default ``cap``); :attr:`cap` is the capacity it works on, :attr:`refuted_up_to` the
    largest capacity refuted so far (-1: none).
    """

    def __init__(
        self,
        q: I64,
        m: int,
        cap: int,
        *,
        dpcap: int | None = None,
        compiled: bool = True,
        counts: I64 | None = None,
    ) -> None:
        q = np.asarray(q, dtype=np.int64)
        if counts is None:
            lengths, cnts = np.unique(q[q > 0], return_counts=True)
            self.s = np.ascontiguousarray(lengths[::-1], dtype=np.int64)
            self.d = np.ascontiguousarray(cnts[::-1], dtype=np.int64)
        else:
            self.s = np.ascontiguousarray(q, dtype=np.int64)
            self.d = np.ascontiguousarray(counts, dtype=np.int64)
        self.d0 = self.d.copy()
        self.m = int(m)
        cap = int(cap)
        self.dpcap = max(cap, int(dpcap) if dpcap is not None else cap)
        r = int(self.s.size)
        self.r = r
        self.status = PAUSED
        self.diving = False
        self.noise = 0.0
        self.seed = 0  # the driver's note of which dive this is
        #: simplex pivots allowed per call (a call also pauses there: the clock is checked
        #: between calls)
        self.max_pivots = 1 << 40
        self.func = cg_run if compiled else pure(cg_run)
        self.trivial = self.too_large = False
        self.st = np.zeros(ST_SIZE, dtype=np.int64)
        self.st[_CAP] = cap
        self.st[_REFCAP] = -1
        total = int((self.s * self.d).sum())
        # capacities below the longest job or the mean load are refuted without the LP
        low = max(int(self.s[0]), -(-total // m)) if r else 0
        if low > cap:
            self.st[_REFCAP] = low - 1
            self.st[_CAP] = cap = low
        if r == 0 or cap > self.dpcap:
            self.status = REFUTED if r else NOT_REFUTED
            self.trivial = True
            return
        dpcap = self.dpcap
        if r > MAX_LENGTHS:
            self.too_large = True
            self.status = NOT_REFUTED
            return
        u = np.minimum(self.d, dpcap // self.s).astype(np.int64)
        chunks = int(sum(int(x).bit_length() for x in u.tolist()))
        if chunks * (dpcap + 1) > MAX_DP_CELLS or r > MAX_LENGTHS:
            self.too_large = True
            self.status = NOT_REFUTED
            return
        n = int(self.d.sum())
        # Y_i <= ymax keeps sum d_i Y_i and m K (K <= n ymax) inside 63 bits
        self.ymax = int(min(1 << 40, (1 << 62) // ((n + 1) * (m + 1))))
        maxc = MAX_COLUMNS
        # a pattern holds at most dpcap // (shortest length) jobs, so as many lengths
        width = max(1, min(r, dpcap // int(self.s[-1])))
        self.cidx = np.zeros((maxc, width), dtype=np.int32)
        self.ccnt = np.zeros((maxc, width), dtype=np.int32)
        self.cnnz = np.zeros(maxc, dtype=np.int32)
        # initial basis: one single-length pattern per length (diagonal, feasible)
        one = np.maximum(np.minimum(self.d, cap // self.s), 1).astype(np.int64)
        for i in range(r):
            self.cidx[i, 0] = i
            self.ccnt[i, 0] = int(one[i])
            self.cnnz[i] = 1
        self.st[_NCOLS] = r
        self.st[_MLEFT] = m
        self.ch_own = np.zeros(max(chunks, 1), dtype=np.int32)
        self.ch_cnt = np.zeros(max(chunks, 1), dtype=np.int32)
        self.st[_NCH] = pure(_chunks)(self.s, self.d, dpcap, self.ch_own, self.ch_cnt)
        self.head = np.arange(2 * r - 1, 3 * r - 1, dtype=np.int32)
        self.binv = np.diag(1.0 / one.astype(np.float64))
        self.rhs = self.d.astype(np.float64)
        self.xb = self.rhs / one.astype(np.float64)
        self.work = np.zeros((r, r))
        self.colbuf = np.zeros(r)
        self.wcol = np.zeros(r)
        self.y = np.zeros(r)
        self.yint = np.zeros(r, dtype=np.int64)
        self.best_y = np.zeros(r, dtype=np.int64)
        self.dp = np.zeros(dpcap + 1, dtype=np.int64)
        self.take = np.zeros((max(chunks, 1), dpcap + 1), dtype=np.uint8)
        self.cnt = np.zeros(r, dtype=np.int64)
        self.fix_len = np.zeros(n, dtype=np.int32)
        self.fix_bin = np.zeros(n, dtype=np.int32)
        self.cand = np.zeros(r, dtype=np.int64)
        self.cbuf = np.zeros(r, dtype=np.int64)
        self.value_ = np.zeros(1)  # the master's value when a call ended

    @property
    def cap(self) -> int:
        """The capacity the column generation works on."""
        return int(self.st[_CAP])

    @property
    def refuted_up_to(self) -> int:
        """The largest capacity refuted so far (-1: none)."""
        return int(self.st[_REFCAP])

    def add_pattern(self, pat: I64) -> None:
        """Add a column: a pattern as job counts per distinct length (it must fit)."""
        if self.trivial or self.too_large or self.status != PAUSED:
            return
        t = int(self.st[_NCOLS])
        if t >= self.cidx.shape[0]:
            return
        if int((pat * self.s).sum()) > self.cap or bool((pat > self.d0).any()):
            raise ValueError("the pattern does not fit")
        nz = 0
        for i in np.flatnonzero(pat).tolist():
            self.cidx[t, nz] = i
            self.ccnt[t, nz] = int(pat[i])
            nz += 1
        self.cnnz[t] = nz
        self.st[_NCOLS] = t + 1

    def patterns_of(self, q: I64, node_of: I32) -> list[I64]:
        """The nodes of a packing of ``q`` that fit in :attr:`cap`, as patterns."""
        idx = {int(v): i for i, v in enumerate(self.s.tolist())}
        out: dict[tuple[int, ...], I64] = {}
        order = np.argsort(node_of, kind="stable")
        bounds = np.searchsorted(node_of[order], np.arange(int(node_of.max()) + 2))
        for k in range(bounds.size - 1):
            jobs = q[order[bounds[k] : bounds[k + 1]]]
            if jobs.size == 0 or int(jobs.sum()) > self.cap:
                continue
            pat = np.zeros(self.r, dtype=np.int64)
            for v in jobs.tolist():
                if v > 0:
                    pat[idx[int(v)]] += 1
            out.setdefault(tuple(pat.tolist()), pat)
        return list(out.values())

    @property
    def iterations(self) -> int:
        """Pricing rounds done so far."""
        return int(self.st[_ITERS])

    def _call(
        self, max_iters: int, stop_below: float, max_fixes: int = 1 << 30, move: bool = True
    ) -> int:
        self.st[_PIVLEFT] = self.max_pivots
        self.status = int(
            self.func(
                self.s,
                self.d,
                self.dpcap,
                self.ymax,
                self.ch_own,
                self.ch_cnt,
                self.cidx,
                self.ccnt,
                self.cnnz,
                self.head,
                self.binv,
                self.xb,
                self.work,
                self.colbuf,
                self.wcol,
                self.y,
                self.yint,
                self.best_y,
                self.dp,
                self.take,
                self.cnt,
                self.cand,
                self.cbuf,
                self.rhs,
                self.fix_len,
                self.fix_bin,
                self.value_,
                self.st,
                int(max_iters),
                float(stop_below),
                move,
                self.diving,
                int(max_fixes),
                float(self.noise),
            )
        )
        return self.status

    def run(self, max_iters: int) -> int:
        """At most ``max_iters`` more pricing rounds of the bound: REFUTED (every capacity
        up to ``dpcap``), NOT_REFUTED (the LP at :attr:`cap` is at most m; every smaller
        capacity is refuted, up to :attr:`refuted_up_to`) or PAUSED."""
        if self.status != PAUSED or self.diving:
            return self.status
        return self._call(max_iters, self.m - 1e-7)

    def solve(self, max_iters: int, *, early_exit: bool = True) -> int:
        """Like :meth:`run` but staying at :attr:`cap` until the LP optimum: OPTIMAL (its
        value is :attr:`value`, above m), NOT_REFUTED (at most m; without ``early_exit``
        only at the optimum, whose value is then :attr:`value` too) or PAUSED. Capacities
        the duals on the way refute still raise :attr:`refuted_up_to`; REFUTED if that
        reaches ``dpcap``."""
        if self.status != PAUSED or self.diving:
            return self.status
        return self._call(max_iters, self.m - 1e-7 if early_exit else -1.0, move=False)

    def reopen(self) -> None:
        """After NOT_REFUTED (perhaps an early exit): let :meth:`solve` go on, e.g. to the
        optimum with ``early_exit=False``."""
        if self.status == NOT_REFUTED and not (self.trivial or self.too_large or self.diving):
            self.status = PAUSED

    @property
    def value(self) -> float:
        """The master problem's value when the last call ended (the LP value if optimal)."""
        return float(self.value_[0])

    def raise_cap(self, cap: int) -> None:
        """Work on a larger capacity from now on (every column still fits)."""
        if self.trivial or self.too_large or self.diving:
            raise RuntimeError("only a bound that is not diving can move")
        if not self.cap <= cap <= self.dpcap:
            raise ValueError("the capacity can only grow, up to dpcap")
        self.st[_CAP] = cap
        self.status = PAUSED

    def copy(self) -> LPBound:
        """An independent copy (arrays copied), to explore another capacity from here."""
        other = copy.copy(self)
        for k, v in vars(self).items():
            if isinstance(v, np.ndarray):
                setattr(other, k, v.copy())
        return other

    def dive(self, max_iters: int, max_fixes: int = 1 << 30, *, seed: int = 0) -> int:
        """Dive for a packing at :attr:`cap` (see the module docstring): at most
        ``max_iters`` more pricing rounds and ``max_fixes`` more fixed nodes; PACKED,
        DIVE_FAILED, REFUTED (:attr:`cap` refuted, before any node was fixed) or PAUSED.

        ``seed`` (read when the dive starts) other than 0 makes another, randomised dive:
        each pattern's LP value gets a random bonus below ``DIVE_NOISE`` when the next node
        is fixed (a deterministic generator, so the same seed gives the same dive)."""
        if self.trivial or self.too_large:
            return DIVE_FAILED
        if not self.diving:
            if self.status == REFUTED:
                return REFUTED
            self.diving = True
            self.status = PAUSED
            self.noise = DIVE_NOISE if seed else 0.0
            self.st[_RNG] = (seed * 0x9E3779B97F4A7C15 + 1) & 0x7FFFFFFFFFFFFFFF
        if self.status != PAUSED:
            return self.status
        return self._call(max_iters, -1.0, max_fixes)

    @property
    def nodes_left(self) -> int:
        """Nodes not fixed by the dive yet."""
        return int(self.st[_MLEFT])

    def remaining(self) -> I64:
        """The jobs the dive has not placed yet (lengths, longest first)."""
        return np.repeat(self.s, self.d)

    def fixed_bins(self) -> tuple[I32, I32]:
        """(length index, node) of every job the dive has placed."""
        nfix = int(self.st[_NFIX])
        return self.fix_len[:nfix].copy(), self.fix_bin[:nfix].copy()

    def packing(self, q: I64) -> I32:
        """Once PACKED: the node of every job of ``q`` (as given)."""
        if self.status != PACKED:
            raise RuntimeError("no packing found")
        lens, bins = self.fixed_bins()
        by_len: dict[int, list[int]] = {}
        for i, b in zip(lens.tolist(), bins.tolist(), strict=True):
            by_len.setdefault(int(self.s[i]), []).append(b)
        node_of = np.full(q.size, -1, dtype=np.int32)
        for j, v in enumerate(q.tolist()):
            node_of[j] = by_len[int(v)].pop()
        return node_of

    def certificate(self) -> dict[str, Any]:
        """Why :attr:`refuted_up_to` is infeasible: Farley's integer duals (their total
        exceeds m times the best pattern value at that capacity), or the trivial rule."""
        if self.trivial or int(self.st[_K]) == 0:
            return {"rule": "longest_job_or_mean_load"}
        return {
            "rule": "lp_farley",
            "lengths": self.s.tolist(),
            "counts": self.d0.tolist(),
            "duals": self.best_y.tolist(),
            "dual_total": int(self.st[_NUM]),
            "best_pattern_value": int(self.st[_K]),
        }


def check_certificate(cert: dict[str, Any], m: int, cap: int) -> bool:
    """Re-check a Farley certificate independently (plain Python integers)."""
    s = [int(x) for x in cert["lengths"]]
    d = [int(x) for x in cert["counts"]]
    y = [int(x) for x in cert["duals"]]
    if any(v < 0 for v in y) or any(v <= 0 for v in s):
        return False
    # exact bounded knapsack by DP over the capacity (jobs one by one)
    best = [0] * (cap + 1)
    for si, di, yi in zip(s, d, y, strict=True):
        for _ in range(min(di, cap // si)):
            for c in range(cap, si - 1, -1):
                v = best[c - si] + yi
                if v > best[c]:
                    best[c] = v
    k = best[cap]
    return sum(di * yi for di, yi in zip(d, y, strict=True)) > m * k


def warm_up() -> None:
    """Compile (or load from numba's cache) the kernels of this module."""
    q = np.array([5, 5, 4, 4, 3, 3, 3], dtype=np.int64)
    LPBound(q, 3, 9, dpcap=12).run(50)
    LPBound(q, 3, 9).dive(50)
