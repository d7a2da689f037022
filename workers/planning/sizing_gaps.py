"""Gap repair for the plan of long jobs and short fillers (:mod:`.sizing_split`): move and
swap long jobs between nodes until every node's gap can be filled by the short jobs.

On a farm night of shot renders and transcode chunks, the plan of :func:`.sizing_split.
split_plan` often stays one node above the lower bound although a packing at the bound
exists: at ``m`` nodes of ``C`` ticks the batch leaves ``m * C - total`` ticks free in
all (a few hundred on 10,000 jobs), and each node whose long jobs leave a gap the short
jobs cannot fill exactly (1 to 27 ticks when the shortest chunk is 28, or 33 to 42, ...)
wastes part of that. Best fit puts a long render beside the longest partner that fits,
so its gap is often a few ticks: unfillable. What helps is *which* long jobs share a
node: a render beside a shorter partner (a gap the chunks fill), two short renders
together or three on a node, a short render moved onto a node of chunks alone.

:func:`regap` is a local search on the long jobs alone over ``m`` nodes (the plan's own
nodes and empty ones, a gap of ``C`` each) whose cost is the waste ``sum(waste[gap])``,
``waste[g]`` being ``g`` less the largest sum of short jobs within ``g`` (from the whole
multiset of short lengths). A node of positive waste is drawn at random; for each of its
long jobs it prices, in one vector operation each, every swap with a long job of about
its length on another node and every move onto a node with room for it; the cheapest is
taken when it saves waste or keeps it (then a tabu list keeps it from being undone at
once), and with probability ``exp(-increase / TEMPERATURE)`` when it costs (annealing,
Kirkpatrick, Gelatt and Vecchi 1983: without it the search stalls a tick or two above
the target). Every ``PAIR_EVERY`` iterations (the first included) the nodes of two long
jobs are re-paired all at once: the least-waste assignment of the shorter jobs to the
longer ones (Kuhn's Hungarian method, scipy's ``linear_sum_assignment``, in blocks of
similar lengths), a move no chain of swaps finds soon (on the hardest 10,000-job farm
batch it took the waste from 494 to 475 ticks, the slack being 482). It stops when the
waste is at most ``m * C - total`` (less a margin when it gets there soon): only then can
the short jobs fill the gaps and the nodes of short jobs alone so that ``m`` nodes hold
them all. ``waste[g]`` assumes every short length is at hand; when the fills run out of
one, :func:`.sizing_split.split_plan` prices the gaps that came out short at what they
wasted and calls the search again.

It is a heuristic on whole ticks rounded up and only proposes: :func:`.sizing_split.
split_plan` fills the gaps with the short jobs it really has, and the caller checks the
plan on the true durations (:class:`.sizing_fit.Fit`) before it counts its nodes.
"""

from __future__ import annotations

import math
import time

import numpy as np
import numpy.typing as npt
from scipy.optimize import linear_sum_assignment

I64 = npt.NDArray[np.int64]

#: a swap looks at long jobs at most SWAP_REACH ticks shorter than the one it replaces
#: (the other node's gap must take the difference; wider gaps are reached by moves)
SWAP_REACH = 200
#: annealing temperature in ticks of waste, and how long a job may not return to a node
#: it left on a move that saved nothing (iterations)
TEMPERATURE, TABU_ITERS = 0.5, 50
#: the pairs are re-matched every PAIR_EVERY iterations, in blocks of PAIR_BLOCK
PAIR_EVERY, PAIR_BLOCK = 400, 100
#: the nodes of waste and those with room are read again every REFRESH_EVERY iterations
REFRESH_EVERY = 32
#: the clock is read every CLOCK_EVERY iterations
CLOCK_EVERY = 8
#: once the waste is within the slack, the search goes on for up to MARGIN_ITERS
#: iterations to leave MARGIN ticks more (the fills take what the short jobs left: the
#: last nodes filled may miss their best fill by a few ticks)
MARGIN, MARGIN_ITERS = 24, 150
_NONE = np.iinfo(np.int64).max // 4


