"""A stage plan's certificate holds for the durations as given, not only for whole ticks.

Reference: the brute force of tests/reference_stages.py run at a resolution fine enough
that no time is rounded (dyadic durations, speeds and start times at 1/16 s), which makes
its optimum the true optimum of the stated problem; the same graphs are planned by
spanwright at a coarse resolution (1 s or 0.5 s), where whole ticks round times up.
"""

from __future__ import annotations

import dataclasses
import random
from fractions import Fraction

from reference_stages import Tiny, brute_force_optimum
from stage_helpers import to_problem

from workers.planning.stages.search import solve_stages

FINE = 1 / 16  # every time below is a whole number of 1/16 s at every speed


def dyadic_tiny(rng: random.Random) -> Tiny:
    """A small graph whose times are all multiples of 1/16 s at speeds 0.5, 1 and 2."""
    n, m = rng.randint(2, 5), rng.randint(1, 3)
    p = [rng.choice([0.0, 0.75, 1.25, 2.5, 3.0, 4.0]) for _ in range(n)]
    after = [sorted(rng.sample(range(j), rng.randint(0, min(j, 2)))) for j in range(n)]
    uses = [[0] if rng.random() < 0.5 else [] for _ in range(n)]
    return Tiny(
        p=p,
        speeds=[rng.choice([0.5, 1.0, 2.0]) for _ in range(m)],
        after=after,
        free_at=[rng.choice([0.0, 0.0, 0.75, 1.5]) for _ in range(m)],
        slots=[rng.choice([1, 1, 2]) for _ in range(m)],
        uses=uses,
        caps=[rng.choice([1, 2])],
        resolution=rng.choice([1.0, 0.5]),
    )


def test_bounds_and_flags_hold_for_the_stated_durations() -> None:
    """On 120 random graphs planned at a coarse resolution: the reported lower bound is at
    most the true optimum (the brute force at 1/16 s), the reported makespan is at least
    it, and ``proven_optimal`` is claimed only when the makespan is the true optimum."""
    rng = random.Random(77)
    rounded = 0
    for _ in range(120):
        g = dyadic_tiny(rng)
        true_opt = brute_force_optimum(dataclasses.replace(g, resolution=FINE)) * Fraction(FINE)
        problem = to_problem(g)
        rounded += problem.rounded
        for method in ("list", "exact"):
            res = solve_stages(problem, method, max_rounds=3)
            assert res.exact_lower_bound <= true_opt, (g, method)
            assert res.exact_value >= true_opt, (g, method)
            assert not res.proven_optimal or res.exact_value == true_opt, (g, method)
    assert rounded > 20  # the coarse resolution really rounded many of them
