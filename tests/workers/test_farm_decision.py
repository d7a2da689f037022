"""The decision view of farms (``farm_exact.bisect``) and the whole-tick root bound, against
references that are not spanwright code.

References: ``reference.exact_optimum`` (an exact branch and bound over assignments in
Python Fractions, tests/reference.py) for the optimum of small farms, and HiGHS through
``scipy.optimize.milp`` as a second opinion on larger ones: its plan, measured again here
in exact Fractions, is a plan, so its makespan is an upper bound on the optimum that no
proven lower bound may pass (HiGHS' own bound is never used).
"""

from __future__ import annotations

import random
from collections.abc import Sequence
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from reference import exact_optimum

from workers.planning import Instance, Node, solve
from workers.planning.budget import Budget
from workers.planning.farm_bounds import eligibility
from workers.planning.farm_exact import bisect, prove

Case = tuple[list[float], list[Node], list[list[str]]]


def optimum(
    p: Sequence[float], nodes: Sequence[Node], requires: Sequence[Sequence[str]]
) -> Fraction:
    """The exact optimum by tests/reference.py."""
    return exact_optimum(
        list(p), [(nd.speed, nd.free_at, nd.provides) for nd in nodes], [set(r) for r in requires]
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
    reach = {0: ()}
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
    """HiGHS' plan for the assignment MILP (a hint: only its plan is used, measured again)."""
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
        options={"time_limit": 20},
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
