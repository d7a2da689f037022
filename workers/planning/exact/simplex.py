"""The dense revised simplex of the bin-packing master problem (see :mod:`.lpbound`).

The restricted master problem over the patterns found so far,

    min sum_p x_p   subject to   sum_p a_ip x_p >= d_i,  x >= 0,

has ``r`` rows (one per distinct length). Its columns, in the order every kernel here
enumerates them: ids 0 .. r-1 are the surplus columns -e_i, r .. 2r-2 the
dual-optimal-inequality columns e_{j+1} - e_j (a longer job's place holds a shorter job;
Ben Amor, Desrosiers and Valerio de Carvalho 2006), 2r-1 .. the patterns of
:class:`Columns`. Patterns cost 1, the other columns 0.

The basis inverse is explicit and dense (r^2 per pivot), refactorised from scratch every
``REFACTOR_EVERY`` pivots (Gauss-Jordan with partial pivoting). :func:`primal` goes from
a feasible basis to an optimal one; :func:`dual` back to a feasible one after the
right-hand side shrank (a dive fixed a node). Both are resumable: a call spends at most
``Basis.ctr[LEFT]`` pivots and says when they are spent.

Everything here works in floating point and gives *hints* only: the duals it returns are
rounded down to integers and verified exactly (Farley's bound) by :mod:`.lpbound`.
The kernels are written in the subset of Python numba compiles (``.py_func``: the same
code as plain Python).
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from ..kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]
F64 = npt.NDArray[np.float64]

#: simplex pivots between two refactorisations of the basis inverse
REFACTOR_EVERY = 1000
#: pivots allowed per master solve before pricing goes ahead with the duals at hand
MAX_PIVOTS_PER_SOLVE = 2_000
#: reduced costs below -EPS_RC enter the basis
EPS_RC = 1e-9

#: outcomes of :func:`primal` and :func:`dual`: done, this call's pivots spent (resume
#: later), gave up
DONE, SPENT, GAVE_UP = 0, 1, 2
#: the counters of a basis (``Basis.ctr``): pivots since the last refactorisation, pivots
#: in all, pivots this call may still make
SINCE, TOTAL, LEFT = range(3)


class Columns(NamedTuple):
    """The patterns of the master problem, sparse: pattern t holds ``cnt[t, e]`` jobs of
    length index ``idx[t, e]`` for e < ``nnz[t]`` (lengths in increasing index)."""

    idx: I32
    cnt: I32
    nnz: I32


class Basis(NamedTuple):
    """A basis of the master problem and what the simplex keeps with it."""

    head: I32  # the column id of each basis row
    binv: F64  # the basis inverse (r x r)
    xb: F64  # the basic solution B^-1 d
    y: F64  # the duals c_B B^-1
    ctr: I64  # counters: SINCE, TOTAL, LEFT
    work: F64  # scratch (r x r): the basis being inverted
    colbuf: F64  # scratch: a dense column
    wcol: F64  # scratch: B^-1 a of the entering column


def diagonal_basis(r: int, one: F64, rhs: F64) -> Basis:
    """The basis of the first r patterns, pattern i holding ``one[i]`` jobs of length
    index i alone (diagonal, and feasible for the right-hand side ``rhs``)."""
    return Basis(
        head=np.arange(2 * r - 1, 3 * r - 1, dtype=np.int32),
        binv=np.diag(1.0 / one),
        xb=rhs / one,
        y=np.zeros(r),
        ctr=np.zeros(3, dtype=np.int64),
        work=np.zeros((r, r)),
        colbuf=np.zeros(r),
        wcol=np.zeros(r),
    )


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
def _column(cid: int, r: int, cols: Columns, out: F64) -> float:
    """Dense column ``cid`` (see the module for the ids) into ``out``; returns its cost."""
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
    for e in range(cols.nnz[t]):
        out[cols.idx[t, e]] = float(cols.cnt[t, e])
    return 1.0


@jit
def _reduced_cost(cid: int, r: int, cols: Columns, y: F64) -> float:
    """The reduced cost of column ``cid`` under the duals ``y``."""
    if cid < r:  # surplus: rc = y_i
        return float(y[cid])
    if cid < 2 * r - 1:  # e_{j+1} - e_j: rc = y_j - y_{j+1}
        j = cid - r
        return float(y[j] - y[j + 1])
    t = cid - (2 * r - 1)
    v = 0.0
    for e in range(cols.nnz[t]):
        v += cols.cnt[t, e] * y[cols.idx[t, e]]
    return 1.0 - v


@jit
def _row_entry(cid: int, r: int, cols: Columns, binv: F64, p: int) -> float:
    """Row ``p`` of B^-1 times column ``cid``."""
    if cid < r:
        return float(-binv[p, cid])
    if cid < 2 * r - 1:
        j = cid - r
        return float(binv[p, j + 1] - binv[p, j])
    t = cid - (2 * r - 1)
    alpha = 0.0
    for e in range(cols.nnz[t]):
        alpha += cols.cnt[t, e] * binv[p, cols.idx[t, e]]
    return alpha


@jit
def basic_solution(r: int, d: F64, b: Basis) -> None:
    """x_B = B^-1 d; rounding noise below zero is cleared, real negatives are kept."""
    for i in range(r):
        v = 0.0
        for j in range(r):
            v += b.binv[i, j] * d[j]
        b.xb[i] = 0.0 if -1e-9 < v < 0.0 else v


@jit
def refactor(r: int, d: F64, cols: Columns, b: Basis) -> bool:
    """Recompute the basis inverse and the basic solution from scratch."""
    for k in range(r):
        _column(b.head[k], r, cols, b.colbuf)
        for i in range(r):
            b.work[i, k] = b.colbuf[i]
    if not _invert(b.work, b.binv):
        return False
    basic_solution(r, d, b)
    return True


@jit
def objective(r: int, b: Basis) -> float:
    """The master's value at the basic solution: the sum of the basic patterns."""
    npat0 = 2 * r - 1
    z = 0.0
    for k in range(r):
        if b.head[k] >= npat0:
            z += b.xb[k]
    return z


