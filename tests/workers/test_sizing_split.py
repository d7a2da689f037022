"""Batches of long jobs and short fillers in deadline sizing (sizing_split): the waste
bound, the reachable sums, and the plan that packs the long jobs first and fills their
gaps exactly.

References, none of them spanwright code: the fewest bins by brute force over set
partitions (n <= 8; test_sizing_exact's ``fewest_groups`` through test_sizing_lp), the
fewest bins from the assignment MILP solved by scipy HiGHS (``milp_bins`` of
test_sizing_lp), every sub-multiset sum enumerated with itertools, hand arithmetic on
batches small enough to check on paper, and planted batches whose optimum is known by
construction (each node one long job and short ones that fill it to the tick; the total
work proves that many nodes). The plan is a heuristic: whatever it returns must be a
packing of every job within the capacity.
"""

from __future__ import annotations

import itertools
from typing import Any

import numpy as np
import pytest

from tests.workers.test_sizing_lp import fewest_bins, milp_bins
from workers.planning.budget import Budget
from workers.planning.sizing import size
from workers.planning.sizing_fit import Fit
from workers.planning.sizing_phase import State, _long_lp, split_phase
from workers.planning.sizing_split import (
    _fill,
    _reach,
    filler_waste_bound,
    split_plan,
    split_point,
)


def subset_sums(items: list[int]) -> set[int]:
    """Every sum of a sub-multiset of ``items``, enumerated."""
    out: set[int] = set()
    for r in range(len(items) + 1):
        for combo in itertools.combinations(items, r):
            out.add(sum(combo))
    return out


def is_packing(q: np.ndarray, cap: int, bin_of: np.ndarray, bins: int) -> bool:
    """Every job in one of bins 0 .. bins - 1, every one of them used, none over ``cap``."""
    if bin_of.size != q.size or bin_of.min() < 0 or bin_of.max() != bins - 1:
        return False
    loads = np.bincount(bin_of, weights=q, minlength=bins)
    return bool((loads <= cap).all() and (np.bincount(bin_of, minlength=bins) > 0).all())


def test_reach_matches_enumerated_subset_sums() -> None:
    """The bounded subset-sum bitset equals the sums enumerated by itertools."""
    rng = np.random.default_rng(1)
    for _ in range(40):
        vals = sorted({int(x) for x in rng.integers(1, 12, rng.integers(1, 4))})
        cnt = [int(c) for c in rng.integers(1, 4, len(vals))]
        limit = int(rng.integers(1, 40))
        items = [v for v, c in zip(vals, cnt, strict=True) for _ in range(c)]
        want = {s for s in subset_sums(items) if s <= limit}
        bits = _reach(vals, cnt, limit)
        got = {s for s in range(limit + 1) if (bits >> s) & 1}
        assert got == want


def test_fill_reaches_the_largest_enumerated_sum() -> None:
    """A gap no wider than the exact window is filled to the largest sub-multiset sum that
    fits it (enumerated); a wider one (greedy first) to at most that; the counts taken
    are always within the counts given."""
    rng = np.random.default_rng(2)
    for _ in range(60):
        vals = sorted({int(x) for x in rng.integers(2, 15, rng.integers(1, 4))})
        cnt = [int(c) for c in rng.integers(1, 5, len(vals))]
        gap = int(rng.integers(0, 60))
        items = [v for v, c in zip(vals, cnt, strict=True) for _ in range(c)]
        best = max(s for s in subset_sums(items) if s <= gap)
        got = []
        for window in (gap, int(rng.integers(0, 30))):
            left = list(cnt)
            take = _fill(gap, vals, left, window=window)
            got.append(sum(t * v for t, v in zip(take, vals, strict=True)))
            assert all(0 <= t <= c for t, c in zip(take, cnt, strict=True))
            assert [c - t for c, t in zip(cnt, take, strict=True)] == left
        assert got[0] == best
        assert got[1] <= best


def test_waste_bound_by_hand() -> None:
    """Capacity 10, four jobs of 9 and two of 2 (worked by hand): no two 9s share a node,
    so each 9 has a gap of 1 that a 2 cannot fill; the four nodes hold 36 of 40 ticks of
    room, the 2s need a fifth. Total work 40 proves 4; the waste (4 x 1) proves 5, and the
    brute force agrees."""
    q = np.array([9, 9, 9, 9, 2, 2], dtype=np.int64)
    bound, waste = filler_waste_bound(q, 10, 9)
    assert (bound, waste) == (5, 4)
    assert fewest_bins(q.tolist(), 10) == 5


