"""The greedy rules against Graham's published worst cases, brute force and HiGHS."""

from __future__ import annotations

import heapq

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import brute_force_makespan, milp_makespan

from workers.planning import Instance, solve
from workers.planning.greedy import longest_first_order
from workers.planning.kernels import assign_in_order, least_loaded, pure


def graham_lpt_family(m: int) -> list[int]:
    """Graham (1969), SIAM J. Appl. Math. 17:416-429: two jobs each of 2m-1 .. m+1, three of m."""
    jobs = [d for d in range(2 * m - 1, m, -1) for _ in range(2)]
    return [*jobs, m, m, m]


@pytest.mark.parametrize("m", range(2, 11))
def test_lpt_meets_graham_tight_family(m: int) -> None:
    """Graham 1969: on the tight family LPT = 4m - 1 while OPT = 3m, the ratio 4/3 - 1/(3m)."""
    res = solve(Instance.build(graham_lpt_family(m), m), "longest_first")
    assert res.makespan == 4 * m - 1
    assert res.lower_bound <= 3 * m
    assert res.makespan / (3 * m) == pytest.approx(4 / 3 - 1 / (3 * m))
    assert res.worst_case_ratio == pytest.approx(4 / 3 - 1 / (3 * m))


@pytest.mark.parametrize("m", range(2, 5))
def test_graham_tight_family_optimum_by_brute_force(m: int) -> None:
    """Graham 1969's family has OPT = 3m: checked by exhaustive search for small m."""
    assert brute_force_makespan(graham_lpt_family(m), m) == 3 * m


@pytest.mark.parametrize("m", [5, 6, 7])
def test_graham_tight_family_optimum_by_milp(m: int) -> None:
    """Graham 1969's family has OPT = 3m: checked with scipy.optimize.milp (HiGHS)."""
    assert milp_makespan(graham_lpt_family(m), m) == pytest.approx(3 * m)


@pytest.mark.parametrize("m", range(2, 11))
def test_graham_tight_family_optimum_by_witness(m: int) -> None:
    """Graham 1969's family has OPT = 3m for every m, by the paper's own argument: the
    three jobs of length m fill one node to 3m and each pair (k, 3m - k), k = m+1..2m-1,
    fills one of the other m - 1 nodes, so OPT <= 3m; the total work is 3m * m, so the
    mean load gives OPT >= 3m. Here the witness is built and checked job by job."""
    jobs = graham_lpt_family(m)
    witness = [[m, m, m]] + [[k, 3 * m - k] for k in range(m + 1, 2 * m)]
    assert len(witness) == m
    assert sorted(d for node in witness for d in node) == sorted(jobs)
    assert all(sum(node) == 3 * m for node in witness)
    assert sum(jobs) == 3 * m * m


@pytest.mark.parametrize("m", range(2, 11))
def test_list_scheduling_meets_graham_1966_family(m: int) -> None:
    """Graham (1966), Bell Syst. Tech. J. 45: m(m-1) unit jobs then one of length m give
    list = 2m - 1 while OPT = m, the ratio 2 - 1/m."""
    jobs = [1] * (m * (m - 1)) + [m]
    res = solve(Instance.build(jobs, m), "list")
    assert res.makespan == 2 * m - 1
    assert res.worst_case_ratio == pytest.approx(2 - 1 / m)
    assert res.lower_bound == m  # mean load (m(m-1) + m) / m = m, also the longest job
    assert res.makespan / m == pytest.approx(2 - 1 / m)


def _random_cases(count: int, n_max: int, seed: int) -> list[tuple[list[int], int]]:
    rng = np.random.default_rng(seed)
    cases = []
    for _ in range(count):
        n = int(rng.integers(1, n_max + 1))
        m = int(rng.integers(1, 5))
        cases.append((rng.integers(1, 60, size=n).tolist(), m))
    return cases


def coffman_sethi(p: list[int], m: int, assignment: list[dict]) -> float:
    """The a-posteriori LPT ratio of Coffman and Sethi (1976): with at least k jobs on every
    node, LPT <= ((k + 1)/k - 1/(km)) OPT; never above Graham's 4/3 - 1/(3m), and 1 with no
    more jobs than nodes (each job on its own node), worked here from the plan's job counts."""
    if len(p) <= m:
        return 1.0
    k = min(len(a["jobs"]) for a in assignment)
    return min(4 / 3 - 1 / (3 * m), (k + 1) / k - 1 / (k * m))


@pytest.mark.parametrize(("p", "m"), _random_cases(60, 10, seed=7))
@pytest.mark.parametrize(("method", "ratio"), [("longest_first", 4 / 3), ("list", 2.0)])
def test_against_brute_force(p: list[int], m: int, method: str, ratio: float) -> None:
    """Brute force on random n <= 10: bounds <= OPT <= makespan, within Graham's worst case
    (4/3 - 1/(3m) for LPT, Graham 1969; 2 - 1/m for list scheduling, Graham 1966), a
    proven-optimal plan is the brute-force optimum, and LPT within the Coffman-Sethi
    (1976) a-posteriori ratio (worked here from the plan)."""
    opt = brute_force_makespan(p, m)
    r = solve(Instance.build(p, m), method)
    assert max(r.certificate.bounds.values()) <= opt and r.lower_bound <= opt <= r.makespan
    assert r.makespan <= (ratio - (ratio - 1) / m) * opt + 1e-9
    assert r.proven_optimal <= (r.makespan == opt)  # proven optimal implies the optimum
    assert r.proven_optimal == (r.lower_bound == opt == r.makespan)


