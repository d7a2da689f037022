"""The decision view of farms (``farm_exact.bisect``) and the whole-tick root bound, against
references that are not spanwright code.

References: ``reference.exact_optimum`` (an exact branch and bound over assignments in
Python Fractions, tests/reference.py) for the optimum of small farms, and HiGHS through
``scipy.optimize.milp`` as a second opinion on larger ones: its plan, measured again here
in exact Fractions, is a plan, so its makespan is an upper bound on the optimum that no
proven lower bound may pass (HiGHS' own bound is never used). The parts of the decision
search, Farley's bound (``farm_exact_lp``) and the subset-sum rebalancing
(``farm_decision_fill``), are checked against the same optimum, a knapsack enumerated with
itertools, and hand computations given in the docstrings.
"""

from __future__ import annotations

import itertools
import math
import random
from collections.abc import Sequence
from fractions import Fraction
from unittest.mock import patch

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import exact_optimum

from workers.planning import Instance, Node, solve
from workers.planning import farm_decision_fill as fill_mod
from workers.planning import farm_exact_lp as lpmod
from workers.planning.budget import Budget
from workers.planning.farm_bounds import eligibility
from workers.planning.farm_decision_fill import Fill
from workers.planning.farm_exact import SearchData, bisect, farm_lp, prove
from workers.planning.kernels import pure

Case = tuple[list[float], list[Node], list[list[str]]]


def optimum(
    p: Sequence[float], nodes: Sequence[Node], requires: Sequence[Sequence[str]]
) -> Fraction:
    """The exact optimum by tests/reference.py."""
    return Fraction(
        exact_optimum(
            list(p),
            [(nd.speed, nd.free_at, nd.provides) for nd in nodes],
            [set(r) for r in requires],
        )
    )


def plan_makespan(p: Sequence[float], nodes: Sequence[Node], plan: Sequence[int]) -> Fraction:
    """The latest node finish ``f_k + sum p_j / s_k`` of ``plan``, in Fractions."""
    work = [Fraction(0)] * len(nodes)
    for j, k in enumerate(plan):
        work[k] += Fraction(p[j])
    return max(
        Fraction(nd.free_at) + w / Fraction(nd.speed) for nd, w in zip(nodes, work, strict=True)
    )


def allowed(nodes: Sequence[Node], req: Sequence[str]) -> list[int]:
    return [k for k, nd in enumerate(nodes) if set(req) <= nd.provides]


@st.composite
def farms(draw: st.DrawFn) -> Case:
    """Up to 8 jobs on up to 4 nodes: speeds 1, 2, 4, 0.5, 3, busy nodes, a gpu tag, whole
    durations that are often multiples of 4 (so the gcd rounding of the room matters)."""
    m = draw(st.integers(1, 4))
    n = draw(st.integers(1, 8))
    unit = draw(st.sampled_from([1.0, 4.0, 0.25, 1e6]))
    nodes = [
        Node(
            f"n{k}",
            draw(st.sampled_from([1.0, 2.0, 4.0, 0.5, 3.0])),
            frozenset({"gpu"}) if k == 0 or draw(st.booleans()) else frozenset(),
            float(draw(st.integers(0, 9))) * unit,
        )
        for k in range(m)
    ]
    p = [float(draw(st.integers(1, 12))) * unit for _ in range(n)]
    req = [["gpu"] if draw(st.integers(0, 3)) == 0 else [] for _ in range(n)]
    return p, nodes, req


def run_bisect(
    case: Case, seconds: float, lower: float = 0.0
) -> tuple[Fraction, Fraction, bool, list[int]]:
    p, nodes, req = case
    inst = Instance.build(p, nodes, requires=req)
    elig = eligibility(inst)
    start = np.array([allowed(nodes, r)[0] for r in req], dtype=np.int32)
    proof = bisect(inst, elig, start, lower, Budget(seconds))
    return proof.makespan, proof.lower_bound, proof.finished, proof.node_of.tolist()


@settings(max_examples=250, deadline=None)
@given(farms())
def test_bisect_finds_and_proves_the_optimum(case: Case) -> None:
    """tests/reference.py exact_optimum: with time enough the decision search ends with the
    optimum, proven; its plan is allowed and its makespan (in Fractions) is the one given."""
    p, nodes, req = case
    opt = optimum(p, nodes, req)
    makespan, lower, finished, plan = run_bisect(case, 30.0)
    assert all(k in allowed(nodes, req[j]) for j, k in enumerate(plan))
    assert plan_makespan(p, nodes, plan) == makespan
    assert finished
    assert lower == makespan == opt