def regap(
    lengths: I64,
    bin_of: I64,
    cap: int,
    bins: int,
    waste: I64,
    slack: int,
    t_end: float,
    seed: int = 0,
) -> I64 | None:
    """Long jobs of ``lengths`` (ticks, each at most ``cap``) on nodes ``bin_of`` (each
    below ``bins``; nodes may be empty) moved and swapped onto ``bins`` nodes so that the
    waste of their gaps (``waste[gap]``, an array over 0 .. ``cap``) is at most ``slack``
    (``MARGIN`` less if it gets there soon after): the new node of each long job, or None
    when the search ran to ``t_end`` (``time.perf_counter``) without getting within
    ``slack``."""
    n = int(lengths.size)
    if n == 0 or slack < 0:
        return None
    used = int(bin_of.max()) + 1
    if used > bins or int(lengths.max()) > cap:
        return None
    gap = np.full(bins, cap, dtype=np.int64)
    gap[:used] -= np.bincount(bin_of, weights=lengths, minlength=used).astype(np.int64)
    if int(gap.min()) < 0:
        return None
    B = bin_of.astype(np.int64).copy()
    total = int(waste[gap].sum())
    if total <= slack - MARGIN:
        return B
    best_b: I64 | None = B.copy() if total <= slack else None
    best_total, since = min(total, slack + 1), 0
    lens = lengths
    # a long job that shares a node with no other long job (it and the shortest other
    # one exceed the capacity) never moves: its node's gap is its own
    two = np.partition(lens, 1)[:2] if n > 1 else np.array([cap + 1, cap + 1], dtype=np.int64)
    other = np.where(lens == two[0], two[1], two[0])
    movable = lens + other <= cap
    fixed = np.zeros(bins, dtype=np.bool_)
    fixed[B[~movable]] = True
    members: list[list[int]] = [[] for _ in range(bins)]
    for j in np.flatnonzero(movable).tolist():
        members[int(B[j])].append(j)
    mov = np.flatnonzero(movable)
    order = mov[np.argsort(lens[mov], kind="stable")]  # movable long jobs, shortest first
    sorted_len = lens[order]
    rng = np.random.default_rng(seed)
    tabu: dict[tuple[int, int], int] = {}  # (job, node) -> iteration it may return
    it = 0
    shortest = int(sorted_len[0]) if sorted_len.size else cap + 1
    bad = roomy = np.zeros(0, dtype=np.int64)
    while total > slack - MARGIN:
        it += 1
        if it % PAIR_EVERY == 1:  # every pair re-matched at once (first, then now and then)
            saved = _rematch(lens, B, gap, waste, cap, fixed)
            if saved:
                total -= saved
                members = [[] for _ in range(bins)]
                for j in mov.tolist():
                    members[int(B[j])].append(j)
                if total <= slack and total < best_total:
                    best_b, best_total = B.copy(), total
                continue
        if best_b is not None:
            since += 1
            if since > MARGIN_ITERS:
                break
        if it % CLOCK_EVERY == 0 and time.perf_counter() > t_end:
            break
        if it % REFRESH_EVERY == 1 or bad.size == 0:
            # the nodes of waste, and those with room for a long job (read again now and
            # then: a node that joined since is missed until then)
            bad = np.flatnonzero((waste[gap] > 0) & ~fixed)
            roomy = np.flatnonzero(gap >= shortest)
            if bad.size == 0:
                break  # the waste left is on nodes of unmovable jobs
        a = int(bad[rng.integers(bad.size)])
        ga = int(gap[a])
        wa = int(waste[ga])
        if wa == 0:  # no waste left here
            continue
        best, pick = _NONE, (-1, -1, False)  # (job of a, job or node, is a move)
        for j in members[a]:
            x = int(lens[j])
            # swaps: k (length y) takes j's place, j goes to k's node b
            lo = int(np.searchsorted(sorted_len, x - SWAP_REACH, "left"))
            hi = int(np.searchsorted(sorted_len, x + ga, "right"))
            cand = order[lo:hi]
            b = B[cand]
            gb = gap[b]
            dl = lens[cand] - x
            na, nb = ga - dl, gb + dl
            ok = (na >= 0) & (nb >= 0) & (b != a)
            # (where not ok, index 0 instead: never above the capacity, as each node's
            # load stays at least the job it keeps)
            cost = np.where(ok, waste[na * ok] + waste[nb * ok] - wa - waste[gb], _NONE)
            if cost.size:
                c = int(cost.min())
                if c < best or (c == best and rng.random() < 0.5):
                    ties = np.flatnonzero(cost == c)
                    best, pick = c, (j, int(cand[ties[rng.integers(ties.size)]]), False)
            # moves: j onto a node with room for it
            room = roomy[(gap[roomy] >= x) & (roomy != a)]
            if room.size:
                gr = gap[room]
                mcost = waste[gr - x] + int(waste[ga + x]) - wa - waste[gr]
                c = int(mcost.min())
                if c < best or (c == best and rng.random() < 0.5):
                    ties = np.flatnonzero(mcost == c)
                    best, pick = c, (j, int(room[ties[rng.integers(ties.size)]]), True)
        j, k, is_move = pick
        if j < 0:
            continue
        dest = k if is_move else int(B[k])
        if best >= 0 and tabu.get((j, dest), 0) > it:
            continue
        if best > 0 and rng.random() >= math.exp(-best / TEMPERATURE):
            continue
        x = int(lens[j])
        members[a].remove(j)
        members[dest].append(j)
        B[j] = dest
        if is_move:
            gap[a] += x
            gap[dest] -= x
        else:
            y = int(lens[k])
            members[dest].remove(k)
            members[a].append(k)
            B[k] = a
            gap[a] += x - y
            gap[dest] += y - x
            tabu[(k, dest)] = it + TABU_ITERS
        tabu[(j, a)] = it + TABU_ITERS
        total += best
        if total < best_total:
            best_b, best_total = B.copy(), total
    return B if total <= slack - MARGIN else best_b


