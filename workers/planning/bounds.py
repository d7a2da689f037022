"""Lower bounds on the optimum makespan of identical nodes, each with its name and evidence.

Every bound here is a theorem about *every* plan of the batch, so the optimum can never
lie below it. Formulas and sources (see ``../shared/references.md`` section 3):

``mean_load``      total work over node count (McNaughton 1959: the preemptive optimum).
``longest_job``    the longest job has to run somewhere.
``pigeonhole``     p(m) + p(m+1) on the durations sorted longest first: two of the m+1
                   longest jobs share a node (Dell'Amico and Martello 1995, "L1").
``pigeonhole_k``   its generalisation: among the km+1 longest jobs some node runs k+1 of
                   them, at least the k+1 shortest of those.
``bin_packing``    lifting a bin-packing bound (Martello and Toth 1990, L2, with the
                   cardinality companion credited to Haouari and Jemmali 2008): if no
                   packing into m bins of capacity C exists, the optimum exceeds C.

Durations are real seconds. The bin-packing bound works on whole ticks of ``resolution``
seconds with every duration *rounded down*, so any real plan is also a plan of the
rounded batch no longer than itself: a bound on the rounded batch, times the resolution,
is a bound for the true durations.

Every bound holds in exact arithmetic for the given floats (see :mod:`.rational`): sums
are taken exactly (whole numbers in integers, other floats by error-free extraction),
ticks by exact floor, and each bound is then rounded *down* to the float we report.
Ticks are used only while the whole batch stays within ``rational.MAX_TICKS`` ticks.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from fractions import Fraction
from typing import Any, TypeVar

import numpy as np
import numpy.typing as npt

from .model import Instance
from .rational import (
    MAX_TICKS,
    array_sum,
    ceil_div,
    down,
    floor_ticks,
    ticks_to_seconds_down,
)
from .result import Certificate

#: order used to pick the reported source among equal bounds (simplest first)
BOUND_ORDER = ("mean_load", "longest_job", "pigeonhole", "pigeonhole_k", "bin_packing", "search")

#: at most this many alpha values are tried per capacity (any alpha gives a valid bound)
MAX_ALPHAS = 2048
#: the cardinality bound costs O(n) per alpha: it is tried for at most this many alphas
MAX_CARD_ALPHAS = 48
#: pigeonhole_k: at most this many k whose float sums tie with the best are summed exactly
MAX_WINDOW_CANDIDATES = 8

I64 = npt.NDArray[np.int64]
#: a bound's value: a float (identical nodes) or an exact Fraction (farms)
V = TypeVar("V", float, Fraction)


def pick(bounds: Mapping[str, V], order: Sequence[str] = BOUND_ORDER) -> tuple[str, V]:
    """The largest bound and its name (the simplest rule in ``order`` wins ties)."""
    best = max(bounds.values())
    for name in order:
        if name in bounds and bounds[name] >= best:
            return name, best
    name = max(bounds, key=lambda k: bounds[k])
    return name, bounds[name]


def to_ticks(durations: npt.NDArray[np.float64], resolution: float) -> I64:
    """Durations as whole ticks of ``resolution``, rounded down exactly (never up).

    The caller keeps every quotient within ``rational.MAX_TICKS``.
    """
    return floor_ticks(durations, resolution)


def pigeonhole_window(p_desc: npt.NDArray[np.float64], m: int) -> tuple[Fraction, int]:
    """The best ``k`` of ``pigeonhole_k`` and its exact sum: jobs km+1-k .. km+1 (1-based)
    of the durations sorted longest first, best over ``1 <= k <= (n - 1) // m``; needs n > m.

    The sums are compared in floating point (prefix-sum differences, which can cancel);
    every k within the round-off of the best is then summed exactly, and the largest
    exact sum wins (any k gives a valid bound).
    """
    p = p_desc
    n = int(p.size)
    kmax = (n - 1) // m
    ks = np.arange(1, kmax + 1)
    cs = np.concatenate(([0.0], np.cumsum(p)))
    # jobs km+1-k .. km+1 (1-based) are indices km-k .. km (0-based)
    sums = cs[ks * m + 1] - cs[ks * m - ks]
    # a running sum of i non-negative terms is within i units of round-off of its exact
    # value, so every difference is within about 2 n u cs[-1] of the window's exact sum
    slack = 4.0 * (n + 2) * 2.0**-53 * float(cs[-1])
    near = np.flatnonzero(sums >= float(sums.max()) - 2.0 * slack)
    if near.size > MAX_WINDOW_CANDIDATES:
        near = np.sort(near[np.argsort(-sums[near], kind="stable")[:MAX_WINDOW_CANDIDATES]])
    best, best_k = Fraction(-1), 0
    for i in near.tolist():
        k = i + 1
        exact = array_sum(p[k * m - k : k * m + 1])
        if exact > best:
            best, best_k = exact, k
    return best, best_k


def simple_bounds(
    sorted_desc: npt.NDArray[np.float64], m: int, total: Fraction | None = None
) -> dict[str, Any]:
    """mean_load, longest_job, pigeonhole and pigeonhole_k on real durations.

    Each is computed exactly and rounded down. ``total`` is the exact sum of the
    durations when the caller has it. Returns the bounds plus ``k`` (the pigeonhole
    generalisation's best k) under the key ``"_k"``.
    """
    p = sorted_desc
    n = p.size
    if total is None:
        total = array_sum(p)
    out: dict[str, Any] = {
        "mean_load": down(total / m),
        "longest_job": float(p[0]) if n else 0.0,
    }
    if n > m:
        out["pigeonhole"] = down(Fraction(float(p[m - 1])) + Fraction(float(p[m])))
        window, k = pigeonhole_window(p, m)
        out["pigeonhole_k"] = down(window)
        out["_k"] = k
    return out


def tick_bounds(q_desc: I64, m: int) -> int:
    """The simple bounds on whole ticks (the mean load rounds up there)."""
    n = q_desc.size
    best = max(-(-int(q_desc.sum()) // m), int(q_desc[0]) if n else 0)
    if n > m:
        kmax = (n - 1) // m
        ks = np.arange(1, kmax + 1)
        cs = np.concatenate(([0], np.cumsum(q_desc)))
        best = max(best, int((cs[ks * m + 1] - cs[ks * m - ks]).max()))
    return best


class BinPackingBound:
    """Martello-Toth L2 and the cardinality bound for items ``q`` (whole ticks)."""

    def __init__(self, q: I64) -> None:
        self.a = np.sort(q)
        self.prefix = np.concatenate(([0], np.cumsum(self.a)))
        self.n = int(self.a.size)
        self.values = np.unique(self.a)

    def _alphas(self, cap: int) -> I64:
        vals = self.values[self.values <= cap // 2]
        if vals.size > MAX_ALPHAS:
            vals = vals[np.linspace(0, vals.size - 1, MAX_ALPHAS).astype(np.int64)]
        return np.concatenate(([0], vals[vals > 0]))

    def bins_needed(self, cap: int) -> tuple[int, int, str]:
        """A lower bound on the bins of capacity ``cap`` the items need.

        Returns (bins, alpha, which) with ``which`` in {"L2", "cardinality"}.
        """
        a, pre, n = self.a, self.prefix, self.n
        if n == 0:
            return 0, 0, "L2"
        if int(a[-1]) > cap:
            return n + 1, 0, "L2"  # an item does not fit at all: infinitely many bins
        if cap <= 0:
            return (0 if int(a[-1]) == 0 else n + 1), 0, "L2"
        alphas = self._alphas(cap)
        half = cap // 2
        i_half = int(np.searchsorted(a, half, "right"))  # items <= C/2
        i_hi = np.searchsorted(a, cap - alphas, "right")  # items <= C - alpha
        i_lo = np.searchsorted(a, alphas, "left")  # items >= alpha start here
        j1 = n - i_hi
        j2 = i_hi - i_half
        s2 = pre[i_hi] - pre[i_half]
        s3 = pre[i_half] - pre[i_lo]
        room = j2 * cap - s2
        extra = np.maximum(0, -(-(s3 - room) // cap))
        l2 = j1 + j2 + extra
        k = int(np.argmax(l2))
        best, best_alpha, which = int(l2[k]), int(alphas[k]), "L2"
        # cardinality companion: how many J3 items fit beside J2 items, counting items
        cand = alphas[alphas > 0]
        if cand.size > MAX_CARD_ALPHAS:
            cand = cand[np.linspace(0, cand.size - 1, MAX_CARD_ALPHAS).astype(np.int64)]
        for alpha in cand.tolist():
            hi = int(np.searchsorted(a, cap - alpha, "right"))
            lo = int(np.searchsorted(a, alpha, "left"))
            room_items = int(((cap - a[i_half:hi]) // alpha).sum())
            c3 = i_half - lo
            per_bin = cap // alpha
            val = (n - hi) + (hi - i_half) + max(0, -(-(c3 - room_items) // per_bin))
            if val > best:
                best, best_alpha, which = val, alpha, "cardinality"
        return best, best_alpha, which


def lifted_bin_packing(
    q_desc: I64, m: int, low: int, high: int, work_limit: float = 6e7
) -> tuple[int, dict[str, Any]]:
    """Smallest capacity (ticks) in [low, high] that the bin-packing bounds do not rule out.

    ``low`` must already be a proven lower bound and ``high`` a capacity known to be
    feasible (an upper bound). Every capacity refuted on the way is a proof that the
    optimum is larger, so the search is valid whether or not the bound is monotone in C.
    Returns the bound and its evidence (the largest refuted capacity and the alpha).
    """
    bp = BinPackingBound(q_desc)
    # Probe the simple bound itself first: when it is not refuted (the common case on
    # batches with many jobs per node) one evaluation settles the search.
    bins, alpha, which = bp.bins_needed(low)
    if bins <= m:
        return low, {}
    # invariant: lo is refuted, hi is not
    lo, hi, refuted = low, high, low
    evidence: dict[str, Any] = {"refuted_capacity_ticks": low, "alpha": alpha, "rule": which}
    steps = 1
    per_step = float(q_desc.size) * (1 + MAX_CARD_ALPHAS)
    while hi - lo > 1 and steps * per_step < work_limit:
        mid = (lo + hi) // 2
        bins, alpha, which = bp.bins_needed(mid)
        steps += 1
        if bins > m:
            lo = mid
            refuted, evidence = mid, {"refuted_capacity_ticks": mid, "alpha": alpha, "rule": which}
        else:
            hi = mid
    return refuted + 1, evidence


def lower_bounds(inst: Instance, upper: float | None = None) -> Certificate:
    """Every lower bound for an identical-node instance, and the best of them.

    ``upper`` is the makespan of any known plan; it caps the bin-packing search.
    """
    m = inst.m
    p = inst.sorted_desc
    total = inst.total_exact
    simple = simple_bounds(p, m, total)
    k = simple.pop("_k", None)
    bounds: dict[str, float] = dict(simple)
    evidence: dict[str, Any] = {}
    if k is not None:
        evidence["pigeonhole_k"] = {"k": k, "jobs_considered": k * m + 1}
    res = inst.resolution
    tick = Fraction(res)
    q = inst.sorted_desc_ticks
    if q is not None:  # every tick count, and their sum, stays exact
        low = tick_bounds(q, m)
        tick_mean = ticks_to_seconds_down(ceil_div(int(q.sum()), m), res)
        bounds["mean_load"] = max(bounds["mean_load"], tick_mean)
        if upper is not None and math.isfinite(upper) and inst.n > m:
            high = min(math.floor(Fraction(upper) / tick), MAX_TICKS)
            if high > low:
                lb, ev = lifted_bin_packing(q, m, low, high)
                if ev:
                    bounds["bin_packing"] = ticks_to_seconds_down(lb, res)
                    ev["refuted_capacity"] = ticks_to_seconds_down(
                        ev["refuted_capacity_ticks"], res
                    )
                    evidence["bin_packing"] = ev
    source, value = pick(bounds)
    evidence["resolution"] = res
    return Certificate(value=value, source=source, bounds=bounds, evidence=evidence)
