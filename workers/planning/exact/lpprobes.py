"""The LP of bin packing in the exact search: probes that raise the lower bound, and dives.

:class:`LPProbes` runs the column generation of :mod:`.lpbound` on capacities between the
lower bound and the incumbent of the driver (:mod:`.driver`), a slice of a few
milliseconds at a time so that the driver can look at its clock in between:

* the *bound* probes capacities (the lower bound first, or the capacity just below the
  incumbent when the gap is narrow; then where the LP value is estimated to reach m, by a
  secant step from the last refuted probe); every capacity it refutes comes with Farley's
  certificate in integers (:meth:`.lpbound.LPBound.certificate`);
* the *dives* look for a packing at the smallest capacity the LP cannot refute (a
  packing there is optimal), from the LP solved to its optimum at that capacity (the
  root), restarted with seeded random tie-breaking when they fail; when few nodes are
  left, first fit decreasing or the decision search of :mod:`.decision` packs the rest.

A packing found here is only a candidate: the driver measures it again on the true
durations.
"""

from __future__ import annotations

import math
import time
from typing import Any, Protocol

import numpy as np
import numpy.typing as npt

from ..budget import Budget
from . import constructions, decision, lpbound

#: multiply-adds of simplex pivots per slice of the LP (see _limit_pivots)
PIVOT_WORK = 3_000_000
#: the LP probes the capacity just below the incumbent first when the gap is this narrow
#: (relative to the lower bound) and there are at least this many jobs per node
TOP_FIRST_GAP, TOP_FIRST_JOBS_PER_NODE = 0.01, 4
#: after this many failed dives at the lower bound, dives at one tick more alternate
DIVES_BEFORE_NEXT = 6
#: a dive hands what is left to the exact search once this few nodes are left, with this
#: node allowance per try
DIVE_SEARCH_NODES_LEFT, DIVE_SEARCH_ALLOWANCE = 15, 10_000

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]


class Incumbent(Protocol):
    """What the probes read of the driver's best plan."""

    @property
    def ub_ticks(self) -> int:
        """The makespan in ticks of the best packing so far."""
        ...

    def best_packing(self) -> I32:
        """A copy of that packing (the node of every job)."""
        ...


