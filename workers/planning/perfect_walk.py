"""The ejection walk of the perfect packing search: a local search on a partial packing.

The state is a partial packing into at most ``k`` bins, each within capacity, plus the
*pool* of items not packed (after the consistent neighbourhood search of Buljubasic and
Vasquez, Comput. Oper. Res. 2016: a partial solution and moves that keep every bin
feasible; and the min-conflicts repair of Minton, Johnston, Philips and Laird, Artif.
Intell. 58, 1992). A step completes a pool item to ``C`` (exactly, or within the waste
still allowed) by pool items (a new bin), or by one pool item and one item taken from a
packed bin. That bin is refilled from the pool if it can be (an ejection chain: a new
bin), else released into the pool (a sideways step that changes the pool). Of the bins
holding the length taken, the one whose longest item is shortest gives it (a bin of short
items only is the one a tight packing can least afford, the observation behind the
average-weight control of Fleszar and Charalambous, Eur. J. Oper. Res. 210, 2011). New
bins are protected for a few steps, an item that waits long may take two packed items
(releasing two bins), a pool that stops shrinking releases a few random bins, and a small
pool is tried first fit decreasing into the bins still free. Every step keeps each bin
within ``C`` and the total waste within the slack.

:func:`walk_start` builds the state (:class:`WalkState`) from the bins of
:mod:`workers.planning.perfect_exact_fill`; :func:`eject_walk` makes steps on it, in
place, and can be called again to go on. See :mod:`workers.planning.perfect`.
"""

from __future__ import annotations

from typing import NamedTuple

import numpy as np
import numpy.typing as npt

from .binpacking import sort_longest_first
from .kernels import jit
from .perfect_lengths import distinct_lengths, length_table, rng_below, rng_next
from .perfect_pool import TRY_LIMIT, _packed_near, _pool_fill

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: packed items tried per step for an ejection chain (refilling their bin), REPAIR_MANY
#: of them in pools of at most SMALL_POOL items (the last bins)
REPAIR_TRIES, REPAIR_MANY, SMALL_POOL = 1, 8, 12
#: bins compared (by their longest item) when taking an item of some length
TOUR = 16
#: a bin formed less than this many steps ago is not taken from
PROTECT = 2
#: an item waiting longer than AGE + AGE_PER_ITEM * (pool size) steps may take two packed
#: items (releasing two bins)
AGE, AGE_PER_ITEM = 500, 4
#: after this many idle steps per pool item, release a random bin
KICK_IDLE = 20
#: after this many steps without a smaller pool, release KICK_BINS bins
STALL, KICK_BINS = 5000, 8
#: the scalars of the walk state: pool size, bins in use, free bins, waste, generator,
#: steps made, idle steps, smallest pool so far and the step it was reached
S_POOL, S_LIVE, S_FREE, S_WASTE, S_RNG, S_MOVES, S_IDLE, S_BEST, S_SINCE = range(9)
#: ... and the knobs walk_start sets from REPAIR_MANY, SMALL_POOL, STALL, KICK_BINS and
#: TOUR (kept in the state so that an experiment can change them without a recompile)
S_RMANY, S_SMALL, S_STALL, S_KICK, S_TOUR, S_SIZE = range(9, 15)
#: pools up to this many items are tried with first fit decreasing into the bins still free
FFD_POOL = 64
#: at most this many items of one bin are looked at when it gives or takes items
BIN_ITEMS = 256


class WalkState(NamedTuple):
    """The state of :func:`eject_walk`, changed in place by each call.

    Items of each length are kept in one block of ``perm`` (``first[v]`` .. ``first[v] +
    vcnt[v]``), pool items first: ``pc[v]`` of them. Bins are doubly linked lists of items.
    """

    vals: I64  # the distinct lengths, longest first
    vcnt: I64  # items of each length
    first: I64  # the first item of each length
    vid: I64  # the length index of each item
    tab: I32  # length -> its index (empty above TABLE_LIMIT: binary search)
    perm: I32  # the items, by length, pool items first in each block
    slot: I32  # where each item is in perm
    pc: I32  # pool items of each length
    bin_of: I32  # the bin of each item, -1 in the pool
    load: I64  # the load of each bin
    head: I32  # the first item of each bin (-1: empty) ...
    nxt: I32  # ... and the next ...
    prv: I32  # ... and the previous item in its bin
    pool: I32  # the pool items (npool of them) ...
    ppos: I32  # ... and where each is listed (-1: packed)
    live: I32  # the bins in use (nlive of them) ...
    lpos: I32  # ... and where each is listed (-1: not in use)
    free: I32  # the empty bins (nfree of them)
    entered: I64  # the step at which each item last entered the pool
    born: I64  # the step at which each bin was last formed
    scal: I64  # the scalars (see S_*)


