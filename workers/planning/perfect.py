"""Perfect packing search: fill every node to the deadline when the total-work bound is tight.

Deadline sizing asks for the fewest bins of capacity ``C`` (whole ticks). When a lower
bound ``k`` (the total work over ``C``, rounded up, or a stronger one) is the optimum,
the slack ``k * C - sum`` is small and almost every bin of an optimal packing is full to
the tick. Constructions that take "the best fit so far" (first/best fit decreasing,
minimum bin slack) spread a little waste over many bins and end a few bins above ``k``;
Falkenauer's triplets (1996), where every bin of the optimum holds three items summing
to ``C`` exactly, are the classic case. This module looks for a packing into exactly
``k`` bins with two compiled kernels:

``exact_fill``    bin-oriented construction (the bin-at-a-time scheme of minimum bin
                  slack, Gupta and Ho 1999): each bin is opened by the longest item left
                  and completed by a depth-first search over the *distinct* lengths left,
                  whose last item is found by lookup of the exact remainder (a two-sum /
                  three-sum search over the multiset of remaining lengths). The first
                  completion tried is drawn at random among the two-item splits, so that
                  restarts differ (the first attempt also runs it without, longest
                  first as minimum bin slack does, and keeps the smaller pool). A bin
                  whose best completion wastes more than the slack still allowed is not
                  formed: its opening item waits in a *pool*.
``eject_walk``    local search on a partial packing (bins within capacity plus the pool
                  of unpacked items), after the consistent neighbourhood search of
                  Buljubasic and Vasquez (Comput. Oper. Res. 2016: a partial solution and
                  moves that keep every bin feasible) and the min-conflicts repair of
                  Minton, Johnston, Philips and Laird (Artif. Intell. 58, 1992). A pool
                  item is completed to ``C`` (exactly, or within the waste still allowed)
                  by pool items (a new bin), or by one pool item and one item taken from
                  a packed bin. That bin is refilled from the pool if it can be (an
                  ejection chain: a new bin), else released into the pool (a sideways
                  step that changes the pool). Of the
                  bins holding the length taken, the one whose longest item is shortest
                  gives it (a bin of short items only is the one a tight packing can
                  least afford, the observation behind the average-weight control of
                  Fleszar and Charalambous, Eur. J. Oper. Res. 210, 2011). New bins are
                  protected for a few steps, an item that waits long may take two packed
                  items (releasing two bins), and a pool that stops shrinking releases a
                  few random bins. Every step keeps each bin within ``C`` and the total
                  waste within the slack.

:func:`perfect_fill` drives both under a wall-clock limit with deterministic restarts
(seeds 0, 1, 2, ...) and gives up early when the walk stays far from ``k`` bins (then
``k`` is likely below the optimum). Lengths are looked up through a table when ``C`` is
at most ``TABLE_LIMIT`` ticks, else by binary search. Both kernels are compiled with
:func:`workers.planning.kernels.jit`; ``.py_func`` is the same code in plain Python
(the tests compare the two).
"""

from __future__ import annotations

import time
from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from .binpacking import _alive_from as _alive
from .binpacking import first_fit_decreasing
from .kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]
#: the state of the walk (see walk_start)
WalkState = tuple[
    I64, I64, I64, I64, I32, I32, I32, I32, I32, I64, I32,
    I32, I32, I32, I32, I32, I32, I32, I64, I64, I64,
]  # fmt: skip

