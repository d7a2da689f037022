"""The compiled list scheduler, local walk and heads and tails (``list_kernel``,
``walk_kernel``) against their plain-Python twins.

Sources: the plain-Python list scheduler ``Lister.schedule_pure`` (the one the other
stage tests check against the brute force and the independent plan checker of
tests/reference_stages.py) and the kernels' own uncompiled code (``kernels.pure``);
every walk's plan is also passed through that independent checker. Graphs: the random
small ones of test_stage_reference (speeds, tags, busy nodes, slots, a limit), the same
with jobs carried in (test_stage_replan), and larger random layered graphs built here.
"""

from __future__ import annotations

import random

import numpy as np
from reference_stages import check_rows, makespan
from stage_helpers import to_problem
from test_stage_reference import random_tiny
from test_stage_replan import carried_problem, with_running

from workers.planning import Instance, Node
from workers.planning.kernels import pure
from workers.planning.stages.list_kernel import heads_tails, list_pass
from workers.planning.stages.listing import Lister, Placement
from workers.planning.stages.paths import longest_paths, longest_paths_numpy, release_ticks
from workers.planning.stages.plan import StagePlan
from workers.planning.stages.problem import StageProblem
from workers.planning.stages.walk_kernel import walk


def layered_problem(rng: random.Random, n: int) -> StageProblem:
    """A random layered graph of ``n`` jobs on 2-8 nodes of speeds 1, 1.5 and 2, with
    1-4 slots, some busy, a tag on half, two limits (a job may use both)."""
    m = rng.randint(2, 8)
    ids = [f"j{j}" for j in range(n)]
    after = [
        sorted({ids[rng.randrange(j)] for _ in range(rng.randint(0, 3))}) if j else []
        for j in range(n)
    ]
    nodes = [
        Node(
            f"n{k}",
            speed=rng.choice([1.0, 1.5, 2.0]),
            provides=frozenset({"gpu"}) if k % 2 == 0 else frozenset(),
            free_at=rng.choice([0.0, 0.0, 30.0]),
        )
        for k in range(m)
    ]
    requires = [["gpu"] if rng.random() < 0.2 else [] for _ in range(n)]
    uses = [[x for x in ("lic", "disk") if rng.random() < 0.3] for _ in range(n)]
    durations = [float(rng.randint(0, 400)) for _ in range(n)]
    inst = Instance.build(durations, nodes, job_ids=ids, requires=requires)
    return StageProblem.build(
        inst,
        after=after,
        uses=uses,
        limits={"lic": rng.randint(1, 3), "disk": rng.randint(1, 5)},
        slots=[rng.randint(1, 4) for _ in range(m)],
    )


def same(a: Placement, b: Placement) -> bool:
    return all(
        np.array_equal(x, y) for x, y in ((a.node, b.node), (a.slot, b.slot), (a.start, b.start))
    )


def compiled(lister: Lister, rank: np.ndarray, **kw: object) -> Placement:
    """The kernel called directly (``Lister.schedule`` would fall back to the twin
    without numba)."""
    order = np.argsort(rank, kind="stable").astype(np.int64)
    slot, start, done = list_pass(rank, order, *lister.kernel_args(**kw))  # type: ignore[arg-type]
    assert done == lister.problem.n
    return lister.placement(slot, start)


def problems() -> list[StageProblem]:
    rng = random.Random(1717)
    out = [to_problem(random_tiny(rng)) for _ in range(60)]
    out += [carried_problem(*with_running(random_tiny(rng), rng)) for _ in range(60)]
    out += [layered_problem(rng, rng.randint(20, 300)) for _ in range(12)]
    return out


def test_list_kernel_equals_the_plain_python_scheduler() -> None:
    """Source: ``Lister.schedule_pure`` and the kernel's uncompiled code. For random
    priorities, forward, backward (reversed graph) and with node start times given,
    the compiled kernel places every job on the same node and slot at the same tick."""
    rng = np.random.default_rng(5)
    for problem in problems():
        lister = Lister(problem)
        free = rng.integers(0, 5, problem.m).astype(np.int64)
        for _ in range(3):
            rank = rng.permutation(problem.n).astype(np.int64)
            for kw in ({}, {"reverse": True}, {"free": free}, {"reverse": True, "free": free}):
                assert same(compiled(lister, rank, **kw), lister.schedule_pure(rank, **kw))
            order = np.argsort(rank).astype(np.int64)
            fast_slot, fast_start, _ = list_pass(rank, order, *lister.kernel_args())
            slow_slot, slow_start, _ = pure(list_pass)(rank, order, *lister.kernel_args())
            assert np.array_equal(fast_slot, slow_slot) and np.array_equal(fast_start, slow_start)


def test_walk_kernel_equals_its_twin_and_plans_pass_the_checker() -> None:
    """Source: the kernel's uncompiled code and the independent plan checker
    (tests/reference_stages.py). The compiled walk and its twin return the same
    priorities and makespan; the best priority's list schedule is feasible, its
    makespan over the jobs is the one returned, and no longer than the start's."""
    rng = random.Random(99)
    for _ in range(25):
        g = random_tiny(rng)
        problem = to_problem(g)
        lister = Lister(problem)
        tail = np.zeros(problem.n, dtype=np.int64)
        rank0 = np.arange(problem.n, dtype=np.int64)[::-1].copy()
        seed = rng.randint(1, 2**31 - 2)
        best, span, last = walk(rank0, 40, seed, 2, tail, lister.kernel_args())
        best2, span2, last2 = pure(walk)(rank0, 40, seed, 2, tail, lister.kernel_args())
        assert span == span2 and np.array_equal(best, best2) and np.array_equal(last, last2)
        got = lister.schedule_pure(best)
        plan = StagePlan(problem, got.node, got.slot, got.start)
        rows = plan.rows()
        assert check_rows(g, rows) == []
        assert int(plan.end.max()) == span
        first = lister.schedule_pure(rank0)
        assert span <= int(
            (first.start + StagePlan(problem, first.node, first.slot, first.start).run).max()
        )
        assert makespan(g, rows) == plan.makespan_ticks


def test_heads_tails_kernel_equals_the_numpy_levels() -> None:
    """Source: ``paths.longest_paths_numpy`` (level by level in numpy, then in plain
    Python; checked against brute force by the bound tests) and the kernel's uncompiled
    code: the compiled pass gives the same heads and tails, jobs carried in included."""
    for problem in problems():
        want = longest_paths_numpy(problem)
        got = longest_paths(problem, compiled=True)
        assert np.array_equal(got.head, want.head) and np.array_equal(got.tail, want.tail)
        args = (
            problem.order,
            problem.after_ptr,
            problem.after_idx,
            problem.succ_ptr,
            problem.succ_idx,
            problem.timing.dmin,
            release_ticks(problem),
        )
        head, tail = pure(heads_tails)(*args)
        assert np.array_equal(head, want.head) and np.array_equal(tail, want.tail)
