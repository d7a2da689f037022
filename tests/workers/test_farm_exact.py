"""Exact proofs on farms (workers/planning/farm_exact) against references written here.

The reference is ``brute_force`` below: every assignment of the jobs to the nodes that may
run them (itertools.product), each node's finish ``f_k + sum p_j / s_k`` computed with
fractions.Fraction from the floats given (every float is an exact rational), so it is the
true optimum of the instance as stated. A few larger tests use an instance whose optimum
is known by construction (every node filled exactly to C, and no plan can end before the
mean-load bound ``(sum p + sum s f) / sum s = C``). No expected value comes from
spanwright code.
"""

from __future__ import annotations

import itertools
import math
import random
from collections.abc import Sequence
from fractions import Fraction

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.planning import Instance, Node
from workers.planning.budget import Budget
from workers.planning.farm_bounds import eligibility
from workers.planning.farm_exact import (
    CHECK_EVERY,
    FarmProof,
    exact_loads,
    exact_makespan,
    prove,
)

Plan = tuple[int, ...]


def allowed_nodes(
    nodes: Sequence[Node], requires: Sequence[Sequence[str]] | None, n: int
) -> list[list[int]]:
    """For every job, the nodes that provide every tag it requires."""
    req = requires or [()] * n
    return [[k for k, nd in enumerate(nodes) if set(req[j]) <= nd.provides] for j in range(n)]


def finishes(p: Sequence[float], nodes: Sequence[Node], plan: Sequence[int]) -> list[Fraction]:
    """Every node's finish in exact rationals: f_k + (sum of its p_j) / s_k."""
    work = [Fraction(0)] * len(nodes)
    for j, k in enumerate(plan):
        work[k] += Fraction(p[j])
    return [
        Fraction(nd.free_at) + w / Fraction(nd.speed) for nd, w in zip(nodes, work, strict=True)
    ]


def brute_force(
    p: Sequence[float], nodes: Sequence[Node], requires: Sequence[Sequence[str]] | None = None
) -> tuple[Fraction, list[Plan]]:
    """The optimum makespan over every allowed assignment, and every plan reaching it."""
    n, m = len(p), len(nodes)
    allowed = allowed_nodes(nodes, requires, n)
    share = [[Fraction(p[j]) / Fraction(nd.speed) for nd in nodes] for j in range(n)]
    cache: dict[tuple[int, int], Fraction] = {}

    def finish(k: int, mask: int) -> Fraction:
        got = cache.get((k, mask))
        if got is None:
            got = Fraction(nodes[k].free_at) + sum(
                (share[j][k] for j in range(n) if mask >> j & 1), Fraction(0)
            )
            cache[(k, mask)] = got
        return got

    best: Fraction | None = None
    plans: list[Plan] = []
    for plan in itertools.product(*allowed):
        masks = [0] * m
        for j, k in enumerate(plan):
            masks[k] |= 1 << j
        span = max(finish(k, masks[k]) for k in range(m))
        if best is None or span < best:
            best, plans = span, [plan]
        elif span == best:
            plans.append(plan)
    assert best is not None
    return best, plans


def run(
    p: Sequence[float],
    nodes: Sequence[Node],
    incumbent: Sequence[int],
    requires: Sequence[Sequence[str]] | None = None,
    lower: float = 0.0,
    max_nodes: int | None = None,
    seconds: float = 60.0,
) -> tuple[Instance, FarmProof]:
    """prove() on a freshly built instance."""
    inst = Instance.build(p, list(nodes), requires=requires)
    proof = prove(
        inst,
        eligibility(inst),
        np.asarray(incumbent, dtype=np.int32),
        lower,
        Budget(seconds),
        max_nodes=max_nodes,
    )
    return inst, proof


def check_optimal(
    p: Sequence[float],
    nodes: Sequence[Node],
    incumbent: Sequence[int],
    requires: Sequence[Sequence[str]] | None = None,
    lower: float = 0.0,
) -> FarmProof:
    """The proof is finished, its plan is allowed and optimal by brute force."""
    opt, _ = brute_force(p, nodes, requires)
    _, proof = run(p, nodes, incumbent, requires, lower)
    plan = proof.node_of.tolist()
    allowed = allowed_nodes(nodes, requires, len(p))
    assert proof.finished
    assert proof.makespan == opt
    assert proof.lower_bound == opt
    assert max(finishes(p, nodes, plan)) == opt
    assert all(k in allowed[j] for j, k in enumerate(plan))
    return proof