#: the random generator of both kernels: 48-bit linear congruential (the constants of
#: POSIX drand48); the top bits are used, so draws do not alternate like low bits do
RNG_A, RNG_C, RNG_MASK = 0x5DEECE66D, 11, (1 << 48) - 1
#: capacities (ticks) up to this get a direct table from a length to its index
TABLE_LIMIT = 1 << 20
#: exact_fill: search nodes per bin (fewer when the bins are many: FILL_WORK in all)
FILL_NODES, FILL_WORK = 1000, 40_000_000
#: eject_walk: pool items tried per completion search (all of them in a smaller pool)
TRY_LIMIT = 64
#: eject_walk: packed items tried per step for an ejection chain (refilling their bin),
#: REPAIR_MANY of them in pools of at most SMALL_POOL items (the last bins)
REPAIR_TRIES, REPAIR_MANY, SMALL_POOL = 1, 8, 12
#: eject_walk: bins compared (by their longest item) when taking an item of some length
TOUR = 16
#: eject_walk: a bin formed less than this many steps ago is not taken from
PROTECT = 2
#: eject_walk: an item waiting longer than AGE + AGE_PER_ITEM * (pool size) steps may
#: take two packed items (releasing two bins)
AGE, AGE_PER_ITEM = 500, 4
#: eject_walk: after this many idle steps per pool item, release a random bin
KICK_IDLE = 20
#: eject_walk: after this many steps without a smaller pool, release KICK_BINS bins
STALL, KICK_BINS = 5000, 8
#: the scalars of the walk state: pool size, bins in use, free bins, waste, generator,
#: steps made, idle steps, smallest pool so far and the step it was reached
S_POOL, S_LIVE, S_FREE, S_WASTE, S_RNG, S_MOVES, S_IDLE, S_BEST, S_SINCE = range(9)
#: ... and the knobs walk_start sets from REPAIR_MANY, SMALL_POOL, STALL, KICK_BINS and
#: TOUR (kept in the state so that an experiment can change them without a recompile)
S_RMANY, S_SMALL, S_STALL, S_KICK, S_TOUR, S_SIZE = range(9, 15)
#: eject_walk: distinct lengths tried when a completion may waste some of the slack
NEAR_STEPS = 16
#: eject_walk: pools up to this many items are tried with first fit decreasing into the
#: bins still free
FFD_POOL = 64
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


@jit
def _next(state: int) -> int:
    """One step of the 48-bit generator (exact in int64: the product wraps mod 2**64)."""
    return (state * RNG_A + RNG_C) & RNG_MASK


@jit
def _below(state: int, m: int) -> int:
    """A draw in 0 .. m - 1 from the top bits of ``state``."""
    return (state >> 17) % m


@jit
def _distinct(q: I64) -> tuple[I64, I64, I64, I64]:
    """Distinct lengths of ``q`` (sorted longest first): values, counts, first item, the
    value index of each item."""
    n = q.shape[0]
    vid = np.empty(n, dtype=np.int64)
    d = 0
    for i in range(n):
        if i == 0 or q[i] != q[i - 1]:
            d += 1
        vid[i] = d - 1
    vals = np.empty(d, dtype=np.int64)
    cnt = np.zeros(d, dtype=np.int64)
    first = np.empty(d, dtype=np.int64)
    for i in range(n):
        v = vid[i]
        if cnt[v] == 0:
            vals[v] = q[i]
            first[v] = i
        cnt[v] += 1
    return vals, cnt, first, vid


@jit
def _table(vals: I64, cap: int) -> I32:
    """Index of each length 0 .. cap in ``vals`` (-1: absent); empty above TABLE_LIMIT."""
    if cap > TABLE_LIMIT:
        return np.empty(0, dtype=np.int32)
    tab = np.full(cap + 1, -1, dtype=np.int32)
    for v in range(vals.shape[0]):
        if vals[v] <= cap:
            tab[vals[v]] = v
    return tab


@jit
def _first_le(vals: I64, x: int) -> int:
    """The first index whose value is <= x (``vals`` descending)."""
    lo, hi = 0, vals.shape[0]
    while lo < hi:
        mid = (lo + hi) // 2
        if vals[mid] <= x:
            hi = mid
        else:
            lo = mid + 1
    return lo


@jit
def _find(vals: I64, tab: I32, x: int) -> int:
    """The index of length ``x`` in ``vals``, or -1."""
    if x <= 0:
        return -1
    if tab.shape[0] > 0:
        return tab[x] if x < tab.shape[0] else -1
    i = _first_le(vals, x)
    if i < vals.shape[0] and vals[i] == x:
        return i
    return -1


