"""Farley's bound for farms: the pattern LP of bin packing with node classes, made exact.

"Does every node end by ``C``?" (``C`` in the whole ticks of :mod:`.farm_exact`) is a
packing question: node ``k`` can take jobs of total length at most
``cap_k(C) = floor((C - g_k) / w_k)`` (its room ``(C - f_k) s_k`` in scaled units), and
only jobs it may run. Nodes of one speed, ``free_at`` and eligibility form a class ``q``
of ``m_q`` nodes with one capacity. Group the jobs into item types ``i`` (one length and
one job type, ``d_i`` jobs each). A *pattern* of class ``q`` is a multiset of item types
the class may run whose lengths fit ``cap_q``. Every plan ending by ``C`` uses at most
``m_q`` patterns of each class and covers every job, so for any values ``Y_i >= 0``

    sum_i d_i Y_i  <=  sum_q m_q K_q(Y),      K_q(Y) = max over patterns of q of sum a_i Y_i

(each job's value is counted on the node that runs it; a node's jobs form one of its
patterns). ``sum_i d_i Y_i > sum_q m_q K_q(Y)`` therefore refutes ``C``: Farley's (1990)
argument, as :mod:`.exact.lpbound` uses it for identical nodes. It holds for every
``Y``; the best ``Y`` are the duals of the LP relaxation of the pattern model

    min t   s.t.   sum_{q, P} a_iP x_qP >= d_i,   sum_P x_qP <= m_q t,   x, t >= 0

(``C`` is refuted by the LP when ``t* > 1``), solved by column generation: HiGHS
(``scipy.optimize.linprog``) for the restricted master problem, in floating point, and a
bounded knapsack per eligibility set, by dynamic programming over every capacity, for the
pricing. The LP only *suggests* ``Y``: its duals are scaled and rounded down to integers,
and the test above is made with ``K_q`` from the knapsack solved exactly in integers.

Exactness of ``K_q``: lengths and capacities are divided by ``G``, the gcd of the lengths
(every pattern's length is a multiple of ``G``, so ``floor(cap / G)`` loses nothing), and,
when the capacities are still too large for the table, by a further grid ``r``: lengths
``floor(p / r)`` and capacity ``floor(cap / r)``. Every pattern that fits still fits
(``sum floor(p / r) <= floor(sum p / r)``), so ``K_q`` can only grow: the test stays valid,
only weaker. Since the table covers every capacity up to that of the largest limit asked
about, one ``Y`` is tested at every ``C`` at once; the least ``C`` it does not refute is
found by bisection (the test gets easier as ``C`` grows).
"""

from __future__ import annotations

import math
from bisect import bisect_right
from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from .budget import Budget
from .kernels import jit, pure

I64 = npt.NDArray[np.int64]
U8 = npt.NDArray[np.uint8]

#: the knapsack table holds at most this many capacities (a grid coarsens larger ones)
MAX_TABLE = 1 << 15
#: ... and at most this many cells (chunks x capacities) in all, per eligibility set
MAX_CELLS = 1 << 24
#: the rounded duals' largest value
DUAL_SCALE = 1 << 24
#: column-generation rounds per limit asked about
MAX_ROUNDS = 60
#: below this many cells the knapsack runs as plain Python (no compiled-code load)
TINY_CELLS = 50_000


@jit
def knapsack_table(weight: I64, value: I64, dp: I64, take: U8) -> None:
    """The 0/1 knapsack over items (``weight``, ``value``: non-negative integers) at every
    capacity ``c < dp.size``: afterwards ``dp[c]`` is the best value of items of total
    weight at most ``c``, and ``take[t, c] == 1`` says item ``t`` is in that optimum
    given the choices of items ``t + 1, ...`` (read back by :func:`pattern_at`)."""
    cap = dp.shape[0] - 1
    for c in range(cap + 1):
        dp[c] = 0
    for t in range(weight.shape[0] - 1, -1, -1):
        w = weight[t]
        v = value[t]
        row = take[t]
        for c in range(cap + 1):
            row[c] = 0
        if v <= 0 or w > cap:
            continue
        for c in range(cap, w - 1, -1):
            nv = dp[c - w] + v
            if nv > dp[c]:
                dp[c] = nv
                row[c] = 1


@dataclass
class _Column:
    """One eligibility set: its item types, their binary-split chunks and the table."""

    items: list[int]  # item type indices the set may run
    own: list[int]  # chunk -> item type
    mult: list[int]  # chunk -> jobs in it
    weight: I64
    dp: I64
    take: U8


