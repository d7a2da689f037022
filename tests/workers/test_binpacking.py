"""The bin-packing kernels behind deadline sizing, against brute force and published bounds."""

from __future__ import annotations

import math
from functools import cache

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.planning.binpacking import (
    FOUND,
    REFUTED,
    UNDECIDED,
    best_fit_decreasing,
    bin_starts,
    first_fit_decreasing,
    min_bin_slack,
    pack_search,
    reduce_bins,
)
from workers.planning.bounds import BinPackingBound


def brute_force_bins(items: list[int], cap: int) -> int:
    """Fewest bins by dynamic programming over subsets (independent of the project code)."""
    n = len(items)
    full = (1 << n) - 1
    fits = [sum(items[i] for i in range(n) if mask >> i & 1) <= cap for mask in range(full + 1)]

    @cache
    def best(mask: int) -> int:
        if mask == 0:
            return 0
        low = mask & -mask  # the lowest item left must go in some bin: enumerate that bin
        rest = mask ^ low
        out = n + 1
        sub = rest
        while True:
            b = sub | low
            if fits[b]:
                out = min(out, 1 + best(mask ^ b))
            if sub == 0:
                break
            sub = (sub - 1) & rest
        return out

    return best(full)


def loads_ok(bin_of: np.ndarray, start: np.ndarray, sizes: np.ndarray, cap: float) -> bool:
    """Every bin's jobs run back to back and end by the capacity."""
    end = start + sizes
    if (end > cap).any():
        return False
    for b in np.unique(bin_of):
        idx = np.flatnonzero(bin_of == b)
        o = idx[np.argsort(start[idx], kind="stable")]
        if (start[o][1:] < end[o][:-1] - 1e-9).any():
            return False
    return True


instances = st.integers(4, 30).flatmap(
    lambda cap: st.tuples(st.just(cap), st.lists(st.integers(1, cap), min_size=1, max_size=9))
)


@settings(max_examples=150, deadline=None)
@given(instances)
def test_ffd_within_dosa_bound(inst: tuple[int, list[int]]) -> None:
    """FFD <= 11/9 OPT + 6/9 (Dosa, ESCAPE 2007, LNCS 4614; full proof Dosa, Li, Han and
    Tuza, Theor. Comput. Sci. 510, 2013) with OPT by brute force; never below OPT nor
    below the Martello-Toth L2 bound (Martello and Toth 1990)."""
    cap, items = inst
    sizes = np.sort(np.array(items, dtype=np.float64))[::-1].copy()
    opt = brute_force_bins(items, cap)
    bin_of, start, used = first_fit_decreasing(sizes, float(cap))
    assert opt <= used <= 11 / 9 * opt + 6 / 9 + 1e-9
    assert loads_ok(bin_of, start, sizes, cap)
    lb, _, _ = BinPackingBound(np.array(items, dtype=np.int64)).bins_needed(cap)
    assert lb <= opt <= used


@settings(max_examples=150, deadline=None)
@given(instances)
def test_bfd_and_mbs_are_valid_packings(inst: tuple[int, list[int]]) -> None:
    """Best fit decreasing and minimum bin slack give packings that respect the capacity
    and use at least OPT bins (brute force); BFD within 11/9 OPT + 4 (Johnson 1973, the
    additive constant from memory)."""
    cap, items = inst
    sizes = np.sort(np.array(items, dtype=np.float64))[::-1].copy()
    opt = brute_force_bins(items, cap)
    for bin_of, start, used in (
        best_fit_decreasing(sizes, float(cap)),
        min_bin_slack(sizes, float(cap), 1000, 1000),
    ):
        assert used >= opt
        assert len(np.unique(bin_of)) == used
        assert loads_ok(bin_of, start, sizes, cap)
    assert best_fit_decreasing(sizes, float(cap))[2] <= 11 / 9 * opt + 4


@settings(max_examples=150, deadline=None)
@given(instances)
def test_pack_search_decides_like_brute_force(inst: tuple[int, list[int]]) -> None:
    """The exact search finds a packing into OPT bins and refutes OPT - 1 (OPT by brute
    force over subsets)."""
    cap, items = inst
    q = np.sort(np.array(items, dtype=np.int64))[::-1].copy()
    opt = brute_force_bins(items, cap)
    status, assign, _ = pack_search(q, cap, opt, 10**7)
    assert status == FOUND
    assert assign.min() >= 0 and assign.max() < opt
    assert (np.bincount(assign, weights=q, minlength=opt) <= cap).all()
    assert opt == 1 or pack_search(q, cap, opt - 1, 10**7)[0] == REFUTED


@settings(max_examples=100, deadline=None)
@given(instances, st.integers(0, 1000))
def test_local_search_keeps_packings_valid(inst: tuple[int, list[int]], seed: int) -> None:
    """The bin-saving local search (Levine and Ducatelle 2004) returns a packing that
    respects the capacity with no more bins than it was given and never fewer than OPT
    (brute force)."""
    cap, items = inst
    q = np.array(items, dtype=np.int64)
    sizes = np.sort(q.astype(np.float64))[::-1].copy()
    order = np.argsort(-q, kind="stable")
    b_sorted, _, used = first_fit_decreasing(sizes, float(cap))
    bin_of = np.empty(q.size, dtype=np.int32)
    bin_of[order] = b_sorted
    new, new_used = reduce_bins(q, cap, bin_of, used, min(3, max(1, used - 1)), 10**5, seed)
    assert brute_force_bins(items, cap) <= new_used <= used
    assert new.min() >= 0 and new.max() < new_used
    assert (np.bincount(new, weights=q, minlength=new_used) <= cap).all()