class _Blocks(NamedTuple):
    """Items by length (part of a :class:`WalkState`): the items of length index v are one
    block of ``perm`` from ``first[v]``, pool items first (``pc[v]`` of them)."""

    vid: I64
    first: I64
    pc: I32
    perm: I32
    slot: I32


class _Bins(NamedTuple):
    """The packing (part of a :class:`WalkState`): each bin a doubly linked list."""

    bin_of: I32
    load: I64
    head: I32
    nxt: I32
    prv: I32


class _Pool(NamedTuple):
    """The pool (part of a :class:`WalkState`): its items, where each is listed, and the
    step at which each item entered it."""

    pool: I32
    ppos: I32
    entered: I64


class _Live(NamedTuple):
    """The bins (part of a :class:`WalkState`): in use, where each is listed, empty, and
    the step at which each was formed."""

    live: I32
    lpos: I32
    free: I32
    born: I64


@jit
def _parts(w: WalkState) -> tuple[_Blocks, _Bins, _Pool, _Live]:
    """The parts of ``w`` that the moves below change (the same arrays)."""
    return (
        _Blocks(w.vid, w.first, w.pc, w.perm, w.slot),
        _Bins(w.bin_of, w.load, w.head, w.nxt, w.prv),
        _Pool(w.pool, w.ppos, w.entered),
        _Live(w.live, w.lpos, w.free, w.born),
    )


# -- moving items between the pool and the bins ------------------------------------------
# (the moves take the parts they change rather than the whole state: a compiled call
# takes a reference to every array it is handed, and these calls are many)


@jit
def _place(bk: _Blocks, i: int, t: int) -> None:
    """Item ``i`` to position ``t`` of ``perm``; the item there takes i's old position."""
    s = bk.slot[i]
    o = bk.perm[t]
    bk.perm[t] = i
    bk.slot[i] = t
    bk.perm[s] = o
    bk.slot[o] = s


@jit
def _enter_pool(i: int, bk: _Blocks, pl: _Pool, npool: int) -> int:
    """List item ``i`` (in no bin) in the pool; returns the new pool size."""
    v = bk.vid[i]
    _place(bk, i, bk.first[v] + bk.pc[v])
    bk.pc[v] += 1
    pl.ppos[i] = npool
    pl.pool[npool] = i
    return npool + 1


@jit
def _to_pool(i: int, moves: int, q: I64, bk: _Blocks, bn: _Bins, pl: _Pool, npool: int) -> int:
    """Take item ``i`` out of its bin into the pool, stamped as entering at ``moves``;
    returns the new pool size."""
    b = bn.bin_of[i]
    if bn.prv[i] >= 0:
        bn.nxt[bn.prv[i]] = bn.nxt[i]
    else:
        bn.head[b] = bn.nxt[i]
    if bn.nxt[i] >= 0:
        bn.prv[bn.nxt[i]] = bn.prv[i]
    bn.load[b] -= q[i]
    bn.bin_of[i] = -1
    npool = _enter_pool(i, bk, pl, npool)
    pl.entered[i] = moves
    return npool


@jit
def _to_bin(i: int, b: int, q: I64, bk: _Blocks, bn: _Bins, pl: _Pool, npool: int) -> int:
    """Take pool item ``i`` into bin ``b``; returns the new pool size."""
    p = pl.ppos[i]
    npool -= 1
    last = pl.pool[npool]
    pl.pool[p] = last
    pl.ppos[last] = p
    pl.ppos[i] = -1
    v = bk.vid[i]
    _place(bk, i, bk.first[v] + bk.pc[v] - 1)
    bk.pc[v] -= 1
    bn.bin_of[i] = b
    bn.nxt[i] = bn.head[b]
    if bn.head[b] >= 0:
        bn.prv[bn.head[b]] = i
    bn.prv[i] = -1
    bn.head[b] = i
    bn.load[b] += q[i]
    return npool


