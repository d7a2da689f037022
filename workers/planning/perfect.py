"""Perfect packing search: fill every node to the deadline when the total-work bound is tight.

Deadline sizing asks for the fewest bins of capacity ``C`` (whole ticks). When a lower
bound ``k`` (the total work over ``C``, rounded up, or a stronger one) is the optimum,
the slack ``k * C - sum`` is small and almost every bin of an optimal packing is full to
the tick. Constructions that take "the best fit so far" (first/best fit decreasing,
minimum bin slack) spread a little waste over many bins and end a few bins above ``k``;
Falkenauer's triplets (1996), where every bin of the optimum holds three items summing
to ``C`` exactly, are the classic case. This module looks for a packing into exactly
``k`` bins with two compiled kernels, each in its own module:

``exact_fill``    (:mod:`.perfect_exact_fill`) bin-oriented construction (the
                  bin-at-a-time scheme of minimum bin slack, Gupta and Ho 1999): each bin
                  is opened by the longest item left and completed by a search over the
                  distinct lengths left whose last item is found by lookup of the exact
                  remainder; the first completion tried is drawn at random, so that
                  restarts differ (the first attempt also runs it without, longest first
                  as minimum bin slack does, and keeps the smaller pool). A bin that would
                  waste more than the slack still allowed is not formed: its opening item
                  waits in a *pool*.
``eject_walk``    (:mod:`.perfect_walk`) local search on the partial packing (bins within
                  capacity plus the pool), after the consistent neighbourhood search of
                  Buljubasic and Vasquez (2016) and the min-conflicts repair of Minton et
                  al. (1992): a pool item is completed to ``C`` by pool items, or by an
                  item taken from a packed bin that is then refilled from the pool (an
                  ejection chain) or released into it. Every step keeps each bin within
                  ``C`` and the total waste within the slack.

:func:`perfect_fill` (here) drives both under a wall-clock limit with deterministic
restarts (seeds 0, 1, 2, ...) and gives up early when the walk stays far from ``k`` bins
(then ``k`` is likely below the optimum). Lengths are looked up through a table when
``C`` is at most ``TABLE_LIMIT`` ticks, else by binary search (:mod:`.perfect_lengths`).
Both kernels are compiled with :func:`workers.planning.kernels.jit`; ``.py_func`` is the
same code in plain Python (the tests compare the two).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from .binpacking import first_fit_decreasing
from .perfect_exact_fill import exact_fill
from .perfect_walk import S_FREE, S_MOVES, S_POOL, S_WASTE, eject_walk, walk_start

I64 = npt.NDArray[np.int64]

#: exact_fill: search nodes per bin (fewer when the bins are many: FILL_WORK in all)
FILL_NODES, FILL_WORK = 1000, 40_000_000
#: exact_fill: at most FILL_SHARE of the time left, at FILL_STEPS_PER_SECOND for the
#: first fill (a low estimate of the kernel's steps per second on one core: a step's cost
#: depends on the batch) and at the rate the fills so far ran for the next ones
FILL_SHARE, FILL_STEPS_PER_SECOND, FILL_RATE_STEPS = 0.3, 50_000_000, 1_000_000
#: perfect_fill: moves of the first attempt (plus MOVES_PER_ITEM per item); each further
#: attempt (the next seed) gets MOVES_GROWTH times more
MOVES_FIRST, MOVES_PER_ITEM, MOVES_GROWTH = 10_000, 1.0, 1.3
#: perfect_fill: an attempt that after GIVE_UP_MOVES + n / 10 moves has never had fewer
#: than max(GIVE_UP_FREE, k / GIVE_UP_SHARE) bins free ends the search: the pool is
#: far from fitting, which happens when k is below the optimum
GIVE_UP_MOVES, GIVE_UP_FREE, GIVE_UP_SHARE = 10_000, 8, 500
#: perfect_fill: at most MOVES_CAP + MOVES_CAP_PER_ITEM * n moves over all attempts
MOVES_CAP, MOVES_CAP_PER_ITEM = 20_000, 500
#: perfect_fill: moves per call of the walk (the first call, then doubling to the last),
#: so that the clock is read often
MOVES_SLICE_FIRST, MOVES_SLICE = 250, 4_000


@dataclass(slots=True)
class _Fills:
    """Exact fills that end in time: each may spend a share of the time left to ``t_end``,
    counted in the kernel's steps (a kernel cannot read the clock) at the rate the fills
    so far ran (FILL_STEPS_PER_SECOND until they have run long enough to tell)."""

    t_end: float
    steps: int = 0
    seconds: float = 0.0

    def fill(self, qs: I64, cap: int, k: int, slack: int, nodes: int, seed: int) -> I64:
        now = time.perf_counter()
        rate = self.steps / self.seconds if self.steps >= FILL_RATE_STEPS else FILL_STEPS_PER_SECOND
        limit = max(1000, int(max(0.0, self.t_end - now) * FILL_SHARE * rate))
        bin_of, _, used = exact_fill(qs, cap, k, slack, nodes, seed, limit)
        self.seconds += time.perf_counter() - now
        self.steps += used
        return bin_of


@dataclass(frozen=True, slots=True)
class FillResult:
    """What :func:`perfect_fill` found: a packing into ``bins`` bins (whole ticks)."""

    bin_of: I64  # bin of each item, in the order given
    bins: int
    reached: bool  # the packing uses at most the ``k`` bins asked for
    attempts: int
    moves: int


def _complete(qs: I64, bin_of: npt.NDArray[np.integer[Any]], k: int, cap: int) -> tuple[int, I64]:
    """The bins in use numbered 0 .. m - 1 and the pool first fit decreasing into new
    bins after them: (bins in all, bin of each item)."""
    packed = bin_of >= 0
    used = np.bincount(bin_of[packed], minlength=k) > 0
    newid = np.cumsum(used) - 1
    kept = int(used.sum())
    out = np.full(qs.size, -1, dtype=np.int64)
    out[packed] = newid[bin_of[packed]]
    rest = np.flatnonzero(~packed)  # qs is sorted longest first, so rest is too
    if rest.size:
        extra, _, more = first_fit_decreasing(qs[rest].astype(np.float64), float(cap))
        out[rest] = kept + extra
        return kept + int(more), out
    return kept, out


def perfect_fill(
    q: I64,
    cap: int,
    k: int,
    seconds: float,
    *,
    should_stop: Callable[[], bool] | None = None,
    order: npt.NDArray[np.intp] | None = None,
) -> FillResult | None:
    """Look for a packing of ``q`` (whole ticks, any order) into ``k`` bins of ``cap``.

    Deterministic restarts (seed 0, 1, 2, ...), each a fill followed by the walk with a
    growing allowance of moves, until ``k`` bins are reached or ``seconds`` have passed.
    Returns the packing with the fewest bins found (the pool of an unfinished attempt
    packed first fit decreasing into extra bins), or None when the items cannot fit in
    ``k`` bins by their total or an item is longer than ``cap``. ``order``, if given, is
    a permutation that sorts ``q`` longest first (checked; it saves a sort).
    """
    t_end = time.perf_counter() + seconds
    n = int(q.size)
    if k < 1 or (n and int(q.max()) > cap):
        return None
    if order is None or order.size != n or bool((np.diff(q[order]) > 0).any()):
        order = np.argsort(-q, kind="stable")
    order = order[q[order] > 0]
    qs = np.ascontiguousarray(q[order], dtype=np.int64)
    slack = k * cap - int(qs.sum())
    if slack < 0:
        return None
    best: tuple[int, I64] | None = None
    attempts = moves_all = 0
    budget_moves = MOVES_FIRST + int(MOVES_PER_ITEM * n)
    nodes = min(FILL_NODES, max(20, FILL_WORK // k))
    give_up_at = GIVE_UP_MOVES + n // 10
    moves_cap = MOVES_CAP + MOVES_CAP_PER_ITEM * n
    hopeless = False
    seed = 0
    fills = _Fills(t_end)
    while True:
        attempts += 1
        bin_of = fills.fill(qs, cap, k, slack, nodes, seed)
        bins, cand = _complete(qs, bin_of, k, cap)
        if seed == 0 and bins > k:
            # the first attempt also tries the fill without random starts (each first
            # completion the longest, as minimum bin slack does) and walks on from the
            # smaller pool: it wins on some mixes, the random one on others
            plain = fills.fill(qs, cap, k, slack, nodes, -1)
            bins2, cand2 = _complete(qs, plain, k, cap)
            if bins2 <= k or int((plain < 0).sum()) < int((bin_of < 0).sum()):
                bin_of, bins, cand = plain, bins2, cand2
        if bins <= k:  # the fill alone (its pool first fit decreasing) is enough
            best = (bins, cand)
            break
        walk = walk_start(qs, cap, k, bin_of, seed)
        scal = walk.scal
        step = MOVES_SLICE_FIRST
        least_free = k
        while bins > k and scal[S_MOVES] < budget_moves:
            if time.perf_counter() >= t_end or (should_stop is not None and should_stop()):
                break
            if moves_all + scal[S_MOVES] >= moves_cap:
                hopeless = True
                break
            least_free = min(least_free, int(scal[S_FREE]))
            if scal[S_MOVES] >= give_up_at and least_free > max(GIVE_UP_FREE, k // GIVE_UP_SHARE):
                hopeless = True  # far from k bins: the bound is likely not the optimum
                break
            eject_walk(qs, cap, slack, min(step, budget_moves - int(scal[S_MOVES])), walk)
            step = min(2 * step, MOVES_SLICE)
            if scal[S_POOL] == 0 or scal[S_WASTE] < slack:
                # (with no waste left to spend, the pool fits only as exact bins)
                bins, cand = _complete(qs, walk.bin_of, k, cap)
            if scal[S_FREE] == 0:
                break  # every bin is in use (then the pool is empty)
        if scal[S_POOL] > 0:
            bins, cand = _complete(qs, walk.bin_of, k, cap)
        least_free = min(least_free, int(scal[S_FREE]))
        if bins > k and least_free > max(GIVE_UP_FREE, k // GIVE_UP_SHARE):
            hopeless = True  # (the attempt ended before the check above)
        moves_all += int(scal[S_MOVES])
        if best is None or bins < best[0]:
            best = (bins, cand)
        if bins <= k or hopeless or time.perf_counter() >= t_end:
            break
        if should_stop is not None and should_stop():
            break
        seed += 1
        budget_moves = int(budget_moves * MOVES_GROWTH)
    bins, cand = best
    out = np.zeros(n, dtype=np.int64)  # zero-length items go to bin 0
    out[order] = cand
    bins = max(bins, 1 if n else 0)  # (only zero-length items: one bin holds them)
    return FillResult(out, bins, bins <= k, attempts, moves_all)


def warm_up() -> None:
    """Compile (or load from numba's cache) both kernels on a tiny input, and the LP
    kernels sizing runs before them (:mod:`.sizing_lp`)."""
    from .sizing_lp import warm_up as lp_warm_up

    q = np.array([5, 4, 3, 3, 2, 1], dtype=np.int64)
    bin_of, _, _ = exact_fill(q, 6, 3, 0, 10, 0, 1000)
    eject_walk(q, 6, 0, 10, walk_start(q, 6, 3, bin_of, 0))
    lp_warm_up()
