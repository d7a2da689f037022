"""Exact proofs for small farms: a depth-first branch and bound in whole numbers.

A floating-point solver (HiGHS in ``farm_milp``) can only give a hint: its dual bound holds
up to its tolerances, and at durations of 1e8..1e9 s it has claimed optima that a plan
beats. :func:`prove` settles the question in exact arithmetic. It starts from a valid plan
(the incumbent, whose exact makespan is the upper bound UB) and either finds better plans
or proves that no plan has a makespan below the best one found.

Exact scale (every comparison that prunes or proves is between Python ints):

* every duration ``p_j`` and ``free_at`` ``f_k`` is a double, hence a dyadic rational; with
  ``2**e`` the least power of two that makes all of them whole, ``P_j = p_j 2**e`` and
  ``F_k = f_k 2**e`` are ints;
* a speed ``s_k = a_k / b_k`` (``b_k`` a power of two; speeds such as 0.3 are not dyadic in
  decimal, but the double is); with ``A = lcm(a_k)`` node ``k`` finishes at
  ``T_k / Z`` seconds where ``T_k = F_k A + (b_k A / a_k) L_k``, ``L_k`` the sum of ``P_j``
  it runs and ``Z = 2**e A``. ``g_k = F_k A`` and ``w_k = b_k A / a_k`` are ints, and a
  plan's makespan is ``max_k T_k / Z``.

Search: jobs longest first (ties by job type, then position, so equal jobs are adjacent);
each job branches over the nodes that may run it, earliest resulting finish first. A branch
is cut as soon as a node would finish at or after the best makespan known (only strictly
better plans are sought). Nodes equal in speed, ``free_at`` and eligibility for every job
type form a class; a job is tried on only one node of a class per distinct load (so only
the first empty one): swapping two such nodes changes no finish time.

At every search node the remaining jobs must fit. Node ``k`` may still take
``floor((best - 1 - T_k) / w_k)`` units and what it takes is the sum of some of the
remaining jobs, so its room is the largest such subset sum that fits (listed exactly for
the deepest depths, where the search spends most of its nodes, and grown as the search
runs; above them, zero if the room is below the smallest job left). For the whole farm and
for every node set made of eligible sets, the remaining jobs that may only run inside the
set must fit in the room of its nodes. A state (the next job and each class's multiset of
loads) whose subtree was searched to the end is remembered: it cannot lead to a plan better
than the best known (which only decreases), whichever branch reaches it again.

The search stops when the best plan meets a lower bound (``lower``, or the exact root
bounds below), when it has been exhausted (the best plan is optimal), or when the budget or
``max_nodes`` runs out (``finished=False``; the bound reported is then the root bound).

The decision view (:func:`bisect`) asks the same search "does every node end by ``C``?"
at fixed ``C`` and adds two tools. Plans: the subset-sum rebalancing of
:mod:`.farm_decision_fill` (node ``k``'s capacity at ``C`` is ``(C - g_k) / w_k`` units, so
speeds and busy time become bin sizes), whose plans are measured again here in ticks.
Bounds: Farley's bound of the pattern LP per node class (:mod:`.farm_exact_lp`), whose
refutations are checked in integers, raises the bound where the jobs are few per node.

Root bounds, all exact and all facts about every plan: the makespan is at least
``max_k f_k`` (a node that runs nothing ends at ``f_k``), at least
``min_{k eligible} f_k + p_j / s_k`` for every job, and at least the least ``T`` at which
the room test above passes for all jobs (with ``T`` in place of ``best - 1``: the loads
of an optimal plan pass it at ``T`` = its makespan, and the test only gets easier as ``T``
grows, so bisection finds that least ``T``).
"""

from __future__ import annotations

import math
from array import array
from bisect import bisect_right
from collections.abc import Sequence
from dataclasses import dataclass
from fractions import Fraction
from random import Random

import numpy as np
import numpy.typing as npt

from .budget import Budget
from .farm_bounds import Eligibility
from .farm_decision_fill import Fill
from .farm_exact_lp import FarmLP
from .model import FloatArray, Instance
from .result import Schedule