@jit
def _duals(r: int, b: Basis) -> None:
    """y = c_B B^-1 (patterns cost 1, the other columns 0)."""
    npat0 = 2 * r - 1
    for j in range(r):
        b.y[j] = 0.0
    for k in range(r):
        if b.head[k] >= npat0:
            for j in range(r):
                b.y[j] += b.binv[k, j]


@jit
def _ftran(cid: int, r: int, cols: Columns, b: Basis) -> None:
    """wcol = B^-1 a for column ``cid`` (see :func:`_column`), using its few nonzeros."""
    wcol = b.wcol
    binv = b.binv
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
        for e in range(cols.nnz[t]):
            k = cols.idx[t, e]
            c = float(cols.cnt[t, e])
            for i in range(r):
                wcol[i] += c * binv[i, k]


@jit
def _pivot(r: int, leave: int, enter: int, theta: float, b: Basis) -> None:
    """Basis change: column ``enter`` replaces row ``leave``'s, with step ``theta``;
    counted against the call's pivots."""
    wcol = b.wcol
    binv = b.binv
    xb = b.xb
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
    b.head[leave] = enter
    b.ctr[SINCE] += 1
    b.ctr[TOTAL] += 1
    b.ctr[LEFT] -= 1


@jit
def _refactor_due(ctr: I64) -> bool:
    """Whether REFACTOR_EVERY pivots were made since the last refactorisation (the count
    starts again)."""
    if ctr[SINCE] < REFACTOR_EVERY:
        return False
    ctr[SINCE] = 0
    return True


@jit
def _pivots_spent(piv: int, ctr: I64) -> int:
    """GAVE_UP after MAX_PIVOTS_PER_SOLVE pivots of one solve, SPENT when this call's
    pivots are, else DONE (go on)."""
    if piv >= MAX_PIVOTS_PER_SOLVE:
        return GAVE_UP
    if ctr[LEFT] <= 0:
        return SPENT
    return DONE


