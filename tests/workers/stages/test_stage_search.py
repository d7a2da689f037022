"""The anytime improver of `exact` (local moves, perturbations, restarts, forward-backward
improvement) against the independent checker and brute force of tests/reference_stages.py.
"""

from __future__ import annotations

import random

import numpy as np
from reference_stages import brute_force_optimum, check_rows, makespan
from stage_helpers import to_problem
from test_stage_reference import random_tiny

from workers.planning.stages.search import solve_stages


def test_improver_plans_feasible_and_never_below_optimum() -> None:
    """Source: brute force and the independent plan checker (tests/reference_stages.py).
    With enough rounds to run every kind of move (swaps, blocker swaps, perturbations and
    restarts), every plan passes the checker, its makespan is the checker's, it is at or
    above the optimum, and every bound is at or below it."""
    rng = random.Random(4200)
    for _ in range(40):
        g = random_tiny(rng)
        opt = brute_force_optimum(g)
        result = solve_stages(to_problem(g), "exact", max_rounds=60, seed=3)
        rows = result.plan.rows()
        assert check_rows(g, rows) == []
        assert makespan(g, rows) == result.plan.makespan_ticks >= opt
        assert max(b.ticks for b in result.bounds.bounds) <= opt


def test_improver_reproducible_with_a_round_limit() -> None:
    """Source: the seeded generator's contract (numpy.random.default_rng): the same seed
    and round limit give the same plan."""
    rng = random.Random(4300)
    g = random_tiny(rng)
    a = solve_stages(to_problem(g), "exact", max_rounds=30, seed=5).plan
    b = solve_stages(to_problem(g), "exact", max_rounds=30, seed=5).plan
    assert np.array_equal(a.start, b.start)
    assert np.array_equal(a.node, b.node)