# -- the regression that started it ------------------------------------------------------

HIGHS_CASE = [756104229.0, 606921806.0, 571394725.0, 826744948.0, 548764629.0]
TWO_NODES = [Node("a", 1.0), Node("b", 0.5)]


def test_highs_false_optimum_is_beaten_and_the_true_one_proven() -> None:
    """Brute force: the optimum is 2240318708 s, reached only with node a running jobs 1,
    2 and 4 (indices 0, 1, 3); HiGHS' plan (b runs job 4 alone) ends at 2483185389 s."""
    opt, plans = brute_force(HIGHS_CASE, TWO_NODES)
    assert opt == 2240318708
    assert plans == [(0, 0, 1, 0, 1)]
    highs_plan = (0, 0, 0, 1, 0)
    assert max(finishes(HIGHS_CASE, TWO_NODES, highs_plan)) == 2483185389
    proof = check_optimal(HIGHS_CASE, TWO_NODES, highs_plan)
    assert proof.node_of.tolist() == [0, 0, 1, 0, 1]
    assert proof.makespan == Fraction(2240318708)


def test_highs_case_from_every_incumbent() -> None:
    """Brute force (as above): whatever valid plan the search starts from, it ends at the
    optimum 2240318708 with node a on indices 0, 1, 3."""
    for start in itertools.product(range(2), repeat=5):
        proof = check_optimal(HIGHS_CASE, TWO_NODES, start)
        assert proof.node_of.tolist() == [0, 0, 1, 0, 1]


# -- scales, speeds, busy nodes, tags -----------------------------------------------------

BASE = [7, 13, 5, 11, 3, 9, 8, 6]


@pytest.mark.parametrize("scale", [1e-9, 1e-6, 1e-3, 1.0, 1e3, 1e6, 1e9, 1e12])
def test_scales(scale: float) -> None:
    """Brute force in Fraction of the very floats given (x * scale is rounded once, and
    that float is the instance), with speeds 1, 0.3 and 2 and a busy node."""
    p = [x * scale for x in BASE]
    nodes = [Node("a", 1.0), Node("b", 0.3), Node("c", 2.0, free_at=4 * scale)]
    check_optimal(p, nodes, [0] * len(p))


def test_mixed_scales_in_one_batch() -> None:
    """Brute force: durations from 1e-9 s to 1e12 s in one batch (whole-number scaled
    values far above 2**62), speeds 0.3, 1 and 3, a node busy for a fraction of a second."""
    p = [1e12, 3e-9, 5.5, 7e11, 2e-9, 3e11 + 0.25, 1e-3]
    nodes = [Node("a", 0.3), Node("b", 1.0, free_at=0.1), Node("c", 3.0)]
    check_optimal(p, nodes, [0] * len(p))
    check_optimal(p, nodes, [2] * len(p))


@pytest.mark.parametrize(
    "speeds",
    [(1.0, 2.0, 3.0), (0.5, 0.3, 1.0), (3.0, 3.0, 0.3), (0.3, 0.3, 0.3, 2.0), (2.0, 0.5)],
)
def test_speeds(speeds: tuple[float, ...]) -> None:
    """Brute force: speeds 1, 2, 3, 0.5 and 0.3 (0.3 is not a dyadic rational in decimal;
    the double closest to it is the speed), durations with fractions of a second."""
    p = [12.5, 7.25, 30.0, 3.1, 18.0, 9.75, 0.1][: 8 - len(speeds)]
    nodes = [Node(f"n{k}", s) for k, s in enumerate(speeds)]
    check_optimal(p, nodes, [0] * len(p))


def test_busy_nodes() -> None:
    """Brute force: nodes still busy (free_at > 0) with different speeds."""
    p = [40.0, 35.0, 22.0, 18.0, 15.0, 9.0, 4.0, 2.0]
    nodes = [Node("a", 1.0, free_at=30.0), Node("b", 2.0, free_at=55.5), Node("c", 0.5)]
    check_optimal(p, nodes, [2] * len(p))


