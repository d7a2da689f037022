"""Lower bounds on the cost of a rental (:mod:`.rental`), each proven in exact arithmetic.

A floating-point solver (HiGHS, through scipy) only suggests numbers here; every bound is
evaluated again in integers or fractions from those suggestions, by an argument that holds
for whatever was suggested.

``work`` (:func:`work_bound`): each used node of an offer costs at least its least price
per second of speed-1 work (:meth:`.Market.price_per_work`: boot, billing unit and
``min_billed`` included) times the work it runs. So for any prices ``y_c >= 0`` per class
of jobs with equal ``requires``, at most the cheapest price of an offer that can run it,
the cost is at least ``sum_c W_c y_c - sum_f cap_f max_{c on f} y_c`` over the free farm
nodes ``f`` (the dual of the transportation relaxation: weak duality, checked term by
term). HiGHS suggests the ``y``; they are clipped to the rule exactly.

``cover``: in :mod:`.rental_cover`.

``lp_patterns`` (:func:`pattern_bound`): the cutting-stock relaxation over patterns
(Gilmore and Gomory 1961, 1963 for several stock sizes): a pattern is a set of jobs one
node (a free farm node, or a node of an offer billed ``h`` units) can finish by the
deadline; cover every job at the least cost of patterns. Column generation with HiGHS on
the restricted master and an exact knapsack per offer (durations rounded down to a grain,
capacities rounded down: every real pattern stays a pattern) prices new patterns. The
bound is Farley's (1990): integer duals ``Y >= 0`` (the master's duals scaled and rounded
down), ``V`` the best pattern value of each node type by the exact knapsack, and
``lambda = min_{o,h} cost_oh / V_oh``: then ``lambda Y`` less the farm's best pattern
values is dual feasible, so ``lambda (sum_g d_g Y_g - sum_f V_f)`` is at most the LP
optimum, hence at most the cheapest cost (``max_count`` is dropped: a relaxation).
"""

from __future__ import annotations

import math
from fractions import Fraction
from typing import Any

import numpy as np
from scipy.optimize import linprog

from .budget import Budget
from .rational import floor_ticks
from .rental_plan import Market

# -- work ------------------------------------------------------------------------------


def work_bound(mk: Market) -> tuple[Fraction, dict[str, Any]]:
    """The ``work`` bound (module docstring) and its evidence."""
    names, _ = mk.classes
    work = mk.class_work()
    prices = [mk.price_per_work(o) for o in range(len(mk.offers))]
    cap_y: list[Fraction | None] = []
    for c in range(len(names)):
        ps = [p for o, p in enumerate(prices) if p is not None and mk.offer_serves(o, c)]
        cap_y.append(min(ps) if ps else None)
    farm = [f for f in mk.free_farm if mk.farm_capacity(f) > 0]
    caps = [mk.farm_capacity(f) for f in farm]

    def value(y: list[Fraction]) -> Fraction:
        total = sum((w * yc for w, yc in zip(work, y, strict=True)), Fraction(0))
        for f, cap in zip(farm, caps, strict=True):
            ys = [y[c] for c in range(len(names)) if mk.farm_serves(f, c)]
            total -= cap * max(ys, default=Fraction(0))
        return total

    tries = [[c if c is not None else Fraction(0) for c in cap_y]]
    hint = _transport_duals(mk, work, prices, farm, caps)
    if hint is not None:
        tries.append(
            [
                max(Fraction(0), min(Fraction(h), c) if c is not None else Fraction(h))
                for h, c in zip(hint, cap_y, strict=True)
            ]
        )
    best = max(tries, key=value)
    v = max(Fraction(0), value(best))
    return v, {
        "class_work": [float(w) for w in work],
        "farm_capacity": float(sum(caps, Fraction(0))),
        "prices_per_work": [float(y) for y in best],
    }


def _transport_duals(
    mk: Market,
    work: list[Fraction],
    prices: list[Fraction | None],
    farm: list[int],
    caps: list[Fraction],
) -> list[float] | None:
    """HiGHS's duals of the transportation relaxation (a hint only)."""

    nc = len(work)
    cols: list[tuple[int, int | None, int | None]] = []  # (class, offer, farm position)
    cost = []
    for c in range(nc):
        for o, p in enumerate(prices):
            if p is not None and mk.offer_serves(o, c):
                cols.append((c, o, None))
                cost.append(float(p))
        for k, f in enumerate(farm):
            if mk.farm_serves(f, c):
                cols.append((c, None, k))
                cost.append(0.0)
    if not cols:
        return None
    a = np.zeros((nc + len(farm), len(cols)))
    b = np.zeros(nc + len(farm))
    for i, (c, _, pos) in enumerate(cols):
        a[c, i] = -1.0
        if pos is not None:
            a[nc + pos, i] = 1.0
    b[:nc] = [-float(w) for w in work]
    b[nc:] = [float(x) for x in caps]
    res = linprog(cost, A_ub=a, b_ub=b, bounds=(0, None), method="highs")
    if res.status != 0:
        return None
    return [max(0.0, -float(x)) for x in res.ineqlin.marginals[:nc]]


