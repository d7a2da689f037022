"""The perfect packing search against brute force and instances whose optimum is known by
construction (planted cuts, Falkenauer's triplets)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from tests.workers.test_binpacking import brute_force_bins
from workers.planning.perfect import perfect_fill
from workers.planning.perfect_exact_fill import exact_fill
from workers.planning.perfect_walk import S_MOVES, S_POOL, eject_walk, walk_start

#: generous: every case here finishes in milliseconds; the limit only guards a hang
SECONDS = 30.0


def planted(bins: int, cap: int, rng: np.random.Generator, shave: int = 0) -> np.ndarray:
    """Planted instance: ``bins`` bins of capacity ``cap`` each cut at 1 to 4 random
    points into pieces (the planted construction of ../shared/references.md section 2.5,
    there for machines of length U). The pieces fill the bins exactly, so ``bins`` is the
    optimum: the pieces' total is ``bins * cap`` (no fewer bins can hold it) and the cut
    bins hold them. ``shave`` ticks are then taken off random pieces (never below 1):
    the cut bins still hold them and the total still needs ``bins`` bins while
    ``shave < cap``, so the optimum stays ``bins`` with some slack."""
    pieces: list[int] = []
    for _ in range(bins):
        cuts = np.sort(rng.choice(np.arange(1, cap), size=int(rng.integers(1, 5)), replace=False))
        edges = np.concatenate(([0], cuts, [cap]))
        pieces.extend(np.diff(edges).tolist())
    q = np.array(pieces, dtype=np.int64)
    for _ in range(shave):
        j = int(rng.integers(0, q.size))
        if q[j] > 1:
            q[j] -= 1
    rng.shuffle(q)
    return q


def triplets(k: int, cap: int, rng: np.random.Generator) -> np.ndarray:
    """Falkenauer's triplets (J. Heuristics 2, 1996; the T class of BPPLIB, see
    ../shared/references.md section 5): k bins each cut into three items of 25 % to 50 %
    of the capacity that fill it exactly, so the optimum is k by construction."""
    a = rng.integers(int(0.38 * cap), int(0.49 * cap) + 1, k)
    b = rng.integers(int(0.25 * cap), 1 + np.minimum((cap - a) // 2, int(0.49 * cap)), k)
    q = np.concatenate([a, b, cap - a - b]).astype(np.int64)
    rng.shuffle(q)
    return q


def assert_packing(q: np.ndarray, bin_of: np.ndarray, bins: int, cap: int) -> None:
    """Every item is in a bin 0 .. bins - 1 and no bin holds more than the capacity."""
    assert bin_of.shape == q.shape
    assert bin_of.min() >= 0 and bin_of.max() < bins
    assert (np.bincount(bin_of, weights=q, minlength=bins) <= cap).all()


@pytest.mark.parametrize("seed", range(8))
def test_planted_cuts_are_packed_into_their_bins(seed: int) -> None:
    """Planted instances (bins cut into pieces, optimum = the number of bins by
    construction) of 5 to 400 bins, with and without slack: the search finds a packing
    into exactly that many bins."""
    rng = np.random.default_rng(seed)
    bins = int(rng.integers(5, 400))
    cap = int(rng.integers(50, 5000))
    q = planted(bins, cap, rng, shave=int(rng.integers(0, cap)) if seed % 2 else 0)
    res = perfect_fill(q, cap, bins, SECONDS)
    assert res is not None and res.reached and res.bins == bins
    assert_packing(q, res.bin_of, bins, cap)


@pytest.mark.parametrize(
    ("k", "cap", "seed"),
    [(20, 1000, 1), (40, 1000, 2), (83, 1000, 3), (167, 1000, 4), (333, 23618, 5)],
)
def test_falkenauer_triplets_are_packed_exactly(k: int, cap: int, seed: int) -> None:
    """Falkenauer's triplets with 60 to 999 items (his T class has 60 to 501 items of
    capacity 1000): the optimum k = items / 3 is known by construction, every bin of it
    full to the tick; the search reaches k bins, where first fit decreasing does not."""
    q = triplets(k, cap, np.random.default_rng(seed))
    res = perfect_fill(q, cap, k, SECONDS)
    assert res is not None and res.reached and res.bins == k
    assert_packing(q, res.bin_of, k, cap)


instances = st.integers(4, 40).flatmap(
    lambda cap: st.tuples(st.just(cap), st.lists(st.integers(1, cap), min_size=1, max_size=9))
)


@settings(max_examples=80, deadline=None)
@given(instances)
def test_reaches_the_brute_force_optimum_and_never_below(inst: tuple[int, list[int]]) -> None:
    """Small random batches, optimum OPT by brute force over subsets: asked for OPT bins
    the search finds a valid packing into OPT bins; asked for OPT - 1 it never claims one
    (its packing is valid and uses at least OPT bins)."""
    cap, items = inst
    q = np.array(items, dtype=np.int64)
    opt = brute_force_bins(items, cap)
    res = perfect_fill(q, cap, opt, SECONDS)
    assert res is not None and res.reached and res.bins == opt
    assert_packing(q, res.bin_of, opt, cap)
    # one bin fewer is never reached; None means the total alone rules it out
    lows = [perfect_fill(q, cap, opt - 1, SECONDS)] if opt > 1 else []
    tried = [low for low in lows if low is not None]
    assert all(not low.reached and low.bins >= opt for low in tried)
    for low in tried:
        assert_packing(q, low.bin_of, low.bins, cap)


def test_impossible_targets_are_refused() -> None:
    """By definition of bin packing: an item longer than the capacity fits no bin, and a
    total above k * capacity fits no k bins, so there is no packing to return."""
    assert perfect_fill(np.array([12, 3], dtype=np.int64), 10, 5, SECONDS) is None
    assert perfect_fill(np.array([6, 6, 6], dtype=np.int64), 10, 1, SECONDS) is None


def test_zero_length_items_ride_along() -> None:
    """Zero-length jobs take no room (definition): they are placed in the first bin and the
    others still fill the planted optimum of 2 bins exactly (7 + 3 and 5 + 5 in bins of 10)."""
    q = np.array([0, 7, 5, 0, 3, 5], dtype=np.int64)
    res = perfect_fill(q, 10, 2, SECONDS)
    assert res is not None and res.reached and res.bins == 2
    assert_packing(q, res.bin_of, 2, 10)
    assert res.bin_of[0] == res.bin_of[3] == 0


@pytest.mark.parametrize("seed", range(4))
def test_compiled_and_pure_python_agree(seed: int) -> None:
    """The numba kernels and their ``.py_func`` (the same code as plain Python) give the
    same fill and the same walk, step for step (kernels.jit contract); Falkenauer
    triplets so that the walk has work to do."""
    rng = np.random.default_rng(seed)
    k, cap = 20, int(rng.integers(900, 1100))
    q = np.sort(triplets(k, cap, rng))[::-1].copy()
    fast = exact_fill(q, cap, k, 0, 100, seed, 10**9)
    slow = exact_fill.py_func(q, cap, k, 0, 100, seed, 10**9)
    assert fast[1] == slow[1] and np.array_equal(fast[0], slow[0])
    walk_fast = walk_start(q, cap, k, fast[0], seed)
    walk_slow = walk_start.py_func(q, cap, k, slow[0], seed)
    for _ in range(3):
        left_fast = eject_walk(q, cap, 0, 400, walk_fast)
        left_slow = eject_walk.py_func(q, cap, 0, 400, walk_slow)
        assert left_fast == left_slow
        for a, b in zip(walk_fast, walk_slow, strict=True):
            assert np.array_equal(a, b)
    assert walk_fast[-1][S_MOVES] > 0
    if walk_fast[-1][S_POOL] == 0:
        assert_packing(q, walk_fast[8].astype(np.int64), k, cap)


def test_fill_stops_when_its_work_is_spent() -> None:
    """A fill whose step budget runs out forms no further bin: every bin it formed is within
    the capacity (checked by summing, as in ``assert_packing``) and the items it did not
    place wait in the pool (-1); with room to work it places them all. Falkenauer triplets
    (Falkenauer 1996: every optimal bin holds three items and is full)."""
    rng = np.random.default_rng(7)
    k, cap = 60, 1000
    q = np.sort(triplets(k, cap, rng))[::-1].copy()
    short, bins_short, _ = exact_fill(q, cap, k, 0, 100, 0, 50)
    full, bins_full, _ = exact_fill(q, cap, k, 0, 10_000, 0, 10**9)
    assert bins_short < bins_full
    assert int((short < 0).sum()) > int((full < 0).sum())
    loads = np.bincount(short[short >= 0], weights=q[short >= 0], minlength=bins_short)
    assert loads.size == bins_short and bool((loads <= cap).all())
