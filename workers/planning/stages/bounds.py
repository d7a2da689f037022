"""Lower bounds on the optimum makespan of a stage graph, each with its name and evidence.

Every bound is a theorem about **the tick-rounded problem** of :mod:`.timing` (running
times ``d_jk = ceil(p_j / (s_k res))`` ticks, node ``k``'s ``c_k`` slots free from
``F_k = ceil(free_at_k / res)``, makespan ``max(max_j end_j, max_k F_k)``), computed in
integers or fractions, so none exceeds that problem's optimum ``C*`` (the plans of this
package solve that problem). Notation: ``d_j`` is job ``j``'s running time on its fastest
eligible node, ``r_j`` / ``q_j`` its head / tail (:mod:`.paths`), ``M = sum_k c_k`` the
slots, ``c_L`` a limit's capacity. Since ``C*`` is a whole number, each bound is rounded
up to whole ticks.

Jobs carried in (a re-planned graph, :mod:`.carried`): slot ``s`` of node ``k`` is free
from ``F_s >= F_k`` (``Timing.slot_free``), job ``j`` starts no earlier than its release
(folded into its head ``r_j``), and carried jobs hold some limit places for a while. Each
bound below uses the slots' own start times; the limit holds are left out (a relaxation:
dropping them only adds room), so every bound stays valid. Without carried jobs
``F_s = F_k`` for every slot of ``k`` and the bounds read as written.

``busy_nodes``     ``max_s F_s``: the makespan counts every slot's start time.
``critical_path``  ``max_j r_j + d_j + q_j``: along any chain of waits the jobs run one
                   after another, the first no earlier than an eligible node is free,
                   each for at least its fastest time (evidence: the ids on the path).
``mean_load``      all work fits in the slots: node ``k`` offers ``c_k (C - F_k)``
                   slot-ticks by ``C`` (``C >= F_k`` by the makespan's definition). On
                   one speed each job takes ``d_j`` slot-ticks, so
                   ``C* >= (sum_j d_j + sum_k c_k F_k) / M``; with several speeds, a job on
                   node ``k`` does ``s_k d_jk`` speed-1 ticks of work (at least
                   ``w_j = min`` of that over its eligible nodes) and node ``k`` offers
                   ``c_k s_k (C - F_k)``, so
                   ``C* >= (sum_j w_j + sum_k c_k s_k F_k) / sum_k c_k s_k`` (with slots
                   free at their own ``F_s``, ``c_k F_k`` is the sum of its slots' ``F_s``).
``limit_load``     per limit L: its jobs all run inside ``[min r, C* - min q]`` (over the
                   jobs J_L using L), at most ``min(c_L, M)`` at a time, each for at least
                   ``d_j``: ``C* >= min r + sum_{J_L} d_j / min(c_L, M) + min q``.
``heads_tails``    the same for any set S of jobs (graphs-and-rentals.md item 4: the
                   relaxation to parallel machines with release and delivery times,
                   Carlier 1982 for one machine): ``C* >= min_S r + sum_S d_j / cap +
                   min_S q``, over the sets ``{j : r_j >= a, q_j >= b}`` for thresholds
                   ``a`` (heads) and ``b`` (tails); for all jobs (``cap = M``) and for each
                   limit's jobs (``cap = min(c_L, M)``).
``lanes``          the same sets S, counted per lane (Carlier 1987, the bound for parallel
                   machines with heads and tails, from memory): drop the waits inside S
                   and keep each job's window; then some optimal plan of that relaxation
                   puts at least one job on each of its ``cap <= |S|`` lanes (a lane left
                   empty can take the last job of a lane holding two, at the same start),
                   and lane ``i`` runs from its first job's start ``>= r_first`` for its
                   work and is followed by its last job's tail, so ``C* >= r_first +
                   work_i + q_last``; summed over the lanes, with first jobs distinct and
                   last jobs distinct: ``cap C* >= (cap smallest r in S) + sum_S d_j +
                   (cap smallest q in S)``. Lanes: all slots for all jobs; for a limit's
                   jobs ``min(c_L, M)`` lanes (at most ``c_L`` run at once, so their
                   intervals colour onto ``c_L`` lanes). Tried on the prefixes of the jobs
                   by decreasing head and by decreasing tail.
``energetic``      energetic reasoning (Lopez, Erschler and Esquirol 1992; Baptiste, Le
                   Pape and Nuijten 2001): in a plan ending by ``C`` job ``j`` runs inside
                   ``[r_j, C - q_j]`` for at least ``d_j``, so inside any ``[t1, t2)`` for
                   at least ``max(0, min(d_j, t2 - t1, r_j + d_j - t1, t2 - C + q_j +
                   d_j))`` (the least of its overlaps when started first or last: the
                   overlap is concave in the start). If the jobs' sum exceeds the slot-ticks
                   the nodes offer in ``[t1, t2)`` (``sum_s (t2 - max(t1, F_s))^+`` over
                   the slots;
                   for a limit's jobs also ``c_L (t2 - t1)``), no plan ends by ``C``:
                   ``C* >= C + 1``. Each refuted ``C`` is a proof on its own, so a search
                   over ``C`` needs no monotonicity. Run for up to
                   :data:`ENERGETIC_MAX_JOBS` jobs (O(n^2 log n) per ``C``), skipped above.
"""

