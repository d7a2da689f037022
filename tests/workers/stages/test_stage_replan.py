"""Re-planning a stage graph (issue 17, point 5) and the releases it rests on.

Two kinds of check, each against something other than our own code:

* the tick tables, list scheduler and every bound with jobs carried in (slots kept, limit
  places held, releases) against the brute force of ``tests/reference_stages.py``
  extended with the same fixed intervals and releases: every plan passes its independent
  checker and every bound is at most the brute-force optimum;
* re-planned graphs against a recount made here from the events alone, in exact
  fractions of seconds since the original start: every job accounted once; a job waiting
  for a running job starts after that job's stated end; a node never runs more jobs than
  slots and a limit never more than its capacity, the running jobs included.
"""

from __future__ import annotations

import random
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
from reference_stages import Tiny, brute_force_optimum, check_rows, makespan
from stage_helpers import to_problem
from test_stage_reference import random_tiny

from workers.planning import Instance, Node
from workers.planning.errors import InvalidInstance
from workers.planning.replan import Events, Running
from workers.planning.stages.bounds import stage_bounds
from workers.planning.stages.carried import Carried
from workers.planning.stages.listing import RULES, Lister, priority
from workers.planning.stages.paths import longest_paths
from workers.planning.stages.plan import StagePlan
from workers.planning.stages.problem import StageProblem, csr
from workers.planning.stages.replan import remaining_stages, replan_stages
from workers.planning.stages.search import solve_stages


# -- carried jobs against the brute force -----------------------------------------------
def with_running(g: Tiny, rng: random.Random) -> tuple[Tiny, list[tuple[int, float, list[int]]]]:
    """``g`` with 0-2 jobs running at 0 (node, end seconds, limits held), each on a node
    with a slot for it, some of ``g``'s jobs waiting for them (as releases)."""
    running: list[tuple[int, float, list[int]]] = []
    left = list(g.slots)
    for _ in range(rng.randint(0, 2)):
        k = rng.randrange(g.m)
        if not left[k]:
            continue
        left[k] -= 1
        end = rng.choice([0.0, 1.0, 2.5, 3.0, 4.0, 6.5])
        lims = [0] if g.caps and rng.random() < 0.6 else []
        running.append((k, end, lims))
    if g.caps:  # at most cap places held
        held = [r for r in running if r[2]]
        for r in held[g.caps[0] :]:
            r[2].clear()
    g.busy = [(k, e) for k, e, _ in running]
    g.held = [(lim, e) for _, e, lims in running for lim in lims]
    waits: list[list[int]] = [[] for _ in range(g.n)]
    for j in range(g.n):
        for c in range(len(running)):
            if rng.random() < 0.35:
                waits[j].append(c)
    g.release = [max((running[c][1] for c in w), default=0.0) for w in waits]
    g.carried_waits = waits  # type: ignore[attr-defined]
    return g, running


def carried_problem(g: Tiny, running: list[tuple[int, float, list[int]]]) -> StageProblem:
    """``g`` through the package's builder, with its running jobs as :class:`Carried`."""
    base = to_problem(g)
    wp, wi = csr(g.carried_waits)  # type: ignore[attr-defined]
    up_, ui = csr([lims for _, _, lims in running])
    carried = Carried(
        job_ids=tuple(f"r{c}" for c in range(len(running))),
        node_free=tuple(Fraction(x) for x in g.free_at),
        node=np.asarray([k for k, _, _ in running], dtype=np.int64),
        end=tuple(Fraction(e) for _, e, _ in running),
        uses_ptr=up_,
        uses_idx=ui,
        wait_ptr=wp,
        wait_idx=wi,
    )
    return StageProblem.from_indices(
        base.instance,
        (base.after_ptr, base.after_idx),
        (base.uses_ptr, base.uses_idx),
        base.limit_names,
        base.capacities.tolist(),
        base.slots.tolist(),
        carried,
    )