@jit
def _list_live(b: int, lv: _Live, nlive: int) -> int:
    """List bin ``b`` as in use; returns the new count."""
    lv.lpos[b] = nlive
    lv.live[nlive] = b
    return nlive + 1


@jit
def _release(
    b: int,
    moves: int,
    q: I64,
    bk: _Blocks,
    bn: _Bins,
    pl: _Pool,
    lv: _Live,
    counts: tuple[int, int, int],
) -> tuple[int, int, int]:
    """Empty bin ``b`` into the pool (each item stamped as entering at ``moves``), take it
    off the live list and put it on the free list. ``counts`` and the result: (npool,
    nlive, nfree)."""
    npool, nlive, nfree = counts
    while bn.head[b] >= 0:
        npool = _to_pool(bn.head[b], moves, q, bk, bn, pl, npool)
    p = lv.lpos[b]
    nlive -= 1
    lv.live[p] = lv.live[nlive]
    lv.lpos[lv.live[p]] = p
    lv.lpos[b] = -1
    lv.free[nfree] = b
    return npool, nlive, nfree + 1


# -- looking things up (the innermost loops: each takes just the arrays it reads) ---------


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
def _items_of(b: int, head: I32, nxt: I32, skip: int, items: I64) -> int:
    """The items of bin ``b`` but ``skip`` (at most BIN_ITEMS) into ``items``; how many."""
    m = 0
    i = head[b]
    while i >= 0 and m < BIN_ITEMS:
        if i != skip:
            items[m] = i
            m += 1
        i = nxt[i]
    return m


@jit
def _ffd_plan(
    q: I64, cap: int, pool: I32, npool: int, nfree: int, sizes: I64, fload: I64
) -> tuple[int, int]:
    """First fit decreasing of the pool (at most FFD_POOL items) into at most ``nfree``
    empty bins: the pool items longest first in ``sizes``; returns (bins used, their
    waste), bins used -1 when they do not suffice."""
    for t in range(npool):
        sizes[t] = pool[t]
    sort_longest_first(sizes, npool, q)
    used = 0
    for t in range(npool):
        x = q[sizes[t]]
        e = 0
        while e < used and fload[e] + x > cap:
            e += 1
        if e == used:
            if used == nfree:
                return -1, 0
            fload[e] = 0
            used += 1
        fload[e] += x
    extra = 0
    for e in range(used):
        extra += cap - fload[e]
    return used, extra


# -- the state and the walk --------------------------------------------------------------


@jit
def _keep(scal: I64, now: tuple[int, int, int, int, int, int, int, int, int]) -> None:
    """Keep the scalars S_POOL .. S_SINCE (in that order) in ``scal``."""
    for t in range(S_SINCE + 1):
        scal[t] = now[t]


@jit
def _kept(scal: I64) -> tuple[int, int, int, int, int, int, int, int, int]:
    """The scalars S_POOL .. S_SINCE of ``scal``, as plain ints (the generator must not
    overflow as a numpy scalar would when run as plain Python)."""
    return (
        int(scal[S_POOL]),
        int(scal[S_LIVE]),
        int(scal[S_FREE]),
        int(scal[S_WASTE]),
        int(scal[S_RNG]),
        int(scal[S_MOVES]),
        int(scal[S_IDLE]),
        int(scal[S_BEST]),
        int(scal[S_SINCE]),
    )


