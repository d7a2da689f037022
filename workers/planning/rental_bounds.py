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

``cover`` (:func:`cover_bound`): integer counts. Whatever the plan, the nodes of offer
``o`` are ``n`` nodes billed ``H`` units in all, and can do at most
``min(s (U H - n b), s n (D - b))`` work (each node ``s (min(h U, D) - b)``); for every set
``A`` of classes, the work of ``A`` beyond the free farm nodes that can run it must fit on
the offers that can. The least ``sum_o price_o U H_o / 3600`` under these constraints is a
lower bound; it is found exactly by a depth-first branch and bound in integers (work
scaled by a power of two, cost by a common denominator), with the remaining offers priced
at their least price per work to cut. Its optimum also guides the plan search.

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
from dataclasses import dataclass
from fractions import Fraction
from itertools import combinations
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


# -- cover -----------------------------------------------------------------------------


@dataclass
class Cover:
    """The ``cover`` relaxation's optimum: its cost, and per offer billed units and
    nodes (``complete`` False: the search stopped early, ``value`` is no bound)."""

    value: Fraction
    units: dict[int, int]
    nodes: dict[int, int]
    complete: bool
    visited: int


def hall_sets(mk: Market) -> list[tuple[frozenset[int], Fraction, frozenset[int]]]:
    """(classes, work beyond the free farm that can run them, offers that can run them)
    for every set of classes (singletons and the whole when there are more than 6)."""
    names, _ = mk.classes
    work = mk.class_work()
    nc = len(names)
    subsets: list[tuple[int, ...]] = []
    if nc <= 6:
        for r in range(1, nc + 1):
            subsets += combinations(range(nc), r)
    else:
        subsets = [(c,) for c in range(nc)] + [tuple(range(nc))]
    best: dict[frozenset[int], tuple[frozenset[int], Fraction]] = {}
    for sub in subsets:
        offers = frozenset(o for o in range(len(mk.offers)) for c in sub if mk.offer_serves(o, c))
        farm = {f for f in mk.free_farm for c in sub if mk.farm_serves(f, c)}
        need = sum((work[c] for c in sub), Fraction(0))
        need -= sum((mk.farm_capacity(f) for f in farm), Fraction(0))
        if need > 0 and (offers not in best or best[offers][1] < need):
            best[offers] = (frozenset(sub), need)
    return [(sub, need, offers) for offers, (sub, need) in best.items()]