#: search nodes between two looks at the clock (at most; fewer on large farms, so that
#: about CHECK_WORK node looks pass between two)
CHECK_EVERY = 4096
CHECK_WORK = 20_000
#: states remembered as searched; the table is emptied when it holds this many ...
MEMO_LIMIT = 200_000
#: ... or when its keys hold this many bits in all
MEMO_BITS = 1 << 28
#: subset sums of the last jobs are listed for as many depths as this many sums allow
#: (int64: 8 bytes each) ...
MAX_SUBSET_SUMS = 1 << 22
#: ... or as many Python ints, when the sums can pass 2**62
MAX_BIG_SUBSET_SUMS = 1 << 18
#: subset sums listed before the search starts; then the list grows while a level costs
#: at most this many sums per search node visited so far
FIRST_SUBSET_SUMS = 1 << 14
SUMS_PER_NODE = 128
#: the share of the time left that one question of :func:`bisect` may take
SLICE = 0.3
#: shares of the time left for the first rebalancing at the bound, for Farley's bound,
#: for the rebalancing at the bound after it, and for that of every later question
FILL_FIRST = 0.15
LP_SHARE = 0.5
FILL_AFTER = 0.3
FILL_SHARE = 0.2
#: ... and at most this many moves a node (on small farms the clock is not the limit)
FILL_MOVES = 200
#: search nodes of the first, short branch and bound at the bound
FIRST_NODES = 2000
#: with at most this many job types, every union of their eligible sets is checked for fit
MAX_UNION_TYPES = 4


@dataclass(frozen=True, eq=False)
class FarmProof:
    """What :func:`prove` established.

    ``node_of`` is the best plan found (the incumbent if none beat it) and ``makespan`` its
    exact makespan; ``lower_bound`` is proven ``<=`` the optimum (equal to ``makespan``
    when ``finished``); ``nodes`` counts the search nodes visited.
    """

    node_of: npt.NDArray[np.int32]
    makespan: Fraction
    lower_bound: Fraction
    finished: bool
    nodes: int


def dyadic_exponent(values: FloatArray) -> int:
    """The least ``e >= 0`` such that every value times ``2**e`` is a whole number."""
    a = np.abs(values[values != 0])
    if a.size == 0:
        return 0
    mant, exp = np.frexp(a)
    whole = np.ldexp(mant, 53).astype(np.int64)  # the 53-bit significand, exactly
    low = (whole & -whole).astype(np.float64)  # its lowest set bit (a power of two)
    zeros = np.frexp(low)[1] - 1
    return max(0, int((53 - exp - zeros).max()))