@jit
def walk_start(q: I64, cap: int, k: int, bin_of0: I64, seed: int) -> WalkState:
    """The state of :func:`eject_walk` for the partial packing ``bin_of0``.

    ``q``: whole ticks, longest first; ``bin_of0``: bin of each item (0 .. k - 1) or -1
    for the pool. Bins numbered k or more are left out (their items wait in the pool).
    """
    n = q.shape[0]
    vals, vcnt, first, vid = distinct_lengths(q)
    nb_max = k + 1
    w = WalkState(
        vals,
        vcnt,
        first,
        vid,
        length_table(vals, cap),
        np.arange(n).astype(np.int32),  # perm
        np.arange(n).astype(np.int32),  # slot
        np.zeros(vals.shape[0], dtype=np.int32),  # pc
        np.full(n, -1, dtype=np.int32),  # bin_of
        np.zeros(nb_max, dtype=np.int64),  # load
        np.full(nb_max, -1, dtype=np.int32),  # head
        np.full(n, -1, dtype=np.int32),  # nxt
        np.full(n, -1, dtype=np.int32),  # prv
        np.empty(n, dtype=np.int32),  # pool
        np.full(n, -1, dtype=np.int32),  # ppos
        np.full(nb_max, -1, dtype=np.int32),  # live
        np.full(nb_max, -1, dtype=np.int32),  # lpos
        np.full(nb_max, -1, dtype=np.int32),  # free
        np.zeros(n, dtype=np.int64),  # entered
        np.full(nb_max, -PROTECT - 1, dtype=np.int64),  # born
        np.zeros(S_SIZE, dtype=np.int64),  # scal
    )
    bk, bn, pl, lv = _parts(w)
    npool = 0
    for i in range(n):  # every item starts in the pool ...
        npool = _enter_pool(i, bk, pl, npool)
    for i in range(n):  # ... and goes to its bin
        b = bin_of0[i]
        if 0 <= b < k:
            npool = _to_bin(i, b, q, bk, bn, pl, npool)
    nlive = 0
    nfree = 0
    for b in range(k - 1, -1, -1):
        if bn.head[b] < 0:
            lv.free[nfree] = b
            nfree += 1
    for b in range(k):
        if bn.head[b] >= 0:
            nlive = _list_live(b, lv, nlive)
    waste = 0
    for t in range(nlive):
        waste += cap - bn.load[lv.live[t]]
    scal = w.scal
    _keep(scal, (npool, nlive, nfree, waste, rng_next(seed * 7919 + 3), 0, 0, npool, 0))
    scal[S_RMANY] = REPAIR_MANY
    scal[S_SMALL] = SMALL_POOL
    scal[S_STALL] = STALL
    scal[S_KICK] = KICK_BINS
    scal[S_TOUR] = TOUR
    return w


