"""The bounds added for `exact` (issue 17, performance part) against the brute force of
tests/reference_stages.py: each is at most the optimum of the tick-rounded problem on
random small graphs, including graphs built to make that bound bind (many jobs sharing
few lanes, long heads and tails). Expected values are the brute force's, never ours.
"""

from __future__ import annotations

import random

import pytest
from reference_stages import Tiny, brute_force_optimum
from stage_helpers import to_problem
from test_stage_reference import random_tiny

from workers.planning.stages import bounds
from workers.planning.stages.bounds import lanes
from workers.planning.stages.paths import longest_paths


def lane_heavy_tiny(rng: random.Random) -> Tiny:
    """Fan-in graphs: a few sources, a middle layer sharing one limit of capacity 1-2,
    a sink or two; 1-3 nodes of 1-2 slots, identical speeds."""
    n = rng.randint(4, 6)
    p = [float(rng.randint(0, 6)) for _ in range(n)]
    after: list[list[int]] = []
    for j in range(n):
        k = rng.randint(0, min(j, 2))
        after.append(sorted(rng.sample(range(j), k)))
    m = rng.randint(1, 3)
    uses = [[0] if rng.random() < 0.7 else [] for _ in range(n)]
    return Tiny(
        p=p,
        speeds=[1.0] * m,
        after=after,
        slots=[rng.choice([1, 2]) for _ in range(m)],
        uses=uses,
        caps=[rng.choice([1, 2])],
    )


@pytest.mark.parametrize("whole_set_only", [False, True])
@pytest.mark.parametrize("seed", range(3))
def test_lanes_never_above_brute_force(
    seed: int, whole_set_only: bool, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Source: brute force (tests/reference_stages.py). Carlier's per-lane bound with
    heads and tails (all slots, and each limit's lanes) is <= the optimum, on the general
    random graphs of test_stage_reference (speeds, tags, busy nodes, slots, limits) and
    on lane-heavy fan-in graphs; both with the prefix scan and with the whole-set
    evaluation used on large sets."""
    if whole_set_only:
        monkeypatch.setattr(bounds, "LANES_SCAN_UP_TO", 0)
    rng = random.Random(3100 + seed)
    for i in range(50):
        g = lane_heavy_tiny(rng) if i % 2 else random_tiny(rng)
        problem = to_problem(g)
        got = lanes(longest_paths(problem)).ticks
        assert got <= brute_force_optimum(g), g
