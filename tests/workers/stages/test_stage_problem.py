"""Validation of stage graphs (issue 17, point 1): what is refused, with which field path.

Sources: the issue's own rules (an unknown id in ``after``, a job waiting for itself and
any cycle are refused naming the jobs of one cycle; a limit used but not given, and a
capacity below 1, are refused by field); the cycle checks against graphlib's own
``CycleError`` (the standard library), and a topological order is checked arc by arc.
"""

from __future__ import annotations

import graphlib
import random

import numpy as np
import pytest

from workers.planning import Instance, InvalidInstance, Node
from workers.planning.stages.problem import StageProblem


def inst(n: int = 4, m: int = 2) -> Instance:
    return Instance.build([1.0] * n, m, job_ids=[f"j{i}" for i in range(n)])


def refused(**kw: object) -> InvalidInstance:
    with pytest.raises(InvalidInstance) as got:
        StageProblem.build(inst(), **kw)  # type: ignore[arg-type]
    return got.value


def test_unknown_id_and_self_wait() -> None:
    """Source: issue 17 (unknown id, self-wait refused by field path)."""
    e = refused(after=[[], ["nope"], ["j2"], []])
    assert [i.path for i in e.issues] == [("jobs", 1, "after", 0), ("jobs", 2, "after", 0)]
    assert "unknown job id 'nope'" in e.issues[0].detail
    assert "waits for itself" in e.issues[1].detail


def test_cycle_named_in_order() -> None:
    """Source: issue 17 (a cycle is refused naming the jobs of one cycle); graphlib raises
    CycleError on the same graph, and every named job waits for the one before it."""
    after = [["j3"], ["j0"], [], ["j1"]]
    with pytest.raises(graphlib.CycleError):
        list(
            graphlib.TopologicalSorter(
                dict(zip(["j0", "j1", "j2", "j3"], after, strict=True))
            ).static_order()
        )
    e = refused(after=after)
    cycle = [inst().job_ids[i.path[1]] for i in e.issues]  # type: ignore[index]
    assert sorted(cycle) == ["j0", "j1", "j3"]
    for a, b in zip(cycle, cycle[1:] + cycle[:1], strict=True):
        assert a in after[int(b[1:])]
    assert "j0 -> " in e.detail or "j1 -> " in e.detail or "j3 -> " in e.detail


def test_limits_and_slots() -> None:
    """Source: issue 17 (limit used but not given, capacity < 1, slots < 1: refused)."""
    e = refused(uses=[["lic"], [], [], []], limits={"other": 0}, slots=[1, 0])
    paths = {i.path for i in e.issues}
    assert paths == {("limits", "other"), ("nodes", 1, "slots"), ("jobs", 0, "uses", 0)}


def test_topological_order_at_scale() -> None:
    """Source: the definition of a topological order (every arc goes forward), checked arc
    by arc on a random graph of 5,000 jobs and 20,000 arcs; repeats in 'after' count once."""
    rng = random.Random(5)
    n = 5000
    ids = [f"j{i}" for i in range(n)]
    perm = list(range(n))
    rng.shuffle(perm)
    after: list[list[str]] = [[] for _ in range(n)]
    for _ in range(20000):
        a, b = sorted(rng.sample(range(n), 2))
        after[perm[b]].append(ids[perm[a]])
    after[perm[n - 1]].append(after[perm[n - 1]][0] if after[perm[n - 1]] else ids[perm[0]])
    p = StageProblem.build(Instance.build([1.0] * n, 3, job_ids=ids), after=after)
    pos = np.empty(n, dtype=np.int64)
    pos[p.order] = np.arange(n)
    jobs = np.repeat(np.arange(n), np.diff(p.after_ptr))
    assert (pos[p.after_idx] < pos[jobs]).all()
    assert p.arcs == sum(len(set(r)) for r in after)


def test_ticks_round_up_exactly() -> None:
    """Source: exact rational arithmetic (Python's fractions): 0.3 s on a speed-0.1 node at
    resolution 1 is 0.29999999999999998889.../0.1000000000000000055... = just under 3,
    so 3 ticks; and a node free at 0.5 s is free from tick 1."""
    i = Instance.build([0.3], [Node("a", speed=0.1, free_at=0.5)], job_ids=["x"])
    p = StageProblem.build(i)
    import math
    from fractions import Fraction

    assert p.timing.run[0, 0] == math.ceil(Fraction(0.3) / Fraction(0.1))
    assert p.timing.free[0] == 1