from __future__ import annotations

import heapq
from collections.abc import Callable
from dataclasses import dataclass, field
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from ..rational import array_sum, down
from .paths import Paths
from .problem import StageProblem, sorted_unique

I64 = npt.NDArray[np.int64]

#: energetic reasoning is tried on instances with at most this many jobs
ENERGETIC_MAX_JOBS = 500
#: heads_tails tries every distinct head as a threshold up to this many jobs, else this
#: many (spread over the sorted distinct heads)
HEADS_TAILS_ALL_UP_TO = 2_000
HEADS_TAILS_THRESHOLDS = 48
#: lanes runs its prefix scan (a heap per job, in plain Python) up to this many jobs per
#: set, and on the whole set alone above
LANES_SCAN_UP_TO = 5_000
#: integers handled by the vectorised energetic test stay below this
INT64_ROOM = 2**62


@dataclass(frozen=True)
class Bound:
    """A proven lower bound on the optimum, in whole ticks, with the argument's data."""

    name: str
    ticks: int
    evidence: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True)
class StageBounds:
    """Every bound computed (several ``limit_load`` entries, one per limit) and the best."""

    bounds: tuple[Bound, ...]
    resolution: float

    @property
    def best(self) -> Bound:
        """The largest bound (the first computed among equals)."""
        return max(self.bounds, key=lambda b: b.ticks)

    @property
    def ticks(self) -> int:
        """The best bound in ticks."""
        return self.best.ticks

    @property
    def exact(self) -> Fraction:
        """The best bound in seconds, exactly."""
        return self.ticks * Fraction(self.resolution)

    @property
    def seconds(self) -> float:
        """The best bound in seconds, rounded down to a float (never above the proof)."""
        return down(self.exact)


