"""Deadline sizing for stage graphs (issue 17, point 4): the node count is checked against
the brute force of tests/reference_stages.py (the fewest nodes whose true optimum meets
the deadline), and two small cases are worked out by hand."""

from __future__ import annotations

import random

import pytest
from reference_stages import Tiny, brute_force_optimum

from service.reading import read_sizing_request
from workers.planning import Infeasible
from workers.planning.budget import Budget
from workers.planning.stage_sizing import StageSizingArgs, size_stages

SHOT = [
    {"id": "bg", "duration": 600, "uses": ["lic"]},
    {"id": "fg", "duration": 900, "uses": ["lic"]},
    {"id": "fx", "duration": 450, "uses": ["lic"]},
    {"id": "mg", "duration": 700},
    {"id": "comp", "duration": 300, "after": ["bg", "fg", "fx", "mg"]},
    {"id": "encode", "duration": 120, "after": ["comp"]},
]


def sized(body: dict) -> StageSizingArgs:
    args = read_sizing_request(body)
    assert isinstance(args, StageSizingArgs)
    return args


def test_hand_worked_shot_needs_two_two_slot_nodes() -> None:
    """By hand: the work is 600+900+450+700+300+120 = 3,070 s and one two-slot node offers
    2 x 1,500 = 3,000 s by the deadline, so one node is refuted and the mean-load bound is 2;
    on two nodes the plan exists (checked exactly by the result)."""
    args = sized({"jobs": SHOT, "deadline": 1500, "limits": {"lic": 2}, "node": {"slots": 2}})
    res = size_stages(args, Budget(1.0))
    assert (res.nodes_needed, res.nodes_lower_bound) == (2, 2)
    assert res.bound_source == "mean_load" and res.proven_optimal
    assert res.plan.exact_value <= 1500
    res.plan.plan.check()


def test_critical_path_beyond_the_deadline_is_refused_naming_it() -> None:
    """By hand: fg (900) -> comp (300) -> encode (120) takes 1,320 s > 1,000 s, whatever
    the node count."""
    args = sized({"jobs": SHOT, "deadline": 1000, "limits": {"lic": 2}})
    with pytest.raises(Infeasible) as exc:
        args.check()
    assert exc.value.jobs == ["fg", "comp", "encode"]


def graph(rng: random.Random) -> tuple[list[int], list[list[int]], list[list[int]], int, int]:
    n = rng.randint(2, 6)
    p = [rng.randint(1, 6) for _ in range(n)]
    after = [sorted(rng.sample(range(j), rng.randint(0, min(j, 2)))) for j in range(n)]
    uses = [[0] if rng.random() < 0.4 else [] for _ in range(n)]
    return p, after, uses, rng.choice([1, 2]), rng.choice([1, 2])


def optimum(
    p: list[int], after: list[list[int]], uses: list[list[int]], slots: int, cap: int, k: int
) -> int:
    """The brute-force optimum of the graph on ``k`` identical nodes (ticks = seconds)."""
    g = Tiny(
        p=[float(x) for x in p],
        speeds=[1.0] * k,
        after=after,
        slots=[slots] * k,
        uses=uses,
        caps=[cap],
    )
    return brute_force_optimum(g)


@pytest.mark.parametrize("seed", range(3))
def test_node_count_matches_brute_force(seed: int) -> None:
    """On 30 random graphs per seed, with a deadline between the optimum on one node per
    job and the total work: the lower bound is at most the fewest nodes whose brute-force
    optimum meets the deadline, and the answer's plan meets it (so the answer is at least
    that count)."""
    rng = random.Random(500 + seed)
    for _ in range(30):
        p, after, uses, slots, cap = graph(rng)
        n = len(p)
        deadline = rng.randint(optimum(p, after, uses, slots, cap, n), sum(p))
        truth = min(
            k for k in range(1, n + 1) if optimum(p, after, uses, slots, cap, k) <= deadline
        )
        body = {
            "jobs": [
                {
                    "id": f"j{j}",
                    "duration": p[j],
                    "after": [f"j{i}" for i in after[j]],
                    "uses": ["L"] if uses[j] else [],
                }
                for j in range(n)
            ],
            "deadline": deadline,
            "limits": {"L": cap},
            "node": {"slots": slots},
            "max_nodes": n,
        }
        res = size_stages(sized(body), Budget(2.0))
        assert res.nodes_lower_bound <= truth <= res.nodes_needed
        assert res.plan.exact_value <= deadline
