"""Tests of ``method: exact`` on identical nodes (workers/planning/exact).

Every expected optimum comes from outside the project: a brute force written here, the
assignment MILP solved by scipy.optimize.milp (HiGHS, tests/reference.py), instances whose
optimum is known by construction, Graham's tight LPT family (Graham 1969), LPT written
here with the standard library's heapq, and Farley's (1990) LP bound re-checked with a
knapsack written here. Tests that compare a compiled kernel with its own pure-Python twin
say so: they are plumbing (the two paths agree), and their expected answer, where there is
one, comes from brute force.
"""

from __future__ import annotations

import heapq
import itertools
import time
from collections.abc import Sequence
from fractions import Fraction

import numpy as np
import pytest
from reference import check_plan_exact, exact_optimum, exact_plan_makespan, milp_makespan

from workers.planning import Budget, Instance, Node, solve
from workers.planning.exact import constructions, decision, improve, solve_exact
from workers.planning.greedy import longest_first_schedule
from workers.planning.solve import Progress


def brute_force(p: Sequence[float], m: int) -> float:
    """Optimum makespan over every assignment of jobs to nodes (node of job 0 fixed), on
    whole or real durations (all m**(n-1) assignments)."""
    n = len(p)
    best = sum(p)
    for rest in itertools.product(range(m), repeat=n - 1):
        loads = [0] * m
        loads[0] = p[0]
        for j, k in enumerate(rest, start=1):
            loads[k] += p[j]
        best = min(best, max(loads))
    return best


def lpt_makespan(p: Sequence[float], m: int) -> float:
    """Longest processing time first (Graham 1969) with the standard library's heapq: each
    job, longest first, onto the least-loaded of m identical nodes. Ties between equal
    loads do not change the multiset of loads, so the makespan does not depend on them."""
    heap = [0.0] * m
    for t in sorted(p, reverse=True):
        heapq.heapreplace(heap, heap[0] + t)
    return max(heap)


def exact(p: list[float], m: int, seconds: float = 5.0, **kw: object) -> object:
    """solve_exact on a fresh budget."""
    inst = Instance.build(p, m, **kw)  # type: ignore[arg-type]
    return solve_exact(inst, Budget(seconds))


def test_equals_brute_force_on_random_small_cases() -> None:
    """Exhaustive search over all m**(n-1) assignments (brute force) agrees, n <= 8."""
    rng = np.random.default_rng(11)
    for _ in range(60):
        n = int(rng.integers(2, 9))
        m = int(rng.integers(2, 4))
        p = [int(x) for x in rng.integers(1, 40, size=n)]
        res = exact(p, m)
        opt = brute_force(p, m)
        assert res.makespan == opt, (p, m)
        assert res.proven_optimal and res.stop_reason == "proved_optimal"
        assert res.lower_bound <= opt


def test_equals_highs_milp_on_random_instances_up_to_30_jobs() -> None:
    """scipy.optimize.milp (HiGHS) on the assignment model gives the same optimum."""
    rng = np.random.default_rng(5)
    for n, m in [(12, 3), (18, 4), (24, 3), (30, 5)]:
        p = [int(x) for x in rng.integers(5, 60, size=n)]
        opt = milp_makespan(p, m, time_limit=20.0)
        res = exact(p, m)
        assert res.makespan == pytest.approx(opt)
        assert res.proven_optimal


def planted(rng: np.random.Generator, m: int, u: int, pieces: int) -> list[int]:
    """Cut m segments of length u into ``pieces`` parts each: the optimum is u."""
    out: list[int] = []
    for _ in range(m):
        cuts = np.sort(rng.choice(np.arange(1, u), size=pieces - 1, replace=False))
        out.extend(np.diff(np.concatenate(([0], cuts, [u]))).tolist())
    rng.shuffle(out)
    return out


@pytest.mark.parametrize("m,u,pieces", [(3, 100, 3), (5, 1000, 3), (8, 500, 4), (12, 300, 2)])
def test_planted_instances_reach_the_planted_optimum(m: int, u: int, pieces: int) -> None:
    """Planted instances (optimum known by construction: the segments' length u)."""
    rng = np.random.default_rng(m * u)
    p = planted(rng, m, u, pieces)
    res = exact(p, m)
    assert res.makespan == u
    assert res.proven_optimal