# -- lp_patterns -----------------------------------------------------------------------

#: the knapsack capacity of the pattern bound is kept below this many grains
MAX_GRAINS = 4000
#: ... and its items (distinct rounded durations per class) below this many
MAX_GROUPS = 400


def pattern_bound(
    mk: Market, budget: Budget, max_rounds: int = 200
) -> tuple[Fraction, dict[str, Any]]:
    """The ``lp_patterns`` bound (module docstring) and its evidence."""
    inst = mk.instance
    _, cls = mk.classes
    types = _node_types(mk)
    if not types:
        return Fraction(0), {"skipped": "no node can run anything"}
    top = max(cap for _, cap, _, _ in types)
    grain = max(inst.resolution, float(top) / MAX_GRAINS)
    q = floor_ticks(inst.durations, grain)
    keys = sorted(set(zip(cls.tolist(), q.tolist(), strict=True)), key=lambda t: (t[0], -t[1]))
    if len(keys) > MAX_GROUPS:
        return Fraction(0), {"skipped": f"{len(keys)} job groups"}
    gidx = {k: i for i, k in enumerate(keys)}
    d = np.zeros(len(keys), dtype=np.int64)
    for k in zip(cls.tolist(), q.tolist(), strict=True):
        d[gidx[k]] += 1
    size = np.array([k[1] for k in keys], dtype=np.int64)
    gcls = [k[0] for k in keys]
    g = Fraction(grain)
    # node types: (serves mask over groups, capacity in grains, cost, farm?)
    ntype = []
    for serves, cap, cost, farm in types:
        mask = np.array([serves[c] for c in gcls], dtype=bool)
        ntype.append((mask, math.floor(cap / g), cost, farm))
    cols: list[tuple[int, np.ndarray]] = []
    ng = len(keys)
    for i in range(ng):  # one job per pattern, on its cheapest node type that serves it
        fits = [t for t, (m, cap, _, _) in enumerate(ntype) if m[i] and cap >= size[i]]
        if fits:
            t = min(fits, key=lambda t: ntype[t][2])
            a = np.zeros(ng, dtype=np.int64)
            a[i] = 1
            cols.append((t, a))
    best = Fraction(0)
    evidence: dict[str, Any] = {"grain_seconds": grain, "groups": ng}
    big = 1e9 * (1 + max(float(c) for _, _, c, _ in ntype))
    for rnd in range(max_rounds):
        if budget.expired():
            evidence["stopped"] = "time"
            break
        nf = sum(1 for _, _, _, farm in ntype if farm)
        prices = [float(ntype[t][2]) for t, _ in cols] + [big] * ng
        a_ub = np.zeros((ng + nf, len(cols) + ng))
        farm_row: dict[int, int] = {}
        for t, (_, _, _, farm) in enumerate(ntype):
            if farm:
                farm_row[t] = ng + len(farm_row)
        for col, (t, a) in enumerate(cols):
            a_ub[:ng, col] = -a
            if t in farm_row:
                a_ub[farm_row[t], col] = 1.0
        a_ub[:ng, len(cols) :] = -np.eye(ng)
        b_ub = np.concatenate((-d.astype(float), np.ones(nf)))
        res = linprog(prices, A_ub=a_ub, b_ub=b_ub, bounds=(0, None), method="highs")
        if res.status != 0:
            break
        y = np.maximum(0.0, -np.asarray(res.ineqlin.marginals[:ng]))
        u = np.maximum(0.0, -np.asarray(res.ineqlin.marginals[ng:]))
        ymax = float(y.max()) if y.size else 0.0
        if ymax <= 0:
            break
        yint = np.floor(y * ((1 << 40) / ymax)).astype(np.int64)
        value, new, info = _farley(ntype, size, d, yint)
        if value > best:
            best, evidence["farley"] = value, info
        added = 0
        for t, a, _ in new:
            gain = float(y @ a) - (float(u[farm_row[t] - ng]) if t in farm_row else 0.0)
            if gain > float(ntype[t][2]) * (1 + 1e-9) + 1e-9:
                cols.append((t, a))
                added += 1
        evidence["rounds"] = rnd + 1
        evidence["lp_value_hint"] = float(res.fun)
        if not added:
            break
    return best, evidence