@jit
def eject_walk(q: I64, cap: int, slack: int, max_moves: int, w: WalkState) -> int:
    """Up to ``max_moves`` steps of the pool walk (see the module) on the state made by
    :func:`walk_start` (changed in place). Every step keeps each bin within ``cap`` and
    the total waste within ``slack``. Returns the items left in the pool (0: every item
    is packed, in at most ``k`` bins).
    """
    vals, vcnt, tab, scal = w.vals, w.vcnt, w.tab, w.scal
    bk, bn, pl, lv = _parts(w)
    first, pc, perm = bk.first, bk.pc, bk.perm
    bin_of, load, head, nxt = bn.bin_of, bn.load, bn.head, bn.nxt
    pool, entered = pl.pool, pl.entered
    live, free, born = lv.live, lv.free, lv.born
    npool, nlive, nfree, waste, state, moves, idle, best_pool, since = _kept(scal)
    stop = moves + max_moves
    items = np.empty(BIN_ITEMS, dtype=np.int64)
    sizes = np.empty(FFD_POOL, dtype=np.int64)
    fload = np.empty(FFD_POOL, dtype=np.int64)
    check_ffd = True
    while npool > 0 and moves < stop:
        moves += 1
        if check_ffd and npool <= FFD_POOL:
            # the pool, first fit decreasing, into the bins still free
            check_ffd = False
            used, extra = _ffd_plan(q, cap, pool, npool, nfree, sizes, fload)
            if used >= 0 and waste + extra <= slack:
                for e in range(used):
                    fload[e] = 0
                for t in range(npool):  # the same first fit, now applied
                    i = sizes[t]
                    e = 0
                    while fload[e] + q[i] > cap:
                        e += 1
                    fload[e] += q[i]
                    npool = _to_bin(i, free[nfree - 1 - e], q, bk, bn, pl, npool)
                for e in range(used):
                    b = free[nfree - 1 - e]
                    nlive = _list_live(b, lv, nlive)
                    born[b] = moves
                nfree -= used
                waste += extra
                break
        if nfree == 0:
            break
        # the item to complete: the longest waiting of four drawn from the pool
        state = rng_next(state)
        a = pool[rng_below(state, npool)]
        for _ in range(3):
            state = rng_next(state)
            c = pool[rng_below(state, npool)]
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
            # room for a from one packed item (plus perhaps one pool item p), its bin
            # refilled from the pool if it can be (an ejection chain), else released
            rep_b = -1
            rep_z = -1
            rep_1 = -1
            rep_2 = -1
            tried = 0
            limit = scal[S_RMANY] if npool <= scal[S_SMALL] else REPAIR_TRIES
            state = rng_next(state)
            off = rng_below(state, npool + 1)
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
                state = rng_next(state)
                o2 = rng_below(state, packed)
                for u1 in range(packed):
                    yi = perm[first[v] + pc[v] + (o2 + u1) % packed]
                    b = bin_of[yi]
                    if born[b] + PROTECT > moves:
                        continue
                    # of a few bins holding this length, take from the one whose longest
                    # item is shortest (a bin of short items only is the one a tight
                    # packing can least afford)
                    lb = _longest(q, head, nxt, b)
                    for u2 in range(u1 + 1, min(packed, u1 + scal[S_TOUR])):
                        y2 = perm[first[v] + pc[v] + (o2 + u2) % packed]
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
                    m = _items_of(b, head, nxt, yi, items)
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
                npool = _to_pool(steal, moves, q, bk, bn, pl, npool)
                if rep_z >= 0:
                    npool = _to_pool(rep_z, moves, q, bk, bn, pl, npool)
                npool = _to_bin(rep_1, rep_b, q, bk, bn, pl, npool)
                if rep_2 >= 0:
                    npool = _to_bin(rep_2, rep_b, q, bk, bn, pl, npool)
                born[rep_b] = moves
                waste -= load[rep_b]
            elif steal < 0 and nlive > 1 and moves - entered[a] > AGE + AGE_PER_ITEM * npool:
                # a long wait: two packed items y1 + y2 = r from two bins
                for _ in range(8):
                    state = rng_next(state)
                    b1 = live[rng_below(state, nlive)]
                    m = _items_of(b1, head, nxt, -1, items)
                    state = rng_next(state)
                    y1 = items[rng_below(state, m)]
                    if q[y1] >= r:
                        continue
                    v = _packed_near(r - q[y1], r - q[y1] - allow, vals, tab, vcnt, pc)
                    if v < 0:
                        continue
                    state = rng_next(state)
                    y2 = perm[first[v] + pc[v] + rng_below(state, vcnt[v] - pc[v])]
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
                state = rng_next(state)
                b = live[rng_below(state, nlive)]
                waste -= cap - load[b]
                npool, nlive, nfree = _release(b, moves, q, bk, bn, pl, lv, (npool, nlive, nfree))
            best_pool = npool
            since = moves
            check_ffd = True
            continue
        idle = 0
        for vb in (np.int64(victim), np.int64(bin_of[steal2]) if steal2 >= 0 else np.int64(-1)):
            if vb < 0:
                continue
            waste -= cap - load[vb]
            npool, nlive, nfree = _release(int(vb), moves, q, bk, bn, pl, lv, (npool, nlive, nfree))
        nfree -= 1
        nb = free[nfree]
        for c in (np.int64(a), np.int64(n1), np.int64(n2), np.int64(steal), np.int64(steal2)):
            if c >= 0:
                npool = _to_bin(int(c), nb, q, bk, bn, pl, npool)
        nlive = _list_live(nb, lv, nlive)
        born[nb] = moves
        waste += cap - load[nb]
        check_ffd = True
        if npool < best_pool:
            best_pool = npool
            since = moves
    _keep(scal, (npool, nlive, nfree, waste, state, moves, idle, best_pool, since))
    return int(npool)