@pytest.mark.parametrize("m", range(2, 11))
def test_graham_tight_family(m: int) -> None:
    """Graham (1969): two jobs each of 2m-1 .. m+1 and three of m; OPT = 3m, LPT = 4m-1."""
    p = [x for x in range(2 * m - 1, m, -1) for _ in range(2)] + [m, m, m]
    inst = Instance.build(p, m)
    assert longest_first_schedule(inst).makespan == 4 * m - 1  # the family is tight for LPT
    res = solve_exact(inst, Budget(5.0))
    assert res.makespan == 3 * m
    assert res.proven_optimal
    assert res.worst_case_ratio == pytest.approx(4 / 3 - 1 / (3 * m))  # Graham 1969


def test_certificate_never_exceeds_a_known_optimum_even_when_stopped_early() -> None:
    """Lower bound <= optimum (brute force / planted) for budgets down to zero."""
    rng = np.random.default_rng(3)
    for seconds in (0.0, 0.001, 0.05):
        for _ in range(10):
            p = [int(x) for x in rng.integers(1, 30, size=7)]
            res = exact(p, 3, seconds)
            assert res.lower_bound <= brute_force(p, 3)
        p = planted(rng, 20, 997, 3)
        res = exact(p, 20, seconds)
        assert res.lower_bound <= 997 <= res.makespan


def hard_instance(seed: int) -> list[int]:
    """A few-jobs-per-node batch (normal lengths, n/m = 2.5) of the kind that is slow to prove
    (Dell'Amico and Martello 1995 class; Lawrinenko 2018 hard region)."""
    rng = np.random.default_rng(seed)
    return [max(1, int(x)) for x in rng.normal(100, 20, size=100)]


def test_budget_is_honoured() -> None:
    """The solver stops on its own clock: wall time within the budget plus a generous margin."""
    p = hard_instance(7)
    inst = Instance.build(p, 40)
    solve_exact(inst, Budget(0.05))  # warm the compiled kernels
    t0 = time.perf_counter()
    res = solve_exact(inst, Budget(0.3))
    wall = time.perf_counter() - t0
    assert wall <= 0.3 * 1.05 + 0.5
    assert res.stop_reason in ("proved_optimal", "time_budget")
    assert res.solve_seconds <= wall + 1e-6


def test_cancel_is_reported() -> None:
    """A cancel seen through Budget.should_stop before any search ends it with stop_reason
    cancelled. Graham's (1969) tight family on m = 40 nodes: LPT gives 4m - 1 = 159, the
    optimum and the mean load are 3m = 120, so the starting plan cannot be proven optimal
    without a search; the certificate still brackets the optimum: bound <= 120 <= plan
    <= 159."""
    m = 40
    p = [x for x in range(2 * m - 1, m, -1) for _ in range(2)] + [m, m, m]
    inst = Instance.build(p, m)
    res = solve_exact(inst, Budget(30.0, should_stop=lambda: True, poll_interval=0.0))
    assert res.solve_seconds < 5.0
    assert res.stop_reason == "cancelled" and not res.proven_optimal
    assert res.lower_bound <= 3 * m <= res.makespan <= 4 * m - 1


def test_progress_hook_is_monotone() -> None:
    """Plumbing (no expected value of our own): progress reports never raise the incumbent
    nor lower the bound, the bound stays below the incumbent, and the last report is the
    plan returned; the plan itself is checked in exact arithmetic (tests/reference.py)."""
    seen: list[Progress] = []
    p = hard_instance(9)
    inst = Instance.build(p, 40)
    res = solve_exact(inst, Budget(0.4), progress=seen.append)
    assert seen
    for a, b in itertools.pairwise(seen):
        assert b.best_makespan <= a.best_makespan
        assert b.best_lower_bound >= a.best_lower_bound
        assert b.elapsed >= a.elapsed
    assert all(s.best_lower_bound <= s.best_makespan for s in seen)
    assert seen[-1].best_makespan == res.makespan
    check_plan_exact(res.to_dict(), p, 40, job_ids=inst.job_ids)