def cover_bound(
    mk: Market,
    upper: Fraction | None,
    budget: Budget,
    *,
    extra: Fraction = Fraction(0),
    max_visits: int = 200_000,
) -> Cover:
    """The ``cover`` relaxation (module docstring) by branch and bound. ``upper``: a
    known cost (a plan's): the search looks for cheaper ones only, and when it finds none
    the bound is ``upper``. ``extra`` work is added to every set (a guide, not a bound)."""
    sets = hall_sets(mk)
    offers = [o for o in range(len(mk.offers)) if mk.capacity(o, mk.htop(o)) > 0]
    d = mk.d_exact
    den = [need.denominator for _, need, _ in sets] + [d.denominator]
    for o in offers:
        off = mk.offers[o]
        den += [Fraction(off.speed).denominator * Fraction(off.boot).denominator * d.denominator]
    scale = math.lcm(*den)
    cden = math.lcm(*[mk.unit_cost(o).denominator for o in offers] or [1])
    unit = mk.unit
    par: dict[int, tuple[int, int, int, int, int, int, int, Fraction]] = {}
    for o in offers:
        off = mk.offers[o]
        s, b = Fraction(off.speed), Fraction(off.boot)
        a1, b1, c2 = s * unit * scale, s * b * scale, s * (d - b) * scale
        cost = mk.unit_cost(o) * cden
        ratio = cost * max(d / unit, Fraction(mk.hmin(o))) / c2  # least cost per work
        par[o] = (
            int(a1),
            int(b1),
            int(c2),
            int(cost),
            mk.hmin(o),
            mk.htop(o),
            off.max_count,
            ratio,
        )
    offers.sort(key=lambda o: (-par[o][7], o))  # dearest per work first, cheapest last
    needs = [int((need + extra) * scale) for _, need, _ in sets]
    member = {o: [i for i, (_, _, offs) in enumerate(sets) if o in offs] for o in offers}
    ns = len(sets)
    # per set and depth: the least ratio and the most capacity of the offers from there on
    ratio_from = [[Fraction(-1)] * (len(offers) + 1) for _ in range(ns)]
    cap_from = [[0] * (len(offers) + 1) for _ in range(ns)]
    for a in range(ns):
        for i in range(len(offers) - 1, -1, -1):
            o = offers[i]
            ratio_from[a][i] = ratio_from[a][i + 1]
            cap_from[a][i] = cap_from[a][i + 1]
            if a in member[o]:
                r = par[o][7]
                old = ratio_from[a][i]
                ratio_from[a][i] = r if old < 0 else min(old, r)
                cap_from[a][i] += par[o][2] * par[o][6]
    best_int = None if upper is None else math.ceil(upper * cden)
    best_sol: dict[int, tuple[int, int]] | None = None
    chosen: dict[int, tuple[int, int]] = {}
    state = {"visits": 0, "stopped": False}

    def capacity(o: int, h: int) -> tuple[int, int] | None:
        a1, b1, c2, _, hmin, htop, mc, _ = par[o]
        if h == 0:
            return 0, 0
        lo, hi = max(1, -(-h // htop)), mc if hmin == 0 else min(mc, h // hmin)
        if lo > hi:
            return None
        cross = a1 * h // (b1 + c2)
        best = None
        for n in {lo, hi, min(max(cross, lo), hi), min(max(cross + 1, lo), hi)}:
            v = min(a1 * h - b1 * n, c2 * n)
            if best is None or v > best[0] or (v == best[0] and n < best[1]):
                best = (v, n)
        return best

    def covering(o: int, need: int) -> int | None:
        """The fewest units of offer ``o`` whose capacity reaches ``need``."""
        a1, b1, c2, _, hmin, htop, mc, _ = par[o]
        n = max(1, -(-need // c2))
        while n <= mc:
            h = max(n * hmin, -(-(need + b1 * n) // a1))
            if h <= n * htop:  # more nodes need more units (boot, least units)
                return h
            n += 1
        return None

    def rest(i: int, deficit: list[int]) -> int | None:
        out = 0
        for a, dd in enumerate(deficit):
            if dd > 0:
                if cap_from[a][i] < dd or ratio_from[a][i] < 0:
                    return None
                out = max(out, math.ceil(ratio_from[a][i] * dd))
        return out

    def dfs(i: int, cost: int, deficit: list[int]) -> None:
        nonlocal best_int, best_sol
        state["visits"] += 1
        if state["visits"] > max_visits or (state["visits"] & 255 == 0 and budget.expired()):
            state["stopped"] = True
            return
        if all(dd <= 0 for dd in deficit):
            if best_int is None or cost < best_int:
                best_int, best_sol = cost, dict(chosen)
            return
        if i == len(offers):
            return
        r = rest(i, deficit)
        if r is None or (best_int is not None and cost + r >= best_int):
            return
        o = offers[i]
        a1, _, _, uc, _, htop, mc, _ = par[o]
        need = max([deficit[a] for a in member[o]] or [0])
        if need <= 0:
            dfs(i + 1, cost, deficit)
            return
        top = covering(o, need)
        hs: range | list[int]
        if i == len(offers) - 1:  # the last offer covers what is left at its least
            hs = [] if top is None else [top]
        else:
            hs = range((htop * mc if top is None else top) + 1)
        for h in hs:
            if state["stopped"]:
                break
            if best_int is not None:
                # a lower bound for every h' >= h: the units' cost, plus the deficits
                # left priced at the cheapest later offers (capacity at most a1 h')
                lb = cost + uc * h
                for a in member[o]:
                    ra = ratio_from[a][i + 1]
                    if ra >= 0 and deficit[a] > 0 and uc >= ra * a1:
                        lb = max(lb, math.ceil(cost + ra * deficit[a] + (uc - ra * a1) * h))
                if lb >= best_int:
                    break
            got = capacity(o, h)
            if got is None:
                continue
            chosen[o] = (h, got[1])
            nd = list(deficit)
            for a in member[o]:
                nd[a] -= got[0]
            dfs(i + 1, cost + uc * h, nd)
            del chosen[o]

    dfs(0, 0, needs)
    sol = best_sol or {}
    value = Fraction(best_int, cden) if best_int is not None else Fraction(0)
    return Cover(
        value=value,
        units={o: h for o, (h, _) in sol.items()},
        nodes={o: n for o, (_, n) in sol.items()},
        complete=not state["stopped"] and best_int is not None,
        visited=state["visits"],
    )


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
