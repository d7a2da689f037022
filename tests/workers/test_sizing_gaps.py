"""The gap repair of deadline sizing's plan of long jobs and short fillers (sizing_gaps):
move and swap the long jobs so that every node's gap can be filled by the short jobs.

References, none of them spanwright code: the fewest bins by brute force over set
partitions (n <= 8; ``fewest_bins`` of test_sizing_lp), every sub-multiset sum of the
short jobs enumerated with itertools (what each gap wastes at best), every re-pairing of
a few pairs enumerated with itertools.permutations (the least waste a re-matching can
reach), and planted farm-like batches whose optimum is known by construction (every
node one or two long jobs and short ones that fill it to the tick; the total work proves
that many nodes). The repair is a heuristic: whatever it returns must be a placement of
every long job within the capacity whose waste is within the slack it was given, and a
plan built on it must be a packing of every job.
"""

from __future__ import annotations

import itertools
import time

import numpy as np
import pytest

from tests.workers.test_sizing_lp import fewest_bins
from workers.planning.sizing_gaps import _rematch, regap
from workers.planning.sizing_split import split_plan

#: transcode-like short lengths: a few nominal ones and a second or two off
CHUNKS = (28, 29, 30, 31, 32, 43, 44, 45, 46, 47, 58, 59, 60, 61, 62)


def waste_table(shorts: list[int], cap: int) -> np.ndarray:
    """For every gap 0 .. cap: the gap less the largest sub-multiset sum of ``shorts``
    within it, the sums enumerated with itertools."""
    sums: set[int] = set()
    for r in range(len(shorts) + 1):
        for combo in itertools.combinations(shorts, r):
            sums.add(sum(combo))
    out = np.zeros(cap + 1, dtype=np.int64)
    for g in range(cap + 1):
        out[g] = g - max(s for s in sums if s <= g)
    return out


def is_packing(q: np.ndarray, cap: int, bin_of: np.ndarray, bins: int) -> bool:
    """Every job in one of bins 0 .. bins - 1, every one of them used, none over ``cap``
    (integer sums)."""
    if bin_of.size != q.size or bin_of.min() < 0 or bin_of.max() != bins - 1:
        return False
    loads = [0] * bins
    for x, b in zip(q.tolist(), bin_of.tolist(), strict=True):
        loads[b] += x
    return max(loads) <= cap and (np.bincount(bin_of, minlength=bins) > 0).all()