def test_a_node_busy_past_every_plan() -> None:
    """Brute force: a node busy until 1000 s ends every plan at 1000 s at least, and the
    other nodes can finish the jobs before that, so the optimum is 1000."""
    p = [30.0, 20.0, 10.0, 5.0]
    nodes = [Node("a", 1.0), Node("late", 1.0, free_at=1000.0)]
    proof = check_optimal(p, nodes, [1, 1, 1, 1])
    assert proof.makespan == 1000


def test_tags() -> None:
    """Brute force: jobs that require tags may only run on nodes that provide them all."""
    p = [50.0, 44.0, 31.0, 27.0, 20.0, 12.0, 8.0, 3.0]
    requires = [["gpu"], [], ["gpu", "ram"], [], ["ram"], [], ["gpu"], []]
    nodes = [
        Node("g", 1.0, frozenset({"gpu"})),
        Node("gr", 0.5, frozenset({"gpu", "ram"})),
        Node("r", 2.0, frozenset({"ram"}), free_at=10.0),
        Node("plain", 3.0),
    ]
    start = [1, 1, 1, 1, 1, 1, 1, 1]  # every job may run on "gr"
    check_optimal(p[:7], nodes, start[:7], requires[:7])


def test_identical_nodes_and_equal_jobs() -> None:
    """Brute force: interchangeable nodes and equal jobs (where the symmetry rules cut
    most branches) still reach the optimum."""
    p = [6.0, 6.0, 6.0, 4.0, 4.0, 4.0, 3.0, 3.0]
    nodes = [Node("a"), Node("b"), Node("c"), Node("d", 2.0)]
    check_optimal(p[:7], nodes, [0] * 7)
    p2 = [5.0, 5.0, 4.0, 4.0, 3.0, 3.0, 2.0, 2.0]
    check_optimal(p2, [Node("a"), Node("b"), Node("c")], [0] * 8)


def test_better_by_the_smallest_step() -> None:
    """Brute force: plans one second (or one scaled unit) better than the incumbent are
    found, i.e. only plans at or above the best are cut, not those just below."""
    proof = check_optimal([3.0, 2.0, 2.0], [Node("a"), Node("b")], [0, 0, 1])
    assert proof.makespan == 4
    proof = check_optimal([3.0, 3.0, 2.0, 2.0, 2.0], [Node("a"), Node("b", 2.0)], [1, 1, 1, 1, 0])
    assert proof.makespan == 4


def test_zero_durations() -> None:
    """Brute force: jobs of duration 0 change no finish; with only those, the plan ends at
    the latest free_at."""
    nodes = [Node("a", 1.0, free_at=2.0), Node("b", 0.5)]
    check_optimal([0.0, 3.0, 0.0, 1.0], nodes, [1, 1, 0, 1])
    proof = check_optimal([0.0, 0.0], nodes, [0, 1])
    assert proof.makespan == 2


def test_lower_bound_that_meets_the_optimum_stops_the_search() -> None:
    """Brute force: given the optimum itself as ``lower``, the search ends at it."""
    opt, _ = brute_force(HIGHS_CASE, TWO_NODES)
    check_optimal(HIGHS_CASE, TWO_NODES, (0, 0, 0, 1, 0), lower=float(opt))


def test_stopped_by_max_nodes() -> None:
    """Brute force: cut after 0, 1, 2, ... search nodes, the proof is unfinished, its bound
    is at most the optimum and its plan at least the optimum (and exactly its makespan)."""
    p = [19.0, 17.0, 14.0, 13.0, 11.0, 7.0, 5.0, 2.0]
    nodes = [Node("a", 1.0), Node("b", 0.3), Node("c", 2.0, free_at=3.0)]
    opt, _ = brute_force(p, nodes)
    full = run(p, nodes, [0] * 8)[1]
    assert full.finished
    assert full.nodes > 3
    for cap in range(full.nodes):
        _, proof = run(p, nodes, [0] * 8, max_nodes=cap)
        assert not proof.finished
        assert proof.nodes == cap
        assert proof.lower_bound <= opt <= proof.makespan
        assert proof.makespan == max(finishes(p, nodes, proof.node_of.tolist()))


