"""Stage graphs against the brute force of ``tests/reference_stages.py``: every bound at or
below the true optimum, every plan feasible by an independent checker, list scheduling
within Graham's 2 - 1/m (Graham 1966) where it applies.

Random small graphs (seeded) with waits, limits, multi-slot nodes, speeds, tags and busy
nodes; the optimum is the brute force's, never our own code's.
"""

from __future__ import annotations

import random
from fractions import Fraction

import pytest
from reference_stages import Tiny, brute_force_optimum, check_rows, makespan
from stage_helpers import to_problem

from workers.planning.stages.search import solve_stages


def random_tiny(rng: random.Random, *, plain: bool = False, unit: bool = False) -> Tiny:
    """A random small stage graph; ``plain``: identical single-slot nodes, no limits."""
    n = rng.randint(2, 6)
    m = rng.randint(1, 3)
    p = [1.0 if unit else float(rng.choice([0, 1, 2, 3, 4, 5, 7, 2.5, 0.75])) for _ in range(n)]
    after = [sorted(rng.sample(range(j), rng.randint(0, min(j, 2)))) for j in range(n)]
    perm = list(range(n))  # shuffle ids so batch order is not topological
    rng.shuffle(perm)
    inv = {old: new for new, old in enumerate(perm)}
    after_new: list[list[int]] = [[] for _ in range(n)]
    p_new = [0.0] * n
    for old in range(n):
        after_new[inv[old]] = sorted(inv[i] for i in after[old])
        p_new[inv[old]] = p[old]
    if plain:
        return Tiny(p=p_new, speeds=[1.0] * m, after=after_new)
    g = Tiny(
        p=p_new,
        speeds=[rng.choice([1.0, 1.0, 2.0, 0.5, 1.5]) for _ in range(m)],
        after=after_new,
        free_at=[rng.choice([0.0, 0.0, 1.0, 2.5]) for _ in range(m)],
        slots=[rng.choice([1, 1, 2]) for _ in range(m)],
    )  # no tags and no limits yet: Tiny fills them in empty
    if m > 1 and rng.random() < 0.4:
        g.provides[0] = {"gpu"}
        for j in range(n):
            if rng.random() < 0.3:
                g.requires[j] = {"gpu"}
    if rng.random() < 0.5:
        g.caps = [rng.choice([1, 2])]
        for j in range(n):
            if rng.random() < 0.6:
                g.uses[j] = [0]
    g.resolution = rng.choice([1.0, 0.5, 1.0])
    return g


@pytest.mark.parametrize("seed", range(6))
def test_bounds_never_above_brute_force_and_plans_feasible(seed: int) -> None:
    """Source: brute force (tests/reference_stages.py). On 50 random small graphs per seed,
    with limits, slots, speeds, tags and busy nodes: each bound (critical_path, mean_load,
    limit_load, heads_tails, energetic, busy_nodes) <= the optimum, and every plan (list,
    longest_first, the search) passes the independent checker and is >= the optimum."""
    rng = random.Random(1000 + seed)
    for _ in range(50):
        g = random_tiny(rng)
        opt = brute_force_optimum(g)
        problem = to_problem(g)
        for method in ("list", "longest_first", "exact"):
            result = solve_stages(problem, method, max_rounds=3)
            rows = result.plan.rows()
            assert check_rows(g, rows) == [], (g, method)
            assert makespan(g, rows) == result.plan.makespan_ticks
            assert result.plan.makespan_ticks >= opt
            for b in result.bounds.bounds:
                assert b.ticks <= opt, (b, opt, g)
            assert result.plan.makespan_exact == Fraction(result.plan.makespan_ticks) * Fraction(
                g.resolution
            )


@pytest.mark.parametrize("seed", range(3))
def test_list_within_graham_bound(seed: int) -> None:
    """Source: Graham 1966 (list scheduling with precedence on m identical processors is
    within 2 - 1/m of optimal), against the brute-force optimum; the result reports that
    ratio as its worst_case_ratio there."""
    rng = random.Random(2000 + seed)
    for _ in range(60):
        g = random_tiny(rng, plain=True)
        opt = brute_force_optimum(g)
        problem = to_problem(g)
        for method in ("list", "longest_first"):
            result = solve_stages(problem, method)
            assert result.worst_case_ratio == 2 - 1 / g.m
            assert result.plan.makespan_ticks * g.m <= (2 * g.m - 1) * opt


def test_no_ratio_with_limits_or_slots() -> None:
    """Source: Graham 1966 covers identical single-slot nodes without resources only, so
    with a limit or a second slot no ratio is claimed (null)."""
    g = Tiny(p=[1.0, 2.0], speeds=[1.0], after=[[], []], uses=[[0], [0]], caps=[1])
    assert solve_stages(to_problem(g), "list").worst_case_ratio is None
    g = Tiny(p=[1.0, 2.0], speeds=[1.0], after=[[], []], slots=[2])
    assert solve_stages(to_problem(g), "list").worst_case_ratio is None
