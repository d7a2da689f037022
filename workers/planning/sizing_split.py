"""Batches of long jobs and short fillers: a plan that packs the long ones first and fills
their gaps exactly, and a bound from the waste the fillers cannot avoid.

Some batches are two populations: long jobs (a farm's shot renders, 20 to 90 minutes to
the second) and many short ones of a few distinct lengths (transcode chunks of 30 to 120
s, most of them exact multiples of 15 s, some a second or two off). At the optimum nearly
every node is full to within seconds, and what decides it is which long jobs share a node
and whether the gap they leave can be filled *exactly* by the short ones. Constructions
that take the best fit for each job in turn (first/best fit decreasing, the perfect
packing search) leave gaps of a few seconds that nothing fills. :func:`split_plan`:

1. the long jobs, longest first, each to the node it fits best, or to one at most
   ``PLACE_REACH`` ticks looser when the gap that leaves is final (shorter than the
   shortest long job) and the short jobs cannot fill it while they could fill the other
   (the fillable gaps: the sums of the short lengths with their multiplicities, a
   bounded subset-sum kept as a bitset);
2. swaps of two long jobs between nodes, so that gaps the short jobs cannot fill become
   ones they can (``_repair``; a node whose long job can share with no other is left
   alone: a swap between two such only exchanges their gaps);
3. every gap, smallest first, filled as full as the short jobs left allow: the most
   plentiful lengths while the gap is wide, then an exact bounded subset-sum over the
   last few short jobs' worth, which takes a rare length (the odd seconds) only where it
   is needed; the short jobs left over fill new nodes the same way.

It is a heuristic: the caller checks the plan on the true durations
(:class:`.sizing_fit.Fit`) and keeps it only when it uses fewer nodes. It runs on whole
ticks rounded up, so a node within the capacity fits in real seconds.

:func:`filler_waste_bound` is a lower bound (ticks rounded down): a long job that shares
its node with no other long job wastes at least its gap less the largest sum of short
jobs that fits it, so ``nodes * C >= total work + those wastes``.
"""

from __future__ import annotations

import bisect
import time

import numpy as np
import numpy.typing as npt

from .sizing_gaps import regap

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: the split: the short jobs are at most MAX_SHORT_SHARE of the capacity and of the
#: shortest long job, of at most MAX_SHORT_LENGTHS distinct lengths
MAX_SHORT_SHARE, MAX_SHORT_LENGTHS = 0.125, 32
#: ... and at least this share of the jobs
MIN_SHORT_JOBS = 0.1
#: the sums are bitsets over the capacity: no split above this many ticks a node
MAX_CAP = 100_000
#: the exact subset-sum fills the last FILL_WINDOW_SHORTS longest short jobs' worth of a gap
FILL_WINDOW_SHORTS = 3
#: the fills sort the short lengths by what is left of them before every bin, or every
#: PLENTY_EVERY bins when there are more than PLENTY_ALL_BINS
PLENTY_EVERY, PLENTY_ALL_BINS = 16, 4000
#: a swap may change a gap by less than this many ticks; passes over the bins
REPAIR_REACH, REPAIR_PASSES = 200, 2
#: a long job may go to a bin up to this many ticks looser than its best fit
PLACE_REACH = 200
#: the gap repair leaves the fills this long a node (they take about 13 us a node on our
#: machine, 0.21 s for 16,000 nodes; a measure of best fit's own time was tried instead
#: and a garbage-collection pause in it starved the repair), and fills its placements up
#: to REGAP_ROUNDS times (learning which gaps come out short)
FILL_SECONDS_PER_BIN, REGAP_ROUNDS = 2e-5, 6