def test_node_limit_leaves_the_question_open() -> None:
    """With a node limit of 1 a non-trivial question stays undecided (the anytime contract:
    the caller keeps its interval); triplets of 1000 after Falkenauer (1996), common
    practice as a hard case."""
    rng = np.random.default_rng(3)
    a = rng.integers(380, 491, 20)
    b = rng.integers(250, 1 + (1000 - a) // 2)
    q = np.sort(np.concatenate([a, b, 1000 - a - b]))[::-1].astype(np.int64).copy()
    assert pack_search(q, 1000, 20, 1)[0] == UNDECIDED


def test_equal_jobs_over_half_need_one_bin_each() -> None:
    """Hand-checkable: n items each longer than half the capacity cannot share a bin, so
    every rule uses n bins (no two fit together; common practice)."""
    sizes = np.full(7, 51.0)
    for _, _, used in (
        first_fit_decreasing(sizes, 100.0),
        best_fit_decreasing(sizes, 100.0),
        min_bin_slack(sizes, 100.0, 100, 100),
    ):
        assert used == 7
    assert pack_search(np.full(7, 51, dtype=np.int64), 100, 6, 10**6)[0] == REFUTED


def test_too_long_item_is_reported() -> None:
    """An item longer than the capacity fits no bin: the constructions say -1 and the
    search refutes any count (definition of bin packing)."""
    sizes = np.array([120.0, 10.0])
    assert first_fit_decreasing(sizes, 100.0)[2] == -1
    assert best_fit_decreasing(sizes, 100.0)[2] == -1
    assert min_bin_slack(sizes, 100.0, 10, 10)[2] == -1
    assert pack_search(np.array([120, 10], dtype=np.int64), 100, 5, 100)[0] == REFUTED


def test_bin_starts_hand_example() -> None:
    """Hand-checkable: jobs run back to back on their node in the order given, each
    starting when the one before it on that node ends (7 then 3 on node 0; 5, 4, 1 on
    node 1)."""
    sizes = np.array([7.0, 5.0, 4.0, 3.0, 1.0])
    bins = np.array([0, 1, 1, 0, 1], dtype=np.int32)
    start = bin_starts(np.arange(5, dtype=np.int64), bins, sizes, 2)
    assert start.tolist() == [0.0, 0.0, 5.0, 7.0, 9.0]


def test_ffd_hand_example() -> None:
    """Hand-checkable first fit decreasing (Johnson 1973 rule): items 7,5,4,3,1 in bins of 10
    go {7,3}, {5,4,1}: two bins, and the load sums are the running sums."""
    sizes = np.array([7.0, 5.0, 4.0, 3.0, 1.0])
    bin_of, start, used = first_fit_decreasing(sizes, 10.0)
    assert used == 2
    assert bin_of.tolist() == [0, 1, 1, 0, 1]
    assert start.tolist() == [0.0, 0.0, 5.0, 7.0, 9.0]


@pytest.mark.parametrize("seed", range(6))
def test_compiled_and_pure_python_agree(seed: int) -> None:
    """The numba kernels and their ``.py_func`` (the same code as plain Python) give the
    same packings (kernels.jit contract)."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(5, 60))
    cap = float(rng.integers(50, 200))
    sizes = np.sort(rng.integers(1, int(cap) + 1, n).astype(np.float64))[::-1].copy()
    for fn, extra in (
        (first_fit_decreasing, ()),
        (best_fit_decreasing, ()),
        (min_bin_slack, (200, 200)),
    ):
        fast = fn(sizes, cap, *extra)
        slow = fn.py_func(sizes, cap, *extra)
        assert fast[2] == slow[2]
        assert np.array_equal(fast[0], slow[0]) and np.array_equal(fast[1], slow[1])
    q = sizes.astype(np.int64)
    b_sorted, _, used = first_fit_decreasing(sizes, cap)
    fast_r = reduce_bins(q, int(cap), b_sorted, used, 2, 10**4, seed)
    slow_r = reduce_bins.py_func(q, int(cap), b_sorted, used, 2, 10**4, seed)
    assert fast_r[1] == slow_r[1] and np.array_equal(fast_r[0], slow_r[0])
    order = np.argsort(b_sorted, kind="stable").astype(np.int64)
    fast_t = bin_starts(order, b_sorted, sizes, used)
    assert np.array_equal(fast_t, bin_starts.py_func(order, b_sorted, sizes, used))
    k = math.ceil(q.sum() / cap) + int(rng.integers(0, 2))
    fast_s = pack_search(q, int(cap), k, 5000)
    slow_s = pack_search.py_func(q, int(cap), k, 5000)
    assert fast_s[0] == slow_s[0] and fast_s[2] == slow_s[2]
    assert np.array_equal(fast_s[1], slow_s[1])