def planted(seed: int, cap: int, m: int) -> np.ndarray:
    """A farm-like batch of ``m`` nodes, each filled to ``cap`` exactly: one long job (a
    render of ``cap - 900`` to ``cap - 100``) or two (one above half the capacity, one of
    1200 or more), the rest short jobs of ``CHUNKS`` (a remainder too short for one is
    added to the node's last job)."""
    rng = np.random.default_rng(seed)
    jobs: list[int] = []
    for _ in range(m):
        if rng.random() < 0.45:
            a = int(rng.integers(cap - 900, cap - 100))
            jobs.append(a)
            rest = cap - a
        else:
            a = int(rng.integers(cap // 2, cap - 1300))
            b = int(rng.integers(1200, cap - a + 1))
            jobs += [a, b]
            rest = cap - a - b
        while rest > 0:
            if rest in CHUNKS:
                jobs.append(rest)
                break
            if rest < 56:
                jobs[-1] += rest
                break
            c = int(rng.choice(np.array(CHUNKS)))
            if rest - c >= 28 or rest == c:
                jobs.append(c)
                rest -= c
    return np.array(jobs, dtype=np.int64)


@pytest.mark.parametrize("seed", [0, 1, 4])
def test_planted_farm_batch_reaches_the_planted_optimum(seed: int) -> None:
    """Planted farm-like batches of 60 nodes (total work 60 * 5400 exactly, so 60 nodes
    are the optimum): with the target of 60 nodes the plan is a packing into 60 nodes,
    where best fit and the swaps of the long jobs alone leave a gap the short jobs cannot
    fill (61 nodes)."""
    cap, m = 5400, 60
    q = planted(seed, cap, m)
    assert int(q.sum()) == m * cap
    plain = split_plan(q, cap, 1000)
    out = split_plan(q, cap, 1000, target=m, regap_seconds=2.0, give_up=10.0)
    assert plain is not None
    assert out is not None
    assert plain[1] == m + 1
    assert is_packing(q, cap, out[0], out[1])
    assert out[1] == m


def test_rematch_finds_the_least_waste_pairing() -> None:
    """Random nodes of two long jobs each (at most six pairs, one block): the re-matching
    leaves the waste of the best re-pairing found by trying every permutation of the
    shorter jobs against the longer ones (pairs over the capacity excluded), and a
    placement of every job within the capacity."""
    rng = np.random.default_rng(3)
    cap = 120
    waste = waste_table([7, 7, 7, 9, 9, 11], cap)
    for _ in range(40):
        k = int(rng.integers(2, 7))
        big = rng.integers(61, 100, k)
        small = np.array([int(rng.integers(1, cap - b + 1)) for b in big])
        lens = np.concatenate([big, small]).astype(np.int64)
        B = np.concatenate([np.arange(k), rng.permutation(k)]).astype(np.int64)
        # nodes of a big job and some small one, within the capacity (by construction:
        # re-pair until they fit)
        while (np.bincount(B, weights=lens, minlength=k) > cap).any():
            B[k:] = rng.permutation(k)
        gap = (cap - np.bincount(B, weights=lens, minlength=k)).astype(np.int64)
        best = min(
            sum(int(waste[cap - big[i] - small[p[i]]]) for i in range(k))
            for p in itertools.permutations(range(k))
            if all(big[i] + small[p[i]] <= cap for i in range(k))
        )
        before = int(waste[gap].sum())
        saved = _rematch(lens, B, gap, waste, cap, np.zeros(k, dtype=np.bool_))
        loads = np.bincount(B, weights=lens, minlength=k)
        assert (loads <= cap).all()
        assert (np.bincount(B, minlength=k) == 2).all()
        assert (gap == cap - loads).all()
        assert before - saved == best
        assert int(waste[gap].sum()) == best


def test_regap_returns_placements_within_the_slack() -> None:
    """Small random sets of long jobs on nodes, a random short multiset and a target
    node count: every placement the repair returns puts each long job on one of the
    target nodes, no node over the capacity (integer sums), with a waste (from the
    enumerated sub-multiset sums) at most the slack it was given; and on planted sets
    (pairs of long jobs whose gaps the short jobs fill exactly, scrambled by swaps that
    keep every node within the capacity) it finds one with no waste at all."""
    rng = np.random.default_rng(5)
    results = []
    planted_found = 0
    for trial in range(60):
        cap = int(rng.integers(60, 121))
        shorts = [int(x) for x in rng.choice(np.array([5, 6, 9]), int(rng.integers(2, 7)))]
        waste = waste_table(shorts, cap)
        k = int(rng.integers(2, 6))
        if trial % 2 == 0:  # planted: pairs summing to cap less a fillable gap, scrambled
            fill = np.array([g for g in range(20) if waste[g] == 0])
            big = rng.integers(cap // 2, cap - 20, k)
            small = np.array([cap - b - int(rng.choice(fill)) for b in big])
            lens = np.concatenate([big, small]).astype(np.int64)
            B = np.concatenate([np.arange(k), np.arange(k)]).astype(np.int64)
            for _ in range(10):
                i, j = (int(x) for x in rng.integers(k, 2 * k, 2))
                B[i], B[j] = B[j], B[i]
                if (np.bincount(B, weights=lens, minlength=k) > cap).any():
                    B[i], B[j] = B[j], B[i]
            bins, slack = k, 0
        else:
            lens = rng.integers(cap // 4, cap + 1, 2 * k).astype(np.int64)
            B = np.arange(2 * k, dtype=np.int64)
            bins, slack = 2 * k + int(rng.integers(0, 2)), int(rng.integers(0, 30))
        limit = 0.2 if trial % 2 == 0 else 0.01
        out = regap(lens, B, cap, bins, waste, slack, time.perf_counter() + limit, trial)
        results.append((lens, cap, bins, waste, slack, out))
        planted_found += int(trial % 2 == 0 and out is not None)
    placed = [r for r in results if r[-1] is not None]
    assert len(placed) >= 30
    for lens, cap, bins, waste, slack, r in placed:
        assert r is not None
        loads = [0] * bins
        for x, b in zip(lens.tolist(), r.tolist(), strict=True):
            loads[b] += x
        assert r.min() >= 0
        assert r.max() < bins
        assert max(loads) <= cap
        assert sum(int(waste[cap - load]) for load in loads) <= slack
    assert planted_found == 30


@pytest.mark.parametrize("seed", range(4))
def test_split_plan_with_a_target_is_always_a_packing(seed: int) -> None:
    """Random small batches of long and short jobs (n <= 8), the target the fewest bins
    of the brute force: the plan packs every job within the capacity, in at least that
    many bins."""
    rng = np.random.default_rng(40 + seed)
    for _ in range(30):
        cap = int(rng.integers(40, 100))
        longs = rng.integers(cap // 4, cap + 1, int(rng.integers(1, 6)))
        shorts = rng.choice(np.array([3, 4, 5, 7]), int(rng.integers(1, 4)))
        q = np.concatenate([longs, shorts]).astype(np.int64)
        best = fewest_bins(q.tolist(), cap)
        out = split_plan(q, cap, cap // 4, target=best, regap_seconds=0.05)
        assert out is not None
        bin_of, bins = out
        assert is_packing(q, cap, bin_of, bins)
        assert bins >= best
