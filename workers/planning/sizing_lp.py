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
               nodes, which may jump more than one. One column generation serves every
               m: after a refutation it goes on from its columns and basis at the larger
               m (:meth:`.exact.lpbound.LPBound.raise_nodes`), and it starts with the
               fullest distinct nodes of the best packing so far as columns (with two
               jobs a node they are most of what the LP needs: a tenth of the pricing
               rounds on the ``frames`` batches).

The LP runs twice: on lengths grouped to ``MAX_LENGTHS`` (quick), then, if that left the
bound open and the batch has at most ``EXACT_LENGTHS`` distinct lengths, on the lengths as
they are. Grouping rounds every job down by a little, which on batches packed to the tick
adds up to nodes (the ``frames`` batches of 571 distinct lengths lost 1 to 14). When the
LP on the jobs' own lengths ends at the bound (its master problem at most m), its
fractional packing is rounded by :mod:`.sizing_round` into a plan at the bound.

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

#: pricing rounds per slice of the column generation (the clock is checked in between),
#: and at most about SLICE_CELLS knapsack cells per slice (a few ms)
SLICE_ITERS, SLICE_CELLS = 20, 8_000_000
#: simplex pivots per slice: about this many multiply-adds (a pivot costs r^2)
PIVOT_WORK = 3_000_000
#: fresh dives tried at the bound (the first plain, the others randomised)
MAX_DIVES = 6
#: sizing runs this module, with this share of the time left, on batches of at most
#: LP_JOBS_PER_NODE jobs per node at the lower bound (beyond, the total work is nearly
#: always tight)
LP_SHARE, LP_JOBS_PER_NODE = 0.7, 8.0
#: share of the LP step's time the bound may use (the dive at the bound has the rest)
BOUND_SHARE = 0.85
#: the rounding of a fractional packing gets at least this long (it is a few ms)
ROUND_SECONDS = 0.05
#: the LP starts with at most this many patterns of the best packing so far (the fullest)
SEED_PATTERNS = 1000
#: the bound goes on with the lengths as they are (no grouping) for batches of at most
#: this many distinct lengths (a pivot costs r^2: 0.4 s for 571 lengths on our machine)
EXACT_LENGTHS = 1024