def test_waste_bound_never_above_brute_force() -> None:
    """On small random batches of long and short jobs the waste bound, at every split,
    is at most the fewest bins found by trying every set partition."""
    rng = np.random.default_rng(3)
    checked = 0
    for _ in range(120):
        cap = int(rng.integers(20, 41))
        n_long = int(rng.integers(1, 5))
        n_short = int(rng.integers(0, 5))
        longs = rng.integers(cap // 3, cap + 1, n_long)
        shorts = rng.choice(np.array([2, 3, 5]), n_short)
        q = np.concatenate([longs, shorts]).astype(np.int64)
        best = fewest_bins(q.tolist(), cap)
        for split in sorted({int(x) for x in q}):
            bound, _ = filler_waste_bound(q, cap, split)
            assert bound <= best
            checked += 1
    assert checked > 300


def test_waste_bound_never_above_highs() -> None:
    """On random farm-like batches of 10 to 12 jobs the waste bound is at most the
    fewest bins of the assignment MILP (scipy HiGHS)."""
    rng = np.random.default_rng(4)
    for _ in range(12):
        cap = int(rng.integers(90, 121))
        longs = rng.integers(40, cap + 1, int(rng.integers(3, 6)))
        shorts = rng.choice(np.array([6, 9, 12]), int(rng.integers(5, 8)))
        shorts = shorts + rng.choice(np.array([-1, 0, 0, 1]), shorts.size)
        q = np.concatenate([longs, shorts]).astype(np.int64)
        bound, _ = filler_waste_bound(q, cap, 40)
        assert bound <= milp_bins(q.tolist(), cap)


def test_split_point_finds_the_two_populations() -> None:
    """Chunks of 28 to 122 ticks and renders of 1,200 and more against a capacity of
    5,400: the split is the shortest render; a batch of one population has none."""
    q = np.array([28, 30, 45, 60, 122, 1200, 2500, 5000], dtype=np.int64)
    assert split_point(q, 5400) == 1200
    assert split_point(np.array([1200, 2500, 5000], dtype=np.int64), 5400) == 0


def planted(
    seed: int, cap: int, m: int, long: tuple[int, int], fillers: tuple[int, ...], tail: int
) -> list[int]:
    """``m`` nodes, each one long job (uniform in ``long``) and short ones drawn from
    ``fillers`` until fewer than ``tail`` ticks are left, then one job of exactly what is
    left: every node full to the tick, so the total work proves ``m`` nodes."""
    rng = np.random.default_rng(seed)
    jobs: list[int] = []
    for _ in range(m):
        first = int(rng.integers(*long))
        rest = cap - first
        jobs.append(first)
        while rest > 0:
            pick = [x for x in fillers if x <= rest]
            x = int(rng.choice(pick)) if rest > tail else rest
            jobs.append(x)
            rest -= x
    return jobs


def test_split_plan_meets_planted_optimum() -> None:
    """Planted: every node one long job and short jobs (30, 45, 60 and 31) filling it to
    the capacity; the total work proves the number of nodes, and the plan uses that many,
    a packing of every job."""
    cap, m = 3000, 12
    q = np.array(planted(5, cap, m, (2000, 2800), (30, 31, 45, 60), 120), dtype=np.int64)
    assert int(q.sum()) == m * cap
    out = split_plan(q, cap, 1000)
    assert out is not None
    bin_of, bins = out
    assert is_packing(q, cap, bin_of, bins)
    assert bins == m


@pytest.mark.parametrize("seed", range(6))
def test_split_plan_is_always_a_packing(seed: int) -> None:
    """On random batches (any mix of lengths, zero-length jobs included, any split) the
    plan packs every job within the capacity, in at least the fewest bins of the
    brute force (n <= 8)."""
    rng = np.random.default_rng(10 + seed)
    for _ in range(30):
        cap = int(rng.integers(10, 60))
        n = int(rng.integers(1, 9))
        q = rng.integers(0, cap + 1, n).astype(np.int64)
        split = int(rng.integers(1, cap + 1))
        out = split_plan(q, cap, split)
        assert out is not None
        bin_of, bins = out
        assert is_packing(q, cap, bin_of, bins)
        assert bins >= fewest_bins([int(x) for x in q if x > 0], cap)


def test_sizing_of_a_planted_farm_batch_is_proven() -> None:
    """A planted batch of renders and chunks (every node one render and chunks to the
    second, 400 nodes): the total work proves 400 nodes and the sizing finds and proves
    them within its budget."""
    cap, m = 5400, 400
    fillers = (30, 45, 58, 60, 61, 90, 120)
    d = np.array(planted(6, cap, m, (4300, 5300), fillers, 150), dtype=np.float64)
    np.random.default_rng(6).shuffle(d)
    r = size(d, float(cap), time_budget=2.0, max_nodes=10**6)
    assert r.nodes_needed == m
    assert r.nodes_lower_bound == m


def long_lp_bound(q: np.ndarray, cap: int, split: int) -> int:
    """The lower bound the long-jobs LP of the split phase proves, from a bound of 1."""
    out = split_plan(q, cap, split)
    assert out is not None
    plan, bins = out
    state = State(1, "total_work", bins, "split_fill", plan, np.zeros(q.size))
    notes: tuple[dict[str, int], dict[str, Any], dict[str, int]] = ({}, {}, {})
    _long_lp(state, (q, cap, split), plan, Budget(5.0), notes)
    return state.lower


def test_long_jobs_lp_never_above_brute_force() -> None:
    """On small random batches of long and short jobs the LP bound on the long jobs
    (plus those that share a node with no other) is at most the fewest bins found by
    trying every set partition, and on batches worked by hand it is exact: capacity 10,
    long jobs 7, 7, 6, 4, 4 and short 1, 1 (each 7 shares with no long job; 6, 4, 4
    need two nodes: 4 in all, where the total work, 30 of 30, shows 3); and long jobs 6,
    6, 6 with short 1, 1 (3 nodes, the total work 20 shows 2)."""
    q = np.array([7, 7, 6, 4, 4, 1, 1], dtype=np.int64)
    assert fewest_bins(q.tolist(), 10) == 4
    assert long_lp_bound(q, 10, 4) == 4
    q = np.array([6, 6, 6, 1, 1], dtype=np.int64)
    assert fewest_bins(q.tolist(), 10) == 3
    assert long_lp_bound(q, 10, 4) == 3
    rng = np.random.default_rng(7)
    for _ in range(60):
        cap = int(rng.integers(20, 41))
        longs = rng.integers(cap // 4, cap + 1, int(rng.integers(2, 6)))
        shorts = rng.choice(np.array([1, 2, 3]), int(rng.integers(0, 4)))
        q = np.concatenate([longs, shorts]).astype(np.int64)
        assert long_lp_bound(q, cap, cap // 4) <= fewest_bins(q.tolist(), cap)


def test_long_jobs_lp_never_above_highs() -> None:
    """On random farm-like batches of 12 to 14 jobs the LP bound on the long jobs is at
    most the fewest bins of the assignment MILP (scipy HiGHS)."""
    rng = np.random.default_rng(8)
    for _ in range(8):
        cap = int(rng.integers(90, 121))
        longs = rng.integers(30, cap + 1, int(rng.integers(6, 9)))
        shorts = rng.choice(np.array([5, 7, 9]), 6)
        q = np.concatenate([longs, shorts]).astype(np.int64)
        assert long_lp_bound(q, cap, 30) <= milp_bins(q.tolist(), cap)


def test_split_phase_agrees_with_brute_force() -> None:
    """The whole split phase (waste bound, plan, LP on the long jobs) from the interval
    [1, n] on random farm-like batches of 8 jobs (long ones and short fillers of three
    lengths): its lower end is at most the fewest bins found by trying every set
    partition, its upper end at least that, and its plan meets the deadline."""
    rng = np.random.default_rng(9)
    for _ in range(80):
        cap = int(rng.integers(100, 161))
        longs = rng.integers(50, cap + 1, int(rng.integers(3, 7)))
        shorts = rng.choice(np.array([3, 4, 6]), 8 - longs.size)
        q = np.concatenate([longs, shorts]).astype(np.int64)
        best = fewest_bins(q.tolist(), cap)
        d = q.astype(np.float64)
        order = np.argsort(-d, kind="stable")
        fit = Fit(d, d, 1.0, float(cap), q, cap, order)
        state = State(
            1, "total_work", q.size, "one_each", np.arange(q.size, dtype=np.int32), np.zeros(q.size)
        )
        notes: tuple[dict[str, int], dict[str, Any], dict[str, int]] = ({}, {}, {})
        split_phase(state, (q, q, cap), fit, Budget(2.0), notes, lambda: None)
        assert state.lower <= best <= state.upper
        assert fit.meets(state.bin_of, state.upper, state.start)
        assert "filler_waste" in notes[1]
