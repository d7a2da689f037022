"""Deadline sizing with few jobs per node: the matching bound and the LP bound of bin packing.

With about two jobs per node (short frames against a tight deadline) the classical bounds
of :mod:`.bounds` (total work, Martello-Toth L2, the cardinality bound) often stay one or
two nodes below the optimum, while the linear-programming relaxation of Gilmore and
Gomory (1961), rounded up, was the optimum on every such batch we solved offline (the
generated ``frames`` batches of ``bench/sizing.py`` at 1,000 and 10,000 jobs, the optimum
shown by a dive of the full LP; bench/RESULTS.md, "Deadline sizing"). This module brings
two tools to sizing:

``matching``   the jobs longer than a third of the capacity ``C`` never run three to a
               node, so on their own they need ``b - M`` nodes, ``b`` their number and
               ``M`` a maximum matching of pairs that fit together; with lengths sorted,
               the two-pointer rule (the longest job left pairs with the shortest left
               when they fit, else runs alone) finds ``M`` (a classical greedy for this
               threshold graph). The shorter jobs only add nodes, so ``b - M`` bounds the
               whole batch from below.
``lp_farley``  the LP bound by column generation of :class:`.exact.lpbound.LPBound`
               ("do the jobs fit on m nodes of capacity C?"), asked for m = the lower
               bound, m + 1, ... while it refutes them. Each refutation carries Farley's
               certificate (integer duals ``Y``, their total ``N`` over the jobs and the
               best pattern value ``K``, ``N > m K``); it is checked again here with an
               exact integer knapsack over the capacity, and it proves ``ceil(N / K)``
               nodes, which may jump more than one.

Both sides stay proofs when the lengths are coarsened to fit the LP's limits
(``MAX_LENGTHS`` distinct lengths, ``MAX_DP_CELLS`` knapsack cells):

* for the *bound*, lengths are rounded **down** (to the shortest length of their group,
  and to whole multiples ``g`` of a tick with the capacity ``floor(C / g)``): a set of
  jobs that fits a node still fits after rounding down, so a bound on the rounded batch
  bounds the true one;
* for a *packing* (the LP's dive at the bound), lengths are rounded **up** (to the
  longest of their group, to whole ``g`` ticks with capacity ``floor(C / g)``): a node
  that fits the rounded lengths fits the true ones. The caller checks every plan again
  on the true durations (:class:`.sizing_fit.Fit`).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt

from .exact import lpbound

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: pricing rounds per slice of the column generation (the clock is checked in between)
SLICE_ITERS = 20
#: simplex pivots per slice: about this many multiply-adds (a pivot costs r^2)
PIVOT_WORK = 3_000_000
#: fresh dives tried at the bound (the first plain, the others randomised)
MAX_DIVES = 6
#: sizing runs this module, with this share of the time left, on batches of at most
#: LP_JOBS_PER_NODE jobs per node at the lower bound (where L2 stays below the optimum),
#: and up to LP_L2_JOBS_PER_NODE when the bound in hand is not the total work (beyond,
#: the total work is nearly always tight)
LP_SHARE, LP_JOBS_PER_NODE, LP_L2_JOBS_PER_NODE = 0.5, 2.9, 8.0


def lp_worth(n: int, lower: int, source: str) -> bool:
    """Whether the matching and LP bounds are worth their time on a batch of ``n`` jobs
    whose lower bound so far is ``lower`` nodes, proven by ``source``."""
    per_node = n / max(1, lower)
    if per_node <= LP_JOBS_PER_NODE:
        return True
    return per_node <= LP_L2_JOBS_PER_NODE and source != "total_work"


def matching_bound(q: I64, cap: int) -> int:
    """Nodes of capacity ``cap`` that the jobs longer than ``cap / 3`` need (ticks ``q``,
    rounded down): their number minus a maximum matching of pairs that fit together."""
    big = np.sort(q[3 * q > cap])
    i, j, pairs = 0, int(big.size) - 1, 0
    while i < j:
        # the longest left pairs with the shortest left, else runs alone (both: j moves)
        if int(big[i]) + int(big[j]) <= cap:
            pairs += 1
            i += 1
        j -= 1
    return int(big.size) - pairs


def knapsack_best(s: I64, d: I64, y: I64, cap: int) -> int:
    """max sum a_i y_i over a_i in 0..d_i with sum a_i s_i <= cap, exactly (int64 DP over
    the capacity with binary-split copies; every value fits: the caller keeps d.y < 2^62)."""
    best = np.zeros(cap + 1, dtype=np.int64)
    for si, di, yi in zip(s.tolist(), d.tolist(), y.tolist(), strict=True):
        if yi <= 0 or si > cap:
            continue
        left, part = min(di, cap // si), 1
        while left > 0:
            k = min(part, left)
            w, v = k * si, k * yi
            best[w:] = np.maximum(best[w:], best[: cap + 1 - w] + v)  # 0/1: old row
            left -= k
            part *= 2
    return int(best[cap])


def _coarsen(q: I64, cap: int, up: bool) -> tuple[I64, int, int]:
    """Ticks ``q`` in whole units of ``g`` ticks (rounded down for a bound, up for a
    packing) and the capacity ``floor(cap / g)``, with ``g`` the smallest power of two that
    keeps the knapsack table within the LP's limit. Returns (lengths, capacity, g)."""
    g = 1
    while True:
        c = cap // g
        qq = -(-q // g) if up else q // g
        s = np.unique(qq[qq > 0])
        if s.size == 0:
            return qq.astype(np.int64), c, g
        per = np.minimum(np.bincount(np.searchsorted(s, qq[qq > 0]), minlength=s.size), c // s)
        rows = min(int(s.size), lpbound.MAX_LENGTHS) * max(1, int(per.max()).bit_length())
        if rows * (c + 1) <= lpbound.MAX_DP_CELLS // 2 or c < 8:
            return qq.astype(np.int64), c, g
        g *= 2


def _group(qq: I64, up: bool) -> I64:
    """At most ``MAX_LENGTHS`` distinct positive lengths: equal-count groups of the sorted
    lengths, each rounded to its shortest (``up`` False) or longest (``up`` True)."""
    pos = qq > 0
    vals = np.unique(qq[pos])
    limit = lpbound.MAX_LENGTHS
    if vals.size <= limit:
        return qq
    srt = np.sort(qq[pos])
    # group edges at equal counts of jobs, then snapped to distinct values
    cuts = np.unique(srt[np.linspace(0, srt.size - 1, limit).astype(np.int64)])
    if up:
        # each value goes to the smallest cut at or above it (the largest value is a cut)
        cuts = np.union1d(cuts, [srt[-1]])
        idx = np.searchsorted(cuts, qq, "left")
        out = np.where(pos, cuts[np.minimum(idx, cuts.size - 1)], 0)
    else:
        cuts = np.union1d(cuts, [srt[0]])
        idx = np.searchsorted(cuts, qq, "right") - 1
        out = np.where(pos, cuts[np.maximum(idx, 0)], 0)
    return out.astype(np.int64)


@dataclass
class LPOutcome:
    """What the LP step found: a raised lower bound (with its evidence) and perhaps a
    packing at it (a node per job, of ``q_hi`` within ``cap``)."""

    lower: int
    evidence: dict[str, Any] = field(default_factory=dict)
    packing: I32 | None = None
    bins: int = 0


Stop = Callable[[], bool]


def _clock(seconds: float, should_stop: Stop | None) -> Stop:
    """True once ``seconds`` have passed or ``should_stop`` says so."""
    t_end = time.perf_counter() + seconds

    def over() -> bool:
        return time.perf_counter() >= t_end or (should_stop is not None and should_stop())

    return over


def _slices(lp: lpbound.LPBound, over: Stop, dive: bool, seed: int = 0) -> int:
    lp.max_pivots = max(20, PIVOT_WORK // max(1, lp.r * lp.r))
    status = lp.status if not dive else lpbound.PAUSED
    while not over():
        status = lp.dive(SLICE_ITERS, seed=seed) if dive else lp.run(SLICE_ITERS)
        if status != lpbound.PAUSED:
            return status
    return lpbound.PAUSED


def lp_lower(
    q_lo: I64, cap: int, lower: int, upper: int, seconds: float, should_stop: Stop | None = None
) -> LPOutcome:
    """Raise ``lower`` (a proven bound) with the LP bound while it refutes, within
    ``seconds`` (or until ``should_stop`` says so); never past ``upper`` (a node count
    with a plan)."""
    over = _clock(seconds, should_stop)
    out = LPOutcome(lower)
    qq, c, g = _coarsen(q_lo, cap, up=False)
    qq = _group(qq, up=False)
    s_all, d_all = np.unique(qq[qq > 0], return_counts=True)
    s, d = s_all[::-1].copy(), d_all[::-1].astype(np.int64)
    refuted: list[int] = []
    while out.lower < upper and not over():
        m = out.lower
        lp = lpbound.LPBound(s, m, c, counts=d)
        if lp.too_large:
            break
        status = _slices(lp, over, dive=False)
        if status != lpbound.REFUTED:
            break
        cert = lp.certificate()
        if cert.get("rule") != "lp_farley":
            # the mean load or the longest job (rounded down) already exceed m nodes: the
            # simple bounds say so too, but only for this m
            out.lower = m + 1
            refuted.append(m)
            continue
        y = np.asarray(cert["duals"], dtype=np.int64)
        num = int((d * y).sum())
        k = knapsack_best(s, d, y, c)  # Farley's certificate, checked again exactly
        if not (k > 0 and num > m * k):  # pragma: no cover - the kernel's own check
            break
        out.lower = max(m + 1, min(upper, -(-num // k)))
        refuted.append(m)
        out.evidence = {
            "rule": "lp_farley",
            "capacity_ticks": c,
            "tick_multiple": g,
            "lengths": int(s.size),
            "dual_total": num,
            "best_pattern_value": k,
            "refuted_nodes": list(refuted),
        }
    return out


def lp_dive(
    q_hi: I64, cap: int, bins: int, seconds: float, should_stop: Stop | None = None
) -> I32 | None:
    """A packing of ``q_hi`` into ``bins`` nodes of ``cap`` ticks found by the LP's dives
    on lengths rounded up, or None (the node of every job)."""
    over = _clock(seconds, should_stop)
    qq, c, _ = _coarsen(q_hi, cap, up=True)
    qq = _group(qq, up=True)
    pos = np.flatnonzero(qq > 0)
    if pos.size == 0:
        return None
    root = lpbound.LPBound(qq[pos], bins, c)
    if root.too_large or root.trivial:
        return None
    for seed in range(MAX_DIVES):
        if over():
            break
        lp = root.copy()
        status = _slices(lp, over, dive=True, seed=seed)
        if status == lpbound.REFUTED:
            return None
        if status == lpbound.PACKED:
            node_of = np.zeros(q_hi.size, dtype=np.int32)  # zero-length jobs: node 0
            node_of[pos] = lp.packing(qq[pos])
            return node_of
    return None


def lp_step(
    q_lo: I64,
    q_hi: I64,
    cap: int,
    lower: int,
    upper: int,
    seconds: float,
    should_stop: Stop | None = None,
) -> LPOutcome:
    """The matching and LP bounds from ``lower``, then dives for a packing at the bound,
    within about ``seconds`` (the bound gets most of it) or until ``should_stop``."""
    t0 = time.perf_counter()
    out = LPOutcome(lower)
    match = matching_bound(q_lo, cap)
    if match > out.lower:
        out.lower = min(match, upper)
        out.evidence = {"rule": "matching", "jobs_over_a_third": int((3 * q_lo > cap).sum())}
    if out.lower < upper:
        lp = lp_lower(q_lo, cap, out.lower, upper, 0.6 * seconds, should_stop)
        if lp.lower > out.lower:
            out.lower, out.evidence = lp.lower, lp.evidence
    left = seconds - (time.perf_counter() - t0)
    if out.lower < upper and left > 0 and not (should_stop is not None and should_stop()):
        packing = lp_dive(q_hi, cap, out.lower, left, should_stop)
        if packing is not None:
            out.packing, out.bins = packing, out.lower
    out.evidence = dict(out.evidence, seconds=round(time.perf_counter() - t0, 4))
    return out


def warm_up() -> None:
    """Load the LP's kernels (numba's cache) on a tiny batch: a bound and a dive."""
    q = np.array([5, 5, 4, 4, 3, 3, 3], dtype=np.int64)
    lp_step(q, q, 9, 3, 4, 1.0)