def test_never_worse_than_lpt() -> None:
    """The exact method starts from LPT (Graham 1969) and only keeps better plans: its
    exact makespan is never above LPT's, computed here with heapq (lpt_makespan)."""
    rng = np.random.default_rng(21)
    for _ in range(15):
        m = int(rng.integers(2, 12))
        p = [int(x) for x in rng.integers(1, 1000, size=int(rng.integers(m, 6 * m)))]
        inst = Instance.build(p, m)
        d = solve_exact(inst, Budget(0.05)).to_dict()
        check_plan_exact(d, p, m, job_ids=inst.job_ids)
        assert exact_plan_makespan(d, p, m, job_ids=inst.job_ids) <= lpt_makespan(p, m)


def test_pure_python_kernels_agree_with_compiled() -> None:
    """The ``.py_func`` paths of the kernels give the same answers as the numba ones
    (plumbing); the decision search's answers are the brute-force ones: capacity OPT - 1
    infeasible, capacity OPT feasible with a packing whose loads fit (checked here)."""
    rng = np.random.default_rng(4)
    for _ in range(12):
        m = int(rng.integers(2, 5))
        q = np.sort(rng.integers(1, 50, size=int(rng.integers(3, 11))))[::-1].astype(np.int64)
        opt = brute_force(q.tolist(), m)  # outside reference
        for cap, want in ((opt - 1, decision.INFEASIBLE), (opt, decision.FEASIBLE)):
            fast = decision.CompletionSearch(q, m, cap)
            slow = decision.CompletionSearch(q, m, cap, compiled=False)
            assert fast.run(10**6) == slow.run(10**6) == want
        # the two searches of the last (feasible) capacity: packings that fit in opt
        for packing in (fast.packing(), slow.packing()):
            assert np.bincount(packing, weights=q, minlength=m).max() <= opt
        u = q.copy()
        assert decision.l2_bound(u, u.size, opt) == decision.l2_bound.py_func(u, u.size, opt)
        a1 = np.zeros(q.size, dtype=np.int32)
        a2 = np.zeros(q.size, dtype=np.int32)
        c = int(q.sum())
        assert constructions.first_fit_decreasing(
            q, m, c, a1
        ) == constructions.first_fit_decreasing.py_func(q, m, c, a2)
        assert (a1 == a2).all()
        n1 = (np.arange(q.size) % m).astype(np.int32)
        n2 = n1.copy()
        assert improve.descend(q, n1, m, 100) == improve.descend.py_func(q, n2, m, 100)
        assert (n1 == n2).all()


def test_paused_search_resumes_to_the_same_answer() -> None:
    """Stopping the decision search every few nodes and resuming changes nothing."""
    rng = np.random.default_rng(6)
    q = np.sort(rng.integers(20, 100, size=10))[::-1].astype(np.int64)
    opt = brute_force(q.tolist(), 3)
    for cap in (opt - 1, opt):
        s = decision.CompletionSearch(q, 3, cap)
        while (st := s.run(3)) == decision.PAUSED:
            pass
        assert st == (decision.FEASIBLE if cap >= opt else decision.INFEASIBLE)


@pytest.mark.parametrize("resolution", [1.0, 0.5, 7.0])
def test_real_durations_bound_valid_and_makespan_from_true_durations(resolution: float) -> None:
    """Real durations with a resolution: the bound is at most the true optimum and the plan
    at least it (exact_optimum: branch and bound in Fractions, tests/reference.py), and the
    makespan is the plan's exact makespan on the true durations rounded to nearest."""
    rng = np.random.default_rng(8)
    for _ in range(8):
        p = [float(x) for x in rng.uniform(0.3, 40.0, size=7)]
        inst = Instance.build(p, 3, resolution=resolution)
        d = solve_exact(inst, Budget(2.0)).to_dict()
        check_plan_exact(d, p, 3, job_ids=inst.job_ids)
        ms = exact_plan_makespan(d, p, 3, job_ids=inst.job_ids)
        assert d["makespan"] == float(ms)
        opt = exact_optimum(p, 3)
        assert Fraction(d["lower_bound"]) <= opt <= ms


