"""A second opinion from scipy's HiGHS (a hint, never a proof): on small stage graphs over
identical nodes, a time-indexed MILP (Pritsker, Watters and Wolfe 1969, the classical
formulation: one binary per job and start time; from memory) gives the optimum, which
must equal the brute force of tests/reference_stages.py; our bounds stay below it and
our plans above it.

On identical single-speed nodes with unit demands, a schedule whose number of running
jobs never exceeds the total slots can always be laid onto the slots (an interval graph
is coloured with as many colours as its largest clique), so one cumulative constraint of
capacity "total slots" stands for the nodes; each limit is one more cumulative."""

from __future__ import annotations

import random

import numpy as np
import pytest
from reference_stages import Tiny, brute_force_optimum
from scipy.optimize import Bounds, LinearConstraint, milp
from stage_helpers import to_problem

from workers.planning.stages.search import solve_stages


def milp_optimum(
    p: list[int], after: list[list[int]], slots: int, uses: list[list[int]], caps: list[int]
) -> int:
    """The optimum makespan by the time-indexed MILP, horizon sum(p)."""
    n, horizon = len(p), sum(p)
    times = horizon + 1
    nx = n * times  # x[j, t] = 1 when job j starts at t; last variable: the makespan C
    rows, lo, hi = [], [], []

    def var(j: int, t: int) -> int:
        return j * times + t

    for j in range(n):  # every job starts once, early enough to end by the horizon
        row = np.zeros(nx + 1)
        row[[var(j, t) for t in range(times - p[j])]] = 1
        rows.append(row), lo.append(1), hi.append(1)
        row = np.zeros(nx + 1)  # its end is at most C
        row[[var(j, t) for t in range(times)]] = [t + p[j] for t in range(times)]
        row[nx] = -1
        rows.append(row), lo.append(-np.inf), hi.append(0)
    for j in range(n):  # waits: start_j >= start_i + p_i
        for i in after[j]:
            row = np.zeros(nx + 1)
            row[[var(j, t) for t in range(times)]] = list(range(times))
            row[[var(i, t) for t in range(times)]] -= np.arange(times)
            rows.append(row), lo.append(p[i]), hi.append(np.inf)
    groups = [(list(range(n)), slots)] + [
        ([j for j in range(n) if lim in uses[j]], cap) for lim, cap in enumerate(caps)
    ]
    for jobs, cap in groups:  # at every instant, at most cap of these jobs run
        for t in range(horizon):
            row = np.zeros(nx + 1)
            for j in jobs:
                row[[var(j, s) for s in range(max(0, t - p[j] + 1), t + 1)]] = 1
            rows.append(row), lo.append(-np.inf), hi.append(cap)
    c = np.zeros(nx + 1)
    c[nx] = 1
    integrality = np.ones(nx + 1)
    integrality[nx] = 0
    res = milp(
        c,
        constraints=LinearConstraint(np.array(rows), lo, hi),
        integrality=integrality,
        bounds=Bounds(np.zeros(nx + 1), np.r_[np.ones(nx), horizon]),
    )
    assert res.status == 0, res.message
    return round(res.fun)


@pytest.mark.parametrize("seed", range(2))
def test_highs_agrees_with_brute_force_and_bounds_and_plans(seed: int) -> None:
    """On 15 random graphs per seed (2-5 jobs, durations 1-4, two nodes of 1 or 2 slots,
    a limit of 1 or 2 on some jobs): HiGHS's optimum equals the brute force's, every
    bound of ours is at most it and every plan of ours at least it."""
    rng = random.Random(900 + seed)
    for _ in range(15):
        n = rng.randint(2, 5)
        p = [rng.randint(1, 4) for _ in range(n)]
        after = [sorted(rng.sample(range(j), rng.randint(0, min(j, 2)))) for j in range(n)]
        slots = [rng.choice([1, 2]) for _ in range(2)]
        uses = [[0] if rng.random() < 0.5 else [] for _ in range(n)]
        cap = rng.choice([1, 2])
        g = Tiny(
            p=[float(x) for x in p],
            speeds=[1.0, 1.0],
            after=after,
            slots=slots,
            uses=uses,
            caps=[cap],
        )
        hint = milp_optimum(p, after, sum(slots), uses, [cap])
        assert hint == brute_force_optimum(g)
        for method in ("longest_first", "exact"):
            res = solve_stages(to_problem(g), method, max_rounds=5)
            assert all(b.ticks <= hint for b in res.bounds.bounds)
            assert res.plan.makespan_ticks >= hint