@jit
def primal(r: int, d: F64, cols: Columns, ncols: int, b: Basis, stop_below: float) -> int:
    """Primal simplex over the surplus, dual-optimal-inequality and ``ncols`` pattern
    columns from a feasible basis: DONE when optimal or when the objective reaches
    ``stop_below``, SPENT when this call's pivots are (resume later), GAVE_UP."""
    piv = 0
    _duals(r, b)
    while True:
        if _refactor_due(b.ctr):
            if not refactor(r, d, cols, b):
                return GAVE_UP
            for i in range(r):
                if b.xb[i] < 0.0:
                    b.xb[i] = 0.0
            _duals(r, b)
        # pricing, one loop per kind of column (the hottest loop here: :func:`_reduced_cost`
        # per column, with its branches, costs a few per cent of a whole bound)
        enter = -1
        best_rc = -EPS_RC
        y = b.y
        for i in range(r):  # surplus: rc = y_i
            if y[i] < best_rc:
                best_rc = y[i]
                enter = i
        for j in range(r - 1):  # e_{j+1} - e_j: rc = y_j - y_{j+1}
            rc = y[j] - y[j + 1]
            if rc < best_rc:
                best_rc = rc
                enter = r + j
        cidx = cols.idx
        ccnt = cols.cnt
        cnnz = cols.nnz
        for t in range(ncols):
            v = 0.0
            for e in range(cnnz[t]):
                v += ccnt[t, e] * y[cidx[t, e]]
            rc = 1.0 - v
            if rc < best_rc:
                best_rc = rc
                enter = 2 * r - 1 + t
        if enter < 0:
            return DONE
        spent = _pivots_spent(piv, b.ctr)
        if spent != DONE:
            return spent
        _ftran(enter, r, cols, b)
        # ratio test (ties: the largest pivot element)
        wcol = b.wcol
        leave = -1
        theta = 0.0
        wbest = 0.0
        for i in range(r):
            if wcol[i] > 1e-9:
                ratio = b.xb[i] / wcol[i]
                if (
                    leave < 0
                    or ratio < theta - 1e-12
                    or (ratio <= theta + 1e-12 and wcol[i] > wbest)
                ):
                    leave = i
                    theta = ratio
                    wbest = wcol[i]
        if leave < 0:  # unbounded cannot happen (costs >= 0): give up on this solve
            return GAVE_UP
        _pivot(r, leave, enter, theta, b)
        for i in range(r):
            if b.xb[i] < 0.0:
                b.xb[i] = 0.0
        # the duals move along the new row of the inverse: y += rc_q (B^-1)_p
        for j in range(r):
            b.y[j] += best_rc * b.binv[leave, j]
        piv += 1
        if stop_below > 0.0 and objective(r, b) <= stop_below:
            return DONE


@jit
def _most_negative(r: int, xb: F64) -> int:
    """The basic row with the most negative value below -1e-9 (the first on ties), or
    -1 when the basis is feasible."""
    p = -1
    worst = -1e-9
    for i in range(r):
        if xb[i] < worst:
            worst = xb[i]
            p = i
    return p


@jit
def dual(r: int, d: F64, cols: Columns, ncols: int, b: Basis) -> int:
    """Dual simplex back to a feasible basis after the right-hand side shrank: DONE when
    feasible, SPENT when this call's pivots are (resume later), GAVE_UP (no entering
    column or too many pivots)."""
    piv = 0
    while True:
        if _refactor_due(b.ctr) and not refactor(r, d, cols, b):
            return GAVE_UP
        p = _most_negative(r, b.xb)
        if p < 0:
            return DONE
        spent = _pivots_spent(piv, b.ctr)
        if spent != DONE:
            return spent
        _duals(r, b)
        enter = -1
        best = 0.0
        best_a = 0.0
        for k in range(2 * r - 1 + ncols):
            alpha = _row_entry(k, r, cols, b.binv, p)
            if alpha < -1e-9:
                rc = _reduced_cost(k, r, cols, b.y)
                if rc < 0.0:
                    rc = 0.0
                ratio = rc / -alpha
                if enter < 0 or ratio < best - 1e-12 or (ratio <= best + 1e-12 and -alpha > best_a):
                    enter = k
                    best = ratio
                    best_a = -alpha
        if enter < 0:
            return GAVE_UP
        _ftran(enter, r, cols, b)
        if b.wcol[p] > -1e-12:
            return GAVE_UP
        _pivot(r, p, enter, b.xb[p] / b.wcol[p], b)
        for i in range(r):
            if -1e-9 < b.xb[i] < 0.0:
                b.xb[i] = 0.0
        piv += 1