def _limit_pivots(lp: lpbound.LPBound) -> None:
    """A pivot costs about r^2: a slice pauses after PIVOT_WORK of them."""
    lp.max_pivots = max(20, PIVOT_WORK // max(1, lp.r * lp.r))


class _Dives:
    """The dives at one capacity: the root LP, the dive in progress, the next seed."""

    def __init__(self, root: lpbound.LPBound) -> None:
        self.root = root
        self.current: lpbound.LPBound | None = None
        self.seed = 0
        self.failures = 0


class LPProbes:
    """The LP of bin packing (:mod:`.lpbound`) on capacities below the incumbent: its bound
    refutes capacities, its dives pack the jobs at the smallest capacity it cannot refute.

    The bound probes capacities (see :meth:`raise_bound`); the probe that finds the LP at
    most m at the lower bound becomes the root of the dives there (see :meth:`dive`).
    Unfinished probes and dives are resumed at the next call.
    """

    def __init__(self, q: I64, m: int, slice_seconds: float) -> None:
        self.q = q
        self.m = m
        self.slice_seconds = slice_seconds  # a slice of the LP aims at this many seconds
        self.base: lpbound.LPBound | None = None  # the last probe the LP refuted
        self.probe: lpbound.LPBound | None = None  # the probe in progress
        self.not_below = decision.MAX_TICKS  # smallest capacity the LP did not refute
        self.probes: list[int] = []  # capacities probed, in order
        self.overshot = False  # a probe estimated from the current base was not refuted
        self.prev: tuple[int, float] | None = None  # the base before: (C, z*(C) C)
        self.settled = False  # the bound has nothing more to say
        self.kept: lpbound.LPBound | None = None  # not refuted at its capacity: dive there
        self.dives: dict[int, _Dives] = {}
        self.dives_started = 0
        self.dive_over: set[int] = set()
        self.dive_refuted: int | None = None  # a capacity the dive's own LP refuted
        self.iters = 2
        self.evidence: dict[str, Any] | None = None
        self.disabled = False

    def _new(self, cap: int, inc: Incumbent, dpcap: int | None = None) -> lpbound.LPBound:
        """A column generation at ``cap`` seeded with the incumbent's nodes and first fit
        decreasing's that fit."""
        lp = lpbound.LPBound(self.q, self.m, cap, dpcap=dpcap)
        if lp.status == lpbound.PAUSED:
            ffd = np.zeros(self.q.size, dtype=np.int32)
            constructions.first_fit_decreasing(self.q, self.q.size, lp.cap, ffd)
            for packing in (inc.best_packing(), ffd):
                for pat in lp.patterns_of(self.q, packing):
                    lp.add_pattern(pat)
        return lp

    def _slice(self, lp: lpbound.LPBound, dive: bool) -> int:
        """One slice of column generation, sized to take about ``slice_seconds``."""
        t0 = time.perf_counter()
        i0 = lp.iterations
        _limit_pivots(lp)
        status = lp.dive(self.iters, 1, seed=lp.seed) if dive else lp.solve(self.iters)
        dt = time.perf_counter() - t0
        done = lp.iterations - i0
        if dt > 0 and done > 0:
            want = done * self.slice_seconds / dt
            self.iters = int(min(max(want, 1), 2 * self.iters + 1, 10_000))
        return status

    def _record(self, lp: lpbound.LPBound) -> None:
        self.evidence = {"capacity_ticks": lp.refuted_up_to, **lp.certificate()}

    def raise_bound(self, lb: int, inc: Incumbent, budget: Budget, seconds: float) -> int:
        """Every capacity below the returned one is refuted (by the LP, or already).

        Probes solve the LP to its optimum at one capacity. The first is at ``lb``; then
        z*(C) C is nearly constant, so the capacity where z* reaches m is estimated from
        the last refuted probe (a secant step) and probed from a copy of it (its columns
        and basis are still valid at a larger capacity), never at or above a capacity the
        LP did not refute. The knapsack table of every probe covers all capacities up to
        the incumbent, so its duals may refute more than its own capacity.
        """
        if self.disabled or self.settled:
            return lb
        t_end = time.perf_counter() + seconds
        while not budget.expired() and time.perf_counter() < t_end:
            hi = min(inc.ub_ticks, self.not_below) - 1
            if lb > hi:
                self.settled = True
                break
            lp = self.probe
            if lp is None:
                if (
                    not self.probes
                    and hi > lb
                    and hi - lb <= TOP_FIRST_GAP * lb
                    and self.q.size >= TOP_FIRST_JOBS_PER_NODE * self.m
                ):
                    # many jobs per node and a narrow gap: the simple bounds are nearly
                    # tight there and the incumbent often optimal, so the capacity just
                    # below it first (refuting it proves the incumbent optimal)
                    lp = self._new(hi, inc, dpcap=hi)
                    if lp.too_large:
                        self.disabled = True
                        return lb
                elif self.base is None:
                    lp = self._new(lb, inc, dpcap=inc.ub_ticks - 1)
                    if lp.too_large:
                        self.disabled = True
                        return lb
                else:
                    # z*(C) C nearly constant: z* reaches m near est; probe just below
                    # it (expected refuted, and then closer), then the first capacity
                    # not refuted yet
                    c1, p1 = self.base.cap, self.base.cap * self.base.value
                    slope = 0.0
                    if self.prev is not None and self.prev[0] < c1:  # two refuted probes:
                        slope = (p1 - self.prev[1]) / (c1 - self.prev[0])  # z C is linear
                    est = math.floor((p1 - slope * c1) / (self.m - slope) + 1e-9) - 1
                    low = max(lb, self.base.cap + 1)
                    if self.overshot:  # the estimate from this base was not refuted: bisect
                        est = (low + hi) // 2
                    target = max(low, min(est, hi))
                    if target > hi:
                        self.settled = True
                        break
                    lp = self.base.copy()
                    lp.raise_cap(target)
                self.probe = lp
                self.probes.append(lp.cap)
            status = lp.status
            while status == lpbound.PAUSED:
                if budget.expired() or time.perf_counter() >= t_end:
                    break
                status = self._slice(lp, dive=False)
            if lp.refuted_up_to >= lb:
                lb = lp.refuted_up_to + 1
                self._record(lp)
            if status == lpbound.PAUSED:
                break
            self.probe = None
            if status == lpbound.OPTIMAL:  # z*(cap) > m: refuted, and an estimate
                if self.base is not None:
                    self.prev = (self.base.cap, self.base.cap * self.base.value)
                self.base = lp
                self.overshot = False
            elif status == lpbound.NOT_REFUTED:
                self.overshot = self.base is not None
                if lp.cap <= self.not_below:
                    self.not_below = lp.cap
                    self.kept = lp  # at most m here: a dive at this capacity starts from it
            else:  # REFUTED up to the incumbent, or the bound could not run
                self.settled = True
                break
        return lb

    @property
    def failed_dives(self) -> int:
        """Dives that failed so far (at the capacities still in play)."""
        return sum(s.failures for s in self.dives.values())

    def ready_to_dive(self, cap: int) -> bool:
        """Whether a dive at ``cap`` is worth it now: the LP bound is done (or cannot run)
        and does not refute ``cap``."""
        if self.disabled or cap in self.dive_over:
            return False
        return self.settled or self.not_below <= cap

    def dive(self, lb: int, inc: Incumbent, budget: Budget, seconds: float) -> I32 | None:
        """Dive for a packing at ``lb`` (a packing there is optimal) or, after a few
        failures there, alternately at ``lb + 1`` (the LP may be one short of the
        optimum); the node of every job of ``q``, or None (no luck within ``seconds``: the
        dives go on at the next call).

        The LP at a capacity is solved to its optimum once (the root); every dive starts
        from a copy of it, the first fixing the largest LP values, the others with random
        bonuses (seeded 1, 2, ...): restarts of a randomised dive.
        """
        t_end = time.perf_counter() + seconds
        for c in [c for c in self.dives if c < lb or c >= inc.ub_ticks]:
            del self.dives[c]
        while not budget.expired() and time.perf_counter() < t_end:
            cap = lb
            low = self.dives.get(lb)
            if (
                low is not None
                and low.failures >= DIVES_BEFORE_NEXT
                and lb + 1 < inc.ub_ticks
                and lb + 1 not in self.dive_over
            ):
                high = self.dives.get(lb + 1)
                if high is None or high.failures < low.failures:
                    cap = lb + 1
            if cap in self.dive_over:
                return None
            state = self.dives.get(cap)
            if state is None:
                if self.kept is not None and self.kept.cap == cap:
                    root, self.kept = self.kept, None
                    root.reopen()
                else:
                    root = self._new(cap, inc)
                if root.trivial or root.too_large or root.cap != cap:
                    self.dive_over.add(cap)
                    return None
                state = self.dives[cap] = _Dives(root)
            packing = self._dive_step(state, cap)
            if packing is not None or cap in self.dive_over:
                return packing
        return None

    def _dive_step(self, state: _Dives, cap: int) -> I32 | None:
        """One slice of the dives at ``cap``; a packing if one was found."""
        root = state.root
        if root.status == lpbound.PAUSED:  # the root LP, to its optimum
            _limit_pivots(root)
            root.solve(self.iters, early_exit=False)
            return None
        if root.status == lpbound.REFUTED:  # the LP at cap itself: a proof
            self.dive_refuted = cap
            self._record(root)
            self.dive_over.add(cap)
            return None
        lp = state.current
        if lp is None:
            lp = state.current = root.copy()
            lp.seed = state.seed
            state.seed += 1
            self.dives_started += 1
        left = lp.nodes_left
        status = self._slice(lp, dive=True)
        if status == lpbound.PACKED:
            return self._finish(lp, cap, None, None)
        if status == lpbound.REFUTED and lp.nodes_left == self.m:
            self.dive_refuted = cap
            self._record(lp)
            self.dive_over.add(cap)
            return None
        if status != lpbound.PAUSED:
            state.current = None  # this dive failed: the next one
            state.failures += 1
            return None
        if lp.nodes_left == left:
            return None
        # a node was fixed: perhaps what is left packs by first fit decreasing, or, when
        # few nodes are left, by the exact search with a small allowance
        rest = lp.remaining()
        nl = lp.nodes_left
        node_of = np.zeros(rest.size, dtype=np.int32)
        if constructions.first_fit_decreasing(rest, nl, cap, node_of):
            return self._finish(lp, cap, rest, node_of)
        if nl <= DIVE_SEARCH_NODES_LEFT:
            s = decision.CompletionSearch(rest, nl, cap, memo_bits=14)
            if s.run(DIVE_SEARCH_ALLOWANCE) == decision.FEASIBLE:
                return self._finish(lp, cap, rest, s.packing())
        return None

    def _finish(
        self, lp: lpbound.LPBound, cap: int, rest: I64 | None, rest_nodes: I32 | None
    ) -> I32 | None:
        """The dive's nodes plus a packing of what it left, as a node per job of ``q``."""
        self.dive_over.add(cap)
        self.dives.clear()
        lens, bins = lp.fixed_bins()
        used = self.m - lp.nodes_left  # the nodes the dive fixed: 0 .. used - 1
        by_len: dict[int, list[int]] = {}
        for i, b in zip(lens.tolist(), bins.tolist(), strict=True):
            by_len.setdefault(int(lp.s[i]), []).append(b)
        if rest is not None and rest_nodes is not None:
            for v, b in zip(rest.tolist(), rest_nodes.tolist(), strict=True):
                by_len.setdefault(int(v), []).append(used + int(b))
        node_of = np.zeros(self.q.size, dtype=np.int32)
        try:
            for j, v in enumerate(self.q.tolist()):
                node_of[j] = by_len[int(v)].pop()
        except (KeyError, IndexError):  # pragma: no cover - a dive places every job once
            return None
        if int(node_of.max()) >= self.m:
            return None
        if constructions.makespan_ticks(self.q, node_of, self.m) > cap:  # pragma: no cover
            return None
        return node_of