def _node_types(mk: Market) -> list[tuple[list[bool], Fraction, Fraction, bool]]:
    """(serves per class, work capacity, cost, is a free farm node) of every node type:
    each free farm node, and each offer at billed units ``h_i`` (all of them, or 64 spread
    over the range), with the capacity of the next listed units ``h_(i+1)`` and the cost
    of ``h_i``: a node billed ``h`` units with ``h_i <= h <= h_(i+1)`` does no more work
    and costs no less, so every real node is one of these types."""
    names, _ = mk.classes
    out = []
    for f in mk.free_farm:
        cap = mk.farm_capacity(f)
        if cap > 0:
            out.append(([mk.farm_serves(f, c) for c in range(len(names))], cap, Fraction(0), True))
    for o in range(len(mk.offers)):
        lo, hi = mk.hmin(o), mk.htop(o)
        hs = sorted({lo, hi, *np.linspace(lo, hi, 64).round().astype(int).tolist()})
        serves = [mk.offer_serves(o, c) for c in range(len(names))]
        for h, nxt in zip(hs, [*hs[1:], hs[-1]], strict=True):
            cap = mk.capacity(o, nxt)
            if cap > 0:
                out.append((serves, cap, mk.unit_cost(o) * h, False))
    return out


def _farley(
    ntype: list[tuple[np.ndarray, int, Fraction, bool]],
    size: np.ndarray,
    d: np.ndarray,
    yint: np.ndarray,
) -> tuple[Fraction, list[tuple[int, np.ndarray, int]], dict[str, Any]]:
    """Farley's bound from the integer duals ``yint`` (exact knapsacks), and the best
    pattern of every node type with its value (for new columns)."""
    by_mask: dict[bytes, list[int]] = {}
    for t, (mask, _, _, _) in enumerate(ntype):
        by_mask.setdefault(mask.tobytes(), []).append(t)
    value = [0] * len(ntype)
    pats: list[tuple[int, np.ndarray, int]] = []
    for ts in by_mask.values():
        mask = ntype[ts[0]][0]
        cap = max(ntype[t][1] for t in ts)
        dp, take, chunks = _knapsack(size, d, yint, mask, cap)
        for t in ts:
            c = ntype[t][1]
            value[t] = int(dp[c])
            pats.append((t, _pattern(take, chunks, size, c, len(size)), value[t]))
    total = int((d * yint).sum())
    farm = sum(v for v, (_, _, _, f) in zip(value, ntype, strict=True) if f)
    rented = [(ntype[t][2], value[t]) for t in range(len(ntype)) if not ntype[t][3]]
    ratios = [cost / v for cost, v in rented if v > 0]
    if total - farm <= 0 or not ratios:
        return Fraction(0), pats, {}
    lam = min(ratios)
    return (
        lam * (total - farm),
        pats,
        {
            "dual_total": total,
            "farm_pattern_values": farm,
            "lambda": float(lam),
        },
    )


def _knapsack(
    size: np.ndarray, d: np.ndarray, y: np.ndarray, mask: np.ndarray, cap: int
) -> tuple[np.ndarray, np.ndarray, list[tuple[int, int]]]:
    """Exact bounded knapsack over every capacity up to ``cap`` (binary split of the
    counts, integer values): the best value table, the take table and the chunks."""
    dp = np.zeros(cap + 1, dtype=np.int64)
    chunks: list[tuple[int, int]] = []
    for i in np.flatnonzero(mask & (y > 0) & (size <= cap)).tolist():
        left, k = min(int(d[i]), cap // max(1, int(size[i])) if size[i] else int(d[i])), 1
        while left > 0:
            c = min(k, left)
            chunks.append((i, c))
            left -= c
            k *= 2
    take = np.zeros((len(chunks), cap + 1), dtype=bool)
    for t, (i, c) in enumerate(chunks):
        w, v = c * int(size[i]), c * int(y[i])
        if w == 0:
            dp += v
            take[t, :] = True
            continue
        cand = dp[:-w] + v if w <= cap else dp[:0]
        better = cand > dp[w:]
        take[t, w:] = better
        dp[w:] = np.where(better, cand, dp[w:])
    return dp, take, chunks


def _pattern(
    take: np.ndarray, chunks: list[tuple[int, int]], size: np.ndarray, cap: int, ng: int
) -> np.ndarray:
    """The pattern behind the knapsack's best value at ``cap``."""
    out = np.zeros(ng, dtype=np.int64)
    c = cap
    for t in range(len(chunks) - 1, -1, -1):
        if take[t, c]:
            i, k = chunks[t]
            out[i] += k
            c -= k * int(size[i])
    return out