def lp_worth(n: int, lower: int, source: str) -> bool:
    """Whether the matching and LP bounds are worth their time on a batch of ``n`` jobs
    whose lower bound so far is ``lower`` nodes, proven by ``source`` (whichever: on the
    ``farm`` mix of bench/sizing.py the total work was the bound in hand, six jobs a
    node, and the LP one node above it)."""
    del source  # (kept for the callers: every rule gets the LP now)
    return n <= LP_JOBS_PER_NODE * max(1, lower)


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
    keeps the knapsack table of the grouped lengths (:func:`_group`: binary-split copies
    of each length, times the capacity) within half the LP's limit. Returns (lengths,
    capacity, g)."""
    g, limit = 1, lpbound.MAX_DP_CELLS // 2
    pos = q[q > 0]
    if pos.size == 0:
        return q.astype(np.int64), cap, 1
    # every length takes a row at least: skip the multiples that cannot fit at once
    rows_least = min(int(np.unique(pos).size), lpbound.MAX_LENGTHS)
    while cap // g >= 8 and rows_least * (cap // g + 1) > limit:
        g *= 2
    while True:
        c = cap // g
        qq = -(-q // g) if up else q // g
        grouped = _group(qq, up)
        s, cnt = np.unique(grouped[grouped > 0], return_counts=True)
        if s.size == 0:
            return qq.astype(np.int64), c, g
        rows = sum(int(x).bit_length() for x in np.minimum(cnt, c // s).tolist())
        if rows * (c + 1) <= limit or c < 8:
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

    # group edges at equal counts of jobs, snapped to distinct values; a length that many
    # jobs share takes several of those edges, so ask for more edges until the distinct
    # ones reach the limit (a batch of a few common lengths and many rare ones keeps the
    # common ones exact and still groups the rare ones finely)
    def edges(k: int) -> I64:
        return np.unique(srt[np.linspace(0, srt.size - 1, k).astype(np.int64)])

    lo, hi = limit - 1, int(srt.size)
    cuts = edges(lo)
    while lo < hi and cuts.size < limit - 1:
        mid = (lo + hi + 1) // 2
        more = edges(mid)
        if more.size <= limit - 1:
            lo, cuts = mid, more
        else:
            hi = mid - 1
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
    #: the column generation on the lengths as they are (whole ticks, no grouping) if it
    #: ended at most ``lower`` nodes: a fractional packing at the bound
    fractional: lpbound.LPBound | None = None


Stop = Callable[[], bool]
#: a packing at the bound from a fractional one (:func:`.sizing_round.round_packing`)
Rounding = Callable[[lpbound.LPBound, I64, int, float, Stop | None], I32 | None]


def _clock(seconds: float, should_stop: Stop | None) -> Stop:
    """True once ``seconds`` have passed or ``should_stop`` says so."""
    t_end = time.perf_counter() + seconds

    def over() -> bool:
        return time.perf_counter() >= t_end or (should_stop is not None and should_stop())

    return over


def _slices(lp: lpbound.LPBound, over: Stop, dive: bool, seed: int = 0) -> int:
    lp.max_pivots = max(20, PIVOT_WORK // max(1, lp.r * lp.r))
    # pricing rounds per slice: fewer when the knapsack table is large (the clock is read
    # between slices)
    iters = SLICE_ITERS
    if not (lp.trivial or lp.too_large):
        iters = max(1, min(SLICE_ITERS, SLICE_CELLS // max(1, lp.cg.price.take.size)))
    status = lp.status if not dive else lpbound.PAUSED
    while not over():
        status = lp.dive(iters, seed=seed) if dive else lp.run(iters)
        if status != lpbound.PAUSED:
            return status
    return lpbound.PAUSED


def _seed(lp: lpbound.LPBound, lengths: I64, node_of: I32 | None) -> int:
    """Start the master problem of ``lp`` with the fullest distinct nodes of a packing
    (``node_of``; ``lengths`` each job's length in ``lp``'s units, every one of them in
    ``lp.s``): with few jobs per node they are most of what the LP needs, and the column
    generation then takes a fraction of its rounds. Returns how many were added."""
    if node_of is None or node_of.size != lengths.size or lp.trivial or lp.too_large:
        return 0
    pos = np.flatnonzero(lengths > 0)
    if pos.size == 0:
        return 0
    r = lp.r
    idx = (r - 1 - np.searchsorted(lp.s[::-1], lengths[pos])).astype(np.int64)
    nodes = node_of[pos].astype(np.int64)
    nb = int(nodes.max()) + 1
    load = np.bincount(nodes, weights=lengths[pos].astype(np.float64), minlength=nb)
    # a node's pattern, hashed: the sum of a random key per length (wrapping)
    key = np.random.default_rng(1).integers(1, 1 << 62, r, dtype=np.int64).astype(np.uint64)
    h = np.zeros(nb, dtype=np.uint64)
    np.add.at(h, nodes, key[idx])
    fits = np.flatnonzero((load > 0) & (load <= lp.cap))
    by_load = fits[np.argsort(-load[fits], kind="stable")]
    _, first = np.unique(h[by_load], return_index=True)
    chosen = by_load[np.sort(first)][:SEED_PATTERNS]
    row = np.full(nb, -1, dtype=np.int64)
    row[chosen] = np.arange(chosen.size)
    mine = row[nodes] >= 0
    pats = np.zeros((chosen.size, r), dtype=np.int64)
    np.add.at(pats, (row[nodes[mine]], idx[mine]), 1)
    return lp.add_patterns(pats)


def _raise(
    s: I64,
    d: I64,
    c: int,
    out: LPOutcome,
    upper: int,
    over: Stop,
    max_lengths: int,
    seed: tuple[I64, I32 | None] | None = None,
) -> lpbound.LPBound | None:
    """Raise ``out.lower`` with the LP bound on lengths ``s`` (longest first, ``d`` jobs
    each; capacity ``c``) while it refutes: one column generation, warm-started at each
    larger node count (:meth:`.lpbound.LPBound.raise_nodes`). Each refutation is checked
    again here (Farley's certificate, exact knapsack) before it counts. Returns the
    column generation if it ended with the master problem at most ``out.lower`` nodes
    (NOT_REFUTED: its basis is a fractional packing there, see :mod:`.sizing_round`)."""
    if s.size == 0 or int(s[0]) > c:
        return None
    work = -(-int((s * d).sum()) // c)  # the total work, rounded down, bounds it too
    if work > out.lower:
        out.lower = min(work, upper)
        out.evidence = {"rule": "total_work", "capacity_ticks": c}
    m = out.lower
    if m >= upper:
        return None
    # room for the seeds and the columns a long generation adds (once full, it stops)
    cols = lpbound.MAX_COLUMNS + int(s.size) + SEED_PATTERNS
    lp = lpbound.LPBound(s, m, c, counts=d, max_lengths=max_lengths, max_columns=cols)
    if lp.too_large or lp.trivial:
        return None
    if seed is not None:
        _seed(lp, *seed)
    refuted: list[int] = list(out.evidence.get("refuted_nodes", []))
    while m < upper and not over():
        status = _slices(lp, over, dive=False)
        if status == lpbound.NOT_REFUTED:
            return lp
        if status != lpbound.REFUTED:
            break
        cert = lp.certificate()
        y = np.asarray(cert["duals"], dtype=np.int64)
        num = int((d * y).sum())
        k = knapsack_best(s, d, y, c)  # Farley's certificate, checked again exactly
        if not (k > 0 and num > m * k):  # pragma: no cover - the kernel's own check
            break
        refuted.append(m)
        m = max(m + 1, min(upper, -(-num // k)))
        out.lower = m
        out.evidence = {
            "rule": "lp_farley",
            "capacity_ticks": c,
            "lengths": int(s.size),
            "dual_total": num,
            "best_pattern_value": k,
            "refuted_nodes": refuted,
        }
        if m < upper:
            lp.raise_nodes(m)
    return None


def lp_lower(
    q_lo: I64,
    cap: int,
    lower: int,
    upper: int,
    seconds: float,
    should_stop: Stop | None = None,
    *,
    exact_lengths: int = EXACT_LENGTHS,
    packing: I32 | None = None,
) -> LPOutcome:
    """Raise ``lower`` (a proven bound) with the LP bound while it refutes, within
    ``seconds`` (or until ``should_stop`` says so); never past ``upper`` (a node count
    with a plan).

    First on lengths grouped to at most ``MAX_LENGTHS`` (rounded down: quick), then, if
    that left the bound open and the batch has at most ``exact_lengths`` distinct
    lengths, on the lengths as they are (whole ``g`` ticks), from the bound reached.
    ``packing`` (the node of every job, a packing of the jobs within ``cap``) starts each
    LP with its fullest nodes."""
    over = _clock(seconds, should_stop)
    out = LPOutcome(lower)
    qq, c, g = _coarsen(q_lo, cap, up=False)
    grouped = _group(qq, up=False)
    s_all, d_all = np.unique(grouped[grouped > 0], return_counts=True)
    e_all, f_all = np.unique(qq[qq > 0], return_counts=True)
    s, d = s_all[::-1].copy(), d_all[::-1].astype(np.int64)
    lp = _raise(s, d, c, out, upper, over, lpbound.MAX_LENGTHS, (grouped, packing))
    exact = e_all.size == s.size
    if not exact and e_all.size <= exact_lengths and out.lower < upper and not over():
        s, d = e_all[::-1].copy(), f_all[::-1].astype(np.int64)
        u = np.minimum(d, c // s)
        chunks = int(sum(int(x).bit_length() for x in u.tolist()))
        if chunks * (c + 1) <= lpbound.MAX_DP_CELLS:
            lp = _raise(s, d, c, out, upper, over, exact_lengths, (qq, packing))
            exact = True
    if exact and g == 1 and lp is not None and lp.m == out.lower:
        out.fractional = lp
    if out.evidence:
        out.evidence["tick_multiple"] = g
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
    rounding: Rounding | None = None,
    packing: I32 | None = None,
    dive: bool = True,
) -> LPOutcome:
    """The matching and LP bounds from ``lower``, then a packing at the bound: by
    ``rounding`` of the LP's fractional packing when the LP on the jobs' own lengths
    ended there (:mod:`.sizing_round`), else by dives (unless not ``dive``); within about
    ``seconds`` (the bound gets most of it) or until ``should_stop``."""
    t0 = time.perf_counter()
    out = LPOutcome(lower)
    match = matching_bound(q_lo, cap)
    if match > out.lower:
        out.lower = min(match, upper)
        out.evidence = {"rule": "matching", "jobs_over_a_third": int((3 * q_lo > cap).sum())}
    if out.lower < upper:
        lp = lp_lower(
            q_lo, cap, out.lower, upper, BOUND_SHARE * seconds, should_stop, packing=packing
        )
        if lp.lower > out.lower:
            out.lower, out.evidence = lp.lower, lp.evidence
        out.fractional = lp.fractional
    left = seconds - (time.perf_counter() - t0)
    frac = out.fractional
    if frac is not None and rounding is not None and out.lower < upper and left > 0:
        packing = None
        if np.array_equal(q_lo, q_hi):  # the LP's lengths are the jobs' own
            packing = rounding(frac, q_hi, cap, max(left, ROUND_SECONDS), should_stop)
        out.evidence = dict(out.evidence, rounded=packing is not None)
        if packing is not None:
            out.packing, out.bins = packing, out.lower
    left = seconds - (time.perf_counter() - t0)
    if (
        dive
        and out.packing is None
        and out.lower < upper
        and left > 0
        and not (should_stop is not None and should_stop())
    ):
        packing = lp_dive(q_hi, cap, out.lower, left, should_stop)
        if packing is not None:
            out.packing, out.bins = packing, out.lower
    out.evidence = dict(out.evidence, seconds=round(time.perf_counter() - t0, 4))
    return out


def warm_up() -> None:
    """Load the LP's kernels (numba's cache) on a tiny batch: a bound and a dive."""
    q = np.array([5, 5, 4, 4, 3, 3, 3], dtype=np.int64)
    lp_step(q, q, 9, 3, 4, 1.0)