def _rematch(
    lens: I64, B: I64, gap: I64, waste: I64, cap: int, fixed: npt.NDArray[np.bool_]
) -> int:
    """Re-pair the long jobs of the nodes that hold two (and no unmovable one): the longer
    of each pair against the shorter ones of the other pairs, the assignment of least
    waste (Kuhn's Hungarian method as ``scipy.optimize.linear_sum_assignment`` solves it,
    in blocks of ``PAIR_BLOCK`` pairs by the longer job's length). Changes ``B`` and
    ``gap`` in place where a block saves waste; returns the waste saved (ticks)."""
    bins = int(gap.size)
    count = np.bincount(B, minlength=bins)
    pairs = np.flatnonzero((count == 2) & ~fixed)
    if pairs.size < 2:
        return 0
    idx = np.argsort(B, kind="stable")
    at = np.searchsorted(B[idx], pairs)
    j1, j2 = idx[at], idx[at + 1]
    first = lens[j1] >= lens[j2]
    big, small = np.where(first, j1, j2), np.where(first, j2, j1)
    by = np.argsort(lens[big], kind="stable")
    saved = 0
    for s in range(0, int(pairs.size), PAIR_BLOCK):
        blk = by[s : s + PAIR_BLOCK]
        bg, sm, nodes = big[blk], small[blk], pairs[blk]
        tot = lens[bg][:, None] + lens[sm][None, :]
        cost = np.where(tot <= cap, waste[np.clip(cap - tot, 0, cap)], _NONE // (2 * cap + 2))
        r, c = linear_sum_assignment(cost)
        after, before = int(cost[r, c].sum()), int(waste[gap[nodes]].sum())
        if after < before:
            B[bg[r]] = nodes[r]
            B[sm[c]] = nodes[r]
            gap[nodes[r]] = cap - lens[bg[r]] - lens[sm[c]]
            saved += before - after
    return saved