def _ceil_div(a: int, b: int) -> int:
    return -(-a // b)


def busy_nodes(problem: StageProblem) -> Bound:
    """``max_s F_s`` (every slot's start time; ``max_k F_k`` with nothing carried in)."""
    t = problem.timing
    s = int(np.argmax(t.slot_free))
    k = int(np.searchsorted(t.slot_base, s, side="right")) - 1
    return Bound("busy_nodes", int(t.slot_free[s]), {"node": problem.instance.nodes[k].id})


def critical_path(paths: Paths) -> Bound:
    """``max_j r_j + d_j + q_j`` with the ids of one path that attains it."""
    value, path = paths.critical_path()
    ids = paths.problem.instance.job_ids
    return Bound("critical_path", value, {"jobs": [ids[j] for j in path]})


def mean_load(problem: StageProblem) -> Bound:
    """All work fits in the slots by ``C*`` (see the module docstring)."""
    t = problem.timing
    c = problem.slots
    if len(t.speeds) == 1:
        need = int(t.dmin.sum()) + int(t.slot_free.sum())
        total = int(c.sum())
        return Bound(
            "mean_load",
            _ceil_div(need, total),
            {"work_ticks": int(t.dmin.sum()), "slots": total},
        )
    work = _least_work(problem)
    cap = Fraction(0)
    busy = Fraction(0)
    for k, nd in enumerate(problem.instance.nodes):
        w = int(c[k]) * Fraction(nd.speed)
        cap += w
        busy += Fraction(nd.speed) * int(t.slot_free[t.slot_base[k] : t.slot_base[k + 1]].sum())
    value = (work + busy) / cap
    return Bound(
        "mean_load",
        -((-value.numerator) // value.denominator),
        {"work_ticks_speed_1": str(work), "slot_speed_sum": str(cap)},
    )


def _least_work(problem: StageProblem) -> Fraction:
    """A lower bound on ``sum_j min_k s_k d_jk`` over each job's eligible speeds: the
    least speed-1 work (in ticks) a job does wherever it runs, from the timing's own
    tables, so the bound holds for whichever problem they describe (rounded up, or down).
    Each float product is within half a unit in the last place of the exact one, so one
    step down (``nextafter``) is below it; the sum of those floats is taken exactly."""
    t = problem.timing
    ncol = len(t.speeds)
    ok = np.zeros((t.eligible.shape[0], ncol), dtype=bool)
    for k in range(problem.m):
        ok[:, t.speed_col[k]] |= t.eligible[:, k]
    prod = np.nextafter(t.run * np.asarray(t.speeds, dtype=np.float64), -np.inf)
    prod[~ok[t.job_type]] = np.inf
    least = np.maximum(prod.min(axis=1), 0.0)
    return array_sum(least)


def _users(problem: StageProblem) -> list[I64]:
    """The jobs using each limit."""
    jobs = np.repeat(np.arange(problem.n, dtype=np.int64), np.diff(problem.uses_ptr))
    order = np.argsort(problem.uses_idx, kind="stable")
    cuts = np.searchsorted(problem.uses_idx[order], np.arange(len(problem.limit_names) + 1))
    return [jobs[order[cuts[i] : cuts[i + 1]]] for i in range(len(problem.limit_names))]


def limit_load(paths: Paths) -> list[Bound]:
    """Per limit: ``min r + sum d / min(c_L, M) + min q`` over the jobs using it."""
    p = paths.problem
    slots = int(p.slots.sum())
    out: list[Bound] = []
    for lim, jobs in enumerate(_users(p)):
        if not jobs.size:
            continue
        cap = min(int(p.capacities[lim]), slots)
        work = int(paths.d[jobs].sum())
        lo, hi = int(paths.head[jobs].min()), int(paths.tail[jobs].min())
        out.append(
            Bound(
                "limit_load",
                lo + _ceil_div(work, cap) + hi,
                {
                    "limit": p.limit_names[lim],
                    "jobs": int(jobs.size),
                    "work_ticks": work,
                    "capacity": cap,
                    "min_head": lo,
                    "min_tail": hi,
                },
            )
        )
    return out


def _heads_tails_on(paths: Paths, jobs: I64, cap: int) -> tuple[int, dict[str, Any]]:
    """Best ``a + ceil(W(a, b) / cap) + b`` over the head thresholds tried (every
    distinct head for small sets) and, for each, every tail threshold."""
    r = paths.head[jobs]
    q = paths.tail[jobs]
    d = paths.d[jobs]
    by_tail = np.argsort(-q, kind="stable")
    rs, qs, ds = r[by_tail], q[by_tail], d[by_tail]
    heads = sorted_unique(r)
    if heads.size > HEADS_TAILS_ALL_UP_TO or (
        jobs.size > HEADS_TAILS_ALL_UP_TO and heads.size > HEADS_TAILS_THRESHOLDS
    ):
        pick = np.linspace(0, heads.size - 1, HEADS_TAILS_THRESHOLDS).round().astype(np.int64)
        heads = sorted_unique(heads[pick])
    best, ev = -1, {}
    for a in heads.tolist():
        take = rs >= a
        work = np.cumsum(np.where(take, ds, 0))
        # the set {r >= a, q >= qs[i]} holds at least the first i + 1 of the sorted jobs
        val = a + qs + (work + cap - 1) // cap
        val = np.where(take, val, -1)
        i = int(np.argmax(val))
        if int(val[i]) > best:
            best = int(val[i])
            ev = {"min_head": a, "min_tail": int(qs[i]), "work_ticks": int(work[i])}
    ev["capacity"] = cap
    ev["head_thresholds"] = int(heads.size)
    return best, ev


def _over_sets(
    paths: Paths, on: Callable[[Paths, I64, int], tuple[int, dict[str, Any]]], label: str
) -> tuple[int, dict[str, Any]]:
    """The best of ``on`` over all jobs (on every slot) and over each limit's jobs (on
    ``min(c_L, M)`` lanes), with the evidence of the set that gave it (``label`` names
    the set of all jobs)."""
    p = paths.problem
    slots = int(p.slots.sum())
    best, ev = on(paths, np.arange(p.n, dtype=np.int64), slots)
    ev[label] = "all"
    for lim, jobs in enumerate(_users(p)):
        if jobs.size:
            val, e = on(paths, jobs, min(int(p.capacities[lim]), slots))
            if val > best:
                best, ev = val, {**e, "limit": p.limit_names[lim]}
    return best, ev


def heads_tails(paths: Paths) -> Bound:
    """The parallel-machines relaxation with release and delivery times (module doc)."""
    best, ev = _over_sets(paths, _heads_tails_on, "jobs")
    return Bound("heads_tails", best, ev)


def _lanes_on(paths: Paths, jobs: I64, cap: int) -> tuple[int, dict[str, Any]]:
    """Best ``ceil((cap smallest r + sum d + cap smallest q) / cap)`` over the prefixes
    of ``jobs`` by decreasing head (the smallest heads of a prefix are its last ones)
    and by decreasing tail (module doc); -1 when fewer jobs than lanes."""
    if jobs.size < cap or cap < 1:
        return -1, {}
    if jobs.size > LANES_SCAN_UP_TO:  # the whole set only, by partial sorts
        r, q = paths.head[jobs], paths.tail[jobs]
        low = int(np.partition(r, cap - 1)[:cap].sum()) + int(np.partition(q, cap - 1)[:cap].sum())
        total = int(paths.d[jobs].sum())
        return _ceil_div(low + total, cap), {
            "jobs": int(jobs.size),
            "work_ticks": total,
            "lanes": cap,
        }
    best, ev = -1, {}
    for key, other, label in (
        (paths.head[jobs], paths.tail[jobs], "head"),
        (paths.tail[jobs], paths.head[jobs], "tail"),
    ):
        order = np.argsort(-key, kind="stable")
        ks = key[order]
        work = np.cumsum(paths.d[jobs][order])
        kcum = np.concatenate(([0], np.cumsum(ks)))
        # the cap smallest of the other key over each prefix: a max-heap of size cap
        small = np.empty(jobs.size, dtype=np.int64)
        heap: list[int] = []
        running = 0
        for i, x in enumerate(other[order].tolist()):
            if len(heap) < cap:
                heapq.heappush(heap, -x)
                running += x
            elif x < -heap[0]:
                running += x + heapq.heapreplace(heap, -x)
            small[i] = running
        idx = np.arange(cap - 1, jobs.size)
        last = kcum[idx + 1] - kcum[idx + 1 - cap]  # the cap smallest keys of the prefix
        val = -((-(last + work[idx] + small[idx])) // cap)
        i = int(np.argmax(val))
        if int(val[i]) > best:
            best = int(val[i])
            ev = {
                "by": f"decreasing {label}",
                "jobs": int(idx[i]) + 1,
                "work_ticks": int(work[idx[i]]),
            }
    ev["lanes"] = cap
    return best, ev


def lanes(paths: Paths) -> Bound:
    """Carlier's per-lane bound with heads and tails (module doc), over all jobs on the
    slots and over each limit's jobs on its lanes."""
    best, ev = _over_sets(paths, _lanes_on, "set")
    return Bound("lanes", max(best, 0), ev)


def _slot_capacity(t1: int, t2s: I64, free: I64, slots: I64) -> I64:
    """``sum_k c_k (t2 - max(t1, F_k))^+`` for each ``t2``."""
    u = np.maximum(free, t1)
    order = np.argsort(u)
    us, cs = u[order], slots[order]
    cc = np.concatenate(([0], np.cumsum(cs)))
    cu = np.concatenate(([0], np.cumsum(cs * us)))
    i = np.searchsorted(us, t2s, side="right")
    out: I64 = cc[i] * t2s - cu[i]
    return out


def refute(
    r: I64, d: I64, q: I64, c: int, free: I64, slots: I64, limit_cap: int | None
) -> tuple[int, int] | None:
    """An interval ``(t1, t2)`` in which the jobs' least work exceeds what the slots (and a
    limit of capacity ``limit_cap``) offer when the plan must end by ``c``; ``None`` if
    none of the intervals tried refutes ``c``. Every window must already fit
    (``r + d <= c - q``).

    For fixed ``t1`` a job's least work in ``[t1, t2)`` is ``clamp(t2 - b, 0, A)`` with
    ``b = max(t1, lct - d)`` and ``A = max(0, min(d, r + d - t1))`` (``lct = c - q``), i.e.
    ``(t2 - b)^+ - (t2 - b - A)^+``: summed over jobs by sorting and prefix sums.
    """
    lct = c - q
    t1s = sorted_unique(np.concatenate((r, lct - d)))
    t2all = sorted_unique(np.concatenate((lct, r + d)))
    for t1 in t1s.tolist():
        t2s = t2all[t2all > t1]
        if not t2s.size:
            continue
        a = np.maximum(0, np.minimum(d, r + d - t1))
        b = np.maximum(t1, lct - d)
        e = np.sort(b + a)
        b = np.sort(b)
        cb = np.concatenate(([0], np.cumsum(b)))
        ce = np.concatenate(([0], np.cumsum(e)))
        ib = np.searchsorted(b, t2s, side="right")
        ie = np.searchsorted(e, t2s, side="right")
        need = (ib * t2s - cb[ib]) - (ie * t2s - ce[ie])
        have = _slot_capacity(t1, t2s, free, slots)
        if limit_cap is not None:
            have = np.minimum(have, limit_cap * (t2s - t1))
        bad = np.flatnonzero(need > have)
        if bad.size:
            return t1, int(t2s[bad[0]])
    return None


def energetic(paths: Paths, floor: int, upper: int) -> Bound:
    """The largest ``C + 1`` for a ``C`` in ``[floor, upper)`` refuted by energetic
    reasoning (module doc), found by bisection; ``floor`` must itself be a proven
    bound (it is the value when nothing is refuted)."""
    p = paths.problem
    t = p.timing
    ev: dict[str, Any] = {}
    if p.n > ENERGETIC_MAX_JOBS:
        return Bound("energetic", floor, {"skipped": f"more than {ENERGETIC_MAX_JOBS} jobs"})
    if upper * (2 * p.n + int(p.slots.sum()) + 1) >= INT64_ROOM:
        return Bound("energetic", floor, {"skipped": "times too large for int64 sums"})
    groups: list[tuple[str | None, I64, int | None]] = [
        (None, np.arange(p.n, dtype=np.int64), None)
    ]
    groups += [
        (p.limit_names[lim], jobs, int(p.capacities[lim]))
        for lim, jobs in enumerate(_users(p))
        if jobs.size
    ]

    one_each = np.ones(t.slot_free.size, dtype=np.int64)  # slots, each free at its F_s

    def refuted(c: int) -> dict[str, Any] | None:
        for name, jobs, cap in groups:
            r, d, q = paths.head[jobs], paths.d[jobs], paths.tail[jobs]
            if (r + d + q > c).any():
                return {"refuted": c, "by": "a window too short", "limit": name}
            got = refute(r, d, q, c, t.slot_free, one_each, cap)
            if got is not None:
                return {"refuted": c, "interval": list(got), "limit": name}
        return None

    best = floor
    lo, hi = floor, upper - 1
    if lo <= hi:  # the common case is no refutation at all: one test settles it
        why = refuted(lo)
        if why is None:
            return Bound("energetic", floor, {"refuted": None})
        best, ev, lo = lo + 1, why, lo + 1
    while lo <= hi:
        mid = (lo + hi) // 2
        why = refuted(mid)
        if why is not None:
            best, ev = mid + 1, why
            lo = mid + 1
        else:
            hi = mid - 1
    return Bound("energetic", best, ev)


def stage_bounds(
    problem: StageProblem, paths: Paths, *, upper: int | None = None, energetic_on: bool = True
) -> StageBounds:
    """Every bound of the module docstring; ``upper`` (a plan's makespan in ticks) caps
    the energetic search, which runs only with ``energetic_on``."""
    found = [busy_nodes(problem), critical_path(paths), mean_load(problem)]
    found += limit_load(paths)
    found.append(heads_tails(paths))
    found.append(lanes(paths))
    if energetic_on:
        floor = max(b.ticks for b in found)
        top = upper if upper is not None else floor + int(paths.problem.timing.dmax.sum()) + 1
        found.append(energetic(paths, floor, top))
    return StageBounds(tuple(found), problem.instance.resolution)
