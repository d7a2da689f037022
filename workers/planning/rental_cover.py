"""The ``cover`` lower bound on the cost of a rental (:mod:`.rental`), searched in integers.

The relaxation. Whatever the plan, the nodes of offer ``o`` are ``n`` nodes billed ``H``
units in all, and can do at most ``f_o(H) = max_n min(s (U H - n b), s n (D - b))`` work
(each node ``s (min(h U, D) - b)``, ``n`` within what ``H``, ``max_count`` and the least
billed units allow). For every set ``A`` of classes (jobs with equal ``requires``), the
work of ``A`` beyond what the free farm nodes that can run it can do must fit on the
offers that can (:func:`hall_sets`). Every duration is a whole multiple of the grain
``g`` (:attr:`.Market.grain`), so a free farm node does at most its capacity rounded down
to a multiple of ``g``. The least ``sum_o price_o U H_o / 3600`` under these constraints is
a lower bound on the cost; :func:`cover_bound` finds it exactly by a depth-first branch
and bound in integers (work scaled to whole numbers, cost by a common denominator), the
offers dearest per work first and the last one's units solved directly.

Two facts about whole jobs tighten it, each true of every plan:

* a used node runs a job, so it is billed at least the units that reach the end of the
  shortest job it can run (:func:`_least_units`);
* splits (:class:`Split`, :func:`splits`): for a set ``A`` of classes, the jobs of other
  classes that run on nodes serving ``A`` fit in the room those nodes have beyond A's work,
  at most ``sum_{o serving A} f_o(H_o) - need_A``; when that room is less than the
  shortest job of another class those nodes can run, none runs there, and every set ``C``
  of the other classes must fit on the free farm nodes and offers that serve no class of
  ``A`` (a Hall condition of its own). The search enforces those rows once the last offer
  serving ``A`` has its units.

Pruning, each argument exact:

* ``rest``: every offer costs at least ``rho_o`` per unit of work it can do, where
  ``rho_o = price_o max(D / U, hmin) / (s (D - b))`` (:func:`_least_ratio`: true of the
  pooled capacity whatever ``n``), so each set's deficit costs at least the least
  ``rho`` of the offers left that serve it.
* ``waste``: for any prices ``y_A >= 0`` per unit of work of each set, ``pi_o`` the sum
  over the sets offer ``o`` serves, and ``z_o = max(0, pi_o - rho_o)``, every solution has
  ``cost >= sum_A y_A need_A - sum_o z_o C_o + sum_o w_o(H_o)`` with ``C_o`` the most work
  of all ``max_count`` nodes and ``w_o(H) = c_o H - pi_o f_o(H) + z_o C_o >= 0`` (weak
  duality term by term; ``w_o >= 0`` because ``c_o H >= rho_o f_o(H)``). So the wastes of
  the offers chosen so far add up, and a branch whose wastes already pass the slack to
  the best known cost is cut. HiGHS suggests ``y`` (the LP of the ``rho`` prices); the
  suggestion is rounded down to integers over a power of two and used as it is: the
  argument holds for any ``y >= 0``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from itertools import combinations

import numpy as np
from scipy.optimize import linprog

from .budget import Budget
from .rental_plan import Market


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
    for every set of classes (singletons and the whole when there are more than 6); a
    farm node's capacity rounded down to the grain."""
    names, _ = mk.classes
    work = mk.class_work()
    nc = len(names)
    subsets: list[tuple[int, ...]] = []
    if nc <= 6:
        for r in range(1, nc + 1):
            subsets += combinations(range(nc), r)
    else:
        subsets = [(c,) for c in range(nc)] + [tuple(range(nc))]
    farm_cap = {f: mk.farm_room(f) for f in mk.free_farm}
    best: dict[frozenset[int], tuple[frozenset[int], Fraction]] = {}
    for sub in subsets:
        offers = frozenset(o for o in range(len(mk.offers)) for c in sub if mk.offer_serves(o, c))
        farm = {f for f in mk.free_farm for c in sub if mk.farm_serves(f, c)}
        need = sum((work[c] for c in sub), Fraction(0))
        need -= sum((farm_cap[f] for f in farm), Fraction(0))
        if need > 0 and (offers not in best or best[offers][1] < need):
            best[offers] = (frozenset(sub), need)
    return [(sub, need, offers) for offers, (sub, need) in best.items()]


