"""Deadline confidence of stage plans (issue 17, point 5), checked against arithmetic and
recounts made here: zero spread repeats the plan; with spread the static policy never
beats the longest chain of waits of the sampled durations; the interval is Wilson's
score interval (Wilson, J. Amer. Statist. Assoc. 22:209-212, 1927), written out here.
"""

from __future__ import annotations

import math
import random

import numpy as np
import pytest
from test_stage_replan import pipeline, random_graph

from workers.planning.confidence import SpreadModel, confidence_block
from workers.planning.confidence.stages import (
    plan_order,
    run_samples,
    sample_factors,
    simulate_stages,
    stage_confidence_block,
)
from workers.planning.stages.search import solve_stages


def wilson(k: int, n: int, z: float = 1.959963984540054) -> tuple[float, float]:
    """Wilson's (1927) score interval, from the paper's formula."""
    p = k / n
    centre = (p + z * z / (2 * n)) / (1 + z * z / n)
    half = z / (1 + z * z / n) * math.sqrt(p * (1 - p) / n + z * z / (4 * n * n))
    return max(0.0, centre - half), min(1.0, centre + half)


def test_zero_spread_repeats_the_plan() -> None:
    """Source: arithmetic. With no spread every sample of the static policy is the plan's
    own makespan (times in whole half-seconds, so nothing was rounded), and the deadline
    probability is 1 at the makespan and 0 just below it, with a point interval."""
    problem = pipeline(m=2, slots=2, step=0.0)
    assert not problem.rounded
    res = solve_stages(problem, "exact", max_rounds=30)
    at = simulate_stages(res, spread=0.0, samples=50, deadline=res.makespan)
    assert (at.makespans == res.makespan).all()
    assert at.deadline_probability == 1.0 and at.interval == (1.0, 1.0)
    below = simulate_stages(res, spread=0.0, samples=50, deadline=res.makespan - 0.25)
    assert below.deadline_probability == 0.0 and below.interval == (0.0, 0.0)


@pytest.mark.parametrize("seed", range(3))
def test_zero_spread_on_random_graphs(seed: int) -> None:
    """Source: arithmetic. On random graphs (slots, limits, speeds) planned by every
    method, zero spread gives the plan's makespan in every static sample where whole
    ticks changed no time, and never more where they did (jobs may start earlier than
    their rounded-up ticks, never later)."""
    rng = random.Random(40 + seed)
    for _ in range(8):
        problem = random_graph(rng)
        for method in ("list", "longest_first", "exact"):
            res = solve_stages(problem, method, max_rounds=20)
            got = simulate_stages(res, spread=0.0, samples=3).makespans
            if problem.rounded:
                assert (got <= res.makespan).all()
            else:
                assert (got == res.makespan).all(), method


def longest_chain(problem, durations, node_speed) -> float:  # type: ignore[no-untyped-def]
    """The longest chain of waits, each job at its sampled duration on its planned node,
    in plain Python over the jobs in an order found here (repeated relaxation)."""
    n = problem.n
    ends = [0.0] * n
    preds = [problem.predecessors_of(j).tolist() for j in range(n)]
    for _ in range(n):  # Bellman-Ford style: n rounds settle every chain
        for j in range(n):
            ends[j] = max([ends[i] for i in preds[j]] + [0.0]) + durations[j] / node_speed[j]
    return max(ends)


