"""Eligibility and lower bounds for real farms: node speeds, requires/provides tags, busy nodes.

A job of duration ``p`` takes ``p / s_k`` seconds on node ``k`` of speed ``s_k``; node ``k``
can start its first job at ``free_at`` ``f_k``; a job may only run on a node that provides
every tag it requires. The makespan of a plan is when the last node finishes, and a node
that runs nothing finishes at its ``f_k`` (``result.Schedule.loads``), so every plan, and
the optimum ``C*``, satisfies ``C* >= max_k f_k``. All bounds below rest on that and on one
capacity fact: by time ``C >= f_k`` node ``k`` can do at most ``s_k (C - f_k)`` seconds of
(speed-1) work. Each bound is a theorem about every plan, so the optimum never lies below it.

``busy_nodes``        ``max_k f_k`` (the plan ends when the last still-busy node is done).
``mean_load``         all work has to fit: ``sum_j p_j <= sum_k s_k (C* - f_k)``, hence
                      ``C* >= (sum_j p_j + sum_k s_k f_k) / sum_k s_k``; the identical-node
                      mean load when every ``s_k = 1`` and ``f_k = 0``.
``longest_job``       every job runs somewhere it may: ``max_j min_{k eligible} f_k + p_j / s_k``.
``k_longest``         the k longest jobs run on at most k distinct nodes, which can do at most
                      the k largest values of ``s_k (C - f_k)`` by time ``C``; the least ``C``
                      at which this holds for every k (found by bisection, every refuted ``C``
                      is a proof). Without busy nodes it is ``max_k sum_{i<=k} p_i /
                      sum_{i<=k} s_i`` over the k fastest nodes (the classical uniform-machine
                      bound, common practice).
``pigeonhole``        two of the m+1 longest jobs share a node (and its generalisation to
                      km+1 jobs, as in ``bounds.py``): at least
                      ``min_k f_k + (p_m + p_{m+1}) / s_k``.
``eligibility_group`` for a set N of nodes that is a union of the eligible sets of some job
                      types, the jobs that can only run inside N must fit in N: the three
                      bounds above applied to those jobs and N alone; the best over the sets.
``bin_packing``       only where the nodes considered have one speed ``s`` and one ``free_at``
                      ``f`` (identical bins): ``f + L / s`` where ``L`` is the lifted
                      bin-packing bound of ``bounds.py`` for the speed-1 durations. Applied
                      to the whole farm with tags ignored (a relaxation), and to each
                      eligible set whose nodes are identical.

Every bound holds in exact arithmetic for the given floats (see :mod:`.rational`): sums
and products are taken exactly, division by a speed (3, 0.3, ...) in fractions, and the
result is rounded *down* to the float we report. Floating point only picks which node or
which k to evaluate exactly: every candidate within its round-off of the best is
evaluated in fractions. The bisection of ``k_longest`` refutes a capacity only with room
for round-off, and its final refutation is checked again in fractions.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from . import bounds as ident_bounds
from .errors import Infeasible, Issue
from .model import FloatArray, Instance
from .rational import array_sum, down, exact_dot
from .result import Certificate

#: order used to pick the reported source among equal bounds (simplest first)
FARM_BOUND_ORDER = (
    "busy_nodes",
    "mean_load",
    "longest_job",
    "k_longest",
    "pigeonhole",
    "eligibility_group",
    "bin_packing",
    "milp",
)

#: with at most this many job types, every union of eligible sets is tried
MAX_TYPES_FOR_UNIONS = 10
#: bisection steps of the k-longest bound (each halves the interval)
BISECT_STEPS = 60
#: the bin-packing bound is tried on groups with at most this many jobs
MAX_BIN_PACKING_JOBS = 200_000
#: relative round-off allowed for a float ``f + w / s`` or a float capacity (many units
#: in the last place: only decides which candidates are evaluated exactly, or refutes
#: with room to spare)
ROUND_OFF = 2.0**-44
#: below this, float values are not trusted to relative accuracy (gradual underflow)
TINY = 2.0**-960


@dataclass(frozen=True, eq=False)
class Eligibility:
    """Job types (distinct ``requires`` sets) and which nodes may run each type."""

    job_type: npt.NDArray[np.int32]
    eligible: npt.NDArray[np.bool_]  # [types, nodes]
    type_tags: tuple[frozenset[str], ...]

    @property
    def all_eligible(self) -> bool:
        """True when every job may run on every node."""
        return bool(self.eligible.all())


def eligibility(inst: Instance) -> Eligibility:
    """Group the jobs by their ``requires`` set; raise :class:`Infeasible` naming every job
    that no node may run (issues point at ``/jobs/i/requires``)."""
    m = inst.m
    if inst.requires is None:
        return Eligibility(
            np.zeros(inst.n, dtype=np.int32), np.ones((1, m), dtype=np.bool_), (frozenset(),)
        )
    index = {req: t for t, req in enumerate(dict.fromkeys(inst.requires))}
    job_type = np.fromiter(map(index.__getitem__, inst.requires), dtype=np.int32, count=inst.n)
    tags = tuple(index)
    eligible = np.array(
        [[req <= nd.provides for nd in inst.nodes] for req in tags], dtype=np.bool_
    ).reshape(len(tags), m)
    dead = np.flatnonzero(~eligible.any(axis=1))
    if dead.size:
        bad = np.flatnonzero(np.isin(job_type, dead))
        provided = frozenset().union(*(nd.provides for nd in inst.nodes))
        issues = []
        for j in bad[:50].tolist():
            missing = sorted(tags[job_type[j]] - provided) or sorted(tags[job_type[j]])
            issues.append(
                Issue(
                    ("jobs", j, "requires"),
                    f"no node provides all of {sorted(tags[job_type[j]])} (missing: {missing})",
                )
            )
        raise Infeasible(
            f"{bad.size} job(s) require tags that no node provides together",
            jobs=[inst.job_ids[j] for j in bad.tolist()],
            issues=issues,
        )
    return Eligibility(job_type, eligible, tags)


def work_bound(total: Fraction | float, s: FloatArray, f: FloatArray) -> Fraction:
    """``(total + sum s f) / sum s`` exactly: all work fits on these nodes (see the module
    doc); ``total`` is the exact work."""
    return (Fraction(total) + exact_dot(s, f)) / array_sum(s)


def earliest_finish(work: Fraction, s: FloatArray, f: FloatArray) -> Fraction:
    """``min_k f_k + work / s_k`` exactly: when ``work`` seconds of speed-1 work can be
    done at the earliest on one of these nodes.

    Floats pick the nodes within round-off of the least; those (one per distinct speed
    and ``free_at``) are evaluated in fractions.
    """
    approx = f + float(work) / s
    least = float(approx.min())
    near = np.flatnonzero(approx <= least * (1.0 + ROUND_OFF) + TINY)
    pairs = np.unique(np.stack((s[near], f[near]), axis=1), axis=0)
    return min(Fraction(fk) + work / Fraction(sk) for sk, fk in pairs.tolist())


def _failing(c: float, s: FloatArray, f: FloatArray, need: FloatArray, margin: FloatArray) -> int:
    """The first k whose k longest jobs cannot fit on the k best nodes by ``c``, with room
    for round-off (0 when none is refuted). ``need`` is the float running sum of the jobs
    longest first and ``margin[k-1]`` the relative round-off allowed at k."""
    cap = np.sort(s * (c - f))[::-1][: need.size]
    have = np.cumsum(cap)
    bad = np.flatnonzero(have * (1.0 + margin) < need * (1.0 - margin))
    return int(bad[0]) + 1 if bad.size else 0


def _refuted_exactly(c: float, k: int, p_desc: FloatArray, s: FloatArray, f: FloatArray) -> bool:
    """Whether in exact arithmetic the k largest ``s_i (c - f_i)`` sum to less than the k
    longest jobs (so no plan ends by ``c``)."""
    cap = s * (c - f)
    kth = float(np.sort(cap)[::-1][k - 1])
    near = np.flatnonzero(cap >= kth * (1.0 - ROUND_OFF) - TINY)  # all that can be top k
    exact_c = Fraction(c)
    pairs = zip(s[near].tolist(), f[near].tolist(), strict=True)
    caps = sorted((Fraction(si) * (exact_c - Fraction(fi)) for si, fi in pairs), reverse=True)
    return sum(caps[:k], Fraction(0)) < array_sum(p_desc[:k])


def k_longest_bound(
    p_desc: FloatArray, s: FloatArray, f: FloatArray, floor: float, upper: float
) -> tuple[float, int]:
    """Least ``C >= floor`` with ``top_k(s (C - f)) >= p_1 + ... + p_k`` for every
    ``k <= min(n, m)``; also returns the k that refuted the largest refuted ``C``.

    ``floor`` must be at least ``max f`` (so ``C - f >= 0``) and ``upper`` the makespan of a
    plan (where every condition holds, since it holds at the optimum and grows with ``C``).
    The bound returned is ``floor`` or a ``C`` refuted in exact arithmetic: the optimum
    lies above it.
    """
    kmax = min(p_desc.size, s.size)
    if kmax == 0:
        return floor, 0
    need = np.cumsum(p_desc[:kmax])
    # a capacity and a running sum of k non-negative terms each carry at most about
    # (k + 3) units of round-off; refute only beyond eight times that
    margin = (np.arange(1, kmax + 1, dtype=np.float64) + 8.0) * 2.0**-50

    def failing(c: float) -> int:
        return _failing(c, s, f, need, margin)

    if not np.isfinite(upper) or upper < floor:
        upper = floor + float(p_desc.sum() / s.min()) + 1.0
    if failing(floor) == 0:
        return floor, 0
    lo, hi, k_lo = floor, upper, failing(floor)
    if failing(hi):  # cannot happen for a true upper bound; stay safe
        return lo, k_lo
    for _ in range(BISECT_STEPS):
        mid = 0.5 * (lo + hi)
        if mid <= lo or mid >= hi:
            break
        k = failing(mid)
        if k:
            lo, k_lo = mid, k
        else:
            hi = mid
    if lo > floor and not _refuted_exactly(lo, k_lo, p_desc, s, f):
        return floor, 0  # pragma: no cover - the margin above makes this unreachable
    return lo, k_lo


def pigeonhole_bound(p_desc: FloatArray, s: FloatArray, f: FloatArray) -> tuple[Fraction, int]:
    """Among the km+1 longest jobs one node runs k+1 of them (at least the k+1 shortest of
    those): ``min_k f_k + sum / s_k``, best over k. Returns (bound, k), (0, 0) if n <= m."""
    n, m = p_desc.size, s.size
    if n <= m:
        return Fraction(0), 0
    window, k = ident_bounds.pigeonhole_window(p_desc, m)
    return earliest_finish(window, s, f), k


def _bin_packing(
    p: FloatArray, count: int, speed: float, free: float, resolution: float, upper: float
) -> Fraction | None:
    """``free + L / speed`` with L the identical-node bound of ``count`` speed-1 nodes."""
    if p.size == 0 or p.size > MAX_BIN_PACKING_JOBS:
        return None
    sub = Instance.build(p, count, resolution=resolution)
    cert = ident_bounds.lower_bounds(sub, upper=max(0.0, (upper - free) * speed))
    return Fraction(free) + Fraction(cert.value) / Fraction(speed)


def _longest_job(elig: Eligibility, p: FloatArray, s: FloatArray, f: FloatArray) -> Fraction:
    """``max_t min_{k eligible} f_k + p_t / s_k`` over job types t with longest job p_t,
    exactly (floats pick the types within round-off of the best)."""
    longest = np.zeros(len(elig.type_tags))
    np.maximum.at(longest, elig.job_type, p)
    approx = np.where(elig.eligible, f[None, :] + longest[:, None] / s[None, :], np.inf)
    per_type = approx.min(1)
    top = float(per_type.max())
    near = np.flatnonzero(per_type >= top * (1.0 - ROUND_OFF) - TINY)
    best = max(
        earliest_finish(Fraction(float(longest[t])), s[elig.eligible[t]], f[elig.eligible[t]])
        for t in near.tolist()
    )
    return best


def _uniform(s: FloatArray, f: FloatArray) -> bool:
    return bool(s.size) and bool((s == s[0]).all() and (f == f[0]).all())


def farm_lower_bounds(inst: Instance, elig: Eligibility, upper: float) -> Certificate:
    """Every farm bound of the module doc for ``inst`` and the best of them.

    ``upper`` is the makespan of a known plan (caps the searches).
    """
    p = inst.durations
    s = np.array([nd.speed for nd in inst.nodes], dtype=np.float64)
    f = np.array([nd.free_at for nd in inst.nodes], dtype=np.float64)
    fmax = float(f.max())
    out: dict[str, Fraction] = {}  # exact; reported rounded down
    evidence: dict[str, Any] = {}
    if fmax > 0:
        out["busy_nodes"] = Fraction(fmax)
    out["mean_load"] = work_bound(array_sum(p), s, f)
    # longest job per type, placed where it would finish first
    out["longest_job"] = _longest_job(elig, p, s, f)
    p_desc = inst.sorted_desc
    order_s = np.argsort(-s, kind="stable")
    kl, kk = k_longest_bound(p_desc, s[order_s], f[order_s], fmax, upper)
    out["k_longest"] = Fraction(kl)
    evidence["k_longest"] = {"k": kk}
    ph, pk = pigeonhole_bound(p_desc, s, f)
    if pk:
        out["pigeonhole"] = ph
        evidence["pigeonhole"] = {"k": pk, "jobs_considered": pk * inst.m + 1}
    if _uniform(s, f) and inst.n > inst.m:
        bp = _bin_packing(p, inst.m, float(s[0]), float(f[0]), inst.resolution, upper)
        if bp is not None:
            out["bin_packing"] = bp
            evidence["bin_packing"] = {"nodes": "all (tags ignored)"}
    group, bp_group = _group_bounds(inst, elig, p, s, f, fmax, upper)
    if group is not None:
        out["eligibility_group"] = group[0]
        evidence["eligibility_group"] = group[1]
    if bp_group is not None and ("bin_packing" not in out or bp_group[0] > out["bin_packing"]):
        out["bin_packing"] = bp_group[0]
        evidence["bin_packing"] = bp_group[1]
    source, exact = ident_bounds.pick(out, FARM_BOUND_ORDER)
    evidence["resolution"] = inst.resolution
    reported = {name: down(x) for name, x in out.items()}
    return Certificate(
        value=down(exact), source=source, bounds=reported, evidence=evidence, exact=exact
    )


def _candidate_sets(elig: Eligibility) -> list[tuple[npt.NDArray[np.bool_], bool]]:
    """Node sets to try: each eligible set (full bounds) and, with few types, every union
    of eligible sets (work bound only). The whole farm is left out (the global bounds)."""
    e = elig.eligible
    t = e.shape[0]
    seen: set[bytes] = set()
    out: list[tuple[npt.NDArray[np.bool_], bool]] = []
    for row in range(t):
        key = e[row].tobytes()
        if not e[row].all() and key not in seen:
            seen.add(key)
            out.append((e[row], True))
    if 2 <= t <= MAX_TYPES_FOR_UNIONS:
        for mask in range(1, 1 << t):
            rows = [r for r in range(t) if mask >> r & 1]
            if len(rows) < 2:
                continue
            union: npt.NDArray[np.bool_] = np.asarray(e[rows].any(axis=0), dtype=np.bool_)
            key = union.tobytes()
            if not union.all() and key not in seen:
                seen.add(key)
                out.append((union, False))
    return out


def _type_work(elig: Eligibility, p: FloatArray) -> list[Fraction]:
    """The exact work of each job type."""
    t = len(elig.type_tags)
    order = np.argsort(elig.job_type, kind="stable")
    cuts = np.searchsorted(elig.job_type[order], np.arange(t + 1)).tolist()
    return [array_sum(p[order[cuts[i] : cuts[i + 1]]]) for i in range(t)]


def _group_bounds(
    inst: Instance,
    elig: Eligibility,
    p: FloatArray,
    s: FloatArray,
    f: FloatArray,
    fmax: float,
    upper: float,
) -> tuple[tuple[Fraction, dict[str, Any]] | None, tuple[Fraction, dict[str, Any]] | None]:
    sets = _candidate_sets(elig)
    if not sets:
        return None, None
    e = elig.eligible
    type_work = _type_work(elig, p)
    best: tuple[Fraction, dict[str, Any]] | None = None
    best_bp: tuple[Fraction, dict[str, Any]] | None = None

    def describe(inside: npt.NDArray[np.bool_], nodes: npt.NDArray[np.bool_], rule: str) -> Any:
        tags = [sorted(elig.type_tags[r]) for r in np.flatnonzero(inside).tolist()]
        return {"rule": rule, "nodes": int(nodes.sum()), "job_requires": tags}

    for nodes, full in sets:
        # the job types whose eligible set lies inside this node set
        inside: npt.NDArray[np.bool_] = np.asarray(~(e & ~nodes[None, :]).any(axis=1))
        if not inside.any():
            continue
        sn, fn = s[nodes], f[nodes]
        work = sum((type_work[t] for t in np.flatnonzero(inside).tolist()), Fraction(0))
        cands = {"mean_load": work_bound(work, sn, fn)}
        if full:
            jobs = np.flatnonzero(inside[elig.job_type])
            pg = np.sort(p[jobs])[::-1]
            o = np.argsort(-sn, kind="stable")
            cands["k_longest"] = Fraction(k_longest_bound(pg, sn[o], fn[o], fmax, upper)[0])
            ph, pk = pigeonhole_bound(pg, sn, fn)
            if pk:
                cands["pigeonhole"] = ph
            if _uniform(sn, fn) and pg.size > sn.size:
                bp = _bin_packing(
                    pg, int(sn.size), float(sn[0]), float(fn[0]), inst.resolution, upper
                )
                if bp is not None and (best_bp is None or bp > best_bp[0]):
                    best_bp = (bp, describe(inside, nodes, "bin_packing"))
        rule = max(cands, key=lambda k: cands[k])
        if best is None or cands[rule] > best[0]:
            best = (cands[rule], describe(inside, nodes, rule))
    return best, best_bp