@settings(max_examples=250, deadline=None)
@given(farms(), st.sampled_from([0.0, 1e-4, 1e-3]))
def test_bisect_bound_never_above_the_optimum_when_stopped(case: Case, seconds: float) -> None:
    """tests/reference.py exact_optimum: stopped by the clock at any point, the bound is
    at most the optimum and the plan at least it."""
    p, nodes, req = case
    opt = optimum(p, nodes, req)
    makespan, lower, _, plan = run_bisect(case, seconds)
    assert lower <= opt <= makespan == plan_makespan(p, nodes, plan)


@settings(max_examples=250, deadline=None)
@given(farms())
def test_root_bound_with_whole_units_never_above_the_optimum(case: Case) -> None:
    """tests/reference.py exact_optimum: the root bound of the search (room rounded down to
    the gcd of the jobs, then bisection) with no search node at all is at most the optimum."""
    p, nodes, req = case
    opt = optimum(p, nodes, req)
    inst = Instance.build(p, nodes, requires=req)
    start = np.array([allowed(nodes, r)[0] for r in req], dtype=np.int32)
    proof = prove(inst, eligibility(inst), start, 0.0, Budget(30.0), max_nodes=0)
    assert proof.lower_bound <= opt


def test_gcd_rounding_refutes_what_plain_room_allows() -> None:
    """By hand: 30 jobs of 4 * (100..129) s on two speed-1 nodes (3435 units of 4 s, odd).
    Every load is a multiple of 4 s, so some node runs at least 4 * 1718 s, and a subset
    of units summing to 1718 (found here by a plain subset-sum table) makes that the
    optimum. The root bound alone (no search node) reaches it: the work bound is 6870 s."""
    units = list(range(100, 130))
    reach: dict[int, tuple[int, ...]] = {0: ()}
    for u in units:  # subset sums, each with one subset reaching it
        for total, subset in list(reach.items()):
            reach.setdefault(total + u, (*subset, u))
    assert 1718 in reach
    p = [4.0 * u for u in units]
    inst = Instance.build(p, [Node("a"), Node("b", speed=1.0, free_at=0.0)])
    proof = prove(
        inst, eligibility(inst), np.zeros(30, dtype=np.int32), 0.0, Budget(5), max_nodes=0
    )
    assert proof.lower_bound == 4 * 1718


def bench_like(seed: int) -> Case:
    """A generated farm as in bench/farm_exact.py: speeds 1, 2, 4, a gpu quarter, a busy
    quarter, durations multiples of 4 s."""
    rng = random.Random(seed)
    m = rng.randint(4, 10)
    nodes = [
        Node(
            f"rill-{k}",
            float(rng.choice([1, 2, 4])),
            frozenset({"gpu"}) if k % 4 == 0 else frozenset(),
            float(rng.randint(1, 1200)) if k % 4 == 1 else 0.0,
        )
        for k in range(m)
    ]
    n = m * rng.randint(2, 5)
    p = [4.0 * rng.randint(15, 450) for _ in range(n)]
    req = [["gpu"] if rng.random() < 0.2 else [] for _ in range(n)]
    return p, nodes, req


def highs_plan(case: Case) -> list[int]:
    """HiGHS' plan for the assignment MILP (a hint: only its plan is used, measured again;
    stopped after 2 s, as any plan serves as an upper bound on the optimum)."""
    from scipy.optimize import Bounds, LinearConstraint, milp

    p, nodes, req = case
    pairs = [(j, k) for j in range(len(p)) for k in allowed(nodes, req[j])]
    nv = len(pairs) + 1
    a1 = np.zeros((len(p), nv))
    a2 = np.zeros((len(nodes), nv))
    for v, (j, k) in enumerate(pairs):
        a1[j, v] = 1
        a2[k, v] = p[j] / nodes[k].speed
    a2[:, -1] = -1
    c = np.zeros(nv)
    c[-1] = 1
    free = np.array([nd.free_at for nd in nodes])
    res = milp(
        c,
        constraints=[LinearConstraint(a1, 1, 1), LinearConstraint(a2, -np.inf, -free)],
        integrality=np.r_[np.ones(nv - 1), 0],
        bounds=Bounds(0, np.r_[np.ones(nv - 1), np.inf]),
        options={"time_limit": 2},
    )
    assert res.x is not None
    plan = [0] * len(p)
    for v, (j, k) in enumerate(pairs):
        if res.x[v] > 0.5:
            plan[j] = k
    return plan