def test_invalid_incumbent_is_refused() -> None:
    """The incumbent must be a plan: right length, real nodes, allowed nodes only."""
    inst = Instance.build([3.0, 4.0], [Node("g", 1.0, frozenset({"gpu"})), Node("p")])
    inst_tags = Instance.build(
        [3.0, 4.0], [Node("g", 1.0, frozenset({"gpu"})), Node("p")], requires=[["gpu"], []]
    )
    for bad, target in (([0], inst), ([0, 2], inst), ([-1, 0], inst), ([1, 0], inst_tags)):
        with pytest.raises(ValueError):
            prove(target, eligibility(target), np.array(bad, np.int32), 0.0, Budget(5))


# -- larger instances with the optimum known by construction -----------------------------


def packed(seed: int, jobs_per_node: int, nodes: Sequence[Node], c: int) -> list[float]:
    """Jobs that fill every node exactly to C: node k gets jobs_per_node whole durations
    summing to s_k (C - f_k) (integers, so every float is exact)."""
    rng = random.Random(seed)
    p: list[float] = []
    for nd in nodes:
        room = int(nd.speed * (c - nd.free_at))
        cuts = [0, *sorted(rng.sample(range(1, room), jobs_per_node - 1)), room]
        p += [float(b - a) for a, b in itertools.pairwise(cuts)]
    return p


@pytest.mark.parametrize(
    ("nodes", "jobs_per_node"),
    [
        ([Node("a", 1.0), Node("b", 2.0), Node("c", 3.0)], 5),
        ([Node("a", 1.0), Node("b", 1.0), Node("c", 1.0), Node("d", 2.0)], 4),
        ([Node("a", 1.0, free_at=100.0), Node("b", 2.0), Node("c", 1.0)], 6),
    ],
)
def test_perfect_packings(nodes: list[Node], jobs_per_node: int) -> None:
    """By construction: the jobs fill every node exactly to C = 10**9 + 7, which is the
    mean-load bound (sum p + sum s f) / sum s, so the optimum is C. The search starts from
    every job on the first node and must find such a packing, with a bound of C."""
    c = 10**9 + 7
    p = packed(len(nodes) * jobs_per_node, jobs_per_node, nodes, c)
    total = sum(Fraction(x) for x in p)
    mean_load = (total + sum(Fraction(nd.speed * nd.free_at) for nd in nodes)) / sum(
        Fraction(nd.speed) for nd in nodes
    )
    assert mean_load == c
    _, proof = run(p, nodes, [0] * len(p))
    assert proof.finished
    assert proof.makespan == c
    assert max(finishes(p, nodes, proof.node_of.tolist())) == c


def test_expired_budget_stops_at_the_first_check() -> None:
    """Mean-load bound on identical nodes with whole durations: every makespan is a whole
    number at least sum p / m, so ceil(sum p / m) <= optimum; a spent budget stops the
    search at its first look at the clock with a bound no higher than that."""
    rng = np.random.default_rng(7)
    p = rng.integers(10**8, 10**9, 40).astype(float).tolist()
    nodes = [Node("a"), Node("b"), Node("c")]
    start = [j % 3 for j in range(40)]
    _, proof = run(p, nodes, start, lower=1.0, seconds=0.0)
    assert not proof.finished
    assert proof.nodes == CHECK_EVERY
    assert 1 <= proof.lower_bound <= math.ceil(sum(int(x) for x in p) / 3)
    assert proof.makespan == max(finishes(p, nodes, proof.node_of.tolist()))


# -- exact loads ------------------------------------------------------------------------


@pytest.mark.parametrize("kind", ["whole", "halves", "fractions", "tiny", "huge"])
def test_exact_loads(kind: str) -> None:
    """Fraction sums written here: both the int64 path and the exact fallback."""
    rng = np.random.default_rng(3)
    n = 3000
    p = {
        "whole": rng.integers(0, 10**6, n).astype(float),
        "halves": rng.integers(0, 10**6, n) / 1024.0,
        "fractions": rng.random(n) * 1e4,
        "tiny": rng.random(n) * 1e-9,
        "huge": np.concatenate((rng.random(n - 1) * 1e-6, [1e14])),
    }[kind]
    nodes = [Node("a", 1.0), Node("b", 0.3, free_at=0.1), Node("c", 3.0), Node("d", 2.0)]
    plan = rng.integers(0, 4, n)
    inst = Instance.build(p, nodes)
    want = finishes(p.tolist(), nodes, plan.tolist())
    assert exact_loads(inst, plan) == want
    assert exact_makespan(inst, plan) == max(want)


# -- properties ---------------------------------------------------------------------------