@dataclass(frozen=True)
class Split:
    """A set ``A`` of classes and what follows when the room of the nodes serving it,
    beyond its work, is less than the shortest job of another class they can run: then
    no job of another class runs on them (a job fills at least its duration), so every
    set ``C`` of the other classes fits on the nodes that serve no class of ``A``."""

    offers: frozenset[int]  # the offers serving a class of A
    need: Fraction  # A's work beyond the free farm nodes serving it (may be <= 0)
    shortest: Fraction | None  # None: those nodes run no job of another class
    rows: tuple[tuple[frozenset[int], Fraction], ...]  # per C: offers serving C, not A; need


def _subsets(items: list[int]) -> list[tuple[int, ...]]:
    """Every nonempty subset of up to 4 items; else each one and all of them."""
    if len(items) <= 4:
        return [c for r in range(1, len(items) + 1) for c in combinations(items, r)]
    return [(c,) for c in items] + [tuple(items)]


def splits(mk: Market) -> list[Split]:
    """The :class:`Split` of every set of classes but the whole (:func:`_subsets`) with a
    set ``C`` of positive need."""
    names, cls = mk.classes
    nc = len(names)
    work = mk.class_work()
    p = mk.instance.durations
    shortest_of = [Fraction(float(p[cls == c].min())) for c in range(nc)]
    farm_cap = {f: mk.farm_room(f) for f in mk.free_farm}

    def offers_of(sub: tuple[int, ...]) -> frozenset[int]:
        return frozenset(o for o in range(len(mk.offers)) for c in sub if mk.offer_serves(o, c))

    def farm_of(sub: tuple[int, ...]) -> set[int]:
        return {f for f in mk.free_farm for c in sub if mk.farm_serves(f, c)}

    out = []
    for a in _subsets(list(range(nc))) if nc > 1 else []:
        if len(a) == nc:
            continue
        rest = [c for c in range(nc) if c not in a]
        oa, fa = offers_of(a), farm_of(a)
        rows: dict[frozenset[int], Fraction] = {}  # per set of offers, the largest need
        for c in _subsets(rest):
            need = sum((work[k] for k in c), Fraction(0))
            need -= sum((farm_cap[f] for f in farm_of(c) - fa), Fraction(0))
            offs = offers_of(c) - oa
            if need > 0 and need > rows.get(offs, Fraction(0)):
                rows[offs] = need
        if not rows:
            continue
        other = [
            c
            for c in rest
            if any(mk.offer_serves(o, c) for o in oa) or any(mk.farm_serves(f, c) for f in fa)
        ]
        need_a = sum((work[k] for k in a), Fraction(0))
        need_a -= sum((farm_cap[f] for f in fa), Fraction(0))
        shortest = min(shortest_of[c] for c in other) if other else None
        out.append(Split(oa, need_a, shortest, tuple(rows.items())))
    return out


