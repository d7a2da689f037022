"""Lower bounds never exceed the optimum (brute force, HiGHS), on integer and real data."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import brute_force_makespan

from workers.planning import Instance, solve
from workers.planning.bounds import BinPackingBound, lower_bounds, simple_bounds


@settings(max_examples=150, deadline=None)
@given(st.lists(st.integers(0, 40), min_size=1, max_size=10), st.integers(1, 4))
def test_every_bound_at_most_brute_force_optimum(p: list[int], m: int) -> None:
    """Property: each named bound is <= the exhaustive-search optimum (integer times)."""
    opt = brute_force_makespan([float(x) for x in p], m)
    cert = lower_bounds(Instance.build(p, m), upper=float(sum(p)))
    for name, value in cert.bounds.items():
        assert value <= opt + 1e-9, name


@settings(max_examples=100, deadline=None)
@given(
    st.lists(st.floats(0.01, 50.0, allow_nan=False), min_size=1, max_size=9),
    st.integers(1, 4),
    st.sampled_from([1.0, 0.5, 0.1, 3.0]),
)
def test_bounds_valid_for_real_durations(p: list[float], m: int, resolution: float) -> None:
    """Property: with real durations, bounds computed on ticks rounded down stay <= the
    true optimum for every resolution (the documented rounding rule of bounds.py)."""
    opt = brute_force_makespan(p, m)
    inst = Instance.build(p, m, resolution=resolution)
    cert = lower_bounds(inst, upper=float(sum(p)))
    assert cert.value <= opt + 1e-9
    assert solve(inst, "longest_first").makespan >= opt - 1e-9


def test_pigeonhole_on_sorted_times() -> None:
    """Dell'Amico and Martello 1995 (L1): p(m) + p(m+1) of the sorted times; worked by hand:
    times 9 8 7 6 5 on m = 2 give p2 + p3 = 8 + 7 = 15, and k = 2 gives p3+p4+p5 = 18."""
    b = simple_bounds(np.array([9.0, 8, 7, 6, 5]), 2)
    assert b["pigeonhole"] == 15
    assert b["pigeonhole_k"] == 18 and b["_k"] == 2
    assert b["mean_load"] == 17.5 and b["longest_job"] == 9


def test_martello_toth_l2_worked_example() -> None:
    """Martello and Toth 1990, L2 by hand: items 6,6,6,4,4,4 in bins of 10. alpha = 4:
    J1 = {} (none > 6), J2 = {6,6,6}, J3 = {4,4,4}; room beside J2 = 3*10-18 = 12 >= 12,
    so L(4) = 3; alpha = 0 gives ceil(30/10) = 3; the optimum is 3 bins (6+4 each)."""
    bins, _, _ = BinPackingBound(np.array([6, 6, 6, 4, 4, 4])).bins_needed(10)
    assert bins == 3
    # three items of 6 and a 5 in bins of 10: L2 with alpha = 0 sees J2 = {6,6,6} and J3
    # = {5}: 3 + ceil((5 - 12) / 10) -> 3, but alpha = 5: J1 = {6,6,6} (> 10-5) -> 3 + ... = 4
    bins, alpha, _ = BinPackingBound(np.array([6, 6, 6, 5])).bins_needed(10)
    assert bins == 4 and alpha == 5


def test_lifting_refutes_a_capacity_by_hand() -> None:
    """Dell'Amico and Martello 1995 lifting of Martello-Toth L2, worked by hand: jobs
    12,12,10,6,5 on m = 3. Mean load 15, pigeonhole 16. At C = 16 with alpha = 5:
    J1 = {12,12} (> 11), J2 = {10}, J3 = {6,5}; J3 needs 11 but only 16-10 = 6 is free beside
    J2, so L(5) = 2 + 1 + ceil(5/16) = 4 > 3 bins: C = 16 is impossible and OPT >= 17.
    Brute force gives OPT = 17 ({12,5}, {12}, {10,6})."""
    p = [12, 12, 10, 6, 5]
    cert = lower_bounds(Instance.build(p, 3), upper=22.0)
    assert cert.bounds["bin_packing"] == 17 and cert.source == "bin_packing"
    assert cert.evidence["bin_packing"]["refuted_capacity"] == 16
    assert brute_force_makespan([float(x) for x in p], 3) == 17


def test_pigeonhole_k_proves_more_than_mean_load() -> None:
    """Five jobs of 4 on m = 2: mean load 10, but some node runs three jobs, so OPT = 12.
    pigeonhole_k (k = 2: p3+p4+p5 = 12) proves it; brute force agrees."""
    p = [4, 4, 4, 4, 4]
    res = solve(Instance.build(p, 2), "longest_first")
    assert res.lower_bound == 12 == brute_force_makespan([4.0] * 5, 2)
    assert res.proven_optimal


@pytest.mark.parametrize("m", [1, 3, 7])
def test_bounds_when_fewer_jobs_than_nodes(m: int) -> None:
    """With n <= m only mean load and longest job apply; the longest job is then optimal."""
    cert = lower_bounds(Instance.build([3.5, 2.0], max(m, 2)), upper=3.5)
    assert cert.value == 3.5 and "pigeonhole" not in cert.bounds
