"""The rental's ``cover`` bound with its grain and split arguments, the floating-point clock
of an exactly full node, and the frontier over deadlines: checked against the assignment
MILP of ``tests/workers/test_rental.py`` (scipy.optimize.milp, HiGHS) and exact arithmetic
done here by hand. Expected values never come from the rental code."""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from tests.workers.test_rental import milp_cost
from workers.planning.budget import Budget
from workers.planning.model import Node
from workers.planning.rental import Kind, RentalArgs, rent, rental_instance
from workers.planning.rental_cover import cover_bound
from workers.planning.rental_frontier import frontier

GPU = frozenset({"gpu"})


def _tiny_surplus() -> RentalArgs:
    """Minute billing, no farm. Two gpu jobs of 50 s need two minutes of the gpu kind
    (60 per minute), 20 s of room left: less than the shortest cpu job (30 s), so the cpu
    jobs (30 s and 35 s, 65 s) need two minutes of the cpu kind (30 per minute): 180; a
    third gpu minute for everything is 180 too. A fluid cover would put 45 s of cpu work
    on one cpu minute and the gpu room: 150."""
    inst = rental_instance(
        [50.0, 50.0, 30.0, 35.0], [], 3000.0, requires=[GPU, GPU, frozenset(), frozenset()]
    )
    kinds = (
        Kind("gpu", 1.0, GPU, 3600.0, 0.0, 4),
        Kind("cpu", 1.0, frozenset(), 1800.0, 0.0, 4),
    )
    return RentalArgs(inst, kinds, "minute")


def test_split_when_the_room_is_shorter_than_any_other_job() -> None:
    """The cover bound (with its split: no cpu job fits the gpu node's room) meets the
    MILP optimum, 180 by the docstring's count, and the rental proves it."""
    args = _tiny_surplus()
    opt = milp_cost(args)
    assert opt == pytest.approx(180.0)
    cov = cover_bound(args.check(), None, Budget(5.0))
    assert cov.complete
    assert cov.value == Fraction(180)
    res = rent(args, Budget(2.0))
    assert res.exact_value == Fraction(180)
    assert res.proven_optimal


def _half_speed_farm(seed: int, billing: str) -> RentalArgs:
    """Farm nodes of speed 1.5 whose capacity is often a half second past a whole one
    (the grain argument rounds it down), integer durations, tags on a quarter."""
    rng = np.random.default_rng(seed)
    n = 5 + seed % 4
    d = rng.integers(1, 30, n).astype(float) * 7
    req = [GPU if rng.random() < 0.25 else frozenset() for _ in range(n)]
    farm = [
        Node(f"farm-{i}", 1.5, GPU if i == 0 else frozenset(), float(rng.integers(900, 1100)))
        for i in range(2)
    ]
    kinds = (
        Kind("cpu-small", 1.0, frozenset(), 0.8, float(rng.integers(0, 3) * 30), 6),
        Kind("gpu-small", 2.0, GPU, 4.0, 60.0, 6),
    )
    return RentalArgs(rental_instance(d, farm, 1200.0, requires=req), kinds, billing)


@pytest.mark.parametrize("billing", ["minute", "second"])
@pytest.mark.parametrize("seed", range(6))
def test_cover_with_grain_and_splits_against_milp(seed: int, billing: str) -> None:
    """bound <= optimum <= cost (equal when proven), the optimum from the assignment MILP,
    on farms of speed 1.5 where rounding to the grain matters."""
    args = _half_speed_farm(seed, billing)
    opt = milp_cost(args)
    assert opt is not None
    tol = 1e-6 * max(1.0, opt)
    cov = cover_bound(args.check(), None, Budget(5.0))
    assert cov.complete
    assert float(cov.value) <= opt + tol
    res = rent(args, Budget(1.0))
    assert float(res.exact_lower_bound) <= opt + tol <= float(res.exact_value) + 2 * tol
    assert not res.proven_optimal or abs(float(res.exact_value) - opt) <= tol


def test_exactly_full_node_whose_longest_first_clock_rounds_past_the_deadline() -> None:
    """A farm node of speed 1.5 free at 372 s, deadline 1000 s: the four jobs (942 s of
    work, 628 s on it) end exactly at 1000 s, but the running sum of 287, 281, 258, 116
    over 1.5 rounds to 1000.0000000000001; shortest first it stays on 1000.0. So the free
    farm runs everything and the cheapest cost is 0."""
    p = [281.0, 116.0, 287.0, 258.0]
    assert Fraction(372) + sum(Fraction(x) for x in p) / Fraction(3, 2) == 1000
    clocks = []
    for order in (sorted(p, reverse=True), sorted(p)):
        clock = 372.0
        for x in order:
            clock = clock + x / 1.5
        clocks.append(clock)
    assert clocks[0] > 1000.0 >= clocks[1]
    farm = [Node("farm-0", 1.5, frozenset(), 372.0)]
    args = RentalArgs(
        rental_instance(p, farm, 1000.0), (Kind("cpu", 1.0, frozenset(), 36.0, 0.0, 4),)
    )
    res = rent(args, Budget(1.0))
    assert res.exact_value == 0
    assert res.proven_optimal
    assert float(res.schedule.loads.max()) <= 1000.0


def test_frontier_against_milp_per_deadline() -> None:
    """Each point of the frontier: bound <= MILP optimum at that deadline <= cost, for the
    point as found and as tightened over the deadlines; a deadline shorter than the
    longest job (on the fastest node, speed 2, 600 s / 2 = 300 s > 250 s) is refused."""
    rng = np.random.default_rng(7)
    d = [600.0, *(rng.integers(2, 20, 6).astype(float) * 30).tolist()]
    req = [frozenset()] * 5 + [GPU, GPU]
    farm = [Node("farm-0", 1.0, GPU, 1200.0)]
    kinds = (
        Kind("cpu-small", 1.0, frozenset(), 0.6, 60.0, 6),
        Kind("gpu-large", 2.0, GPU, 3.0, 0.0, 6),
    )
    base = RentalArgs(rental_instance(d, farm, 3600.0, requires=req), kinds, "minute")
    deadlines = [2400.0, 250.0, 3600.0, 1800.0]
    points = frontier(base, deadlines, Budget(4.0))
    assert [pt["deadline"] for pt in points] == deadlines
    assert not points[1]["feasible"]
    for dl, pt in zip(deadlines, points, strict=True):
        if dl == 250.0:
            continue
        inst = rental_instance(d, farm, dl, requires=req)
        opt = milp_cost(RentalArgs(inst, kinds, "minute"))
        assert opt is not None
        tol = 1e-6 * max(1.0, opt)
        assert pt["cost_lower_bound"] <= opt + tol <= pt["cost"] + 2 * tol
        assert pt["bound_frontier"] <= opt + tol <= pt["cost_frontier"] + 2 * tol
    feasible = sorted((pt["deadline"], pt["cost_frontier"]) for pt in points if pt["feasible"])
    costs = [c for _, c in feasible]
    assert costs == sorted(costs, reverse=True)