@dataclass(frozen=True)
class _Par:
    """One offer in scaled integers: capacity ``min(a1 h - b1 n, c2 n)``, ``uc`` per
    billed unit, least and most units per node, ``max_count``, least cost per work."""

    a1: int
    b1: int
    c2: int
    uc: int
    hmin: int
    htop: int
    mc: int
    ratio: Fraction

    def capacity(self, h: int) -> tuple[int, int] | None:
        """The most work ``h`` units can do and the fewest nodes doing it (None: no
        count of nodes is billed exactly ``h`` units)."""
        if h == 0:
            return 0, 0
        lo = max(1, -(-h // self.htop))
        hi = self.mc if self.hmin == 0 else min(self.mc, h // self.hmin)
        if lo > hi:
            return None
        cross = self.a1 * h // (self.b1 + self.c2)
        best: tuple[int, int] | None = None
        for n in {lo, hi, min(max(cross, lo), hi), min(max(cross + 1, lo), hi)}:
            v = min(self.a1 * h - self.b1 * n, self.c2 * n)
            if best is None or v > best[0] or (v == best[0] and n < best[1]):
                best = (v, n)
        return best

    def covering(self, need: int) -> int | None:
        """The fewest units whose capacity reaches ``need`` (None: not even all nodes)."""
        if need <= 0:
            return 0
        n = max(1, -(-need // self.c2))
        while n <= self.mc:
            h = max(n * self.hmin, -(-(need + self.b1 * n) // self.a1))
            if h <= n * self.htop:  # more nodes need more units (boot, least units)
                return h
            n += 1
        return None


def _least_units(mk: Market) -> list[int | None]:
    """Per offer, the fewest units a node of it that runs a job is billed: its least
    billed units, and enough for the shortest job it can run (a used node runs one);
    None when no node of it can run any job by the deadline."""
    names, cls = mk.classes
    p = mk.instance.durations
    shortest = [Fraction(float(p[cls == c].min())) for c in range(len(names))]
    out: list[int | None] = []
    for o, off in enumerate(mk.offers):
        runs = [shortest[c] for c in range(len(names)) if mk.offer_serves(o, c)]
        if not runs or mk.capacity(o, mk.htop(o)) < min(runs) or mk.capacity(o, mk.htop(o)) <= 0:
            out.append(None)
            continue
        need = Fraction(off.boot) + min(runs) / Fraction(off.speed)  # seconds from the start
        out.append(min(mk.htop(o), max(mk.hmin(o), math.ceil(need / mk.unit))))
    return out


def _least_ratio(uc: int, d_units: Fraction, hmin: int, c2: int) -> Fraction:
    """``rho``: the least cost per work of any count of nodes billed ``H`` units in all.
    With ``n <= U H / D`` the capacity is at most ``c2 n <= c2 U H / D``; with more nodes
    at most ``a1 H - b1 n < a1 H (D - b) / D = c2 U H / D``; and ``H >= n hmin`` with
    capacity ``<= c2 n``: so cost / work ``>= uc max(D / U, hmin) / c2``."""
    return Fraction(uc) * max(d_units, Fraction(hmin)) / c2


def _dual_hint(
    sets: list[tuple[list[int], int]], offers: list[int], par: dict[int, _Par]
) -> list[float] | None:
    """HiGHS's duals of ``min sum rho_o w_o, sum_{o in A} w_o >= need_A, w_o <= C_o``
    (a hint: any prices >= 0 give a valid waste bound)."""
    if not sets or not offers:
        return None
    top = max(float(par[o].ratio) for o in offers) or 1.0
    big = max(need for _, need in sets) or 1
    a = np.zeros((len(sets), len(offers)))
    for i, (member, _) in enumerate(sets):
        for k, o in enumerate(offers):
            a[i, k] = -1.0 if o in member else 0.0
    b = np.array([-need / big for _, need in sets])
    cost = [float(par[o].ratio) / top for o in offers]
    bounds = [(0.0, par[o].c2 * par[o].mc / big) for o in offers]
    res = linprog(cost, A_ub=a, b_ub=b, bounds=bounds, method="highs")
    if res.status != 0:
        return None
    return [max(0.0, -float(x)) * top for x in res.ineqlin.marginals]


class _Search:
    """The branch and bound of :func:`cover_bound` (module docstring)."""

    def __init__(self, mk: Market, extra: Fraction) -> None:
        sets = hall_sets(mk)
        cuts = splits(mk)
        least = _least_units(mk)
        offers = [o for o in range(len(mk.offers)) if least[o] is not None]
        # rows: the Hall sets (enforced), then per split its own row (tracked: its room is
        # minus its deficit) and its rows C (enforced once the split's room is known short)
        rows: list[tuple[frozenset[int], Fraction]] = [(offs, need) for _, need, offs in sets]
        nb = len(rows)
        spec: list[tuple[int, Fraction | None, list[int]]] = []
        for cut in cuts:
            track = len(rows)
            rows.append((cut.offers, cut.need))
            rows += list(cut.rows)
            spec.append((track, cut.shortest, list(range(track + 1, len(rows)))))
        d = mk.d_exact
        den = [need.denominator for _, need in rows] + [d.denominator, extra.denominator]
        den += [sh.denominator for _, sh, _ in spec if sh is not None]
        for o in offers:
            off = mk.offers[o]
            den += [Fraction(off.speed).denominator * Fraction(off.boot).denominator]
        self.scale = scale = math.lcm(*den) * d.denominator
        self.cden = math.lcm(*[mk.unit_cost(o).denominator for o in offers] or [1])
        self.par: dict[int, _Par] = {}
        for o in offers:
            off = mk.offers[o]
            s, b = Fraction(off.speed), Fraction(off.boot)
            c2 = int(s * (d - b) * scale)
            uc = int(mk.unit_cost(o) * self.cden)
            self.par[o] = _Par(
                int(s * mk.unit * scale),
                int(s * b * scale),
                c2,
                uc,
                least[o],  # type: ignore[arg-type]
                mk.htop(o),
                off.max_count,
                _least_ratio(uc, d / mk.unit, least[o], c2),  # type: ignore[arg-type]
            )
        offers.sort(key=lambda o: (-self.par[o].ratio, o))  # dearest first, cheapest last
        self.offers = offers
        pos = {o: i for i, o in enumerate(offers)}
        self.needs = [
            int((need + (extra if a < nb else 0)) * scale) for a, (_, need) in enumerate(rows)
        ]
        ns = len(rows)
        self.member = {o: [a for a, (offs, _) in enumerate(rows) if o in offs] for o in offers}
        # per row and depth: the least ratio and the most capacity of the offers from there
        self.ratio_from = [[Fraction(-1)] * (len(offers) + 1) for _ in range(ns)]
        self.cap_from = [[0] * (len(offers) + 1) for _ in range(ns)]
        for a in range(ns):
            for i in range(len(offers) - 1, -1, -1):
                p = self.par[offers[i]]
                self.ratio_from[a][i] = self.ratio_from[a][i + 1]
                self.cap_from[a][i] = self.cap_from[a][i + 1]
                if a in self.member[offers[i]]:
                    old = self.ratio_from[a][i]
                    self.ratio_from[a][i] = p.ratio if old < 0 else min(old, p.ratio)
                    self.cap_from[a][i] += p.c2 * p.mc
        self._prices([(self.member_of(a), self.needs[a]) for a in range(nb)])
        self.yq += [0] * (ns - nb)
        # the Hall sets offer i is the last to serve: their surplus is known once chosen
        self.closing = {
            o: [a for a in self.member[o] if a < nb and self.cap_from[a][i + 1] == 0]
            for i, o in enumerate(offers)
        }
        # splits: (tracked row, shortest job scaled or None, mask of its rows C), each
        # settled when the last offer serving A is chosen (at the start when none does)
        self.cuts = [
            (t, None if sh is None else int(sh * scale), sum(1 << r for r in cs))
            for t, sh, cs in spec
        ]
        self.cuts_at: dict[int | None, list[int]] = {}
        for k, cut in enumerate(cuts):
            last = max((pos[o] for o in cut.offers if o in pos), default=None)
            self.cuts_at.setdefault(None if last is None else offers[last], []).append(k)
        self.base_rows = (1 << nb) - 1
        # per row and depth: the one offer from there on that serves it (else None)
        self.only_from: list[list[int | None]] = []
        for a in range(ns):
            row: list[int | None] = []
            for i in range(len(offers) + 1):
                later = [o for o in offers[i:] if a in self.member[o]]
                row.append(later[0] if len(later) == 1 else None)
            self.only_from.append(row)

    def member_of(self, a: int) -> list[int]:
        return [o for o in self.offers if a in self.member[o]]

    def _prices(self, sets: list[tuple[list[int], int]]) -> None:
        """The waste bound's integer prices: ``yq / q`` per set, ``piq``, ``zq`` and the
        base ``base_q = q (sum y need - sum z C)``."""
        hint = _dual_hint(sets, self.offers, self.par) or [0.0] * len(sets)
        top = max(hint, default=0.0)
        shift = max(0, 40 - math.frexp(top)[1]) if top > 0 else 0
        self.q = q = 1 << shift
        yq = [math.floor(y * q) if y > 0 else 0 for y in hint]
        self.piq: dict[int, int] = {}
        self.zq: dict[int, int] = {}
        base = sum(y * need for y, (_, need) in zip(yq, sets, strict=True))
        for o in self.offers:
            p = self.par[o]
            self.piq[o] = sum(yq[a] for a in self.member[o] if a < len(yq))
            self.zq[o] = max(0, math.ceil(self.piq[o] - p.ratio * q))
            base -= self.zq[o] * p.c2 * p.mc
        self.base_q = base
        self.yq = yq

    def waste(self, o: int, h: int, cap: int) -> int:
        """``q w_o(h)`` for ``h`` units doing at most ``cap`` work (module docstring)."""
        p = self.par[o]
        return p.uc * h * self.q - self.piq[o] * cap + self.zq[o] * p.c2 * p.mc

    def run(self, upper: Fraction | None, budget: Budget, max_visits: int) -> Cover:
        self.best = None if upper is None else math.ceil(upper * self.cden)
        self.sol: dict[int, tuple[int, int]] | None = None
        self.chosen: dict[int, tuple[int, int]] = {}
        self.visits, self.max_visits, self.budget = 0, max_visits, budget
        self.stopped = False
        deficit = list(self.needs)
        active, pending = self._settle(None, deficit, self.base_rows, (1 << len(self.cuts)) - 1)
        self.dfs(0, 0, 0, deficit, active, pending)
        sol: dict[int, tuple[int, int]] = self.sol or {}
        value = Fraction(self.best, self.cden) if self.best is not None else Fraction(0)
        return Cover(
            value=value,
            units={o: h for o, (h, _) in sol.items()},
            nodes={o: n for o, (_, n) in sol.items()},
            complete=not self.stopped and self.best is not None,
            visited=self.visits,
        )

    def _settle(
        self, o: int | None, deficit: list[int], active: int, pending: int
    ) -> tuple[int, int]:
        """The splits settled once offer ``o`` is chosen: a room short of the shortest
        other job enforces the split's rows."""
        for k in self.cuts_at.get(o, ()):
            if pending >> k & 1:
                t, shortest, rows = self.cuts[k]
                if shortest is None or -deficit[t] < shortest:
                    active |= rows
                pending &= ~(1 << k)
        return active, pending

    def _done(self, deficit: list[int], active: int, pending: int) -> bool:
        """Every enforced row covered, and so every split still open if its room were
        final (the offers left at no units)."""
        if any(dd > 0 and active >> a & 1 for a, dd in enumerate(deficit)):
            return False
        for k in range(len(self.cuts)):
            t, shortest, rows = self.cuts[k]
            if (
                pending >> k & 1
                and (shortest is None or -deficit[t] < shortest)
                and any(dd > 0 and rows >> a & 1 for a, dd in enumerate(deficit))
            ):
                return False
        return True

    def _live(self, active: int, pending: int) -> int:
        """The rows enforced now or perhaps later."""
        for k in range(len(self.cuts)):
            if pending >> k & 1:
                active |= self.cuts[k][2]
        return active

    def _tick(self) -> bool:
        self.visits += 1
        if self.visits > self.max_visits or (self.visits & 255 == 0 and self.budget.expired()):
            self.stopped = True
        return self.stopped

    def _rest(self, i: int, deficit: list[int], active: int) -> int | None:
        """The least cost of covering the enforced deficits with the offers from ``i``
        on, by their least ratios (None: they cannot)."""
        out = 0
        for a, dd in enumerate(deficit):
            if dd > 0 and active >> a & 1:
                if self.cap_from[a][i] < dd or self.ratio_from[a][i] < 0:
                    return None
                out = max(out, math.ceil(self.ratio_from[a][i] * dd))
        return out

    def dfs(
        self, i: int, cost: int, wq: int, deficit: list[int], active: int, pending: int
    ) -> None:
        if self._tick():
            return
        if self._done(deficit, active, pending):
            if self.best is None or cost < self.best:
                self.best, self.sol = cost, dict(self.chosen)
            return
        if i == len(self.offers):
            return
        r = self._rest(i, deficit, active)
        if r is None:
            return
        if self.best is not None and (
            cost + r >= self.best or self.base_q + wq >= self.best * self.q
        ):
            return
        o = self.offers[i]
        p = self.par[o]
        live = self._live(active, pending)
        need = max([deficit[a] for a in self.member[o] if live >> a & 1] or [0])
        state = (active, pending)
        if need <= 0:
            self.dfs(i + 1, cost, wq, deficit, *self._settle(o, deficit, *state))
            return
        top = p.covering(need)
        if i == len(self.offers) - 1:  # the last offer covers what is left at its least
            if top is not None:
                self._step(i, o, top, cost, wq, deficit, state)
            return
        start = 0  # units the later offers cannot do without
        for a in range(len(deficit)):
            short = deficit[a] - self.cap_from[a][i + 1]
            if short > 0 and active >> a & 1:
                h = p.covering(short) if a in self.member[o] else None
                if h is None:
                    return
                start = max(start, h)
        end = p.htop * p.mc if top is None else top
        h = start
        while h <= end and not self.stopped:
            if h > start and self._past(i, o, h, cost, wq, deficit, active):
                break
            nxt = self._skip(i, o, h, cost, deficit, active)
            if nxt > h:
                self._tick()
                h = nxt
                continue
            self._step(i, o, h, cost, wq, deficit, state)
            h += 1

    def _skip(self, i: int, o: int, h: int, cost: int, deficit: list[int], active: int) -> int:
        """For the offer before the last (``L``): the first ``h' >= h`` not cut by the
        last offer's least bill. While ``h'`` units of ``o`` (capacity at most ``a1 h' -
        b1 n``) leave ``L`` a need ``N > (k - 1) c2_L``, ``L`` runs ``k`` nodes or more and
        is billed at least ``max(k hmin_L, (N + b1_L k) / a1_L)`` units; when ``o``'s
        unit costs no less than the work it takes from ``L`` at ``L``'s unit price, the
        total grows with ``h'`` until ``N`` may drop to ``(k - 1) c2_L``."""
        if self.best is None or i != len(self.offers) - 2:
            return h
        last = self.offers[-1]
        p, pl = self.par[o], self.par[last]
        if p.uc * pl.a1 < pl.uc * p.a1:
            return h
        rows = [a for a in self.member[last] if active >> a & 1]
        both = [deficit[a] for a in rows if a in self.member[o]]
        only = [deficit[a] for a in rows if a not in self.member[o]]
        if not both:
            return h
        boots = p.b1 * -(-h // p.htop)  # h' >= h units: this many boots at least
        top = max(both) + boots  # N(h') >= top - a1 h'
        k = -(-(top - p.a1 * h) // pl.c2)
        if k <= 0:
            return h
        need = max([top - p.a1 * h, *only])
        least = max(k * pl.hmin * pl.a1, need + pl.b1 * k)  # a1_L times L's least units
        if (cost + p.uc * h) * pl.a1 + pl.uc * least < self.best * pl.a1:
            return h
        return max(h + 1, -(-(top - (k - 1) * pl.c2) // p.a1))

    def _past(
        self, i: int, o: int, h: int, cost: int, wq: int, deficit: list[int], active: int
    ) -> bool:
        """Whether no ``h' >= h`` units of offer ``o`` can lead below the best cost:
        their capacity is at most ``a1 h' - b1 n`` (``n >= h / htop`` nodes), the
        enforced deficits left cost the least ratio of the later offers, and the waste
        grows with ``h'`` for an offer dearer than its prices."""
        if self.best is None:
            return False
        p = self.par[o]
        if p.uc * h >= self.best - cost:
            return True
        boots = p.b1 * max(1, -(-h // p.htop))  # h' >= h units: at least this many nodes
        for a in self.member[o]:
            ra = self.ratio_from[a][i + 1]
            if (
                active >> a & 1
                and ra >= 0
                and deficit[a] > 0
                and p.uc >= ra * p.a1
                and cost + p.uc * h + ra * (deficit[a] - p.a1 * h + boots) >= self.best
            ):
                return True
        # with the surplus of the sets it closes, y_a (f - deficit_a), added to its waste
        pi = self.piq[o] - sum(self.yq[a] for a in self.closing[o])
        grow = p.uc * self.q - pi * p.a1
        low = grow * h + pi * boots + self.zq[o] * p.c2 * p.mc
        low -= sum(self.yq[a] * deficit[a] for a in self.closing[o])
        return grow >= 0 and self.base_q + wq + low >= self.best * self.q

    def _step(
        self,
        i: int,
        o: int,
        h: int,
        cost: int,
        wq: int,
        deficit: list[int],
        state: tuple[int, int],
    ) -> None:
        got = self.par[o].capacity(h)
        if got is None:
            self._tick()
            return
        w = self.waste(o, h, got[0])
        for a in self.closing[o]:  # a set no later offer serves: its surplus is known
            w += self.yq[a] * max(0, got[0] - deficit[a])
        if self.best is not None and self.base_q + wq + w >= self.best * self.q:
            self._tick()
            return
        nd = list(deficit)
        for a in self.member[o]:
            nd[a] -= got[0]
        active, pending = self._settle(o, nd, *state)
        if self.best is not None and i + 1 < len(self.offers):
            ahead = self._ahead(i + 1, nd, active)
            if self.base_q + wq + w + ahead >= self.best * self.q:
                self._tick()
                return
        self.chosen[o] = (h, got[1])
        self.dfs(i + 1, cost + self.par[o].uc * h, wq + w, nd, active, pending)
        del self.chosen[o]

    def _ahead(self, i: int, deficit: list[int], active: int) -> int:
        """A lower bound on ``q`` times the wastes (with the surplus of the sets each
        closes) of the offers from ``i`` on: an offer ``L`` that alone can still cover an
        enforced set of deficit ``N > 0`` runs ``k >= N / c2`` nodes billed ``H >= (N + b1
        k) / a1`` units in all; its waste with its closing surplus is ``uc H q - pi' f +
        z C - sum y_a deficit_a`` (``pi'`` its price without the sets it closes), at least
        ``g H + pi' b1 k + z C - sum y_a deficit_a`` with ``g = uc q - pi' a1``, which
        grows with ``H`` when ``g >= 0``. The others count 0."""
        need: dict[int, int] = {}
        for a, dd in enumerate(deficit):
            if dd > 0 and active >> a & 1:
                only = self.only_from[a][i]
                if only is not None:
                    need[only] = max(need.get(only, 0), dd)
        total = 0
        for o, n in need.items():
            p = self.par[o]
            closing = self.closing[o]
            pi = self.piq[o] - sum(self.yq[a] for a in closing)
            g = p.uc * self.q - pi * p.a1
            if g < 0 or pi < 0:
                continue
            k = -(-n // p.c2)
            low = max(-(-(n + p.b1 * k) // p.a1), k * p.hmin)  # units, rounded up
            total += g * low + pi * p.b1 * k + self.zq[o] * p.c2 * p.mc
            total -= sum(self.yq[a] * max(0, deficit[a]) for a in closing)
        return total


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
    return _Search(mk, extra).run(upper, budget, max_visits)