@pytest.mark.parametrize("seed", range(4))
def test_carried_plans_and_bounds_against_brute_force(seed: int) -> None:
    """Source: brute force (tests/reference_stages.py, extended with fixed intervals for
    running jobs and releases). On random small graphs with jobs running at 0: every
    priority rule's list schedule passes the reference checker with the reference's
    makespan, no plan beats the optimum, and every bound (busy_nodes, critical_path,
    mean_load, limit_load, heads_tails, lanes, energetic) is at most the optimum."""
    rng = random.Random(1700 + seed)
    for _ in range(40):
        g, running = with_running(random_tiny(rng), rng)
        problem = carried_problem(g, running)
        best = brute_force_optimum(g)
        paths = longest_paths(problem)
        lister = Lister(problem)
        spans = []
        for rule in RULES:
            got = lister.schedule(priority(paths, rule))
            plan = StagePlan(problem, got.node, got.slot, got.start)
            assert plan.violations() == [], (g, rule)
            assert check_rows(g, plan.rows()) == [], (g, rule)
            assert makespan(g, plan.rows()) == plan.makespan_ticks
            spans.append(plan.makespan_ticks)
        assert min(spans) >= best, g
        for b in stage_bounds(problem, paths, upper=min(spans)).bounds:
            assert b.ticks <= best, (b, g)


def test_plain_graph_unchanged_by_empty_carry() -> None:
    """Source: brute force. A graph carried in with no running job and nodes free at their
    stated times plans and bounds exactly as the graph itself (the fields added for
    re-planning change nothing when empty)."""
    rng = random.Random(5)
    for _ in range(20):
        g = random_tiny(rng)
        g.carried_waits = [[] for _ in range(g.n)]  # type: ignore[attr-defined]
        a, b = to_problem(g), carried_problem(g, [])
        pa, pb = longest_paths(a), longest_paths(b)
        assert np.array_equal(pa.head, pb.head)
        for rule in RULES:
            x = Lister(a).schedule(priority(pa, rule))
            y = Lister(b).schedule(priority(pb, rule))
            assert np.array_equal(x.start, y.start) and np.array_equal(x.node, y.node)
        assert [t.ticks for t in stage_bounds(a, pa).bounds] == [
            t.ticks for t in stage_bounds(b, pb).bounds
        ]
        assert brute_force_optimum(g) <= solve_stages(b, "longest_first").plan.makespan_ticks


# -- re-planning: a recount from the events ----------------------------------------------
def pipeline(m: int = 2, slots: int = 2, step: float = 0.5) -> StageProblem:
    """Renders r0..r3 (limit ``lic`` of 2) -> comp c0 (after r0, r1), c1 (after r2, r3)
    -> encode e (after c0, c1); node ``k`` has speed ``1 + step k``."""
    ids = ["r0", "r1", "r2", "r3", "c0", "c1", "e"]
    dur = [4.0, 6.0, 5.0, 3.0, 2.0, 2.5, 1.5]
    nodes = [Node(f"n{k}", speed=1.0 + step * k) for k in range(m)]
    inst = Instance.build(dur, nodes, job_ids=ids, deadline=30.0, resolution=0.5)
    return StageProblem.build(
        inst,
        after=[[], [], [], [], ["r0", "r1"], ["r2", "r3"], ["c0", "c1"]],
        uses=[["lic"]] * 4 + [None] * 3,
        limits={"lic": 2},
        slots=[slots] * m,
    )


def recount(problem: StageProblem, events: Events, res: Any) -> None:
    """Check a re-planned result against the original graph and the events alone, in
    exact seconds since the original start."""
    inst = problem.instance
    t0 = Fraction(events.elapsed)
    new = res.problem
    tick = Fraction(new.instance.resolution)
    speed = {nd.id: Fraction(nd.speed) for nd in [*inst.nodes, *events.added_nodes]}
    dur = {jid: Fraction(float(d)) for jid, d in zip(inst.job_ids, inst.durations, strict=True)}
    lost = set(events.lost_nodes)
    kept = {r.job: r for r in events.running if r.node not in lost}
    # every job once
    planned = list(new.instance.job_ids)
    parts = [set(events.finished), set(kept), set(planned)]
    assert sum(map(len, parts)) == inst.n == len(set().union(*parts))
    assert len(planned) == len(set(planned))
    # intervals in absolute seconds: (start, end, node, job)
    node_ids = [nd.id for nd in new.instance.nodes]
    runs = [
        (Fraction(r.started_at), Fraction(r.started_at) + dur[r.job] / speed[r.node], r.node, r.job)
        for r in kept.values()
    ]
    for j, jid in enumerate(planned):
        k = node_ids[int(res.plan.node[j])]
        a = t0 + int(res.plan.start[j]) * tick
        runs.append((a, a + dur[jid] / speed[k], k, jid))
    at = {job: (a, b) for a, b, _, job in runs}
    for a, _, _, _ in runs[len(kept) :]:
        assert a >= t0  # nothing planned before now
    for j, jid in enumerate(inst.job_ids):
        if jid in events.finished:
            continue
        for i in problem.predecessors_of(j).tolist():
            pred = inst.job_ids[i]
            if pred in events.finished:
                continue
            assert at[jid][0] >= at[pred][1], (jid, "starts before", pred, "ends")
    for nid in {k for _, _, k, _ in runs}:
        cap = next(
            int(c) for nd, c in zip(new.instance.nodes, new.slots, strict=True) if nd.id == nid
        )
        on = [(a, b) for a, b, k, _ in runs if k == nid and b > a]
        for a, _ in on:
            assert sum(1 for x, y in on if x <= a < y) <= cap
    users = {inst.job_ids[j] for j in range(inst.n) if problem.limits_of(j).size}
    for lim, cap in zip(problem.limit_names, problem.capacities.tolist(), strict=True):
        on = [(max(a, t0), b) for a, b, _, job in runs if job in users and b > max(a, t0)]
        for a, _ in on:
            assert sum(1 for x, y in on if x <= a < y) <= cap, lim
    # the makespan counts until every node is done, running jobs included
    last = max([b for _, b, _, _ in runs] + [t0])
    assert res.exact_value >= last - t0


