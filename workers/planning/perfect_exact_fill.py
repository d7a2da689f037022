"""The exact fill of the perfect packing search: bins formed one at a time, each filled
to the tick when it can be, by a search over the distinct lengths left whose last item is
found by lookup of the exact remainder.

The bin-at-a-time scheme of minimum bin slack (Gupta and Ho 1999): each bin is opened by
the longest item left and completed by a depth-first search over the *distinct* lengths
left, whose last item is the longest length that fits what remains (a two-sum / three-sum
search over the multiset of remaining lengths). The first completion tried is drawn at
random among the two-item splits, so that restarts differ (with a negative seed: longest
first, as minimum bin slack does). A bin whose best completion wastes more than the slack
still allowed is not formed: its opening item waits in a *pool*, for the ejection walk of
:mod:`workers.planning.perfect_walk`. See :mod:`workers.planning.perfect`.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .binpacking import _alive_from, first_at_most
from .kernels import jit
from .perfect_lengths import distinct_lengths, rng_below, rng_next

I64 = npt.NDArray[np.int64]


@jit
def exact_fill(
    q: I64, cap: int, k: int, slack: int, node_limit: int, seed: int, step_limit: int
) -> tuple[I64, int, int]:
    """Bins filled one at a time, each within the slack still allowed (see the module).

    ``q``: whole ticks, longest first, all in 1 .. cap. Forms at most ``k`` bins; the
    total waste of the bins formed stays within ``slack``. A negative ``seed`` makes no
    random starts (every first completion tried is the longest). ``step_limit`` caps the
    work in all (search nodes and the lengths scanned for them; a kernel cannot read the
    clock): once spent, no further bin is formed and the items left wait in the pool.
    Returns (bin of each item, -1 for the pool; bins formed; steps spent).
    """
    n = q.shape[0]
    bin_of = np.full(n, -1, dtype=np.int64)
    if n == 0:
        return bin_of, 0, 0
    vals, cnt0, first, _ = distinct_lengths(q)
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
    state = rng_next(seed + 1)
    left = n
    bins = 0
    waste = 0
    bottom = d - 1
    steps = 0
    while left > 0 and bins < k and steps < step_limit:
        top = _alive_from(parent, 0)
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
                j = _alive_from(parent, max(lo, first_at_most(vals, 0, rr)))
                while j < d and cnt[j] - inbin[j] <= 0:
                    j = _alive_from(parent, j + 1)
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
                b0 = max(lo, first_at_most(vals, 0, rr - vmin))
                s = b0
                e = first_at_most(vals, 0, (rr - 1) // 2)
                if depth == 0 and b0 + 1 < e and seed >= 0:
                    state = rng_next(state)
                    s = b0 + rng_below(state, e - b0)
                beg[depth] = b0
                start[depth] = s
                phase[depth] = 0 if s > b0 else 1
                cur[depth] = s
            found = -1
            j = cur[depth]
            while True:
                end = d if phase[depth] == 0 else (start[depth] if start[depth] > beg[depth] else d)
                while j < end:
                    steps += 1
                    j = _alive_from(parent, j)
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
            if found >= 0 and nodes < node_limit and steps < step_limit and depth + 1 < deep:
                nodes += 1
                steps += 1
                cur[depth] = found + 1
                path[depth] = found
                inbin[found] += 1
                res_at[depth + 1] = rr - vals[found]
                depth += 1
                cur[depth] = -1
                continue
            if depth == 0 or nodes >= node_limit or steps >= step_limit:
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
    return bin_of, bins, steps
