"""One-dimensional bin packing: the dual of deadline sizing (capacity = the deadline).

Two fast constructions and one exact decision search, each a compiled kernel (numba via
:func:`workers.planning.kernels.jit`) whose ``.py_func`` is the same code run as plain
Python:

``first_fit_decreasing``  items longest first, each into the lowest-numbered bin it fits
                          (Johnson 1973); FFD <= 11/9 OPT + 6/9, tight (Dosa 2007, see
                          ``../shared/references.md`` section 5). A segment tree over the
                          bins holding the least load makes it O(n log n).
``best_fit_decreasing``   items longest first, each into the fullest bin it fits. Bins are
                          kept sorted by load; O(log n) search per item plus the moves.
``pack_search``           depth-first branch and bound on whole ticks: does a packing into
                          ``k`` bins exist? Items longest first, each tried in every open
                          bin of a distinct load and in one new bin (bin symmetry), a bin
                          it fills exactly is the only branch tried (a dominance rule: the
                          later, smaller items in that bin could take its place elsewhere),
                          and a node is cut when the work left exceeds the room left in
                          bins that can still take the shortest item. Stops after
                          ``node_limit`` nodes so that callers can hold a time budget.

The constructions work on real seconds with the same floating-point operations that
:class:`workers.planning.result.Schedule` uses (``start + duration / speed``), so a bin
that "fits" here has a load no later than the capacity in the plan too.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .kernels import chain_starts, jit

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: pack_search outcomes
FOUND, REFUTED, UNDECIDED = 1, 0, -1
#: capacities (ticks) up to this use a table of loads for the symmetry test (8 bytes each)
SEEN_LIMIT = 1 << 22
#: reduce_bins tries pairs of pool items only while the pool is this small
POOL_PAIRS = 40
#: the linear congruential generator of reduce_bins (31 bits; ANSI C's constants)
LCG_A, LCG_C, LCG_M = 1103515245, 12345, 1 << 31


@jit
def first_fit_decreasing(sizes: F64, cap: float) -> tuple[I32, F64, int]:
    """First fit on ``sizes`` (already sorted longest first) into bins of ``cap``.

    Returns (bin of each item, start of each item in its bin, bins used); bins used is
    -1 when an item is longer than ``cap``. Each bin's load is the running sum of its
    items in the order given, the same sum a schedule computes.
    """
    n = sizes.shape[0]
    size = 1
    while size < n:
        size *= 2
    tree = np.empty(2 * size, dtype=np.float64)  # least load in each subtree
    for i in range(size):
        tree[size + i] = 0.0 if i < n else np.inf
    for v in range(size - 1, 0, -1):
        tree[v] = min(tree[2 * v], tree[2 * v + 1])
    bin_of = np.empty(n, dtype=np.int32)
    start = np.empty(n, dtype=np.float64)
    used = 0
    for j in range(n):
        x = sizes[j]
        if not tree[1] + x <= cap:
            return bin_of, start, -1
        v = 1
        while v < size:  # the leftmost leaf whose load + x fits
            v = 2 * v if tree[2 * v] + x <= cap else 2 * v + 1
        b = v - size
        start[j] = tree[v]
        tree[v] = tree[v] + x
        bin_of[j] = b
        if b + 1 > used:
            used = b + 1
        v //= 2
        while v >= 1:
            tree[v] = min(tree[2 * v], tree[2 * v + 1])
            v //= 2
    return bin_of, start, used


@jit
def best_fit_decreasing(sizes: F64, cap: float) -> tuple[I32, F64, int]:
    """Best fit on ``sizes`` (already sorted longest first) into bins of ``cap``.

    Each item goes into the fullest bin whose load + item still fits (ties: any), or a
    new bin. Returns (bin of each item, start in its bin, bins used; -1 if an item is
    longer than ``cap``). Open bins are kept sorted fullest first: a new bin (the least
    loaded, since items shrink) joins near the end, a bin that grows moves forward.
    """
    n = sizes.shape[0]
    ld = np.empty(n, dtype=np.float64)  # loads of the open bins, descending
    bid = np.empty(n, dtype=np.int32)  # the bin each entry belongs to
    bin_of = np.empty(n, dtype=np.int32)
    start = np.empty(n, dtype=np.float64)
    used = 0
    for j in range(n):
        x = sizes[j]
        if not x <= cap:
            return bin_of, start, -1
        # first position whose load + x fits (loads descend, so fitting is a suffix)
        lo, hi = 0, used
        while lo < hi:
            mid = (lo + hi) // 2
            if ld[mid] + x <= cap:
                hi = mid
            else:
                lo = mid + 1
        pos = lo
        if pos == used:  # nothing fits: a new bin at the end
            b = used
            start[j] = 0.0
            v = x
            used += 1
        else:
            b = bid[pos]
            start[j] = ld[pos]
            v = ld[pos] + x
        while pos > 0 and ld[pos - 1] < v:
            ld[pos] = ld[pos - 1]
            bid[pos] = bid[pos - 1]
            pos -= 1
        ld[pos] = v
        bid[pos] = b
        bin_of[j] = b
    return bin_of, start, used


@jit
def pack_search(q: I64, cap: int, k: int, node_limit: int) -> tuple[int, I32, int]:
    """Decide whether items ``q`` (whole ticks, longest first, all > 0) fit in ``k`` bins.

    Returns (FOUND with the bin of each item | REFUTED | UNDECIDED after ``node_limit``
    nodes, bin of each item, nodes visited).
    """
    n = q.shape[0]
    assign = np.full(n, -1, dtype=np.int32)
    if n == 0:
        return 1, assign, 0
    if k <= 0 or q[0] > cap:
        return 0, assign, 0
    suffix = np.zeros(n + 1, dtype=np.int64)
    for i in range(n - 1, -1, -1):
        suffix[i] = suffix[i + 1] + q[i]
    if suffix[0] > k * cap:
        return 0, assign, 0
    qmin = q[n - 1]
    load = np.zeros(k, dtype=np.int64)
    count = np.zeros(k, dtype=np.int64)
    nxt = np.full(n, -1, dtype=np.int64)  # next bin to try at each depth (-1: fresh)
    perfect = np.zeros(n, dtype=np.bool_)
    use_seen = cap <= SEEN_LIMIT
    seen = np.zeros(cap + 1 if use_seen else 1, dtype=np.int64)  # stamp of each load seen
    stamp = 0
    nopen = 0
    nodes = 0
    i = 0
    while True:
        if i == n:
            return 1, assign, nodes
        x = q[i]
        chosen = -1
        if nxt[i] == -1:  # first visit: a bin this item fills exactly is the only branch
            perfect[i] = False
            for b in range(nopen):
                if load[b] + x == cap:
                    chosen = b
                    perfect[i] = True
                    break
            first = 0
        else:
            first = nxt[i]
        if chosen < 0 and not perfect[i]:
            last = nopen + 1 if nopen < k else k
            stamp += 1
            for b in range(first):  # loads already branched on at this depth
                if use_seen:
                    seen[load[b]] = stamp
            for b in range(first, last):
                if load[b] + x > cap:
                    continue
                # a bin of the same load as an earlier bin is the same branch (symmetry)
                dup = False
                if use_seen:
                    dup = seen[load[b]] == stamp
                    seen[load[b]] = stamp
                else:
                    for b2 in range(b):
                        if load[b2] == load[b]:
                            dup = True
                            break
                if not dup:
                    chosen = b
                    break
        if chosen < 0:  # no branch left here: undo the previous item
            nxt[i] = -1
            i -= 1
            if i < 0:
                return 0, assign, nodes
            b = assign[i]
            load[b] -= q[i]
            count[b] -= 1
            if count[b] == 0:
                nopen -= 1
            assign[i] = -1
            continue
        nodes += 1
        if nodes > node_limit:
            return -1, assign, nodes
        nxt[i] = chosen + 1
        if perfect[i]:
            nxt[i] = k  # no other branch after the dominant one
        load[chosen] += x
        count[chosen] += 1
        assign[i] = chosen
        if chosen == nopen:
            nopen += 1
        # cut: the work left must fit in the room of bins that can still take an item
        room = (k - nopen) * cap
        for b in range(nopen):
            r = cap - load[b]
            if r >= qmin:
                room += r
        if suffix[i + 1] > room:
            load[chosen] -= x
            count[chosen] -= 1
            assign[i] = -1
            if count[chosen] == 0:
                nopen -= 1
            continue
        i += 1  # nxt[i] is -1 here: it is reset whenever the search leaves depth i upwards


@jit
def bin_starts(order: I64, bin_of: I32, sizes: F64, m: int) -> F64:
    """Start of each item when every bin runs its items in ``order``, back to back.

    The running sum per bin, in the order given (:func:`kernels.chain_starts` from time
    0): the same floating-point additions a schedule makes, so a bin whose last item ends
    by the capacity here does there too.
    """
    return chain_starts(order, bin_of, sizes, np.zeros(m, dtype=np.float64))


@jit
def _alive_from(parent: I64, i: int) -> int:
    """The first index >= i still unpacked (a union-find of removed items, compressed)."""
    root = i
    while parent[root] != root:
        root = parent[root]
    while parent[i] != root:
        nxt = parent[i]
        parent[i] = root
        i = nxt
    return root


@jit
def first_at_most(vals: I64 | F64, lo: int, x: float) -> int:
    """The first index i >= lo with ``vals[i] <= x`` (``vals`` longest first), or the
    length of ``vals`` when there is none (binary search)."""
    hi = vals.shape[0]
    while lo < hi:
        mid = (lo + hi) // 2
        if vals[mid] <= x:
            hi = mid
        else:
            lo = mid + 1
    return lo


@jit
def _alive_before(back: I64, i: int) -> int:
    """The last index <= i still unpacked, or -1.

    ``back`` is the mirror union-find: entry t + 1 stands for item t (entry 0 for "none"),
    and removing item t links entry t + 1 to entry t.
    """
    return _alive_from(back, i + 1) - 1


@jit
def min_bin_slack(sizes: F64, cap: float, node_limit: int, pair_steps: int) -> tuple[I32, F64, int]:
    """Minimum bin slack (Gupta and Ho 1999, the variant of Fleszar and Hindi 2002 that
    fixes the longest item left in each new bin).

    Bins are filled one at a time: the longest unpacked item, then the subset of the
    others that leaves the least room, found by a depth-first search over the items
    longest first, at most ``node_limit`` nodes per bin (it stops early on a bin filled
    exactly), and the best completion by two items (two pointers, at most ``pair_steps``
    steps). ``sizes`` are sorted longest first. Returns (bin of each item, start in its
    bin, bins used; -1 when an item is longer than ``cap``).
    """
    n = sizes.shape[0]
    bin_of = np.empty(n, dtype=np.int32)
    start = np.empty(n, dtype=np.float64)
    parent = np.arange(n + 1).astype(np.int64)  # parent[n] = n is the end sentinel
    back = np.arange(n + 1).astype(np.int64)  # the mirror, see _alive_before
    path = np.empty(n, dtype=np.int64)
    loads = np.empty(n + 1, dtype=np.float64)
    best = np.empty(n, dtype=np.int64)
    used = 0
    first = 0
    while True:
        first = _alive_from(parent, first)
        if first >= n:
            return bin_of, start, used
        a = sizes[first]
        if not a <= cap:
            return bin_of, start, -1
        parent[first] = first + 1
        back[first + 1] = first
        b = used
        used += 1
        bin_of[first] = b
        start[first] = 0.0
        cur = 0.0 + a
        best_len = 0
        best_slack = cap - cur
        depth = 0
        nodes = 0
        i = first + 1
        while best_slack > 0.0 and nodes < node_limit:
            # the first unpacked item at or after i that still fits (sizes descend)
            lo, hi = i, n
            while lo < hi:
                mid = (lo + hi) // 2
                if cur + sizes[mid] <= cap:
                    hi = mid
                else:
                    lo = mid + 1
            j = _alive_from(parent, lo) if lo < n else n
            if j < n:
                nodes += 1
                path[depth] = j
                loads[depth] = cur
                depth += 1
                cur = cur + sizes[j]
                if cap - cur < best_slack:
                    best_slack = cap - cur
                    best_len = depth
                    for t in range(depth):
                        best[t] = path[t]
                i = j + 1
            else:
                if depth == 0:
                    break
                depth -= 1
                j = path[depth]
                cur = loads[depth]
                i = j + 1
                while i < n and sizes[i] == sizes[j]:  # an equal item gives the same subsets
                    i += 1
        if best_slack > 0.0 and pair_steps > 0:
            # the best two-item completion, by two pointers over the unpacked items
            lo = first_at_most(sizes, first + 1, cap - a)
            i = _alive_from(parent, lo) if lo < n else n
            j = _alive_before(back, n - 1)
            steps = 0
            while i < j and steps < pair_steps:
                steps += 1
                c = (0.0 + a + sizes[i]) + sizes[j]
                if c <= cap:
                    if cap - c < best_slack:
                        best_slack = cap - c
                        best_len = 2
                        best[0] = i
                        best[1] = j
                        if best_slack <= 0.0:
                            break
                    j = _alive_before(back, j - 1)
                else:
                    i = _alive_from(parent, i + 1)
        cur = 0.0 + a
        for t in range(best_len):
            j = best[t]
            bin_of[j] = b
            start[j] = cur
            cur = cur + sizes[j]
            parent[j] = j + 1
            back[j + 1] = j


@jit
def sort_longest_first(items: I64, n: int, q: I64) -> None:
    """Sort the first ``n`` entries of ``items`` (indices into ``q``) longest first, by
    insertion (stable; for a few items)."""
    for t in range(1, n):
        j = items[t]
        u = t
        while u > 0 and q[items[u - 1]] < q[j]:
            items[u] = items[u - 1]
            u -= 1
        items[u] = j


@jit
def _take(items: I64, cnt: I64, b: int, a: int) -> int:
    """Remove entry ``a`` of bin ``b`` (swap with its last entry); returns the item."""
    j = items[b, a]
    cnt[b] -= 1
    items[b, a] = items[b, cnt[b]]
    items[b, cnt[b]] = -1
    return int(j)


@jit
def reduce_bins(
    q: I64, cap: int, bin_of: I32, used: int, free_bins: int, max_work: int, seed: int
) -> tuple[I32, int]:
    """Try to save a bin: the dominance local search of Levine and Ducatelle (2004).

    The ``free_bins`` least loaded bins of a packing (``bin_of``, ``used`` bins, items
    ``q`` in whole ticks) are emptied into a pool; then, bin by bin, up to two items of a
    bin are swapped for up to two pool items that fill it more (Martello and Toth's
    dominance idea: a fuller bin is never worse), or pool items that fit are put in. When
    no swap helps, the pool is packed first fit decreasing into new bins. Pairs of pool
    items are tried while the pool holds at most ``POOL_PAIRS`` items; the search stops
    after about ``max_work`` move evaluations. Returns (the new packing, bins used): the
    new packing whenever it needs no more bins than ``used`` (a sideways step that a
    caller may keep to walk the plateau), else the packing unchanged.
    """
    n = q.shape[0]
    out = bin_of.copy()
    if used <= 1 or free_bins < 1 or free_bins >= used:
        return out, used
    state = (seed * LCG_A + LCG_C) % LCG_M  # a small generator that never overflows int64
    load = np.zeros(used, dtype=np.int64)
    cnt = np.zeros(used, dtype=np.int64)
    for i in range(n):
        load[out[i]] += q[i]
        cnt[out[i]] += 1
    # light bins go to the pool: the least loaded after a random discount of up to a
    # half, so that repeated calls empty different bins
    gone = np.zeros(used, dtype=np.bool_)
    key = np.empty(used, dtype=np.float64)
    for b in range(used):
        state = (state * LCG_A + LCG_C) % LCG_M
        key[b] = load[b] * (1.0 + 0.5 * state / LCG_M)
    for _ in range(free_bins):
        best = -1
        for b in range(used):
            if not gone[b] and (best < 0 or key[b] < key[best]):
                best = b
        gone[best] = True
    width = 2
    for b in range(used):
        if cnt[b] + 2 > width:
            width = cnt[b] + 2
    items = np.full((used, width), -1, dtype=np.int64)
    pool = np.empty(n, dtype=np.int64)
    np_ = 0
    cnt[:] = 0
    for i in range(n):
        b = out[i]
        if gone[b]:
            pool[np_] = i
            np_ += 1
            out[i] = -1
        else:
            items[b, cnt[b]] = i
            cnt[b] += 1
    kept = np.empty(used - free_bins, dtype=np.int64)
    t = 0
    for b in range(used):
        if not gone[b]:
            kept[t] = b
            t += 1
    nk = kept.shape[0]
    work = 0
    improved = True
    while improved and np_ > 0 and work <= max_work:
        improved = False
        state = (state * LCG_A + LCG_C) % LCG_M
        offset = state % nk  # start the pass at a random bin
        for t in range(nk):
            b = kept[(t + offset) % nk]
            room = cap - load[b]
            c = cnt[b]
            best_gain = 0
            bi1, bi2, bp1, bp2 = -1, -1, -1, -1
            # a1, a2: entries of the bin going out (-1: none); p1, p2: pool items coming in
            for a1 in range(-1, c):
                for a2_ in range(a1, c):  # a2_ == a1: no second item out
                    if a1 < 0 and a2_ >= 0:
                        break
                    a2 = a2_ if a2_ > a1 else -1
                    out_sz = 0
                    if a1 >= 0:
                        out_sz += q[items[b, a1]]
                    if a2 >= 0:
                        out_sz += q[items[b, a2]]
                    pairs = np_ <= POOL_PAIRS
                    for p1 in range(np_):
                        g1 = q[pool[p1]] - out_sz
                        work += 1
                        if 0 < g1 <= room and g1 > best_gain:
                            best_gain, bi1, bi2, bp1, bp2 = g1, a1, a2, p1, -1
                        if pairs:
                            work += np_ - p1
                            for p2 in range(p1 + 1, np_):
                                g2 = g1 + q[pool[p2]]
                                if 0 < g2 <= room and g2 > best_gain:
                                    best_gain, bi1, bi2, bp1, bp2 = g2, a1, a2, p1, p2
                    if best_gain == room:
                        break
                if best_gain == room:
                    break
            if best_gain <= 0:
                continue
            if cnt[b] + 2 > width:
                continue  # no slot for two more items in this bin (rare)
            improved = True
            in1 = pool[bp1]
            in2 = pool[bp2] if bp2 >= 0 else -1
            if bp2 >= 0:  # bp2 > bp1: remove it first
                np_ -= 1
                pool[bp2] = pool[np_]
            np_ -= 1
            pool[bp1] = pool[np_]
            if bi2 >= 0:  # bi2 > bi1: remove it first
                j = _take(items, cnt, b, bi2)
                out[j] = -1
                load[b] -= q[j]
                pool[np_] = j
                np_ += 1
            if bi1 >= 0:
                j = _take(items, cnt, b, bi1)
                out[j] = -1
                load[b] -= q[j]
                pool[np_] = j
                np_ += 1
            items[b, cnt[b]] = in1
            cnt[b] += 1
            out[in1] = b
            load[b] += q[in1]
            if in2 >= 0:
                items[b, cnt[b]] = in2
                cnt[b] += 1
                out[in2] = b
                load[b] += q[in2]
            if np_ == 0 or work > max_work:
                break
    # the pool, first fit decreasing into new bins (insertion sort: the pool is small)
    sort_longest_first(pool, np_, q)
    extra = np.zeros(np_ + 1, dtype=np.int64)
    nextra = 0
    for t in range(np_):
        j = pool[t]
        e = 0
        while e < nextra and extra[e] + q[j] > cap:
            e += 1
        if e == nextra:
            nextra += 1
        extra[e] += q[j]
        out[j] = -2 - e
        if nk + nextra > used:
            return bin_of.copy(), used
    newid = np.full(used, -1, dtype=np.int64)
    for t in range(nk):
        newid[kept[t]] = t
    res = np.empty(n, dtype=np.int32)
    for i in range(n):
        res[i] = newid[out[i]] if out[i] >= 0 else nk + (-2 - out[i])
    return res, nk + nextra


def warm_up() -> None:
    """Compile (or load from numba's cache) every kernel here on tiny inputs.

    A cold compile takes seconds; call this at process start so that it is not charged
    to the time budget of the first sizing.
    """
    sizes = np.array([5.0, 4.0, 3.0, 2.0])
    q = np.array([5, 4, 3, 2], dtype=np.int64)
    first_fit_decreasing(sizes, 7.0)
    best_fit_decreasing(sizes, 7.0)
    min_bin_slack(sizes, 7.0, 10, 10)
    pack_search(q, 7, 2, 100)
    reduce_bins(q, 7, np.array([0, 1, 2, 3], dtype=np.int32), 4, 2, 100, 0)
    bin_starts(np.arange(4), np.array([0, 1, 0, 1], dtype=np.int32), sizes, 2)