TAGS = ("gpu", "ram")


@st.composite
def farms(draw: st.DrawFn) -> tuple[list[float], list[Node], list[list[str]], list[int]]:
    """Up to 8 jobs on up to 3 nodes: speeds 1, 2, 3, 0.5, 0.3, busy nodes, tags, durations
    from 1e-9 s to 1e12 s (and any float), and a random allowed plan."""
    m = draw(st.integers(1, 3))
    n = draw(st.integers(1, 8))
    scale = draw(st.sampled_from([1e-9, 1e-3, 1.0, 1e3, 1e9, 1e12]))
    nodes = [
        Node(
            f"n{k}",
            draw(st.sampled_from([1.0, 2.0, 3.0, 0.5, 0.3])),
            frozenset(draw(st.lists(st.sampled_from(TAGS), max_size=2))),
            draw(st.sampled_from([0.0, 0.0, 0.0, 2.5, 10.0])) * scale,
        )
        for k in range(m)
    ]
    durations = st.one_of(
        st.integers(0, 12).map(lambda x: x * scale),
        st.floats(0.0, 1e12, allow_nan=False, allow_infinity=False),
    )
    p = [draw(durations) for _ in range(n)]
    # every job requires a subset of what some node provides
    requires: list[list[str]] = []
    for _ in range(n):
        tags = sorted(nodes[draw(st.integers(0, m - 1))].provides)
        requires.append(sorted(draw(st.sets(st.sampled_from(tags)))) if tags else [])
    allowed = allowed_nodes(nodes, requires, n)
    plan = [draw(st.sampled_from(a)) for a in allowed]
    return p, nodes, requires, plan


@settings(max_examples=300, deadline=None)
@given(farms())
def test_property_optimal(case: tuple[list[float], list[Node], list[list[str]], list[int]]) -> None:
    """Brute force: a finished proof's plan is allowed and its makespan is the optimum."""
    p, nodes, requires, plan = case
    check_optimal(p, nodes, plan, requires)


@st.composite
def whole_farms(draw: st.DrawFn) -> tuple[list[float], list[Node], list[list[str]], list[int]]:
    """Up to 8 short whole-second jobs on up to 3 nodes of speed 1 or 2, free at whole
    seconds: many plans differ by the smallest possible step."""
    m = draw(st.integers(1, 3))
    n = draw(st.integers(1, 8))
    nodes = [
        Node(f"n{k}", draw(st.sampled_from([1.0, 2.0])), free_at=float(draw(st.integers(0, 3))))
        for k in range(m)
    ]
    p = [float(draw(st.integers(0, 6))) for _ in range(n)]
    plan = [draw(st.integers(0, m - 1)) for _ in range(n)]
    return p, nodes, [[] for _ in range(n)], plan


@settings(max_examples=300, deadline=None)
@given(whole_farms())
def test_property_optimal_whole_seconds(
    case: tuple[list[float], list[Node], list[list[str]], list[int]],
) -> None:
    """Brute force: as test_property_optimal, on whole-second instances."""
    p, nodes, requires, plan = case
    check_optimal(p, nodes, plan, requires)


@settings(max_examples=300, deadline=None)
@given(farms(), st.integers(0, 40), st.sampled_from([0.0, 0.5, 1.0]))
def test_property_stopped_early(
    case: tuple[list[float], list[Node], list[list[str]], list[int]], cap: int, frac: float
) -> None:
    """Brute force: stopped after at most ``cap`` search nodes, with ``lower`` a float at
    most ``frac`` times the optimum, the bound never exceeds the optimum, the plan never
    beats it, the makespan is the plan's, and a finished proof is the optimum."""
    p, nodes, requires, plan = case
    opt, _ = brute_force(p, nodes, requires)
    lower = float(opt * Fraction(frac))
    lower = math.nextafter(lower, 0.0) if Fraction(lower) > opt * Fraction(frac) else lower
    _, proof = run(p, nodes, plan, requires, lower=lower, max_nodes=cap)
    assert proof.nodes <= cap
    assert Fraction(lower) <= proof.lower_bound <= opt <= proof.makespan
    assert proof.makespan == max(finishes(p, nodes, proof.node_of.tolist()))
    assert proof.makespan == opt or not proof.finished
    assert proof.lower_bound == opt or not proof.finished