class FarmLP:
    """The bound of the module doc for one farm (the data of a ``farm_exact.SearchData``).

    ``p``/``typ``: job lengths (scaled ints) and types, longest first; ``g``/``w``: every
    node's start and tick weight; ``members``: node classes (lists of nodes);
    ``class_types``: the job types each class may run; ``top``: the largest limit (ticks)
    that will be asked about.
    """

    def __init__(
        self,
        p: list[int],
        typ: list[int],
        g: list[int],
        w: list[int],
        members: list[list[int]],
        class_types: list[frozenset[int]],
        top: int,
    ) -> None:
        kinds: dict[tuple[int, int], int] = {}
        for pj, tj in zip(p, typ, strict=True):
            key = (pj, tj)
            kinds[key] = kinds.get(key, 0) + 1
        index = {key: i for i, key in enumerate(kinds)}
        self.item_of = [index[key] for key in zip(p, typ, strict=True)]
        self.types = class_types
        self.size = [k[0] for k in kinds]
        self.kind = [k[1] for k in kinds]
        self.demand = list(kinds.values())
        self.g = [g[mem[0]] for mem in members]
        self.w = [w[mem[0]] for mem in members]
        self.count = [len(mem) for mem in members]
        unit = 0
        for x in self.size:
            unit = math.gcd(unit, x)
        unit = max(unit, 1)
        most = max(((top - gq) // wq for gq, wq in zip(self.g, self.w, strict=True)), default=0)
        grid = unit * max(1, -(-max(most, 0) // (unit * MAX_TABLE)))
        self.grid = grid  # lengths and capacities are divided by it, rounding down
        self.top = top
        sets: dict[frozenset[int], int] = {}
        self.col_of = [sets.setdefault(ct, len(sets)) for ct in class_types]
        self.cols: list[_Column] = []
        for ct in sets:
            items = [i for i, t in enumerate(self.kind) if t in ct]
            cap = max(
                (self.cap(q, top) for q in range(len(members)) if class_types[q] == ct),
                default=0,
            )
            cap = max(cap, 0)
            own: list[int] = []
            mult: list[int] = []
            for i in items:
                s = self.size[i] // grid
                left = self.demand[i] if s == 0 else min(self.demand[i], cap // s)
                chunk = 1
                while left > 0:
                    c = min(chunk, left)
                    own.append(i)
                    mult.append(c)
                    left -= c
                    chunk *= 2
            cells = len(own) * (cap + 1)
            if cells > MAX_CELLS:
                raise ValueError("knapsack table too large")
            weight = np.array(
                [self.size[i] // grid * c for i, c in zip(own, mult, strict=True)], np.int64
            )
            self.cols.append(
                _Column(
                    items,
                    own,
                    mult,
                    weight,
                    np.zeros(cap + 1, np.int64),
                    np.zeros((len(own), cap + 1), np.uint8),
                )
            )
        self.links = self._links(class_types)
        self.patterns: list[tuple[int, dict[int, int]]] = []  # (class, item -> jobs)
        self.rounds = 0

    def _links(self, class_types: list[frozenset[int]]) -> list[tuple[int, int]]:
        """Pairs (i, j): item type i is no shorter than j and every class that may run i
        may run j, so a place of i in a pattern can hold j instead (the dual-optimal
        inequalities y_i >= y_j of Ben Amor, Desrosiers and Valerio de Carvalho 2006, as
        zero-cost columns: they only speed the column generation up)."""
        where: dict[int, set[int]] = {}
        for q, ct in enumerate(class_types):
            for t in ct:
                where.setdefault(t, set()).add(q)
        by_kind: dict[int, list[int]] = {}
        for i in sorted(range(len(self.size)), key=lambda i: self.size[i]):
            by_kind.setdefault(self.kind[i], []).append(i)
        out = []
        for a, items_a in by_kind.items():
            for b, items_b in by_kind.items():
                if not where.get(a, set()) <= where.get(b, set()):
                    continue
                sizes_b = [self.size[j] for j in items_b]
                for i in items_a:
                    x = bisect_right(sizes_b, self.size[i]) - 1
                    if a == b:
                        x -= 1  # the next shorter of its own kind
                    if x >= 0:
                        out.append((i, items_b[x]))
        return out

    def cap(self, q: int, limit: int) -> int:
        """Class ``q``'s capacity at ``limit`` in grid units (-1: its nodes end later)."""
        room = limit - self.g[q]
        return -1 if room < 0 else (room // self.w[q]) // self.grid

    def price(self, y: list[int]) -> None:
        """Fill every eligibility set's knapsack table for the integer values ``y``."""
        for col in self.cols:
            value = np.array([y[i] * c for i, c in zip(col.own, col.mult, strict=True)], np.int64)
            kernel = knapsack_table
            if col.take.size <= TINY_CELLS:
                kernel = pure(knapsack_table)
            kernel(col.weight, value, col.dp, col.take)

    def best(self, q: int, limit: int) -> int:
        """``K_q`` at ``limit`` from the tables of the last :meth:`price`."""
        col = self.cols[self.col_of[q]]
        c = min(self.cap(q, limit), col.dp.size - 1)
        return int(col.dp[c])

    def pattern(self, q: int, limit: int) -> dict[int, int]:
        """An optimal pattern of class ``q`` at ``limit`` (item type -> jobs)."""
        col = self.cols[self.col_of[q]]
        c = min(self.cap(q, limit), col.dp.size - 1)
        out: dict[int, int] = {}
        for t in range(len(col.own)):
            if col.take[t, c]:
                i = col.own[t]
                out[i] = out.get(i, 0) + col.mult[t]
                c -= int(col.weight[t])
        return out

    def refutes(self, y: list[int], limit: int) -> bool:
        """Farley's test of the module doc at ``limit`` (tables of the last price; the
        tables reach ``top`` only, so a larger limit is never refuted)."""
        if limit > self.top:
            return False
        if any(self.cap(q, limit) < 0 for q in range(len(self.count))):
            return True
        have = sum(m * self.best(q, limit) for q, m in enumerate(self.count))
        return sum(d * v for d, v in zip(self.demand, y, strict=True)) > have

    def reach(self, y: list[int], limit: int) -> int:
        """The largest limit in ``[limit, top]`` that ``y`` refutes (``limit - 1`` if none)."""
        if not self.refutes(y, limit):
            return limit - 1
        lo, hi = limit, self.top + 1  # lo refuted; hi treated as not refuted
        while hi - lo > 1:
            mid = (lo + hi) // 2
            if self.refutes(y, mid):
                lo = mid
            else:
                hi = mid
        return lo

    def seed(self, limit: int, choice: list[int], cls: list[int]) -> None:
        """Starting columns: every node's jobs in the plan ``choice`` (node of every job,
        in the order of ``p``), longest first while they fit at ``limit``, and every item
        type alone, as many as fit, in the eligible class with the most room."""
        used = [0] * len(cls)
        pats: dict[int, dict[int, int]] = {}
        for d, k in enumerate(choice):
            i = self.item_of[d]
            s = self.size[i] // self.grid
            if used[k] + s <= self.cap(cls[k], limit):
                used[k] += s
                pat = pats.setdefault(k, {})
                pat[i] = pat.get(i, 0) + 1
        for k, pat in pats.items():
            self.patterns.append((cls[k], pat))
        nq = len(self.count)
        for i, t in enumerate(self.kind):
            s = self.size[i] // self.grid
            room = [
                (self.cap(q, limit), q)
                for q in range(nq)
                if t in self.types[q] and self.cap(q, limit) >= s
            ]
            if room:
                cap, q = max(room)
                self.patterns.append(
                    (q, {i: min(self.demand[i], cap // s if s else self.demand[i])})
                )

    def solve(self, limit: int, budget: Budget) -> int:
        """Column generation at ``limit``; returns the largest limit proven infeasible by
        an exact Farley test on the way (``limit - 1`` when none was)."""
        from scipy.optimize import linprog  # heavy: only when needed
        from scipy.sparse import coo_matrix

        nq, ni = len(self.count), len(self.size)
        if any(self.cap(q, limit) < 0 for q in range(nq)):
            return self.reach([0] * ni, limit)
        best = limit - 1
        seen = {(q, tuple(sorted(p.items()))) for q, p in self.patterns}
        for _ in range(MAX_ROUNDS):
            if budget.expired():
                break
            self.rounds += 1
            rows, cols, vals = [], [], []
            for v, (q, pat) in enumerate(self.patterns):
                for i, a in pat.items():
                    rows.append(i)
                    cols.append(v)
                    vals.append(-float(a))
                rows.append(ni + q)
                cols.append(v)
                vals.append(1.0)
            nv = len(self.patterns)
            for a, b in self.links:  # a's place can hold b (zero-cost columns)
                rows += [a, b]
                cols += [nv, nv]
                vals += [1.0, -1.0]
                nv += 1
            for q in range(nq):
                rows.append(ni + q)
                cols.append(nv)
                vals.append(-float(self.count[q]))
            a_ub = coo_matrix((vals, (rows, cols)), shape=(ni + nq, nv + 1)).tocsr()
            b_ub = np.concatenate((-np.array(self.demand, float), np.zeros(nq)))
            cost = np.zeros(nv + 1)
            cost[-1] = 1.0
            res = linprog(cost, A_ub=a_ub, b_ub=b_ub, bounds=(0, None), method="highs")
            if res.status != 0:
                break
            dual = -np.asarray(res.ineqlin.marginals)
            y = np.maximum(dual[:ni], 0.0)
            top = float(y.max()) if ni else 0.0
            if top <= 0:
                break
            yi = [int(x) for x in np.floor(y * (DUAL_SCALE / top)).tolist()]
            self.price(yi)
            best = max(best, self.reach(yi, limit))
            if best >= limit or res.fun <= 1.0 + 1e-9:
                break
            u = np.maximum(dual[ni:], 0.0) * (DUAL_SCALE / top)
            added = 0
            for q in range(nq):
                if self.best(q, limit) > u[q] * (1 + 1e-9) + 1e-6:
                    pat = self.pattern(q, limit)
                    key = (q, tuple(sorted(pat.items())))
                    if pat and key not in seen:
                        seen.add(key)
                        self.patterns.append((q, pat))
                        added += 1
            if not added:
                break
        return best


def warm_up() -> None:
    """Load the compiled knapsack and scipy's LP solver (before a clock starts)."""
    from scipy.optimize import linprog  # noqa: F401

    weight = np.array([1, 2], np.int64)
    knapsack_table(weight, weight, np.zeros(3, np.int64), np.zeros((2, 3), np.uint8))