@pytest.mark.parametrize("seed", range(8))
def test_exact_bound_never_above_a_highs_plan(seed: int) -> None:
    """HiGHS (scipy.optimize.milp) as a second opinion: its plan, measured in Fractions,
    ends no earlier than our proven bound; a plan we call optimal ends no later than it."""
    case = bench_like(seed)
    p, nodes, req = case
    theirs = plan_makespan(p, nodes, highs_plan(case))
    res = solve(Instance.build(p, nodes, requires=req), "exact", time_budget=0.5)
    assert Fraction(res.certificate.exact_value) <= theirs
    assert res.schedule.makespan_exact <= theirs or not res.proven_optimal


# -- Farley's bound (farm_exact_lp) and the subset-sum rebalancing (farm_decision_fill) --
def search_of(case: Case) -> SearchData:
    p, nodes, req = case
    inst = Instance.build(p, nodes, requires=req)
    start = np.array([allowed(nodes, r)[0] for r in req], dtype=np.int32)
    return SearchData(inst, eligibility(inst), start)


def test_knapsack_table_matches_enumeration() -> None:
    """itertools: the best value of a subset of the items within every capacity."""
    rng = np.random.default_rng(5)
    for _ in range(30):
        t = int(rng.integers(1, 8))
        weight = rng.integers(0, 9, t).astype(np.int64)
        value = rng.integers(0, 20, t).astype(np.int64)
        cap = int(rng.integers(0, 25))
        dp = np.zeros(cap + 1, np.int64)
        take = np.zeros((t, cap + 1), np.uint8)
        pure(lpmod.knapsack_table)(weight, value, dp, take)
        for c in range(cap + 1):
            best = max(
                sum(int(value[i]) for i in pick)
                for r in range(t + 1)
                for pick in itertools.combinations(range(t), r)
                if sum(int(weight[i]) for i in pick) <= c
            )
            assert dp[c] == best


def test_farley_refutes_one_job_per_node_by_hand() -> None:
    """By hand: six 5 s jobs on three speed-1 nodes. By 9 s a node holds one job (two take
    10 s), so with every job worth 1 the jobs are worth 6 and the nodes hold 3: 9 s is
    refuted. By 10 s a node holds two: 6 <= 6, not refuted by that count."""
    case: Case = ([5.0] * 6, [Node(f"n{k}") for k in range(3)], [[]] * 6)
    s = search_of(case)
    lp = farm_lp(s)
    assert lp is not None
    lp.price([1])
    assert lp.refutes([1], 9 * s.scale)
    assert not lp.refutes([1], 10 * s.scale)


def test_farley_with_speeds_and_busy_node_by_hand() -> None:
    """By hand: jobs of 6, 6 and 6 s; node a speed 2 free at 0, node b speed 1 free at 1.
    By 5 s a holds 10 s of work (one job) and b 4 s (none): three jobs, one place: 5 s
    is refuted. At 6 s a holds two jobs (12 s of work) but b none (5 s of work), so 6 s is
    refuted too; at 7 s b holds one: 3 <= 3. The optimum is 7 s (a runs two jobs, ending
    at 6 s, b one, ending at 7 s). The LP reaches it from 5 s."""
    nodes = [Node("a", speed=2.0), Node("b", speed=1.0, free_at=1.0)]
    case: Case = ([6.0] * 3, nodes, [[]] * 3)
    assert exact_optimum([6.0] * 3, [(2.0, 0.0, frozenset()), (1.0, 1.0, frozenset())]) == 7
    s = search_of(case)
    lp = farm_lp(s)
    assert lp is not None
    lp.seed(5 * s.scale, [0, 0, 0], s.cls)
    assert lp.solve(5 * s.scale, Budget(5.0)) == 7 * s.scale - 1