def scaled_ints(values: FloatArray, e: int) -> list[int]:
    """Every value times ``2**e`` as an int (exact: ``e`` from :func:`dyadic_exponent`)."""
    one = 1 << e
    out = []
    for v in values.tolist():
        num, den = v.as_integer_ratio()
        out.append(num * (one // den))
    return out


def exact_loads(inst: Instance, node_of: npt.ArrayLike) -> list[Fraction]:
    """Every node's exact finish time ``f_k + (sum of the p_j it runs) / s_k`` (what
    :meth:`Schedule.exact_finish` computes; no times are needed for it)."""
    nodes = np.asarray(node_of, dtype=np.int32)
    sched = Schedule(inst, nodes, np.zeros(inst.n))
    return [sched.exact_finish(k) for k in range(inst.m)]


def exact_makespan(inst: Instance, node_of: npt.ArrayLike) -> Fraction:
    """The exact makespan of a plan: the latest node finish (see :func:`exact_loads`)."""
    return max(exact_loads(inst, node_of))


class SubsetSums:
    """Every sum of a subset of ``p[i:]``, in increasing order, for the deepest depths ``i``.

    ``levels[i]`` is that list, or ``None`` for depths not listed yet. :meth:`grow` lists
    one more depth (about doubling the size) while the total stays within its cap: int64
    arrays (8 bytes a sum) when the sums stay below 2**62, Python ints otherwise.
    """

    def __init__(self, p: list[int]) -> None:
        self.p = p
        self.top = len(p)  # the shallowest depth listed
        self.small = sum(p) < 2**62
        self.cap = MAX_SUBSET_SUMS if self.small else MAX_BIG_SUBSET_SUMS
        self.levels: list[Sequence[int] | None] = [None] * (len(p) + 1)
        self.levels[self.top] = array("q", [0]) if self.small else [0]
        self.stored = 1

    def next_size(self) -> int:
        """An upper bound on the size of the next level (0 when none can be listed)."""
        if self.top == 0:
            return 0
        size = 2 * len(self.levels[self.top] or ())
        return size if self.stored + size <= self.cap else 0

    def grow(self) -> None:
        """List depth ``top - 1`` (call only when :meth:`next_size` is positive)."""
        reach = self.levels[self.top]
        assert reach is not None
        p = self.p[self.top - 1]
        level: Sequence[int]
        if isinstance(reach, array):
            a = np.frombuffer(reach, dtype=np.int64)
            both = np.concatenate((a, a + p))
            both.sort(kind="stable")  # two sorted runs: a merge
            level = array("q", both[np.concatenate(([True], both[1:] != both[:-1]))].tobytes())
        else:
            level = sorted({*reach, *(x + p for x in reach)})
        self.top -= 1
        self.levels[self.top] = level
        self.stored += len(level)


def _check_plan(inst: Instance, elig: Eligibility, node_of: npt.NDArray[np.int32]) -> None:
    """Refuse an incumbent that is not a plan (a caller's mistake, not the request's)."""
    if node_of.shape != (inst.n,):
        raise ValueError(f"node_of has shape {node_of.shape}, expected ({inst.n},)")
    if inst.n and (node_of.min() < 0 or node_of.max() >= inst.m):
        raise ValueError("node_of names a node that does not exist")
    if inst.n and not elig.eligible[elig.job_type, node_of].all():
        raise ValueError("node_of puts a job on a node that may not run it")


class SearchData:
    """The integer data of one proof and the tests its search makes (module doc)."""

    def __init__(self, inst: Instance, elig: Eligibility, incumbent: npt.NDArray[np.int32]):
        m = inst.m
        free = np.array([nd.free_at for nd in inst.nodes], dtype=np.float64)
        e = dyadic_exponent(np.concatenate((inst.durations, free)))
        p_all = scaled_ints(inst.durations, e)
        ratios = [nd.speed.as_integer_ratio() for nd in inst.nodes]
        lcm = math.lcm(*(a for a, _ in ratios))
        self.m = m
        self.scale = (1 << e) * lcm  # T / scale is seconds
        self.w = [b * (lcm // a) for a, b in ratios]
        self.g = [f * lcm for f in scaled_ints(free, e)]
        loads = [0] * m
        for j, k in enumerate(incumbent.tolist()):
            loads[k] += p_all[j]
        self.upper = max(self.g[k] + self.w[k] * loads[k] for k in range(m))

        job_type = elig.job_type.tolist()
        self.order = sorted(
            (j for j in range(inst.n) if p_all[j] > 0),
            key=lambda j: (-p_all[j], job_type[j], j),
        )
        self.p = [p_all[j] for j in self.order]
        self.typ = [job_type[j] for j in self.order]
        eligible = elig.eligible
        present = sorted(set(self.typ))
        self.elig_nodes = {t: np.flatnonzero(eligible[t]).tolist() for t in present}

        # classes of interchangeable nodes: same speed, free_at and eligibility column
        keys: dict[tuple[float, float, bytes], int] = {}
        self.cls = [
            keys.setdefault((nd.speed, nd.free_at, eligible[:, k].tobytes()), len(keys))
            for k, nd in enumerate(inst.nodes)
        ]
        members: list[list[int]] = [[] for _ in keys]
        for k, c in enumerate(self.cls):
            members[c].append(k)
        self.members = members
        self.bits = max(sum(self.p), len(self.p)).bit_length() + 1

        # node sets whose capacity must hold the remaining jobs that may only run inside
        sets: list[frozenset[int]] = [frozenset(range(m))]
        rows = [frozenset(self.elig_nodes[t]) for t in present]
        sets += rows
        if len(present) <= MAX_UNION_TYPES:
            for mask in range(1, 1 << len(rows)):
                sets.append(frozenset().union(*(r for i, r in enumerate(rows) if mask >> i & 1)))
        self.sets: list[tuple[list[int], list[int]]] = []
        seen: set[frozenset[int]] = set()
        n = len(self.p)
        for s in sets:
            if s in seen:
                continue
            seen.add(s)
            inside = {t for t, r in zip(present, rows, strict=True) if r <= s}
            if not inside:
                continue
            rem = [0] * (n + 1)
            for i in range(n - 1, -1, -1):
                rem[i] = rem[i + 1] + (self.p[i] if self.typ[i] in inside else 0)
            self.sets.append((sorted(s), rem))

        # the greatest common divisor of the jobs from depth i on (0 past the last)
        self.gcd = [0] * (n + 1)
        for i in range(n - 1, -1, -1):
            self.gcd[i] = math.gcd(self.gcd[i + 1], self.p[i])

        # every sum of a subset of the jobs from depth i on, for the last depths: the room
        # a node can still use is the largest of them that fits
        # a search node costs about one look at every node per node set
        self.check_every = max(16, min(CHECK_EVERY, CHECK_WORK // (m * len(self.sets) + 1)))
        self.sums = SubsetSums(self.p)
        while 0 < self.sums.next_size() <= FIRST_SUBSET_SUMS:
            self.sums.grow()

    def fits(self, limit: int, t: list[int], depth: int) -> bool:
        """Whether the jobs from ``depth`` on may fit with every node ending by ``limit``
        (a relaxation: each node's room is a subset sum of them, the rest is divisible)."""
        if depth >= len(self.p):
            return max(t) <= limit
        smallest = self.p[-1]
        sums = self.sums.levels[depth]
        step = self.gcd[depth]
        caps = []
        for k, w in enumerate(self.w):
            room = limit - t[k]
            if room < 0:
                return False
            c = room // w
            if sums is not None:
                c = sums[bisect_right(sums, c) - 1]
            else:
                c -= c % step  # every sum of the jobs left is a multiple of their gcd
            caps.append(c if c >= smallest else 0)
        for nodes, rem in self.sets:
            need = rem[depth]
            if need:
                have = 0
                for k in nodes:
                    have += caps[k]
                if have < need:
                    return False
        return True

    def root_bound(self, lower: int) -> int:
        """The least whole ``T >= lower`` that the root bounds of the module doc allow."""
        g, w = self.g, self.w
        lo = max(lower, max(g))
        longest: dict[int, int] = {}
        for p, t in zip(self.p, self.typ, strict=True):
            longest.setdefault(t, p)  # longest first: the first seen is the longest
        for t, p in longest.items():
            lo = max(lo, min(g[k] + w[k] * p for k in self.elig_nodes[t]))
        hi = self.upper
        if lo >= hi or self.fits(lo, g, 0):
            return min(lo, hi)
        while hi - lo > 1:  # fits(hi) holds, fits(lo) does not; fits grows with T
            mid = (lo + hi) // 2
            if self.fits(mid, g, 0):
                hi = mid
            else:
                lo = mid
        return hi

    def key(self, depth: int, loads: list[int]) -> int:
        """The state: next job and each class's loads, sorted, packed into one int."""
        bits = self.bits
        key = depth
        for mem in self.members:
            if len(mem) == 1:
                key = (key << bits) | loads[mem[0]]
            else:
                for x in sorted([loads[k] for k in mem]):
                    key = (key << bits) | x
        return key


def _dfs(
    s: SearchData, best: int, target: int, budget: Budget, max_nodes: int | None, fit: bool = False
) -> tuple[int, list[int] | None, bool, int]:
    """The branch and bound of the module doc: plans with a makespan below ``best`` (scaled
    ticks), stopping at one ending by ``target``. Returns the best makespan found (``best``
    if none), its choices (node of each job in search order, or ``None``), whether the
    search was exhausted, and the search nodes visited. With ``fit`` a job tries the
    nodes where it would end latest first (best fit: the decision view's order)."""
    n = len(s.p)
    count = 0
    best_choice: list[int] | None = None
    if not (target < best and s.fits(best - 1, s.g, 0)):
        return best, None, True, 0
    p, typ, w, cls, elig_nodes = s.p, s.typ, s.w, s.cls, s.elig_nodes
    t = list(s.g)  # scaled finish of every node
    loads = [0] * s.m
    choice = [-1] * n
    cands: list[list[int]] = [[] for _ in range(n)]
    ptr = [0] * n
    keys = [0] * n
    memo: set[int] = set()
    memo_limit = min(MEMO_LIMIT, MEMO_BITS // (s.bits * (s.m + 1)))
    limit = max_nodes if max_nodes is not None else -1

    def expand(i: int) -> list[int]:
        """Nodes to try for job i: one per (class, load), earliest finish first."""
        pi = p[i]
        seen: set[tuple[int, int]] = set()
        out: list[tuple[int, int]] = []
        for k in elig_nodes[typ[i]]:
            mark = (cls[k], loads[k])
            if mark in seen:
                continue
            seen.add(mark)
            end = t[k] + w[k] * pi
            if end < best:
                out.append((end, k))
        out.sort(reverse=fit)
        return [k for _, k in out]

    keys[0] = s.key(0, loads)
    cands[0] = expand(0)
    depth = 0
    while depth >= 0:
        k = choice[depth]
        if k >= 0:  # take back the job placed at this depth
            loads[k] -= p[depth]
            t[k] -= w[k] * p[depth]
            choice[depth] = -1
        c = cands[depth]
        if ptr[depth] == len(c):
            if len(memo) >= memo_limit:
                memo.clear()
            memo.add(keys[depth])  # searched to the end: nothing below beats best
            depth -= 1
            continue
        k = c[ptr[depth]]
        ptr[depth] += 1
        end = t[k] + w[k] * p[depth]
        if end >= best:  # in increasing end (not ``fit``): the rest are no better
            if not fit:
                ptr[depth] = len(c)
            continue
        if count == limit:
            return best, best_choice, False, count
        if count % s.check_every == 0 and count:
            if budget.expired():
                return best, best_choice, False, count
            while 0 < s.sums.next_size() <= SUMS_PER_NODE * count:
                s.sums.grow()
        count += 1
        loads[k] += p[depth]
        t[k] = end
        choice[depth] = k
        nxt = depth + 1
        if nxt == n:
            span = max(t)
            if span < best:
                best = span
                best_choice = list(choice)
                if best <= target:
                    break
            continue
        if not s.fits(best - 1, t, nxt):
            continue
        key = s.key(nxt, loads)
        if key in memo:
            continue
        nc = expand(nxt)
        if not nc:
            continue
        keys[nxt] = key
        cands[nxt] = nc
        ptr[nxt] = 0
        depth = nxt
    return best, best_choice, True, count


def _plan(
    s: SearchData, incumbent: npt.NDArray[np.int32], choice: list[int] | None
) -> npt.NDArray[np.int32]:
    """The incumbent with the jobs of the search placed as ``choice`` says."""
    if choice is None:
        return incumbent
    plan = incumbent.copy()
    plan[np.asarray(s.order, dtype=np.intp)] = choice
    return plan


def _start(
    inst: Instance, elig: Eligibility, node_of: npt.NDArray[np.int32], lower: float
) -> tuple[SearchData, npt.NDArray[np.int32], Fraction, int]:
    """The search data, the incumbent, the known bound and the root bound (ticks)."""
    incumbent = np.array(node_of, dtype=np.int32)
    _check_plan(inst, elig, incumbent)
    s = SearchData(inst, elig, incumbent)
    known = Fraction(lower) if math.isfinite(lower) and lower > 0 else Fraction(0)
    return s, incumbent, known, s.root_bound(math.ceil(known * s.scale))


def prove(
    inst: Instance,
    elig: Eligibility,
    node_of: npt.NDArray[np.int32],
    lower: float,
    budget: Budget,
    max_nodes: int | None = None,
) -> FarmProof:
    """Search for a plan better than ``node_of`` in exact arithmetic (see the module doc).

    ``node_of`` must be a valid plan (every job on a node that may run it) and ``lower``
    a proven lower bound on the optimum (it is trusted: the search stops when it meets it).
    Returns the best plan found, its exact makespan and a proven lower bound;
    ``finished`` says the plan is proven optimal.
    """
    s, incumbent, known, target = _start(inst, elig, node_of, lower)
    best, choice, finished, count = _dfs(s, s.upper, target, budget, max_nodes)
    makespan = Fraction(best, s.scale)
    bound = makespan if finished else max(Fraction(target, s.scale), known)
    return FarmProof(_plan(s, incumbent, choice), makespan, min(bound, makespan), finished, count)


def _ticks(s: SearchData, choice: list[int]) -> int:
    """The makespan in ticks of ``choice`` (node of every job, search order)."""
    t = list(s.g)
    for d, k in enumerate(choice):
        t[k] += s.w[k] * s.p[d]
    return max(t)


def farm_lp(s: SearchData) -> FarmLP | None:
    """Farley's bound of :mod:`.farm_exact_lp` on the search's data (``None`` when its
    knapsack tables would be too large)."""
    types = [
        frozenset(t for t, nodes in s.elig_nodes.items() if mem[0] in nodes) for mem in s.members
    ]
    try:
        return FarmLP(s.p, s.typ, s.g, s.w, s.members, types, s.upper)
    except ValueError:
        return None


def bisect(
    inst: Instance,
    elig: Eligibility,
    node_of: npt.NDArray[np.int32],
    lower: float,
    budget: Budget,
) -> FarmProof:
    """The decision view of the module doc: "does every node end by ``C``?" (ticks).

    Each question is put to the subset-sum rebalancing of :mod:`.farm_decision_fill` (a
    plan ending by ``C`` is a new upper bound), then to the branch and bound at a fixed
    ``C``, which either finds such a plan or, searched to the end, proves none exists (the
    optimum is then at least ``C + 1`` ticks: every makespan is a whole number of ticks).
    ``C`` is first the lower bound (where the optimum most often lies): a short branch and
    bound (small farms end there), the rebalancing, and when it finds no plan, Farley's
    bound (:mod:`.farm_exact_lp`) raises the lower bound while it refutes it; then ``C`` is the
    middle of the open interval, and a question left open by its time slice moves the
    next one up, towards plans. Same contract as :func:`prove`; ``nodes`` counts the
    search nodes of every question.
    """
    s, incumbent, known, lo = _start(inst, elig, node_of, lower)
    hi, plan, total = s.upper, incumbent, 0
    # the best plan as the node of every job in search order
    best_choice = [int(k) for k in incumbent[np.asarray(s.order, dtype=np.intp)].tolist()]
    fill = Fill(s.p, [frozenset(s.elig_nodes[t]) for t in s.typ], s.g, s.w, s.upper)
    stuck = -1  # the largest C a time slice left open
    first = True
    asked = 0

    def plan_by(c: int, share: float) -> bool:
        nonlocal hi, plan, best_choice, asked
        asked += 1
        caps = fill.caps(c)
        if caps is None:
            return False
        # from the best plan and, every other time, from a best-fit packing at c
        start = best_choice if asked % 2 else fill.best_fit(caps, Random(asked), 0)
        out = fill.run(start, c, budget.child(share), asked, FILL_MOVES * s.m)
        if out is None:
            return False
        span = _ticks(s, out)
        if span < hi:
            hi, best_choice, plan = span, out, _plan(s, incumbent, out)
        return span <= c

    if lo < hi:  # a short branch and bound first: it settles small farms at once
        best, choice, finished, total = _dfs(
            s, lo + 1, lo, budget.child(FILL_FIRST), FIRST_NODES, fit=True
        )
        if choice is not None:
            hi, plan, best_choice = best, _plan(s, incumbent, choice), choice
        elif finished:
            lo += 1
    if lo < hi and not plan_by(lo, FILL_FIRST) and lo < hi:
        lp = farm_lp(s)
        if lp is not None:
            lp.seed(lo, best_choice, s.cls)
            slice_ = budget.child(LP_SHARE)
            while lo < hi and not slice_.expired():
                reach = lp.solve(lo, slice_)
                if reach < lo:
                    break
                lo = reach + 1
            if lo < hi:
                plan_by(lo, FILL_AFTER)
    while lo < hi and not budget.expired():
        # first the bound, then bisect what is left above the open question (or the bound)
        c = lo if first else (max(lo, stuck) + hi) // 2
        if plan_by(c, FILL_SHARE):
            continue
        last = c == stuck  # only the open question is left: it gets all the time
        best, choice, finished, count = _dfs(
            s, c + 1, c, budget if last else budget.child(SLICE), None, fit=True
        )
        first = False
        total += count
        if choice is not None:
            hi, plan, best_choice = best, _plan(s, incumbent, choice), choice
        elif finished:
            lo = c + 1
        else:
            stuck = max(stuck, c)
            if last:
                break
    makespan = Fraction(hi, s.scale)
    bound = min(max(Fraction(lo, s.scale), known), makespan)
    return FarmProof(plan, makespan, bound, bound == makespan, total)