def test_auto_returns_lpt_when_the_bounds_prove_it() -> None:
    """auto: a batch where LPT meets the mean-load bound (McNaughton 1959) returns LPT."""
    inst = Instance.build([4, 4, 3, 3, 2, 2], 2)  # LPT: 4+3+2 = 9 on both nodes = S/m
    res = solve(inst, "auto", time_budget=1.0)
    assert res.method == "longest_first"
    assert res.stop_reason == "proved_optimal"
    assert res.to_dict()["method_requested"] == "auto"


def test_auto_searches_when_the_gap_is_open() -> None:
    """auto on Graham's tight family (LPT = 4m-1, OPT = 3m) runs the exact search."""
    m = 4
    p = [x for x in range(2 * m - 1, m, -1) for _ in range(2)] + [m, m, m]
    res = solve(Instance.build(p, m), "auto", time_budget=1.0)
    assert res.method == "exact"
    assert res.makespan == 3 * m
    assert "exact" in res.extras["auto_choice"]


#: eight jobs on three nodes whose optimum (brute force) is above the mean load, the
#: longest job and the pigeonhole sum (checked in the test): (jobs, optimum)
SEARCH_CASES = [
    ([47, 52, 15, 18, 32, 37, 48, 28], 94),
    ([11, 20, 32, 29, 55, 31, 41, 40], 89),
    ([14, 46, 12, 10, 39, 22, 28, 40], 72),
    ([17, 14, 45, 59, 44, 51, 30, 11], 92),
    ([42, 38, 47, 40, 34, 10, 44, 18], 92),
]