def split_point(q: I64, cap: int) -> int:
    """The length from which a job counts as long, or 0 when the batch has no such split:
    the widest ratio between consecutive distinct lengths whose shorter side is at most
    ``MAX_SHORT_SHARE`` of the capacity and of the longer side, with at most
    ``MAX_SHORT_LENGTHS`` distinct lengths and at least ``MIN_SHORT_JOBS`` of the jobs
    below (none when the capacity is above ``MAX_CAP`` ticks)."""
    pos = q[q > 0]
    if cap > MAX_CAP:
        return 0
    small = pos[pos <= MAX_SHORT_SHARE * cap]  # the only lengths a short job can have
    if small.size < max(1.0, MIN_SHORT_JOBS * pos.size):
        return 0
    vals, counts = np.unique(small, return_counts=True)
    below = np.cumsum(counts)  # jobs no longer than each length
    vals = vals[: MAX_SHORT_LENGTHS + 1]
    if vals.size <= MAX_SHORT_LENGTHS:  # the next length above them, if any
        rest = pos[pos > MAX_SHORT_SHARE * cap]
        if rest.size:
            vals = np.append(vals, rest.min())
    best, at = 0.0, 0
    for i in range(min(MAX_SHORT_LENGTHS, vals.size - 1)):
        lo, hi = int(vals[i]), int(vals[i + 1])
        if lo > MAX_SHORT_SHARE * cap or lo > MAX_SHORT_SHARE * hi:
            continue
        if below[i] < MIN_SHORT_JOBS * pos.size:  # too few short jobs to matter
            continue
        if hi / lo > best:
            best, at = hi / lo, hi
    return at


