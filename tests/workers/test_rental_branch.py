"""Small rentals searched to the end (``workers/planning/rental_branch.py``) and searches
that keep going while the gap is open (``rental_search._more``).

Outside checks: the README's worked example by hand (docstring below); small cases
against the assignment MILP of ``tests/workers/test_rental.py`` (``milp_cost``,
scipy.optimize.milp, HiGHS); tiny cases against the brute force in exact fractions of the
same file (``brute_cost``); a bin-packing case whose optimum is counted by hand.
"""

from __future__ import annotations

from fractions import Fraction

import numpy as np
import pytest

from tests.workers.test_rental import brute_cost, milp_cost
from workers.planning import rental_search
from workers.planning.budget import Budget, StopReason
from workers.planning.model import Node
from workers.planning.rental import Kind, RentalArgs, rent, rental_instance

README_DURATIONS = [3000.0, 2800.0, 2500.0, 2400.0, 2000.0, 1800.0, 1500.0, 900.0]


def _readme(busy_past_deadline: bool = False) -> RentalArgs:
    farm = [Node("node-01", 1.0, frozenset(), 600.0), Node("node-02", 2.0, frozenset(), 0.0)]
    if busy_past_deadline:
        farm.append(Node("node-03", 1.0, frozenset(), 4000.0))
    kinds = (
        Kind("cpu-small", 1.0, frozenset(), 0.4, 120.0, 10),
        Kind("cpu-large", 2.0, frozenset(), 0.9, 180.0, 5),
    )
    ids = [f"tide_f{i:03d}" for i in range(len(README_DURATIONS))]
    inst = rental_instance(README_DURATIONS, farm, 3600.0, job_ids=ids)
    return RentalArgs(inst, kinds, "minute")