@pytest.mark.parametrize(("p", "opt"), SEARCH_CASES)
def test_search_certificate_names_the_refuted_capacity(p: list[int], opt: int) -> None:
    """Batches where the closed-form bounds stay below the optimum: the brute-force optimum
    (checked here) is above the mean load ceil(sum / 3), the longest job and the pigeonhole
    sum p3 + p4 (Dell'Amico and Martello 1995), so the search proves the rest: source
    'search', the bound the optimum, the refuted capacity one tick below it."""
    assert brute_force(p, 3) == opt
    q = sorted(p, reverse=True)
    assert max(-(-sum(p) // 3), q[0], q[2] + q[3]) < opt
    d = solve_exact(Instance.build(p, 3), Budget(5.0)).to_dict()
    assert d["lower_bound"] == opt and d["bound_source"] == "search"
    assert d["certificate"]["search"]["refuted_capacity"] == opt - 1
    assert d["bounds"]["search"] == opt


def test_rejects_non_identical_nodes() -> None:
    """The exact search is for identical nodes only: a clear error otherwise."""
    from workers.planning import InvalidInstance

    inst = Instance.build([3, 2, 1], [Node("a", speed=2.0), Node("b")])
    with pytest.raises(InvalidInstance):
        solve_exact(inst, Budget(1.0))


def test_neighbourhood_search_keeps_a_valid_packing_and_never_worsens() -> None:
    """The neighbourhood search only accepts repacks that keep every job once and never
    raise the largest load; on planted instances (optimum u by construction) it stays >= u."""
    rng = np.random.default_rng(12)
    for m in (12, 20):
        p = planted(rng, m, 400, 3)
        q = np.array(sorted(p, reverse=True), dtype=np.int64)
        node_of = (np.arange(q.size) % m).astype(np.int32)  # a poor round-robin start
        before = np.bincount(node_of, weights=q, minlength=m).max()
        improve.neighbourhood_search(q, node_of, m, 400, 0.3, np.random.default_rng(1))
        loads = np.bincount(node_of, weights=q, minlength=m)
        assert node_of.min() >= 0 and node_of.max() < m
        assert loads.sum() == q.sum()
        assert 400 <= loads.max() <= before


def test_best_split_is_the_best_subset_sum() -> None:
    """The two-node split finds the largest subset sum not above the target (brute force
    over all subsets), marks a subset with that sum, and the pure twin agrees."""
    rng = np.random.default_rng(31)
    for _ in range(60):
        w = rng.integers(1, 300, size=int(rng.integers(1, 11))).astype(np.int64)
        target = int(rng.integers(0, int(w.sum()) + 5))
        want = max(
            s
            for k in range(w.size + 1)
            for c in itertools.combinations(w.tolist(), k)
            if (s := sum(c)) <= target
        )
        for fn in (improve.best_split, improve.best_split.py_func):
            bits = np.empty((w.size + 1, target // 64 + 1), dtype=np.uint64)
            take = np.zeros(w.size, dtype=np.uint8)
            got = fn(w, target, bits, take)
            assert got == want
            assert int(w[take.astype(bool)].sum()) == want


def test_pair_balance_keeps_every_job_and_never_worsens() -> None:
    """The two-node balancing keeps a valid assignment, never raises the largest load, and
    on many small jobs per node reaches the mean-load bound (planted: optimum u)."""
    rng = np.random.default_rng(32)
    for m in (3, 5, 8):
        p = planted(rng, m, 5000, 12)
        q = np.array(sorted(p, reverse=True), dtype=np.int64)
        node_of = (np.arange(q.size) % m).astype(np.int32)
        before = np.bincount(node_of, weights=q, minlength=m).max()
        improve.pair_balance(q, node_of, m, 5000, 2.0)
        loads = np.bincount(node_of, weights=q, minlength=m)
        assert node_of.min() >= 0 and node_of.max() < m and loads.sum() == q.sum()
        assert 5000 <= loads.max() <= before
        slow = (np.arange(q.size) % m).astype(np.int32)
        improve.pair_balance(q, slow, m, 5000, 2.0, compiled=False)
        assert (slow == node_of).all()
    # many jobs per node: the balancing reaches the optimum
    assert loads.max() == 5000


def best_pattern(lengths: list[int], counts: list[int], values: list[int], cap: int) -> int:
    """The most a single bin of capacity ``cap`` can hold in value: a bounded knapsack
    (``counts[i]`` items of length ``lengths[i]`` and value ``values[i]``), by dynamic
    programming over the capacity in plain integers (textbook, common practice)."""
    best = [0] * (cap + 1)
    for length, count, value in zip(lengths, counts, values, strict=True):
        for _ in range(count):
            for c in range(cap, length - 1, -1):
                best[c] = max(best[c], best[c - length] + value)
    return best[cap]


def test_lp_bound_proves_what_bin_completion_cannot_in_time() -> None:
    """Nearly equal lengths, five per node (the Frangioni NU family): the LP bound refutes
    the capacity below the optimum. Its certificate is re-checked here from its definition
    (Farley 1990, Operations Research 38(5)): with dual values y_i >= 0 per length, any
    bin of capacity C holds at most V = max over patterns of sum y_i a_i (a knapsack
    solved here), so the jobs need at least sum(n_i y_i) / V bins; more than m means no
    plan fits in C. The plan of C + 1 is checked exactly, so the optimum is C + 1."""
    rng = np.random.default_rng(33)
    p = [int(x) for x in rng.integers(90, 101, size=49)] + [10]
    m = 10
    inst = Instance.build(p, m)
    d = solve_exact(inst, Budget(5.0)).to_dict()
    assert d["proven_optimal"]
    cert = d["certificate"]["search"]["refuted_by"]
    assert cert["rule"] == "lp_farley"
    cap = int(cert["capacity_ticks"])
    lengths, counts, duals = cert["lengths"], cert["counts"], cert["duals"]
    assert sorted(x for x, c in zip(lengths, counts, strict=True) for _ in range(c)) == sorted(p)
    assert min(duals) >= 0
    total = sum(c * y for c, y in zip(counts, duals, strict=True))
    assert total > m * best_pattern(lengths, counts, duals, cap)  # C is refuted
    check_plan_exact(d, p, m, job_ids=inst.job_ids)
    assert exact_plan_makespan(d, p, m, job_ids=inst.job_ids) == cap + 1 == d["makespan"]
    small = [int(x) for x in rng.integers(90, 101, size=10)] + [10]
    assert exact(small, 3).makespan == brute_force(small, 3)


def test_hard_region_instances_are_proven_fast() -> None:
    """n/m = 2.5 with normal lengths (the Lawrinenko hard region): proven optimal well
    within a second, the bound never above the plan."""
    for seed in range(3):
        inst = Instance.build(hard_instance(40 + seed), 40)
        t0 = time.perf_counter()
        res = solve_exact(inst, Budget(5.0))
        assert res.proven_optimal
        assert time.perf_counter() - t0 < 5.0
        assert res.lower_bound <= res.makespan


@pytest.mark.parametrize("m,u", [(24, 997), (40, 600)])
def test_few_jobs_per_node_planted_reach_and_prove_the_optimum(m: int, u: int) -> None:
    """Three pieces per node (the hard region, optimum u by construction): proven optimal,
    by the LP bound and its dives where the search alone would take long."""
    rng = np.random.default_rng(m + u)
    p = planted(rng, m, u, 3)
    res = exact(p, m, seconds=5.0)
    assert res.makespan == u
    assert res.proven_optimal


def test_real_durations_with_the_lp_keep_a_valid_bound() -> None:
    """Real durations, few per node, resolution 0.01: the bound (ticks rounded down, LP
    included) stays below the exact mean load, itself at most the optimum (McNaughton
    1959), in Fractions with no tolerance; the plan is checked exactly and its makespan
    is its exact makespan rounded to the nearest double (tests/reference.py)."""
    rng = np.random.default_rng(41)
    m, u = 15, 700
    p = [x / 100 + 0.004 for x in planted(rng, m, u, 3)]  # not multiples of the resolution
    mean_load = sum(map(Fraction, p)) / m  # <= OPT
    inst = Instance.build(p, m, resolution=0.01)
    d = solve_exact(inst, Budget(3.0)).to_dict()
    assert Fraction(d["lower_bound"]) <= mean_load
    check_plan_exact(d, p, m, job_ids=inst.job_ids)
    assert d["makespan"] == float(exact_plan_makespan(d, p, m, job_ids=inst.job_ids))


def test_constructions_stop_when_asked() -> None:
    """Plumbing: MULTIFIT and LDM look at the clock: LDM gives up (None), MULTIFIT returns
    its best packing so far, still a valid one (every job on one of the 20 nodes), and
    finishing the run never makes it worse; loads are summed here with numpy, and both
    are at least the mean load (McNaughton 1959)."""
    rng = np.random.default_rng(34)
    q = np.sort(rng.integers(1, 1000, size=400))[::-1].astype(np.int64)
    assert constructions.ldm(q, 20, should_stop=lambda: True) is None
    packing = constructions.multifit(q, 20, should_stop=lambda: True)
    assert packing is not None and packing.min() >= 0 and packing.max() < 20
    full = constructions.multifit(q, 20)
    assert full is not None

    def worst(packing: np.ndarray) -> int:
        return int(np.bincount(packing, weights=q, minlength=20).max())

    assert -(-int(q.sum()) // 20) <= worst(full) <= worst(packing)


def test_decision_search_tables_match_their_definitions() -> None:
    """The Fenwick tree and the next-shorter index of the decision search (built with numpy)
    answer as defined: prefix sums of the lengths, the first later index with a shorter job."""
    rng = np.random.default_rng(35)
    for _ in range(50):
        q = np.sort(rng.integers(1, 6, size=int(rng.integers(1, 40))))[::-1].astype(np.int64)
        s = decision.CompletionSearch(q, 3, int(q.sum()))
        for k in range(q.size + 1):
            got, i = 0, k
            while i > 0:
                got += int(s.fen[i])
                i -= i & -i
            assert got == int(q[:k].sum())
        for i in range(q.size):
            later = [j for j in range(i + 1, q.size) if q[j] < q[i]]
            assert s.next_smaller[i] == (later[0] if later else q.size)