def _reach(vals: list[int], cnt: list[int], limit: int) -> int:
    """Bitset (bit s set) of the sums up to ``limit`` of sub-multisets of the lengths
    ``vals`` with multiplicities ``cnt`` (binary splitting of each count)."""
    mask = (1 << (limit + 1)) - 1
    r = 1
    for v, c in zip(vals, cnt, strict=True):
        c = min(c, limit // v)
        k = 1
        while c > 0:
            t = min(k, c)
            r |= (r << (v * t)) & mask
            c -= t
            k <<= 1
    return r


def _plenty(vals: list[int], cnt: list[int]) -> list[int]:
    """The short lengths, most plentiful first (then longest first)."""
    return sorted(range(len(vals)), key=lambda i: (-cnt[i], -vals[i]))


def _fill(
    gap: int, vals: list[int], cnt: list[int], window: int, plenty: list[int] | None = None
) -> list[int]:
    """How many of each short length to put in a gap: as full as possible (greedy down to
    ``window`` ticks, then an exact bounded subset-sum); ``cnt`` is decreased."""
    take = [0] * len(vals)
    rem = gap
    # while the gap is wide: the most plentiful lengths first (the rare ones are what
    # an exact fill of an odd remainder needs)
    if plenty is None:
        plenty = _plenty(vals, cnt)
    for i in plenty:
        if rem <= window:
            break
        v = vals[i]
        k = min(cnt[i], max(0, (rem - window) // v + 1))
        k = min(k, rem // v)
        take[i] += k
        cnt[i] -= k
        rem -= k * v
    if rem <= 0:
        return take
    # exact bounded subset-sum on what is left of the gap, remembering each step; the
    # plentiful lengths first, so that the walk back takes a rare one only when needed
    mask = (1 << (rem + 1)) - 1
    steps: list[tuple[int, int, int]] = []  # (index, copies, bitset before)
    r = 1
    for i in plenty:
        v = vals[i]
        c = min(cnt[i], rem // v)
        k = 1
        while c > 0:
            t = min(k, c)
            steps.append((i, t, r))
            r |= (r << (v * t)) & mask
            c -= t
            k <<= 1
    s = r.bit_length() - 1  # the largest reachable sum
    for i, t, before in reversed(steps):
        if not (before >> s) & 1:
            take[i] += t
            cnt[i] -= t
            s -= vals[i] * t
    return take


def _waste_of(good: int, limit: int) -> list[int]:
    """For every gap 0 .. ``limit``: the gap less the largest fillable sum within it
    (``good``, a bitset of the fillable sums)."""
    bits = np.frombuffer(good.to_bytes((limit + 8) // 8, "little"), dtype=np.uint8)
    reach = np.unpackbits(bits, bitorder="little")[: limit + 1].astype(bool)
    best = np.maximum.accumulate(np.where(reach, np.arange(limit + 1), 0))
    out: list[int] = (np.arange(limit + 1) - best).tolist()
    return out


def _repair(
    q: I64, long_idx: I64, bin_of: I32, gaps: list[int], waste: list[int], t_end: float
) -> None:
    """Swap long jobs between bins so that gaps the short jobs cannot fill (``waste``:
    what each gap wastes at best) waste less: a job ``x`` of such a bin for a job ``y``
    of another bin, nearest lengths first; the first swap that leaves the bin without
    waste and the other no worse, else the swap that saves the most. Two passes."""
    members: dict[int, list[int]] = {}
    where: dict[int, list[int]] = {}  # long length -> jobs of that length
    for j in long_idx.tolist():
        members.setdefault(int(bin_of[j]), []).append(j)
        where.setdefault(int(q[j]), []).append(j)
    shortest = int(q[long_idx[-1]]) if long_idx.size else 0
    for _ in range(REPAIR_PASSES):
        for a in [b for b, g in enumerate(gaps) if waste[g] > 0]:
            if time.perf_counter() > t_end:
                return
            ga = gaps[a]
            if waste[ga] == 0 or (len(members[a]) == 1 and shortest > ga + REPAIR_REACH):
                # (alone, and so is every long job it could swap with: a swap between two
                # such bins only exchanges their gaps)
                continue
            best = (0, -1, -1, 0)  # (saving, j, k, delta)
            for step in range(1, REPAIR_REACH):
                for delta in (-step, step):  # the new gap of a: ga + delta
                    if not 0 <= ga + delta < len(waste):
                        continue
                    wa = waste[ga + delta]
                    if wa >= waste[ga]:
                        continue
                    for j in members[a]:
                        for k in where.get(int(q[j]) - delta, ()):  # y takes x's place
                            b = int(bin_of[k])
                            gb = gaps[b]
                            if b == a or gb < delta:
                                continue
                            saving = waste[ga] + waste[gb] - wa - waste[gb - delta]
                            if saving > best[0]:
                                best = (saving, j, k, delta)
                if best[0] >= waste[ga]:  # a is without waste, the other no worse
                    break
            saving, j, k, delta = best
            if saving <= 0:
                continue
            b = int(bin_of[k])
            members[a].remove(j)
            members[b].remove(k)
            members[a].append(k)
            members[b].append(j)
            bin_of[j], bin_of[k] = b, a
            gaps[a], gaps[b] = ga + delta, gaps[b] - delta


def split_plan(
    q: I64,
    cap: int,
    split: int,
    seconds: float = 1.0,
    give_up: float | None = None,
    target: int = 0,
    regap_seconds: float = 0.0,
) -> tuple[I32, int] | None:
    """A packing of ``q`` (whole ticks, rounded up) into bins of ``cap``, long jobs
    (``q >= split``) first and the short ones filled into the gaps; (bin of each job,
    bins used), or None when a job exceeds the capacity. The swaps stop after
    ``seconds``; the whole construction gives up (None) after ``give_up`` seconds.

    With a ``target`` node count, when the long jobs' gaps waste more than ``target``
    nodes can afford, the gap repair of :mod:`.sizing_gaps` moves them for up to
    ``regap_seconds`` (leaving the fills their time) before the gaps are filled."""
    now = time.perf_counter()
    t_end = now + seconds
    t_give_up = now + (give_up if give_up is not None else 1e9)
    n = int(q.size)
    if n == 0 or int(q.max()) > cap:
        return None
    long_idx = np.flatnonzero(q >= split)
    short_idx = np.flatnonzero((q < split) & (q > 0))  # zero-length jobs stay on bin 0
    long_idx = long_idx[np.argsort(-q[long_idx], kind="stable")]
    vals_a, inv = np.unique(q[short_idx], return_inverse=True)
    vals = [int(v) for v in vals_a]
    cnt = np.bincount(inv, minlength=len(vals)).tolist() if vals else []
    shortest_long = int(q[long_idx[-1]]) if long_idx.size else cap + 1
    good = _reach(vals, cnt, cap)
    bin_of = np.zeros(n, dtype=np.int32)
    gaps: list[int] = []  # per bin
    open_gaps: list[tuple[int, int]] = []  # (gap, bin), sorted; bins that may take a long job
    for j in long_idx.tolist():  # best fit decreasing
        x = int(q[j])
        at = bisect.bisect_left(open_gaps, (x, -1))
        if at < len(open_gaps):
            # the best fit, or a bin a little looser whose gap the short jobs can fill
            pick, limit = at, open_gaps[at][0] + PLACE_REACH
            for k in range(at, len(open_gaps)):
                rest = open_gaps[k][0] - x
                if open_gaps[k][0] > limit:
                    break
                if rest >= shortest_long or (good >> rest) & 1:
                    pick = k
                    break
            chosen = open_gaps.pop(pick)[1]
        else:
            chosen = len(gaps)
            gaps.append(cap)
        gaps[chosen] -= x
        bin_of[j] = chosen
        if gaps[chosen] >= shortest_long:
            bisect.insort(open_gaps, (gaps[chosen], chosen))
    waste = _waste_of(good, cap)
    # what a fill may take: the gap repair ends that much before the construction gives up
    reserve = FILL_SECONDS_PER_BIN * target
    window = FILL_WINDOW_SHORTS * (vals[-1] if vals else 0)
    fills = (vals, cnt, window, waste)
    best: tuple[int, I32, list[list[int]]] | None = None  # (bins, long jobs' bins, fills)
    if long_idx.size and len(gaps) <= target and regap_seconds > 0:
        t0 = time.perf_counter()
        t_regap = min(t0 + regap_seconds, t_give_up - reserve)
        best = _regap_rounds(q, cap, long_idx, bin_of, target, fills, t_regap, t_give_up)
        if best is not None and best[0] <= target:
            return _assemble(q, long_idx, short_idx, inv, best)
        # the swaps get the time the repair took, within the fills' reserve
        t_end = min(t_end + time.perf_counter() - t0, t_give_up - reserve)
        if best is not None and time.perf_counter() > t_give_up - reserve:
            return _assemble(q, long_idx, short_idx, inv, best)
    _repair(q, long_idx, bin_of, gaps, waste, t_end)
    rows = _fill_gaps(gaps, fills, cap, t_give_up)
    if rows is None:
        return None if best is None else _assemble(q, long_idx, short_idx, inv, best)
    used = _bins_used(bin_of[long_idx], rows)
    if best is not None and best[0] < used:
        return _assemble(q, long_idx, short_idx, inv, best)
    return _assemble(q, long_idx, short_idx, inv, (used, bin_of[long_idx], rows))


def _regap_rounds(
    q: I64,
    cap: int,
    long_idx: I64,
    bin_of: I32,
    target: int,
    fills: tuple[list[int], list[int], int, list[int]],
    t_regap: float,
    t_give_up: float,
) -> tuple[int, I32, list[list[int]]] | None:
    """The gap repair (:func:`.sizing_gaps.regap`) of the long jobs' bins ``bin_of`` toward
    ``target`` bins, each of its placements filled (:func:`_fill_gaps`): the best one
    (bins used, long jobs' bins, fills), or None. When a fill misses the target, the gap
    lengths whose fill came out short (their short lengths were used up elsewhere) are
    priced at what they wasted, and the repair goes on from where it was."""
    waste = np.asarray(fills[3], dtype=np.int64)  # what each gap wastes, as learnt
    slack = target * cap - int(q.sum())
    lengths = q[long_idx]
    moved: I64 | None = bin_of[long_idx].astype(np.int64)
    best: tuple[int, I32, list[list[int]]] | None = None
    for seed in range(REGAP_ROUNDS):
        assert moved is not None
        moved = regap(lengths, moved, cap, target, waste, slack, t_regap, seed)
        if moved is None:
            break
        gaps = (cap - np.bincount(moved, weights=lengths, minlength=target)).astype(np.int64)
        gap_list: list[int] = gaps.tolist()
        rows = _fill_gaps(gap_list, fills, cap, t_give_up)
        if rows is None:
            break
        used = _bins_used(moved, rows)
        if best is None or used < best[0]:
            best = (used, moved.astype(np.int32), rows)
        if used <= target or time.perf_counter() > t_regap:
            break
        vals = fills[0]
        for row in rows:
            b = row[0]
            if b < target:
                g = int(gaps[b])
                left = g - sum(v * t for v, t in zip(vals, row[1:], strict=True))
                waste[g] = max(int(waste[g]), left)
    return best


def _fill_gaps(
    gaps: list[int], fills: tuple[list[int], list[int], int, list[int]], cap: int, t_give_up: float
) -> list[list[int]] | None:
    """How many short jobs of each length go to each bin: [bin, count of each length]
    per bin, the gaps ``gaps`` smallest first, then new bins of ``cap`` for the short
    jobs left (their numbers follow the gaps'); None after ``t_give_up``. ``fills`` are
    the short lengths, their counts (not changed), the window of the exact fill and what
    each gap wastes at best."""
    vals, cnt0, window, waste = fills
    cnt = list(cnt0)
    per_bin: list[list[int]] = []
    plenty = _plenty(vals, cnt)
    every = 1 if len(gaps) <= PLENTY_ALL_BINS else PLENTY_EVERY
    for k, b in enumerate(sorted(range(len(gaps)), key=gaps.__getitem__)):
        if k % 16 == 15 and time.perf_counter() > t_give_up:
            return None
        if gaps[b] == 0:
            continue
        if k % every == 0:  # the counts change slowly: sorted again now and then
            plenty = _plenty(vals, cnt)
        # a node of short jobs alone: all of it by the exact subset-sum (the last ones
        # must split what is left exactly; the greedy part would use it up unevenly)
        g = gaps[b]
        take = _fill(g, vals, cnt, cap if g == cap else window, plenty)
        if g < cap and g - sum(v * t for v, t in zip(vals, take, strict=True)) > waste[g]:
            # short of what the whole multiset fills (the lengths the greedy part took
            # are used up): the whole gap by the exact subset-sum instead
            for i, t in enumerate(take):
                cnt[i] += t
            take = _fill(g, vals, cnt, g, plenty)
        per_bin.append([b, *take])
    b = len(gaps)
    while vals and sum(cnt) > 0:  # the short jobs left fill new nodes
        if time.perf_counter() > t_give_up:
            return None
        before = sum(cnt)
        per_bin.append([b, *_fill(cap, vals, cnt, cap)])
        b += 1
        if sum(cnt) == before:  # pragma: no cover - every short job fits an empty node
            return None
    return per_bin


def _bins_used(long_bins: I32 | I64, rows: list[list[int]]) -> int:
    """Bins holding a job: those of the long jobs and those the fills put short jobs in."""
    used = set(long_bins.tolist())
    used.update(row[0] for row in rows if any(row[1:]))
    return len(used)


def _assemble(
    q: I64, long_idx: I64, short_idx: I64, inv: I64, plan: tuple[int, I32, list[list[int]]]
) -> tuple[I32, int]:
    """The packing of every job (bins numbered 0 .. m - 1) from the long jobs' bins and
    the fills' counts per bin: (bin of each job, bins used)."""
    _, long_bins, rows = plan
    # zero-length jobs: with the first long job (or the first short ones), not on a bin
    # the gap repair may have emptied
    zero_bin = int(long_bins[0]) if long_bins.size else (rows[0][0] if rows else 0)
    bin_of = np.full(q.size, zero_bin, dtype=np.int64)
    bin_of[long_idx] = long_bins
    # hand the short jobs of each length out to the bins, in the counts chosen
    nvals = len(rows[0]) - 1 if rows else 0
    of_len = [short_idx[inv == i].tolist() for i in range(nvals)]
    for row in rows:
        b = row[0]
        for i, k in enumerate(row[1:]):
            for _ in range(k):
                bin_of[of_len[i].pop()] = b
    used = np.unique(bin_of)  # number the bins in use 0 .. m - 1
    renum = np.full(int(used[-1]) + 1, -1, dtype=np.int64)
    renum[used] = np.arange(used.size)
    return renum[bin_of].astype(np.int32), int(used.size)


def filler_waste_bound(q: I64, cap: int, split: int) -> tuple[int, int]:
    """A lower bound on the bins of ``q`` (whole ticks, rounded down) from the waste the
    short jobs cannot avoid: (bins, waste counted).

    A long job (``q >= split``) that cannot share a bin with any other long job (it and
    the shortest other one exceed ``cap``) shares its bin with short jobs only, whose sum
    is at most the largest sub-multiset sum of all the short jobs that fits its gap
    ``cap - q``: the bin wastes at least the gap minus that sum. Those bins are distinct,
    the others waste at least nothing, so ``bins * cap >= total + wastes`` (a waste bound
    in the manner of the total-work bound; the sums are exact integers).
    """
    pos = q[q > 0]
    longs = np.sort(pos[pos >= split])
    if longs.size < 2 or split <= 0:
        return 0, 0
    shortest, second = int(longs[0]), int(longs[1])
    # each long job against the shortest *other* long job
    other = np.where(longs == shortest, second, shortest)
    alone = longs[longs + other > cap]
    if alone.size == 0:
        return 0, 0
    vals, cnt = np.unique(pos[pos < split], return_counts=True)
    widest = int(cap - alone.min())
    good = _reach([int(v) for v in vals], [int(c) for c in cnt], widest)
    # the largest reachable sum at most g, for every g up to the widest gap
    bits = np.frombuffer(good.to_bytes((widest + 8) // 8, "little"), dtype=np.uint8)
    reach = np.unpackbits(bits, bitorder="little")[: widest + 1].astype(bool)
    best = np.maximum.accumulate(np.where(reach, np.arange(widest + 1), 0))
    gaps = cap - alone.astype(np.int64)
    waste = int((gaps - best[gaps]).sum())
    total = int(pos.sum())
    return -(-(total + waste) // cap), waste
