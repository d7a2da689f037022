"""The list scheduler of :mod:`.listing` as a compiled kernel (numba, through
:func:`..kernels.jit`), on flat integer arrays.

It makes the same decisions as :meth:`.listing.Lister.schedule_pure` (the plain-Python
twin the tests compare it with, job by job): the same events in the same ticks, the
same ready job first (least rank among the classes not blocked at this event), the same
slot (the eligible free slot on which the job ends first, ties to the fastest group
listed first, then the lowest slot). Only the data structures differ: each class's
ready jobs are a min-heap of ranks in its own region of one array, the classes' heads
sit in a tournament tree (a blocked class's leaf is set to "none" for the rest of the
event), each node group's free slots are a min-heap of slot indices, and the events a
min-heap of ``time * span + code`` (the codes of :mod:`.listing`).

Written in the subset of Python that numba compiles, so :func:`..kernels.pure` runs the
same code uncompiled.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..kernels import HAVE_JIT, jit

I64 = npt.NDArray[np.int64]

#: "no ready job" in the tournament tree (above every ``rank * classes + class``)
NONE = 2**62
#: without a kernel loaded yet, a graph of at least this many jobs loads it (numba's
#: start-up, a few tenths of a second, costs less than plain Python on such a graph)
KERNEL_FROM_JOBS = 50_000


def use_kernel(n: int) -> bool:
    """Whether to run a compiled kernel of this package on ``n`` jobs: where numba is
    present, when the list scheduler is already loaded in this process (numba keeps
    the signatures it compiled or loaded from its cache) or ``n >= KERNEL_FROM_JOBS``."""
    return HAVE_JIT and (n >= KERNEL_FROM_JOBS or kernel_loaded())


def kernel_loaded() -> bool:
    """Whether the compiled list scheduler is loaded in this process."""
    return bool(getattr(list_pass, "signatures", ()))


@jit
def _push(h: I64, base: int, size: int, v: int) -> None:
    """Add ``v`` to the min-heap ``h[base:base + size]`` (the caller counts it)."""
    i = size
    while i > 0:
        p = (i - 1) >> 1
        pv = h[base + p]
        if pv <= v:
            break
        h[base + i] = pv
        i = p
    h[base + i] = v


@jit
def _pop(h: I64, base: int, size: int) -> int:
    """Remove and return the least of the min-heap ``h[base:base + size]`` (``size`` is
    the count before; the caller counts one fewer)."""
    top = h[base]
    size -= 1
    if size > 0:
        v = h[base + size]
        i = 0
        while True:
            c = 2 * i + 1
            if c >= size:
                break
            if c + 1 < size and h[base + c + 1] < h[base + c]:
                c += 1
            if h[base + c] < v:
                h[base + i] = h[base + c]
                i = c
            else:
                break
        h[base + i] = v
    return int(top)


@jit
def _set_leaf(tree: I64, leaves: int, c: int, v: int) -> None:
    """Set class ``c``'s leaf of the tournament tree to ``v`` and mend the path up."""
    i = leaves + c
    tree[i] = v
    i >>= 1
    while i >= 1:
        a = tree[2 * i]
        b = tree[2 * i + 1]
        tree[i] = a if a <= b else b
        i >>= 1


