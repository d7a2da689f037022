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
patterns found so far, solved by a small dense revised simplex (:mod:`.simplex`: explicit
basis inverse, refactorised now and then), and a bounded knapsack (:mod:`.pricing`:
dynamic programming over the capacity) that prices new patterns: the best one, and from
the same table the best pattern under each of the longest jobs that price well. Standard
devices speed it up: the dual-optimal inequalities y_i >= y_j for s_i >= s_j (Ben Amor,
Desrosiers and Valerio de Carvalho 2006; as zero-cost "a longer job's place can hold a
shorter job" columns), and the early exit z(RMP) <= m (the RMP value is an upper bound on
z*, so C cannot be refuted by this bound). The knapsack table covers every capacity up to
``dpcap``, so one set of duals refutes a whole range of capacities at once, and a column
generation can move up to a larger capacity keeping its columns and its (still feasible)
basis.

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

The kernel :func:`cg_run` is resumable (its state, :class:`CGState`, lives in arrays owned
by :class:`LPBound`), so the driver can check its wall clock between slices. It is written in
the subset of Python numba compiles; ``cg_run.py_func`` is the pure-Python twin that the
tests compare against.
"""

from __future__ import annotations

import copy
from typing import Any

import numpy as np

from ..kernels import pure
from .colgen import (
    _CAP,
    _DPCAP,
    _ITERS,
    _K,
    _MLEFT,
    _NCH,
    _NCOLS,
    _NFIX,
    _NUM,
    _REFCAP,
    _RNG,
    _YMAX,
    DIVE_NOISE,
    I32,
    I64,
    ST_SIZE,
    CGState,
    _add_column,
    cg_run,
)

# the kernels' status codes, part of this module's interface
from .colgen import DIVE_FAILED as DIVE_FAILED
from .colgen import NOT_REFUTED as NOT_REFUTED
from .colgen import OPTIMAL as OPTIMAL
from .colgen import PACKED as PACKED
from .colgen import PAUSED as PAUSED
from .colgen import REFUTED as REFUTED
from .pricing import Pricing, _chunks
from .simplex import (
    LEFT,
    Columns,
    diagonal_basis,
)

#: the knapsack table (binary-split items x capacity) must stay below this many cells
MAX_DP_CELLS = 12_000_000
#: at most this many distinct lengths (the basis inverse is dense: r^2 per pivot)
MAX_LENGTHS = 256
#: at most this many patterns are kept in the master problem
MAX_COLUMNS = 4_000


def _copied(v: Any) -> Any:
    """``v`` with every array in it copied (an array, or named tuples of them)."""
    if isinstance(v, np.ndarray):
        return v.copy()
    return type(v)(*(_copied(x) for x in v))


class LPBound:
    """Resumable column generation: a bound (``run``) or a dive (``dive``).

    ``q`` are the job lengths in ticks (any order); with ``counts`` it is the distinct
    lengths, longest first, and ``counts`` their multiplicities. The bound starts at
    capacity ``cap`` and moves up as capacities are refuted, at most to ``dpcap``
    (default ``cap``); :attr:`cap` is the capacity it works on, :attr:`refuted_up_to` the
    largest capacity refuted so far (-1: none). ``max_lengths`` and ``max_columns``
    replace ``MAX_LENGTHS`` and ``MAX_COLUMNS`` for this instance (a generation whose
    column store is full stops as if the master were optimal: NOT_REFUTED, a weaker bound
    but never a wrong one).
    """

    cg: CGState  # (only when neither trivial nor too large)

    def __init__(
        self,
        q: I64,
        m: int,
        cap: int,
        *,
        dpcap: int | None = None,
        compiled: bool = True,
        counts: I64 | None = None,
        max_lengths: int | None = None,
        max_columns: int | None = None,
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
        if r > (MAX_LENGTHS if max_lengths is None else max_lengths):
            self.too_large = True
            self.status = NOT_REFUTED
            return
        u = np.minimum(self.d, dpcap // self.s).astype(np.int64)
        chunks = int(sum(int(x).bit_length() for x in u.tolist()))
        if chunks * (dpcap + 1) > MAX_DP_CELLS:
            self.too_large = True
            self.status = NOT_REFUTED
            return
        n = int(self.d.sum())
        self.st[_DPCAP] = dpcap
        self._set_ymax(m)
        maxc = MAX_COLUMNS if max_columns is None else max(r + 1, int(max_columns))
        # a pattern holds at most dpcap // (shortest length) jobs, so as many lengths
        width = max(1, min(r, dpcap // int(self.s[-1])))
        cols = Columns(
            idx=np.zeros((maxc, width), dtype=np.int32),
            cnt=np.zeros((maxc, width), dtype=np.int32),
            nnz=np.zeros(maxc, dtype=np.int32),
        )
        # initial basis: one single-length pattern per length (diagonal, feasible)
        one = np.maximum(np.minimum(self.d, cap // self.s), 1).astype(np.int64)
        for i in range(r):
            cols.idx[i, 0] = i
            cols.cnt[i, 0] = int(one[i])
            cols.nnz[i] = 1
        self.st[_NCOLS] = r
        self.st[_MLEFT] = m
        rows = max(chunks, 1)
        price = Pricing(
            ch_own=np.zeros(rows, dtype=np.int32),
            ch_cnt=np.zeros(rows, dtype=np.int32),
            dp=np.zeros(dpcap + 1, dtype=np.int64),
            take=np.zeros((rows, dpcap + 1), dtype=np.uint8),
            pat=np.zeros(r, dtype=np.int64),
            cand=np.zeros(r, dtype=np.int64),
            cbuf=np.zeros(r, dtype=np.int64),
            yint=np.zeros(r, dtype=np.int64),
            best_y=np.zeros(r, dtype=np.int64),
        )
        self.st[_NCH] = pure(_chunks)(self.s, self.d, dpcap, price.ch_own, price.ch_cnt)
        rhs = self.d.astype(np.float64)
        self.cg = CGState(
            rhs=rhs,
            cols=cols,
            basis=diagonal_basis(r, one.astype(np.float64), rhs),
            price=price,
            fix_len=np.zeros(n, dtype=np.int32),
            fix_bin=np.zeros(n, dtype=np.int32),
            value=np.zeros(1),
        )

    def _set_ymax(self, m: int) -> None:
        # Y_i <= ymax keeps sum d_i Y_i and m K (K <= n ymax) inside 63 bits
        n = int(self.d0.sum())
        self.st[_YMAX] = int(min(1 << 40, (1 << 62) // ((n + 1) * (m + 1))))

    def raise_nodes(self, m: int) -> None:
        """After a refutation (REFUTED by :meth:`run`, at the capacity it started on, with
        ``dpcap`` that capacity): ask the same question for ``m`` nodes (``m`` larger),
        keeping the columns and the basis -- a warm start of the next column generation.
        The refutation's certificate is forgotten: read it before."""
        if self.trivial or self.too_large or self.diving:
            raise RuntimeError("only a bound that is not diving can ask for more nodes")
        if self.cap != self.dpcap or m < self.m:
            raise ValueError("at its one capacity, for at least as many nodes")
        self.m = int(m)
        self.st[_MLEFT] = self.m
        self.st[_REFCAP] = -1
        self.st[_NUM] = 0
        self.st[_K] = 0
        self._set_ymax(self.m)
        self.status = PAUSED

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
        if int(self.st[_NCOLS]) >= self.cg.cols.idx.shape[0]:
            return
        if int((pat * self.s).sum()) > self.cap or bool((pat > self.d0).any()):
            raise ValueError("the pattern does not fit")
        pure(_add_column)(pat, self.r, self.cg.cols, self.st)

    def add_patterns(self, pats: I64) -> int:
        """Add columns: the rows of ``pats`` (job counts per distinct length), those that
        fit (and while there is room for columns). Returns how many were added."""
        if self.trivial or self.too_large or self.status != PAUSED:
            return 0
        pats = np.asarray(pats, dtype=np.int64).reshape(-1, self.r)
        ok = ((pats * self.s).sum(axis=1) <= self.cap) & (pats <= self.d0).all(axis=1)
        ok &= (pats >= 0).all(axis=1) & (pats.sum(axis=1) > 0)
        cols, added = self.cg.cols, 0
        width = cols.idx.shape[1]
        for row in pats[ok]:
            t = int(self.st[_NCOLS])
            nz = np.flatnonzero(row)
            if t >= cols.idx.shape[0] or nz.size > width:
                break
            cols.idx[t, : nz.size] = nz
            cols.cnt[t, : nz.size] = row[nz]
            cols.nnz[t] = nz.size
            self.st[_NCOLS] = t + 1
            added += 1
        return added

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
        self.cg.basis.ctr[LEFT] = self.max_pivots
        self.status = int(
            self.func(
                self.s,
                self.d,
                self.st,
                self.cg,
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
        return float(self.cg.value[0])

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
            if isinstance(v, np.ndarray | CGState):
                setattr(other, k, _copied(v))
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
        return self.cg.fix_len[:nfix].copy(), self.cg.fix_bin[:nfix].copy()

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
            "duals": self.cg.price.best_y.tolist(),
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