@pytest.mark.parametrize("branch_jobs", [rental_search.BRANCH_JOBS, 0])
def test_readme_worked_example_is_proven_optimal(
    branch_jobs: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The README's example, by hand. The free farm: node-01 (speed 1, free at 600) can
    do 3000 s of work by 3600, node-02 (speed 2) 7200 s: 10,200 s of the 16,900 s, so at
    least 6,700 s run on rented nodes. Minute billing: a cpu-small node (0.4/h, boot 120)
    doing x s of work is billed at least (x + 120) / 60 minutes, costing at least
    0.4 (x + 120) / 3600; a cpu-large node (0.9/h, speed 2, boot 180) doing y s costs at
    least 0.9 (y / 2 + 180) / 3600 = (0.45 y + 162) / 3600, dearer per second of work
    and per node. cpu-small alone: one node does at most 3480 s < 6700, so n >= 2 nodes
    billed H minutes in all do at most 60 H - 120 n, and 60 H - 240 >= 6700 gives
    H >= 115.67: at least 116 minutes, 116 * 0.4 / 60 = 0.7733. With a cpu-large node:
    alone, (0.45 * 6700 + 162) / 3600 = 0.8825; beside k >= 1 cpu-small nodes (each at
    most 3480 s, so y >= 6700 - 3480 k), (0.45 y + 162 + 0.4 (6700 - y) + 48 k) / 3600
    >= 0.8475 for k = 1 and more for larger k. So nothing costs less than 0.7733. A plan
    at that cost: node-01 runs f000 (3000 s, ends 3600), node-02 runs f001 + f003 + f004
    (7200 s of work, ends exactly 3600), one cpu-small runs f002 + f007 (120 + 3400 =
    3520 s, 59 min), another f005 + f006 (120 + 3300 = 3420 s, 57 min): 116 minutes.
    The optimum is 2 x cpu-small at 116 minutes, and the answer must prove it: with the
    exhaustive search of small batches, and with it switched off (the packings of the
    cover optimum alone must find it)."""
    monkeypatch.setattr(rental_search, "BRANCH_JOBS", branch_jobs)
    args = _readme()
    res = rent(args, Budget(5.0))
    by_hand = Fraction(0.4) * 116 * 60 / 3600  # the request's 0.4 as the float it is
    assert res.rent == {"cpu-small": 2}
    assert res.exact_value == by_hand
    assert res.exact_lower_bound == by_hand
    assert res.proven_optimal
    assert res.stop_reason == StopReason.PROVED_OPTIMAL
    assert float(res.schedule.loads.max()) <= 3600.0
    opt = milp_cost(args)  # HiGHS agrees
    assert opt is not None
    assert abs(opt - float(by_hand)) <= 1e-9


@pytest.mark.parametrize("branch_jobs", [rental_search.BRANCH_JOBS, 0])
def test_a_farm_node_busy_past_the_deadline_changes_nothing(
    branch_jobs: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    """The README's example with a third farm node busy until 4000 s, past the 3600 s
    deadline: it can run nothing by the deadline, so the cheapest rental is the one worked
    by hand above (2 x cpu-small, 116 minutes), proven; the node stays in the plan with no
    job (it was refused as "no plan within the kinds' max_count" before)."""
    monkeypatch.setattr(rental_search, "BRANCH_JOBS", branch_jobs)
    res = rent(_readme(busy_past_deadline=True), Budget(5.0))
    by_hand = Fraction(0.4) * 116 * 60 / 3600
    assert res.rent == {"cpu-small": 2}
    assert res.exact_value == by_hand
    assert res.proven_optimal
    assert "node-03" not in {res.schedule.instance.nodes[k].id for k in res.schedule.node_of}


def _tight_args(seed: int) -> RentalArgs:
    """Up to 12 jobs (multiples of 100 s), a farm of 0-3 busy nodes, 2-3 kinds with
    boots, minute or second billing: farms that full fills must use to the second."""
    rng = np.random.default_rng(seed)
    n = int(rng.integers(6, 13))
    d = (rng.integers(5, 31, n) * 100).astype(float)
    farm = [
        Node(
            f"farm-{i}",
            float(rng.choice([1.0, 2.0])),
            frozenset({"gpu"}) if i == 0 and rng.random() < 0.5 else frozenset(),
            float(rng.integers(0, 10) * 100),
        )
        for i in range(int(rng.integers(0, 4)))
    ]
    req = [frozenset({"gpu"}) if rng.random() < 0.2 else frozenset() for _ in range(n)]
    kinds = [
        Kind("cpu-small", 1.0, frozenset(), 0.4, 120.0, 4),
        Kind("cpu-large", 2.0, frozenset(), float(rng.choice([0.7, 0.9])), 180.0, 3),
        Kind("gpu-small", 1.5, frozenset({"gpu"}), 1.6, 240.0, 3),
    ]
    if not any(req) and rng.random() < 0.5:
        kinds.pop()
    billing = ["minute", "second"][seed % 2]
    inst = rental_instance(d, farm, 3600.0, requires=req)
    return RentalArgs(inst, tuple(kinds), billing)


@pytest.mark.parametrize("seed", range(12))
def test_small_cases_proven_and_equal_to_milp(seed: int) -> None:
    """Up to 12 jobs: the answer is proven optimal, and its cost is the MILP optimum
    (``milp_cost``, scipy.optimize.milp, HiGHS, as a reference only)."""
    args = _tight_args(seed)
    opt = milp_cost(args)
    assert opt is not None
    res = rent(args, Budget(5.0))
    tol = 1e-6 * max(1.0, opt)
    assert res.proven_optimal
    assert abs(float(res.exact_value) - opt) <= tol
    assert res.exact_lower_bound <= res.exact_value


@pytest.mark.parametrize("seed", range(6))
def test_tiny_cases_equal_to_brute_force(seed: int) -> None:
    """Up to 5 jobs and two nodes per kind: the answer's cost is the exact optimum of
    ``brute_cost`` (every assignment, in fractions), proven."""
    args = _tight_args(500 + seed)
    inst = rental_instance(
        args.instance.durations[:5],
        args.instance.nodes[:2],
        3600.0,
        requires=list((args.instance.requires or (frozenset(),) * 5)[:5]),
    )
    kinds = tuple(Kind(k.name, k.speed, k.provides, k.hour_cost, k.boot, 2) for k in args.kinds)
    args = RentalArgs(inst, kinds, args.billing)
    opt = brute_cost(args)
    assert opt is not None
    res = rent(args, Budget(5.0))
    assert res.exact_value == opt
    assert res.proven_optimal


def test_open_gap_keeps_searching_until_the_budget() -> None:
    """25 jobs of 34 s, one kind (speed 1, boot 1 s, 1.0/h, hour billing), no farm, a
    deadline of 100 s: a node does at most 99 s, so two jobs (68 s), never three (102 s):
    the optimum is ceil(25 / 2) = 13 nodes, 13.0 (counted by hand). No bound here
    reaches it (the work gives 9 nodes, the pattern LP 12.5), and 25 jobs are past the
    exhaustive search: the gap stays open, so the search must use its budget and stop
    on it, not end by itself ("heuristic")."""
    assert rental_search.BRANCH_JOBS < 25
    inst = rental_instance([34.0] * 25, [], 100.0)
    args = RentalArgs(inst, (Kind("cpu", 1.0, frozenset(), 1.0, 1.0, 100),), "hour")
    res = rent(args, Budget(1.0))
    assert res.exact_value == 13
    assert res.exact_lower_bound < 13
    assert not res.proven_optimal
    assert res.stop_reason == StopReason.TIME_BUDGET
    assert res.solve_seconds >= 0.5