@jit
def list_pass(
    rank: I64,
    order: I64,
    waiting: I64,
    sp: I64,
    si: I64,
    cls: I64,
    class_type: I64,
    cl_ptr: I64,
    cl_idx: I64,
    tg_ptr: I64,
    tg_idx: I64,
    gcol: I64,
    slot_group: I64,
    gs_base: I64,
    run: I64,
    slot_time: I64,
    rel_job: I64,
    rel_time: I64,
    held_lim: I64,
    held_end: I64,
    cap: I64,
) -> tuple[I64, I64, int]:
    """One list schedule: each job's slot (global index) and start tick, and how many
    jobs were placed (all of them; see :mod:`.listing` for why).

    ``rank``/``order``: the priority and its inverse; ``waiting``: how many jobs each
    waits for (changed in place); ``sp``/``si``: CSR of the jobs waiting for each;
    ``cls``: each job's class, ``class_type`` its job type, ``cl_ptr``/``cl_idx`` its
    limits; ``tg_ptr``/``tg_idx``: per job type its eligible node groups, fastest first;
    ``gcol``: each group's speed column of ``run``; ``slot_group``: each slot's group,
    ``gs_base``: how many slots the groups before each hold; ``slot_time``: when each
    slot becomes available; ``rel_job``/``rel_time``: releases; ``held_lim``/``held_end``:
    limit places held from 0 until then; ``cap``: each limit's capacity.
    """
    n = rank.shape[0]
    nclass = class_type.shape[0]
    nslot = slot_time.shape[0]
    nrel = rel_job.shape[0]
    nheld = held_lim.shape[0]
    usage = np.zeros(cap.shape[0], dtype=np.int64)
    for i in range(nrel):
        waiting[rel_job[i]] += 1  # its release is one more thing it waits for
    cbase = np.zeros(nclass + 1, dtype=np.int64)
    for j in range(n):
        cbase[cls[j] + 1] += 1
    for c in range(nclass):
        cbase[c + 1] += cbase[c]
    csize = np.zeros(nclass, dtype=np.int64)
    ready = np.empty(max(n, 1), dtype=np.int64)
    leaves = 1
    while leaves < nclass:
        leaves *= 2
    tree = np.full(2 * leaves, NONE, dtype=np.int64)
    for j in range(n):
        if waiting[j] == 0:
            c = cls[j]
            _push(ready, cbase[c], csize[c], rank[j])
            csize[c] += 1
    for c in range(nclass):
        if csize[c] > 0:
            tree[leaves + c] = ready[cbase[c]] * nclass + c
    for i in range(leaves - 1, 0, -1):
        tree[i] = min(tree[2 * i], tree[2 * i + 1])
    ngroup = gs_base.shape[0] - 1
    gsize = np.zeros(ngroup, dtype=np.int64)
    free_slots = np.empty(max(nslot, 1), dtype=np.int64)
    span = 2 * n + nslot + nheld
    events = np.empty(nslot + n + nrel + nheld + 1, dtype=np.int64)
    ne = 0
    for s in range(nslot):
        _push(events, 0, ne, slot_time[s] * span + n + s)
        ne += 1
    for i in range(nrel):
        _push(events, 0, ne, rel_time[i] * span + n + nslot + rel_job[i])
        ne += 1
    for h in range(nheld):
        usage[held_lim[h]] += 1
        _push(events, 0, ne, held_end[h] * span + 2 * n + nslot + h)
        ne += 1
    slot_of = np.zeros(n, dtype=np.int64)
    start = np.zeros(n, dtype=np.int64)
    blocked = np.empty(max(nclass, 1), dtype=np.int64)
    free_count = 0
    done = 0
    while ne > 0:
        now = events[0] // span
        limit = (now + 1) * span
        while ne > 0 and events[0] < limit:
            code = _pop(events, 0, ne) - now * span
            ne -= 1
            s = -1
            one = 0
            lo = 0
            hi = 0
            if code < n:  # a job ends: its slot, its limits, the jobs waiting for it
                s = slot_of[code]
                done += 1
                c = cls[code]
                for a in range(cl_ptr[c], cl_ptr[c + 1]):
                    usage[cl_idx[a]] -= 1
                lo, hi = sp[code], sp[code + 1]
            elif code < n + nslot:  # a slot becomes available
                s = code - n
            elif code < 2 * n + nslot:  # a job's release has come
                one = code - n - nslot
                lo, hi = -1, 0  # index -1 stands for that one job
            else:  # a carried job gives back a limit's place
                usage[held_lim[code - 2 * n - nslot]] -= 1
            for a in range(lo, hi):
                x = one if a < 0 else si[a]
                waiting[x] -= 1
                if waiting[x] == 0:
                    c = cls[x]
                    _push(ready, cbase[c], csize[c], rank[x])
                    csize[c] += 1
                    if ready[cbase[c]] == rank[x]:
                        _set_leaf(tree, leaves, c, rank[x] * nclass + c)
            if s >= 0:
                g = slot_group[s]
                _push(free_slots, gs_base[g], gsize[g], s)
                gsize[g] += 1
                free_count += 1
        nblocked = 0
        while free_count > 0 and tree[1] < NONE:
            v = tree[1]
            c = v % nclass
            j = order[v // nclass]
            full = False
            for a in range(cl_ptr[c], cl_ptr[c + 1]):
                if usage[cl_idx[a]] >= cap[cl_idx[a]]:
                    full = True
                    break
            best_g = -1
            best_d = 0
            best_s = 0
            if not full:
                ty = class_type[c]
                for a in range(tg_ptr[ty], tg_ptr[ty + 1]):
                    g = tg_idx[a]
                    if gsize[g] > 0:
                        d = run[j, gcol[g]]
                        s0 = free_slots[gs_base[g]]
                        if best_g < 0 or d < best_d or (d == best_d and s0 < best_s):
                            best_g, best_d, best_s = g, d, s0
            if best_g < 0:  # its limits are full or no eligible slot is free
                blocked[nblocked] = c
                nblocked += 1
                _set_leaf(tree, leaves, c, NONE)
                continue
            s = _pop(free_slots, gs_base[best_g], gsize[best_g])
            gsize[best_g] -= 1
            free_count -= 1
            slot_of[j] = s
            start[j] = now
            _push(events, 0, ne, (now + best_d) * span + j)
            ne += 1
            for a in range(cl_ptr[c], cl_ptr[c + 1]):
                usage[cl_idx[a]] += 1
            _pop(ready, cbase[c], csize[c])
            csize[c] -= 1
            _set_leaf(tree, leaves, c, ready[cbase[c]] * nclass + c if csize[c] > 0 else NONE)
        for b in range(nblocked):
            c = blocked[b]
            if csize[c] > 0:
                _set_leaf(tree, leaves, c, ready[cbase[c]] * nclass + c)
    return slot_of, start, done


@jit
def _relax(j: int, ptr: I64, idx: I64, d: I64, val: I64) -> None:
    """``val[j] = max(val[j], max over the entries i of row j of val[i] + d[i])``."""
    for a in range(ptr[j], ptr[j + 1]):
        i = idx[a]
        v = val[i] + d[i]
        if v > val[j]:
            val[j] = v


@jit
def heads_tails(
    order: I64, ap: I64, ai: I64, sp: I64, si: I64, d: I64, release: I64
) -> tuple[I64, I64]:
    """Heads and tails (:mod:`.paths`) in one pass each along the topological
    ``order``: ``head[j] = max(release[j], max over i in after(j) of head[i] + d[i])``,
    ``tail[j] = max(0, max over i waiting for j of d[i] + tail[i])``."""
    n = order.shape[0]
    head = release.copy()
    for x in range(n):
        _relax(order[x], ap, ai, d, head)
    tail = np.zeros(n, dtype=np.int64)
    for x in range(n - 1, -1, -1):
        _relax(order[x], sp, si, d, tail)
    return head, tail