@jit
def exact_fill(q: I64, cap: int, k: int, slack: int, node_limit: int, seed: int) -> tuple[I64, int]:
    """Bins filled one at a time, each within the slack still allowed (see the module).

    ``q``: whole ticks, longest first, all in 1 .. cap. Forms at most ``k`` bins; the
    total waste of the bins formed stays within ``slack``. A negative ``seed`` makes no
    random starts (every first completion tried is the longest). Returns (bin of each
    item, -1 for the pool; bins formed).
    """
    n = q.shape[0]
    bin_of = np.full(n, -1, dtype=np.int64)
    if n == 0:
        return bin_of, 0
    vals, cnt0, first, _ = _distinct(q)
    d = vals.shape[0]
    cnt = cnt0.copy()
    nxt_item = first.copy()  # the next unplaced item of each length
    parent = np.arange(d + 1).astype(np.int64)
    deep = min(n, cap // q[n - 1]) + 1  # the most items a bin can hold, plus one
    path = np.empty(deep, dtype=np.int64)
    inbin = np.zeros(d, dtype=np.int64)  # items of each length on the search path
    best = np.empty(deep, dtype=np.int64)
    res_at = np.empty(deep + 1, dtype=np.int64)
    cur = np.empty(deep + 1, dtype=np.int64)
    beg = np.empty(deep + 1, dtype=np.int64)
    start = np.empty(deep + 1, dtype=np.int64)
    phase = np.empty(deep + 1, dtype=np.int64)
    state = _next(seed + 1)
    left = n
    bins = 0
    waste = 0
    bottom = d - 1
    while left > 0 and bins < k:
        top = _alive(parent, 0)
        a = vals[top]
        cnt[top] -= 1
        left -= 1
        anchor = nxt_item[top]
        nxt_item[top] += 1
        if cnt[top] == 0:
            parent[top] = top + 1
        while bottom >= 0 and cnt[bottom] == 0:
            bottom -= 1
        vmin = vals[bottom] if bottom >= 0 else cap + 1
        r = cap - a
        allow = slack - waste
        best_res = r
        best_len = 0
        depth = 0
        res_at[0] = r
        cur[0] = -1
        nodes = 0
        while best_res > 0:
            rr = res_at[depth]
            lo = 0 if depth == 0 else path[depth - 1]
            if cur[depth] < 0:
                # the last item: the longest length left that fits (exact if present)
                j = _alive(parent, max(lo, _first_le(vals, rr)))
                while j < d and cnt[j] - inbin[j] <= 0:
                    j = _alive(parent, j + 1)
                if j < d and rr - vals[j] < best_res:
                    best_res = rr - vals[j]
                    best_len = depth + 1
                    for t in range(depth):
                        best[t] = path[t]
                    best[depth] = j
                if best_res == 0:
                    break
                # children leave room for one more item; at depth 0 start at random
                # among the lengths that can be the longer half of a two-item split
                b0 = max(lo, _first_le(vals, rr - vmin))
                s = b0
                e = _first_le(vals, (rr - 1) // 2)
                if depth == 0 and b0 + 1 < e and seed >= 0:
                    state = _next(state)
                    s = b0 + _below(state, e - b0)
                beg[depth] = b0
                start[depth] = s
                phase[depth] = 0 if s > b0 else 1
                cur[depth] = s
            found = -1
            j = cur[depth]
            while True:
                end = d if phase[depth] == 0 else (start[depth] if start[depth] > beg[depth] else d)
                while j < end:
                    j = _alive(parent, j)
                    if j >= end:
                        break
                    if cnt[j] - inbin[j] > 0:
                        found = j
                        break
                    j += 1
                if found >= 0 or phase[depth] == 1:
                    break
                phase[depth] = 1
                j = beg[depth]
            if found >= 0 and nodes < node_limit and depth + 1 < deep:
                nodes += 1
                cur[depth] = found + 1
                path[depth] = found
                inbin[found] += 1
                res_at[depth + 1] = rr - vals[found]
                depth += 1
                cur[depth] = -1
                continue
            if depth == 0 or nodes >= node_limit:
                break
            depth -= 1
            inbin[path[depth]] -= 1
        for t in range(depth):
            inbin[path[t]] -= 1
        if best_res > allow:
            continue  # the anchor waits in the pool
        waste += best_res
        bin_of[anchor] = bins
        for t in range(best_len):
            v = best[t]
            cnt[v] -= 1
            left -= 1
            bin_of[nxt_item[v]] = bins
            nxt_item[v] += 1
            if cnt[v] == 0:
                parent[v] = v + 1
        bins += 1
    return bin_of, bins


# -- the walk: state helpers ------------------------------------------------------------
# Items of each length are kept in one block of ``perm`` (first[v] .. first[v] + count),
# pool items first: pc[v] of them. Bins are doubly linked lists of items.


@jit
def _to_pool(
    i: int,
    q: I64,
    vid: I64,
    first: I64,
    perm: I32,
    slot: I32,
    pc: I32,
    bin_of: I32,
    load: I64,
    head: I32,
    nxt: I32,
    prv: I32,
    pool: I32,
    ppos: I32,
    npool: int,
) -> int:
    b = bin_of[i]
    if prv[i] >= 0:
        nxt[prv[i]] = nxt[i]
    else:
        head[b] = nxt[i]
    if nxt[i] >= 0:
        prv[nxt[i]] = prv[i]
    load[b] -= q[i]
    bin_of[i] = -1
    v = vid[i]
    s = slot[i]
    t = first[v] + pc[v]
    o = perm[t]
    perm[t] = i
    slot[i] = t
    perm[s] = o
    slot[o] = s
    pc[v] += 1
    ppos[i] = npool
    pool[npool] = i
    return npool + 1


@jit
def _release(
    b: int,
    moves: int,
    q: I64,
    vid: I64,
    first: I64,
    perm: I32,
    slot: I32,
    pc: I32,
    bin_of: I32,
    load: I64,
    head: I32,
    nxt: I32,
    prv: I32,
    pool: I32,
    ppos: I32,
    npool: int,
    entered: I64,
    live: I32,
    lpos: I32,
    nlive: int,
    free: I32,
    nfree: int,
) -> tuple[int, int, int]:
    """Empty bin ``b`` into the pool (each item stamped as entering at ``moves``), take it
    off the live list and put it on the free list. Returns (npool, nlive, nfree)."""
    while head[b] >= 0:
        i = head[b]
        npool = _to_pool(
            i, q, vid, first, perm, slot, pc, bin_of, load, head, nxt, prv, pool, ppos, npool
        )
        entered[i] = moves
    p = lpos[b]
    nlive -= 1
    live[p] = live[nlive]
    lpos[live[p]] = p
    lpos[b] = -1
    free[nfree] = b
    return npool, nlive, nfree + 1


@jit
def _to_bin(
    i: int,
    b: int,
    q: I64,
    vid: I64,
    first: I64,
    perm: I32,
    slot: I32,
    pc: I32,
    bin_of: I32,
    load: I64,
    head: I32,
    nxt: I32,
    prv: I32,
    pool: I32,
    ppos: I32,
    npool: int,
) -> int:
    p = ppos[i]
    npool -= 1
    last = pool[npool]
    pool[p] = last
    ppos[last] = p
    ppos[i] = -1
    v = vid[i]
    s = slot[i]
    t = first[v] + pc[v] - 1
    o = perm[t]
    perm[t] = i
    slot[i] = t
    perm[s] = o
    slot[o] = s
    pc[v] -= 1
    bin_of[i] = b
    nxt[i] = head[b]
    if head[b] >= 0:
        prv[head[b]] = i
    prv[i] = -1
    head[b] = i
    load[b] += q[i]
    return npool


@jit
def _longest(q: I64, head: I32, nxt: I32, b: int) -> int:
    """The longest item of bin ``b``."""
    best = 0
    i = head[b]
    while i >= 0:
        if q[i] > best:
            best = q[i]
        i = nxt[i]
    return int(best)


@jit
def _pool_item(v: int, pc: I32, perm: I32, first: I64, e1: int, e2: int, e3: int) -> int:
    """A pool item of length index ``v`` other than e1, e2, e3, or -1."""
    if v < 0:
        return -1
    for w in range(pc[v]):
        c = int(perm[first[v] + w])
        if c != e1 and c != e2 and c != e3:
            return c
    return -1


@jit
def _pool_near(
    hi: int,
    lo: int,
    vals: I64,
    tab: I32,
    pc: I32,
    perm: I32,
    first: I64,
    e1: int,
    e2: int,
    e3: int,
) -> int:
    """A pool item of the longest length in ``lo .. hi`` (other than e1, e2, e3), or -1.

    Exact lengths (``lo == hi``) are looked up; otherwise at most NEAR_STEPS distinct
    lengths are tried, longest first.
    """
    if hi <= 0:
        return -1
    if lo >= hi:
        return _pool_item(_find(vals, tab, hi), pc, perm, first, e1, e2, e3)
    v = _first_le(vals, hi)
    for _ in range(NEAR_STEPS):
        if v >= vals.shape[0] or vals[v] < lo:
            break
        c = _pool_item(v, pc, perm, first, e1, e2, e3)
        if c >= 0:
            return c
        v += 1
    return -1


@jit
def _packed_near(hi: int, lo: int, vals: I64, tab: I32, vcnt: I64, pc: I32) -> int:
    """The longest length in ``lo .. hi`` that has an item in a bin (its index), or -1."""
    if hi <= 0:
        return -1
    if lo >= hi:
        v = _find(vals, tab, hi)
        return v if v >= 0 and vcnt[v] > pc[v] else -1
    v = _first_le(vals, hi)
    for _ in range(NEAR_STEPS):
        if v >= vals.shape[0] or vals[v] < lo:
            break
        if vcnt[v] > pc[v]:
            return v
        v += 1
    return -1


@jit
def _pool_fill(
    t: int,
    allow: int,
    vals: I64,
    tab: I32,
    q: I64,
    pc: I32,
    perm: I32,
    first: I64,
    pool: I32,
    npool: int,
    e1: int,
    e2: int,
    state: int,
    single: bool,
) -> tuple[int, int, int]:
    """One pool item (if ``single``) or two whose lengths sum to ``t - allow .. t``,
    avoiding e1 and e2; the longest sum of those tried (exact ends the search).

    Returns (item, item or -1, generator state); (-1, -1, state) when none was found
    (at most TRY_LIMIT first items are tried, from a random place in the pool).
    """
    b1, b2, got = -1, -1, -1
    if single:
        c = _pool_near(t, t - allow, vals, tab, pc, perm, first, e1, e2, -1)
        if c >= 0:
            b1, got = c, q[c]
            if got == t:
                return b1, -1, state
    if npool == 0:
        return b1, -1, state
    state = _next(state)
    off = _below(state, npool)
    for u in range(min(npool, TRY_LIMIT)):
        c1 = int(pool[(u + off) % npool])
        if q[c1] >= t or c1 == e1:
            continue
        if c1 == e2:
            continue
        hi = t - q[c1]
        c2 = _pool_near(hi, hi - allow, vals, tab, pc, perm, first, e1, e2, c1)
        if c2 >= 0 and q[c1] + q[c2] > got:
            b1, b2, got = c1, c2, q[c1] + q[c2]
            if got == t:
                break
    return b1, b2, state


@jit
def walk_start(q: I64, cap: int, k: int, bin_of0: I64, seed: int) -> WalkState:
    """The state of :func:`eject_walk` for the partial packing ``bin_of0``.

    ``q``: whole ticks, longest first; ``bin_of0``: bin of each item (0 .. k - 1) or -1
    for the pool. Returns the arrays that ``eject_walk`` takes after ``slack``: lengths
    (values, counts, first item, value of each item, lookup table), the pool blocks
    (perm, slot, pool count per length), the bins (bin of each item, load, doubly
    linked items), the pool list, the bins in use and free, the step at which each item
    entered the pool and each bin formed, and the scalars (see ``S_*``).
    """
    n = q.shape[0]
    vals, vcnt, first, vid = _distinct(q)
    tab = _table(vals, cap)
    d = vals.shape[0]
    perm = np.arange(n).astype(np.int32)
    slot = np.arange(n).astype(np.int32)
    pc = np.zeros(d, dtype=np.int32)
    nb_max = k + 1
    bin_of = np.full(n, -1, dtype=np.int32)
    load = np.zeros(nb_max, dtype=np.int64)
    head = np.full(nb_max, -1, dtype=np.int32)
    nxt = np.full(n, -1, dtype=np.int32)
    prv = np.full(n, -1, dtype=np.int32)
    pool = np.empty(n, dtype=np.int32)
    ppos = np.full(n, -1, dtype=np.int32)
    npool = 0
    for i in range(n):  # every item starts in the pool ...
        v = vid[i]
        s = slot[i]
        t = first[v] + pc[v]
        o = perm[t]
        perm[t] = i
        slot[i] = t
        perm[s] = o
        slot[o] = s
        pc[v] += 1
        ppos[i] = npool
        pool[npool] = i
        npool += 1
    for i in range(n):  # ... and goes to its bin
        b = bin_of0[i]
        if 0 <= b < k:
            npool = _to_bin(
                i, b, q, vid, first, perm, slot, pc, bin_of, load, head, nxt, prv, pool, ppos, npool
            )
    live = np.full(nb_max, -1, dtype=np.int32)  # bins in use, and where each one is listed
    lpos = np.full(nb_max, -1, dtype=np.int32)
    nlive = 0
    free = np.full(nb_max, -1, dtype=np.int32)  # empty bin numbers
    nfree = 0
    for b in range(k - 1, -1, -1):
        if head[b] < 0:
            free[nfree] = b
            nfree += 1
    for b in range(k):
        if head[b] >= 0:
            lpos[b] = nlive
            live[nlive] = b
            nlive += 1
    waste = 0
    for t in range(nlive):
        waste += cap - load[live[t]]
    entered = np.zeros(n, dtype=np.int64)
    born = np.full(nb_max, -PROTECT - 1, dtype=np.int64)
    scal = np.zeros(S_SIZE, dtype=np.int64)
    scal[S_POOL] = npool
    scal[S_LIVE] = nlive
    scal[S_FREE] = nfree
    scal[S_WASTE] = waste
    scal[S_RNG] = _next(seed * 7919 + 3)
    scal[S_BEST] = npool
    scal[S_RMANY] = REPAIR_MANY
    scal[S_SMALL] = SMALL_POOL
    scal[S_STALL] = STALL
    scal[S_KICK] = KICK_BINS
    scal[S_TOUR] = TOUR
    return (
        vals, vcnt, first, vid, tab, perm, slot, pc, bin_of, load, head, nxt, prv,
        pool, ppos, live, lpos, free, entered, born, scal,
    )  # fmt: skip


@jit
def eject_walk(
    q: I64,
    cap: int,
    slack: int,
    max_moves: int,
    vals: I64,
    vcnt: I64,
    first: I64,
    vid: I64,
    tab: I32,
    perm: I32,
    slot: I32,
    pc: I32,
    bin_of: I32,
    load: I64,
    head: I32,
    nxt: I32,
    prv: I32,
    pool: I32,
    ppos: I32,
    live: I32,
    lpos: I32,
    free: I32,
    entered: I64,
    born: I64,
    scal: I64,
) -> int:
    """Up to ``max_moves`` steps of the pool walk (see the module) on the state made by
    :func:`walk_start` (changed in place). Every step keeps each bin within ``cap`` and
    the total waste within ``slack``. Returns the items left in the pool (0: every item
    is packed, in at most ``k`` bins).
    """
    npool = int(scal[S_POOL])  # (plain ints: the generator must not overflow as
    nlive = int(scal[S_LIVE])  # a numpy scalar would when run as plain Python)
    nfree = int(scal[S_FREE])
    waste = int(scal[S_WASTE])
    state = int(scal[S_RNG])
    moves = int(scal[S_MOVES])
    idle = int(scal[S_IDLE])
    best_pool = int(scal[S_BEST])
    since = int(scal[S_SINCE])
    stop = moves + max_moves
    items = np.empty(256, dtype=np.int64)
    sizes = np.empty(FFD_POOL, dtype=np.int64)
    fload = np.empty(FFD_POOL, dtype=np.int64)
    check_ffd = True
    while npool > 0 and moves < stop:
        moves += 1
        if check_ffd and npool <= FFD_POOL:
            # the pool, first fit decreasing, into the bins still free
            check_ffd = False
            for t in range(npool):
                sizes[t] = pool[t]
            for t in range(1, npool):  # insertion sort, longest first
                j = sizes[t]
                u = t
                while u > 0 and q[sizes[u - 1]] < q[j]:
                    sizes[u] = sizes[u - 1]
                    u -= 1
                sizes[u] = j
            used = 0
            extra = 0
            ok = True
            for t in range(npool):
                x = q[sizes[t]]
                e = 0
                while e < used and fload[e] + x > cap:
                    e += 1
                if e == used:
                    if used == nfree:
                        ok = False
                        break
                    fload[e] = 0
                    used += 1
                fload[e] += x
            if ok:
                for e in range(used):
                    extra += cap - fload[e]
            if ok and waste + extra <= slack:
                for e in range(used):
                    fload[e] = 0
                for t in range(npool):  # the same first fit, now applied
                    i = sizes[t]
                    e = 0
                    while fload[e] + q[i] > cap:
                        e += 1
                    fload[e] += q[i]
                    npool = _to_bin(
                        i,
                        free[nfree - 1 - e],
                        q,
                        vid,
                        first,
                        perm,
                        slot,
                        pc,
                        bin_of,
                        load,
                        head,
                        nxt,
                        prv,
                        pool,
                        ppos,
                        npool,
                    )
                for e in range(used):
                    b = free[nfree - 1 - e]
                    lpos[b] = nlive
                    live[nlive] = b
                    nlive += 1
                    born[b] = moves
                nfree -= used
                waste += extra
                break
        if nfree == 0:
            break
        # the item to complete: the longest waiting of four drawn from the pool
        state = _next(state)
        a = pool[_below(state, npool)]
        for _ in range(3):
            state = _next(state)
            c = pool[_below(state, npool)]
            if entered[c] < entered[a]:
                a = c
        r = cap - q[a]
        allow = slack - waste  # the waste a new bin may still have
        kick = 0
        n1, n2 = -1, -1
        if moves - since > scal[S_STALL]:
            kick = scal[S_KICK]  # the pool has not shrunk for a while: release a few bins
            r = 0  # (and make no other move in this step)
        elif r > 0:
            n1, n2, state = _pool_fill(
                r, allow, vals, tab, q, pc, perm, first, pool, npool, a, -1, state, True
            )
        steal = -1  # the packed item taken into the new bin
        victim = -1  # its bin, released into the pool
        steal2 = -1  # a second packed item (its bin released too)
        if n1 < 0 and r > allow:
            rep_b = -1
            rep_z = -1
            rep_1 = -1
            rep_2 = -1
            tried = 0
            limit = scal[S_RMANY] if npool <= scal[S_SMALL] else REPAIR_TRIES
            state = _next(state)
            off = _below(state, npool + 1)
            for u in range(min(npool + 1, TRY_LIMIT)):
                uu = (u + off) % (npool + 1)
                p = pool[uu] if uu < npool else -1  # the last place stands for "no item"
                if p == a:
                    continue
                y = r - (q[p] if p >= 0 else 0)
                v = _packed_near(y, y - allow, vals, tab, vcnt, pc)
                if v < 0:
                    continue
                w1 = y - vals[v]  # the waste of the new bin
                y = vals[v]
                packed = vcnt[v] - pc[v]
                state = _next(state)
                o2 = _below(state, packed)
                for w in range(packed):
                    yi = perm[first[v] + pc[v] + (o2 + w) % packed]
                    b = bin_of[yi]
                    if born[b] + PROTECT > moves:
                        continue
                    # of a few bins holding this length, take from the one whose longest
                    # item is shortest (a bin of short items only is the one a tight
                    # packing can least afford)
                    lb = _longest(q, head, nxt, b)
                    for w2 in range(w + 1, min(packed, w + scal[S_TOUR])):
                        y2 = perm[first[v] + pc[v] + (o2 + w2) % packed]
                        b2 = bin_of[y2]
                        if born[b2] + PROTECT <= moves:
                            l2 = _longest(q, head, nxt, b2)
                            if l2 < lb:
                                yi, b, lb = y2, b2, l2
                    if steal < 0:
                        steal = yi
                        victim = b
                        n1 = p
                    # refill the bin of yi from the pool instead of releasing it
                    m = 0
                    i = head[b]
                    while i >= 0 and m < 256:
                        if i != yi:
                            items[m] = i
                            m += 1
                        i = nxt[i]
                    for zi in range(-1, m):
                        z = items[zi] if zi >= 0 else -1
                        g1, g2, state = _pool_fill(
                            y + (q[z] if z >= 0 else 0),
                            allow - w1,
                            vals,
                            tab,
                            q,
                            pc,
                            perm,
                            first,
                            pool,
                            npool,
                            a,
                            p,
                            state,
                            z >= 0,
                        )
                        if g1 >= 0:
                            rep_b, rep_z, rep_1, rep_2 = b, z, g1, g2
                            steal, victim, n1 = yi, -1, p
                            break
                    tried += 1
                    if rep_b >= 0 or tried >= limit:
                        break
                if rep_b >= 0 or tried >= limit:
                    break
            if rep_b >= 0:
                # the chain: the bin of the stolen item swaps it (and z) for pool items
                waste += load[rep_b]
                npool = _to_pool(
                    steal,
                    q,
                    vid,
                    first,
                    perm,
                    slot,
                    pc,
                    bin_of,
                    load,
                    head,
                    nxt,
                    prv,
                    pool,
                    ppos,
                    npool,
                )
                entered[steal] = moves
                if rep_z >= 0:
                    npool = _to_pool(
                        rep_z,
                        q,
                        vid,
                        first,
                        perm,
                        slot,
                        pc,
                        bin_of,
                        load,
                        head,
                        nxt,
                        prv,
                        pool,
                        ppos,
                        npool,
                    )
                    entered[rep_z] = moves
                npool = _to_bin(
                    rep_1,
                    rep_b,
                    q,
                    vid,
                    first,
                    perm,
                    slot,
                    pc,
                    bin_of,
                    load,
                    head,
                    nxt,
                    prv,
                    pool,
                    ppos,
                    npool,
                )
                if rep_2 >= 0:
                    npool = _to_bin(
                        rep_2,
                        rep_b,
                        q,
                        vid,
                        first,
                        perm,
                        slot,
                        pc,
                        bin_of,
                        load,
                        head,
                        nxt,
                        prv,
                        pool,
                        ppos,
                        npool,
                    )
                born[rep_b] = moves
                waste -= load[rep_b]
            elif steal < 0 and nlive > 1 and moves - entered[a] > AGE + AGE_PER_ITEM * npool:
                # a long wait: two packed items y1 + y2 = r from two bins
                for _ in range(8):
                    state = _next(state)
                    b1 = live[_below(state, nlive)]
                    m = 0
                    i = head[b1]
                    while i >= 0 and m < 256:
                        items[m] = i
                        m += 1
                        i = nxt[i]
                    state = _next(state)
                    y1 = items[_below(state, m)]
                    if q[y1] >= r:
                        continue
                    v = _packed_near(r - q[y1], r - q[y1] - allow, vals, tab, vcnt, pc)
                    if v < 0:
                        continue
                    state = _next(state)
                    y2 = perm[first[v] + pc[v] + _below(state, vcnt[v] - pc[v])]
                    if bin_of[y2] == b1:
                        continue
                    steal, victim, steal2 = y1, b1, y2
                    break
            if steal < 0:
                idle += 1
                if idle > KICK_IDLE * (npool + 1):
                    idle = 0  # nothing moves: release a random bin
                    kick = 1
                else:
                    continue
        if kick > 0:
            for _ in range(kick):
                if nlive == 0:
                    break
                state = _next(state)
                b = live[_below(state, nlive)]
                waste -= cap - load[b]
                npool, nlive, nfree = _release(
                    b, moves, q, vid, first, perm, slot, pc, bin_of, load, head, nxt, prv,
                    pool, ppos, npool, entered, live, lpos, nlive, free, nfree,
                )  # fmt: skip
            best_pool = npool
            since = moves
            check_ffd = True
            continue
        idle = 0
        for vb in (np.int64(victim), np.int64(bin_of[steal2]) if steal2 >= 0 else np.int64(-1)):
            if vb < 0:
                continue
            waste -= cap - load[vb]
            npool, nlive, nfree = _release(
                int(vb), moves, q, vid, first, perm, slot, pc, bin_of, load, head, nxt, prv,
                pool, ppos, npool, entered, live, lpos, nlive, free, nfree,
            )  # fmt: skip
        nfree -= 1
        nb = free[nfree]
        for c in (np.int64(a), np.int64(n1), np.int64(n2), np.int64(steal), np.int64(steal2)):
            if c >= 0:
                npool = _to_bin(
                    int(c),
                    nb,
                    q,
                    vid,
                    first,
                    perm,
                    slot,
                    pc,
                    bin_of,
                    load,
                    head,
                    nxt,
                    prv,
                    pool,
                    ppos,
                    npool,
                )
        lpos[nb] = nlive
        live[nlive] = nb
        nlive += 1
        born[nb] = moves
        waste += cap - load[nb]
        check_ffd = True
        if npool < best_pool:
            best_pool = npool
            since = moves
    scal[S_POOL] = npool
    scal[S_LIVE] = nlive
    scal[S_FREE] = nfree
    scal[S_WASTE] = waste
    scal[S_RNG] = state
    scal[S_MOVES] = moves
    scal[S_IDLE] = idle
    scal[S_BEST] = best_pool
    scal[S_SINCE] = since
    return int(npool)


# -- the driver ---------------------------------------------------------------------------
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
    while True:
        attempts += 1
        bin_of, _ = exact_fill(qs, cap, k, slack, nodes, seed)
        bins, cand = _complete(qs, bin_of, k, cap)
        if seed == 0 and bins > k:
            # the first attempt also tries the fill without random starts (each first
            # completion the longest, as minimum bin slack does) and walks on from the
            # smaller pool: it wins on some mixes, the random one on others
            plain, _ = exact_fill(qs, cap, k, slack, nodes, -1)
            bins2, cand2 = _complete(qs, plain, k, cap)
            if bins2 <= k or int((plain < 0).sum()) < int((bin_of < 0).sum()):
                bin_of, bins, cand = plain, bins2, cand2
        if bins <= k:  # the fill alone (its pool first fit decreasing) is enough
            best = (bins, cand)
            break
        walk = walk_start(qs, cap, k, bin_of, seed)
        scal = walk[-1]
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
            eject_walk(qs, cap, slack, min(step, budget_moves - int(scal[S_MOVES])), *walk)
            step = min(2 * step, MOVES_SLICE)
            if scal[S_POOL] == 0 or scal[S_WASTE] < slack:
                # (with no waste left to spend, the pool fits only as exact bins)
                bins, cand = _complete(qs, walk[8], k, cap)
            if scal[S_FREE] == 0:
                break  # every bin is in use (then the pool is empty)
        if scal[S_POOL] > 0:
            bins, cand = _complete(qs, walk[8], k, cap)
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
    """Compile (or load from numba's cache) both kernels on a tiny input."""
    q = np.array([5, 4, 3, 3, 2, 1], dtype=np.int64)
    bin_of, _ = exact_fill(q, 6, 3, 0, 10, 0)
    eject_walk(q, 6, 0, 10, *walk_start(q, 6, 3, bin_of, 0))