@pytest.mark.parametrize(("p", "m"), _random_cases(60, 10, seed=7))
def test_lpt_within_coffman_sethi(p: list[int], m: int) -> None:
    """LPT within the Coffman-Sethi (1976) a-posteriori ratio of the brute-force optimum,
    and the ratio it reports is that ratio, worked here from its plan."""
    opt = brute_force_makespan(p, m)
    lpt = solve(Instance.build(p, m), "longest_first")
    want = coffman_sethi(p, m, lpt.to_dict()["assignment"])
    assert lpt.extras["a_posteriori_ratio"] == pytest.approx(want)
    assert lpt.makespan <= want * opt + 1e-9


@pytest.mark.parametrize(("p", "m"), _random_cases(25, 25, seed=11))
def test_against_highs(p: list[int], m: int) -> None:
    """scipy.optimize.milp (HiGHS) optimum on random n <= 25: bounds <= OPT <= makespan
    and LPT <= (4/3 - 1/(3m)) OPT (Graham 1969)."""
    opt = milp_makespan(p, m)
    lpt = solve(Instance.build(p, m), "longest_first")
    assert lpt.lower_bound <= opt + 1e-6 <= lpt.makespan + 2e-6
    assert lpt.makespan <= (4 / 3 - 1 / (3 * m)) * opt + 1e-6


durations = st.lists(
    st.floats(0, 1e5, allow_nan=False, allow_infinity=False), min_size=1, max_size=60
)


@settings(max_examples=80, deadline=None)
@given(durations, st.integers(1, 12), st.sampled_from(["list", "longest_first"]))
def test_schedule_is_consistent(p: list[float], m: int, method: str) -> None:
    """Property (common practice): every job assigned exactly once, per-node loads add up to
    the total work, and each node's jobs run back to back without overlap."""
    inst = Instance.build(p, m)
    res = solve(inst, method)
    res.schedule.check()
    assignment = res.to_dict()["assignment"]
    ids = [j["id"] for a in assignment for j in a["jobs"]]
    assert sorted(ids) == sorted(inst.job_ids)
    assert sum(a["load"] for a in assignment) == pytest.approx(sum(p), rel=1e-9, abs=1e-6)
    for a in assignment:
        t = 0.0
        for j in a["jobs"]:
            assert j["start"] == pytest.approx(t, abs=1e-6)
            t = j["end"]
        assert a["load"] == pytest.approx(t, abs=1e-6)
    assert res.makespan == pytest.approx(max(a["load"] for a in assignment))


def heapq_least_loaded(d: list[float], m: int) -> tuple[list[int], list[float]]:
    """Textbook list scheduling with the standard library's heap on (load, node index)."""
    heap = [(0.0, k) for k in range(m)]
    nodes, starts = [], []
    for x in d:
        load, k = heapq.heappop(heap)
        nodes.append(k)
        starts.append(load)
        heapq.heappush(heap, (load + x, k))
    return nodes, starts


@settings(max_examples=60, deadline=None)
@given(durations, st.integers(1, 9))
def test_compiled_kernel_matches_pure_python_and_heapq(p: list[float], m: int) -> None:
    """The numba kernel, its pure-Python source, and a heapq implementation of Graham's
    rule (least-loaded node, lowest index on ties) give the same plan, tie for tie."""
    d = np.asarray(p, dtype=np.float64)
    fast = assign_in_order(d, m)
    slow = pure(assign_in_order)(d, m)
    ref = heapq_least_loaded(p, m)
    np.testing.assert_array_equal(fast[0], slow[0])
    np.testing.assert_array_equal(fast[1], slow[1])
    np.testing.assert_array_equal(fast[0], ref[0])
    np.testing.assert_array_equal(fast[1], ref[1])
    order = np.argsort(-d, kind="stable")
    node_of, _ = least_loaded(order, d, m)
    np.testing.assert_array_equal(node_of[order], heapq_least_loaded(d[order].tolist(), m)[0])


@settings(max_examples=60, deadline=None)
@given(st.lists(st.integers(0, 5), min_size=1, max_size=200))
def test_longest_first_order_is_stable_descending(p: list[int]) -> None:
    """The LPT order equals Python's stable sort by decreasing duration (ties in batch order)."""
    d = np.asarray(p, dtype=np.float64)
    expected = sorted(range(len(p)), key=lambda j: -p[j])
    assert longest_first_order(d).tolist() == expected


def test_ties_are_deterministic() -> None:
    """Equal jobs keep batch order and equal nodes go to the lowest index (our rule)."""
    inst = Instance.build([5, 5, 5, 5], 2, job_ids=["a", "b", "c", "d"])
    plan = solve(inst, "longest_first").to_dict()["assignment"]
    assert [[j["id"] for j in a["jobs"]] for a in plan] == [["a", "c"], ["b", "d"]]


def test_fewer_jobs_than_nodes_is_optimal() -> None:
    """With n <= m each job gets its own node: makespan = longest job, proven optimal."""
    res = solve(Instance.build([30, 10, 20], 5), "longest_first")
    assert res.makespan == 30 and res.proven_optimal and res.gap == 0
    assert res.extras["a_posteriori_ratio"] == 1.0


def test_zero_length_jobs_leaving_a_node_empty() -> None:
    """More jobs than nodes, but zero-length jobs leave a node empty (k = 0): the plan is
    still made, the a-posteriori ratio falls back to Graham's 4/3 - 1/(3m) (Coffman-Sethi
    needs at least one job per node), and it still holds against brute force."""
    p, m = [0.1, 0, 0, 0, 5, 0.1], 5
    res = solve(Instance.build(p, m), "longest_first")
    assert res.extras["a_posteriori_ratio"] == pytest.approx(4 / 3 - 1 / 15)  # m = 5
    opt = brute_force_makespan(p, m)
    assert res.lower_bound <= opt <= res.makespan <= res.extras["a_posteriori_ratio"] * opt