def test_replan_keeps_running_jobs_and_their_waits() -> None:
    """Source: a recount from the events (this file). r1 runs on n0 (ends at 3 + 6 = 9 s),
    r0 and r3 are finished, r2 runs on n1 (speed 1.5: ends at 2 + 5/1.5 s); c0 waits for
    r1 and must start at or after 9 s, c1 after r2's end; the running jobs hold both
    places of the limit until they end; every job is accounted once."""
    problem = pipeline()
    events = Events(
        elapsed=5.0,
        finished=("r0", "r3"),
        running=(Running("r1", "n0", 3.0), Running("r2", "n1", 2.0)),
    )
    res = replan_stages(problem, {}, events, method="exact", max_rounds=50)
    recount(problem, events, res)
    info = res.to_dict()["replan"]
    assert info["finished"] == 2 and info["planned"] == 3
    assert [r["job"] for r in info["running"]] == ["r1", "r2"]
    assert info["stages"] == {
        "waits_met_by_finished": 2,
        "waits_on_running": 2,
        "limits_held_by_running": {"lic": 2},
    }
    plan = dict(zip(res.problem.instance.job_ids, res.plan.start.tolist(), strict=True))
    assert plan["c0"] * Fraction(1, 2) >= Fraction(9) - 5  # r1 ends 9 s after the start
    assert plan["c1"] * Fraction(1, 2) >= Fraction(2) + Fraction(5) / Fraction(1.5) - 5


def test_carried_end_is_the_makespan_when_it_ends_last() -> None:
    """Source: arithmetic. Only e is left, waiting for c1, which runs on n1 (speed 1.5)
    until 2.5 / 1.5 s after now: e starts at the first half-second tick after that and
    the makespan is its end. With two independent jobs, a long one running (ends 7.5 s
    after now) and a short one left, the makespan is the running job's end, exactly."""
    problem = pipeline()
    events = Events(
        elapsed=20.0,
        finished=("r0", "r1", "r2", "r3", "c0"),
        running=(Running("c1", "n1", 20.0),),
    )
    res = replan_stages(problem, {}, events, method="list")
    recount(problem, events, res)
    c1_end = Fraction(5, 3)
    e_start = res.plan.start[0] * Fraction(1, 2)
    assert e_start >= c1_end
    speed = Fraction(res.problem.instance.nodes[int(res.plan.node[0])].speed)
    assert res.exact_value == e_start + Fraction(3, 2) / speed
    inst = Instance.build([10.0, 1.0], [Node("a"), Node("b")], job_ids=["long", "short"])
    two = StageProblem.build(inst)
    events = Events(elapsed=2.5, running=(Running("long", "a", 0.0),))
    res = replan_stages(two, {}, events, method="exact")
    recount(two, events, res)
    assert res.exact_value == Fraction(15, 2) and res.makespan == 7.5
    assert res.exact_lower_bound == 7  # busy_nodes with times rounded down: floor(7.5)