@settings(max_examples=200, deadline=None)
@given(farms(), st.sampled_from([1 << 15, 3]))
def test_farley_never_refutes_the_optimum(case: Case, table: int) -> None:
    """tests/reference.py exact_optimum: the column generation asked at any limit never
    proves a limit at or above the optimum infeasible; also with a knapsack table of 3
    capacities (lengths and capacities rounded down to a coarse grid, a relaxation)."""
    p, nodes, req = case
    opt = optimum(p, nodes, req)
    s = search_of(case)
    with patch.object(lpmod, "MAX_TABLE", table):
        lp = farm_lp(s)
    assert lp is not None
    opt_ticks = opt * s.scale
    assert opt_ticks.denominator == 1
    lp.seed(0, [allowed(nodes, req[j])[0] for j in s.order], s.cls)
    for limit in {0, int(opt_ticks) // 2, int(opt_ticks) - 1, int(opt_ticks)}:
        assert lp.solve(limit, Budget(5.0)) < opt_ticks


@settings(max_examples=200, deadline=None)
@given(farms(), st.integers(0, 3), st.sampled_from([1 << 16, 2]))
def test_fill_plans_end_by_the_limit(case: Case, seed: int, units: int) -> None:
    """tests/reference.py exact_optimum: asked at the optimum (in ticks), a plan the
    rebalancing returns puts every job on a node that may run it and ends by the limit
    (measured here in Fractions); asked below the optimum it returns no plan. Also with
    capacities of at most 2 units (lengths rounded up to a coarse unit, capacities down)."""
    p, nodes, req = case
    opt = optimum(p, nodes, req)
    s = search_of(case)
    with patch.object(fill_mod, "MAX_UNITS", units):
        fill = Fill(s.p, [frozenset(s.elig_nodes[t]) for t in s.typ], s.g, s.w, s.upper)
    start = [allowed(nodes, req[j])[0] for j in s.order]
    limit = opt * s.scale
    assert limit.denominator == 1
    for c in (int(limit), int(limit) - 1):
        out = fill.run(start, c, Budget(5.0), seed=seed, max_moves=200)
        plan = [0] * len(p)
        for d, k in enumerate(out or []):
            plan[s.order[d]] = k
        assert out is None or all(k in allowed(nodes, req[j]) for j, k in enumerate(plan))
        assert out is None or plan_makespan(p, nodes, plan) <= Fraction(c, s.scale)
    assert fill.run(start, math.floor(limit) - 1, Budget(5.0), max_moves=200) is None


def test_fill_moves_long_jobs_to_the_fast_node_by_hand() -> None:
    """By hand: jobs of 8, 6, 4 and 2 s, all on a speed-1 node; a speed-2 node is idle.
    By 7 s the slow node holds 7 s of work and the fast one 14 s: {6} or {4, 2} on the
    slow node and the rest (14 s of work) on the fast one do it, and the rebalancing
    finds one of them with a single split."""
    nodes = [Node("slow", speed=1.0), Node("fast", speed=2.0)]
    p = [8.0, 6.0, 4.0, 2.0]
    s = search_of((p, nodes, [[]] * 4))
    fill = Fill(s.p, [frozenset(s.elig_nodes[t]) for t in s.typ], s.g, s.w, s.upper)
    out = fill.run([0, 0, 0, 0], 7 * s.scale, Budget(5.0), max_moves=1)
    assert out is not None
    plan = [0] * 4
    for d, k in enumerate(out):
        plan[s.order[d]] = k
    assert plan_makespan(p, nodes, plan) <= 7


@pytest.mark.parametrize("limit", [6, 5])
def test_fill_finds_nothing_where_the_work_does_not_fit(limit: int) -> None:
    """By hand: the same four jobs (20 s of work) by 6 s: the nodes hold 6 + 12 = 18 s of
    work, so no plan exists and none is returned (nor by 5 s)."""
    nodes = [Node("slow", speed=1.0), Node("fast", speed=2.0)]
    s = search_of(([8.0, 6.0, 4.0, 2.0], nodes, [[]] * 4))
    fill = Fill(s.p, [frozenset(s.elig_nodes[t]) for t in s.typ], s.g, s.w, s.upper)
    assert fill.run([0, 0, 0, 0], limit * s.scale, Budget(5.0), max_moves=100) is None


def test_three_node_packing_by_hand() -> None:
    """By hand: jobs of 5, 4, 3, 3, 2 and 1 s on three speed-1 nodes by 6 s: 5 + 1, 4 + 2
    and 3 + 3 is the only way (up to the nodes' order), and the exhaustive three-node
    packing finds one such; by 6, 6 and 5 s (17 s of room for 18 s of jobs) there is none."""
    p = [5.0, 4.0, 3.0, 3.0, 2.0, 1.0]
    nodes = [Node("a"), Node("b"), Node("c", free_at=0.0)]
    s = search_of((p, nodes, [[]] * 6))
    fill = Fill(s.p, [frozenset(s.elig_nodes[t]) for t in s.typ], s.g, s.w, s.upper)
    caps = fill.caps(6 * s.scale)
    assert caps is not None
    jobs = list(range(6))
    where = fill.pack(jobs, (0, 1, 2), list(caps))
    assert where is not None
    placed = list(zip(jobs, where, strict=True))
    sums = [sum(p[s.order[d]] for d, x in placed if x == i) for i in range(3)]
    assert sums == [6.0, 6.0, 6.0]
    assert fill.pack(jobs, (0, 1, 2), [caps[0], caps[1], caps[2] * 5 // 6]) is None