@pytest.mark.parametrize("seed", range(3))
def test_static_never_beats_the_sampled_critical_path(seed: int) -> None:
    """Source: a recount here. With spread 0.4, every static sample's makespan is at
    least the longest chain of waits of that sample's durations on the planned nodes
    (recounted in plain Python), and the dynamic one at least the chain on the fastest
    nodes; the deadline probability's interval is Wilson's (1927)."""
    rng = random.Random(70 + seed)
    problem = random_graph(rng)
    res = solve_stages(problem, "longest_first")
    inst = problem.instance
    model = SpreadModel.from_instance(inst, 0.4)
    speeds = np.array([nd.speed for nd in inst.nodes])
    (lo, factors), *_ = list(sample_factors(model, 40, seed))
    assert lo == 0
    dur = inst.durations[None, :] * factors
    static, _ = run_samples(res.plan, dur, "static")
    dynamic, _ = run_samples(res.plan, dur, "dynamic")
    fastest = np.full(problem.n, speeds.max())
    for s in range(40):
        planned = longest_chain(problem, dur[s].tolist(), speeds[res.plan.node].tolist())
        assert static[s] >= planned - 1e-9 * planned
        assert dynamic[s] >= longest_chain(problem, dur[s].tolist(), fastest.tolist()) * (1 - 1e-9)
    deadline = float(np.median(static))
    got = simulate_stages(res, spread=0.4, samples=40, seed=seed, deadline=deadline)
    assert np.array_equal(got.makespans, static)
    k = int(np.count_nonzero(static <= deadline))
    assert got.deadline_probability == k / 40
    assert got.interval == pytest.approx(wilson(k, 40), abs=1e-12)


def test_plan_order_puts_waits_first() -> None:
    """Source: the graph. Plan order lists every job after every job it waits for, also
    when a zero-length job starts at the same tick as the job waiting for it."""
    rng = random.Random(3)
    for _ in range(10):
        problem = random_graph(rng)
        res = solve_stages(problem, "list")
        pos = np.empty(problem.n, dtype=np.int64)
        pos[plan_order(res.plan)] = np.arange(problem.n)
        for j in range(problem.n):
            assert all(pos[i] < pos[j] for i in problem.predecessors_of(j).tolist())


def test_block_has_the_plain_block_shape() -> None:
    """Source: the plan contract's confidence block (confidence_block's keys): the stage
    block carries the same keys, ``dynamic`` included, and its quantiles are ordered."""
    res = solve_stages(pipeline(), "longest_first")
    block = stage_confidence_block(res, spread=0.3, samples=200, seed=1)
    from workers.planning import Instance, Node
    from workers.planning.solve import solve

    plain = solve(Instance.build([1.0, 2.0], [Node("a")], deadline=5.0), "longest_first")
    ref = confidence_block(plain.schedule, spread=0.3, samples=20)
    assert set(block) == set(ref)
    assert set(block["dynamic"]) == set(ref["dynamic"])
    assert block["makespan_p50"] <= block["makespan_p90"] <= block["makespan_p99"]
    assert block["planned_makespan"] == res.makespan


def test_zero_spread_on_a_replanned_graph() -> None:
    """Source: arithmetic. A re-planned graph whose running job ends last (7.5 s after
    now, not a whole tick): every zero-spread sample is 7.5 s, the result's makespan
    with the stated times; on the re-planned pipeline (speeds 1 and 1.5, so ticks round)
    no sample is later than the result's makespan."""
    from workers.planning import Instance, Node
    from workers.planning.replan import Events, Running
    from workers.planning.stages.problem import StageProblem
    from workers.planning.stages.replan import replan_stages

    two = StageProblem.build(Instance.build([10.0, 1.0], [Node("a"), Node("b")]))
    res = replan_stages(two, {}, Events(2.5, running=(Running("job-0", "a", 0.0),)), method="list")
    got = simulate_stages(res, spread=0.0, samples=4)
    assert (got.makespans == 7.5).all() and res.makespan == 7.5
    events = Events(5.0, finished=("r0", "r3"), running=(Running("r1", "n0", 3.0),))
    res = replan_stages(pipeline(), {}, events, method="exact", max_rounds=20)
    got = simulate_stages(res, spread=0.0, samples=4)
    assert (got.makespans <= res.makespan).all()
    assert (simulate_stages(res, spread=0.5, samples=50).makespans >= 9.0 - 5.0).all()