def test_replan_refuses_contradicting_events() -> None:
    """Source: the rules of issue 17 point 5. A running job whose wait is unfinished, more
    running jobs on a node than its slots, and more running users of a limit than its
    capacity are refused, each by its field path."""
    problem = pipeline(slots=1)
    cases = [
        (Events(elapsed=1.0, running=(Running("c0", "n0", 0.0),)), ("running", 0, "job")),
        (
            Events(elapsed=1.0, running=(Running("r0", "n0", 0.0), Running("r1", "n0", 0.0))),
            ("running", 1, "node"),
        ),
        (Events(elapsed=1.0, finished=("c0",)), ("finished", 0)),
    ]
    for events, path in cases:
        with pytest.raises(InvalidInstance) as err:
            remaining_stages(problem, {}, events)
        assert path in [i.path for i in err.value.issues]
    wide = pipeline(m=3, slots=1)
    over = Events(
        elapsed=1.0,
        running=tuple(Running(f"r{k}", f"n{k}", 0.0) for k in range(3)),
    )
    with pytest.raises(InvalidInstance) as err:
        remaining_stages(wide, {}, over)
    assert ("running",) in [i.path for i in err.value.issues]


def random_graph(rng: random.Random) -> StageProblem:
    """A random layered graph of 8-30 jobs, 2-4 nodes of 1-3 slots, one limit or none."""
    n = rng.randint(8, 30)
    m = rng.randint(2, 4)
    ids = [f"j{j}" for j in range(n)]
    dur = [rng.choice([1.0, 2.0, 3.5, 5.0, 0.75]) for _ in range(n)]
    nodes = [Node(f"n{k}", speed=rng.choice([1.0, 2.0, 1.5])) for k in range(m)]
    inst = Instance.build(dur, nodes, job_ids=ids, resolution=0.25)
    after = [[ids[i] for i in rng.sample(range(j), min(j, rng.randint(0, 2)))] for j in range(n)]
    limited = rng.random() < 0.6
    return StageProblem.build(
        inst,
        after=after,
        uses=[["lic"] if limited and rng.random() < 0.5 else [] for _ in range(n)],
        limits={"lic": rng.randint(1, 3)} if limited else {},
        slots=[rng.randint(1, 3) for _ in range(m)],
    )


def events_at(problem: StageProblem, res: Any, elapsed: float, rng: random.Random) -> Events:
    """What the original plan says has happened by ``elapsed`` (its ticks in seconds),
    perhaps with a node lost and one added."""
    plan = res.plan
    tick = problem.instance.resolution
    ids, node_ids = problem.instance.job_ids, [nd.id for nd in problem.instance.nodes]
    finished, running = [], []
    for j, jid in enumerate(ids):
        a, b = plan.start[j] * tick, plan.end[j] * tick  # exact: ticks of 0.25
        if b <= elapsed:
            finished.append(jid)
        elif a <= elapsed:
            running.append(Running(jid, node_ids[int(plan.node[j])], float(a)))
    lost = (rng.choice(node_ids),) if rng.random() < 0.4 else ()
    added = (Node("fresh", speed=1.0, free_at=elapsed + 1.0),) if rng.random() < 0.5 else ()
    return Events(
        elapsed=elapsed,
        finished=tuple(finished),
        running=tuple(running),
        lost_nodes=lost,
        added_nodes=added,
    )


@pytest.mark.parametrize("seed", range(3))
def test_random_replans_recount(seed: int) -> None:
    """Source: a recount from the events (this file). Random graphs are planned, cut at a
    random moment of their plan (what ended is finished, what started runs, perhaps a node
    lost and one added), re-planned with every method: each job is accounted once, waits
    hold across the moment, slots and limits are never over-used, running jobs included."""
    rng = random.Random(900 + seed)
    for _ in range(12):
        problem = random_graph(rng)
        first = solve_stages(problem, "longest_first")
        span = first.plan.makespan_ticks * problem.instance.resolution
        elapsed = rng.choice([0.25, 0.4, 0.6]) * span
        events = events_at(problem, first, elapsed, rng)
        if len(events.finished) + len(events.running) == problem.n:
            continue
        planned_on = {row["job"]: row["node"] for row in first.plan.to_assignment()}
        for method in ("list", "longest_first", "exact"):
            res = replan_stages(problem, planned_on, events, method=method, max_rounds=30)
            recount(problem, events, res)
            info = res.remaining.info()
            assert info["finished"] + len(info["running"]) + info["planned"] == problem.n
            lost = set(events.lost_nodes)
            moved = {r.job for r in events.running if r.node in lost}
            assert moved <= set(info["replanned_from_lost_nodes"])
            assert res.lower_bound <= res.makespan
