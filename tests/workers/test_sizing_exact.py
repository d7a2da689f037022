"""Deadline sizing holds in exact arithmetic: the plan of an answer meets the deadline as
exact rationals, the node interval contains the exact minimum, and tick counts past 2**53
are refused.

References, written here with ``itertools``-style recursion and ``fractions`` only: the
exact minimum node count is found by trying every partition of the jobs into groups
(n <= 7) whose exact work ``sum(duration)`` is at most ``deadline * speed``; a plan is
checked by summing each node's durations as Fractions.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.problems import json_pointer
from tests.bodies import size_body
from workers.planning import InvalidInstance, Node
from workers.planning.sizing import _tick_limit, cost_of, size

LIMIT = 2**53
AUDIT_BODY: dict[str, Any] = {
    "jobs": [{"id": "a", "duration": 1e10}, {"id": "b", "duration": 5e9}],
    "deadline": 1e10,
    "node": {"speed": 1000},
    "resolution": 1e-6,
}


# -- references (no spanwright code) ---------------------------------------------------
def float_up(x: Fraction) -> float:
    """The smallest float not below ``x``."""
    f = float(x)
    return math.nextafter(f, math.inf) if Fraction(f) < x else f


def fewest_groups(durations: list[float], room: Fraction) -> int:
    """The fewest groups the jobs split into with every group's exact sum <= ``room``
    (every set partition tried, jobs placed longest first; n <= 7)."""
    d = sorted((Fraction(x) for x in durations), reverse=True)
    best = [len(d)]

    def place(i: int, loads: list[Fraction]) -> None:
        if len(loads) >= best[0]:
            return
        if i == len(d):
            best[0] = len(loads)
            return
        for k in range(len(loads)):
            if loads[k] + d[i] <= room:
                loads[k] += d[i]
                place(i + 1, loads)
                loads[k] -= d[i]
        place(i + 1, [*loads, d[i]])

    place(0, [])
    return best[0]


def exact_makespan(durations: list[float], k: int, speed: float) -> Fraction:
    """Least makespan of the jobs on k nodes of ``speed``: the least group-sum maximum over
    every partition into at most k groups, divided by the speed, in Fractions."""
    d = sorted((Fraction(x) for x in durations), reverse=True)
    best: list[Fraction | None] = [None]

    def place(i: int, loads: list[Fraction]) -> None:
        if i == len(d):
            ms = max(loads)
            if best[0] is None or ms < best[0]:
                best[0] = ms
            return
        for j in range(len(loads)):
            loads[j] += d[i]
            place(i + 1, loads)
            loads[j] -= d[i]
        if len(loads) < k:
            place(i + 1, [*loads, d[i]])

    place(0, [])
    assert best[0] is not None
    return best[0] / Fraction(speed)


def plan_problems(
    answer: dict[str, Any], durations: list[float], speed: float, deadline: float
) -> list[str]:
    """Everything wrong with a sizing answer's plan, in exact arithmetic: every job once;
    each node's work sum(duration) at most deadline * speed; every stated end at most the
    deadline; no stated start before 0 or before the previous job's stated end."""
    room = Fraction(deadline) * Fraction(speed)
    out: list[str] = []
    seen: list[str] = []
    for node in answer["plan"]:
        jobs = node["jobs"]
        work = sum((Fraction(durations[int(j["id"][1:])]) for j in jobs), Fraction(0))
        if work > room:
            out.append(f"{node['node']}: work {float(work)!r} > deadline * speed")
        clock = Fraction(0)
        for j in sorted(jobs, key=lambda j: j["start"]):
            if Fraction(j["start"]) < clock:
                out.append(f"{j['id']} starts before {float(clock)!r}")
            clock = Fraction(j["end"])
            if clock > Fraction(deadline):
                out.append(f"{j['id']} ends at {j['end']!r} after the deadline")
            seen.append(j["id"])
    if sorted(seen) != sorted(f"j{i}" for i in range(len(durations))):
        out.append("not every job runs exactly once")
    return out


# -- the tick limit ------------------------------------------------------------------------
def test_audit_overflow_body_is_refused_at_resolution() -> None:
    """Regression (audit): jobs of 1e10 and 5e9 s, deadline 1e10 s, speed 1000, resolution
    1e-6 s. A node holds 1e10 * 1000 / 1e-6 = 1e19 ticks, past 2**53 (arithmetic): the
    request is refused with InvalidInstance pointing at /resolution and naming the limit,
    from a sizing body (read at the edge) and from size(), never an OverflowError."""
    for call in (
        lambda: size_body(AUDIT_BODY, time_budget=0.2),
        lambda: size([1e10, 5e9], 1e10, Node("node", speed=1000.0), resolution=1e-6),
    ):
        with pytest.raises(InvalidInstance) as info:
            call()
        pointers = [json_pointer(i.path) for i in info.value.issues]
        text = " ".join(i.detail for i in info.value.issues)
        assert "/resolution" in pointers, pointers
        assert "2**53" in text, text


def test_refusal_names_a_resolution_that_works() -> None:
    """The audit body's refusal names the limit and a resolution X with, in Fractions,
    floor(deadline * speed / X) <= 2**53 and sum(ceil(duration / X)) <= 2**53, while a
    resolution 1e-5 finer than X already holds more than 2**53 ticks per node (so X is the
    finest to five digits). At 1 s the same batch is accepted (no issue)."""
    d = [1e10, 5e9]
    room = Fraction(1e10) * Fraction(1000)
    issues = _tick_limit(np.array(d), room, 1e-6)
    assert [json_pointer(i.path) for i in issues] == ["/resolution"]
    found = re.search(r"at least ([0-9.e+-]+) s", issues[0].detail)
    assert found is not None and "2**53" in issues[0].detail, issues[0].detail
    x = Fraction(float(found.group(1)))
    assert math.floor(room / x) <= LIMIT
    assert sum(math.ceil(Fraction(v) / x) for v in d) <= LIMIT
    assert math.floor(room / (x * (1 - Fraction(1, 10**5)))) > LIMIT
    assert _tick_limit(np.array(d), room, 1.0) == []


# -- the deadline, exactly -------------------------------------------------------------
def test_a_float_only_fit_is_not_claimed() -> None:
    """Regression: jobs 0.1 and 0.7 with the deadline 0.7999999999999999 (the float sum
    0.1 + 0.7). In Fractions 0.1 + 0.7 = 0.79999999999999996114... is above the deadline
    0.79999999999999993338..., so the jobs cannot share a node: the minimum is 2 (partition
    search here), where the float sum claimed 1 node, proven. Three such pairs need 4."""
    deadline = 0.7999999999999999
    assert Fraction(0.1) + Fraction(0.7) > Fraction(deadline)
    for durations, truth in (([0.1, 0.7], 2), ([0.1, 0.7] * 3, 4)):
        assert fewest_groups(durations, Fraction(deadline)) == truth
        ids = [f"j{i}" for i in range(len(durations))]
        r = size(durations, deadline, job_ids=ids, time_budget=0.2)
        assert r.nodes_lower_bound <= truth <= r.nodes_needed
        assert r.nodes_needed == truth
        assert plan_problems(r.to_dict(), durations, 1.0, deadline) == []


@st.composite
def sizings(draw: st.DrawFn) -> tuple[list[float], float, float, float]:
    """(durations, speed, deadline, resolution): up to 7 jobs around 10**e s (e in -9..12),
    a node of speed 3, 0.3, 1.5 or 1, a deadline a hair below, at or above the exact
    optimum on some number of nodes (never below the longest job), a resolution in
    1e-6..1e6 s that keeps the tick counts below 2**50."""
    e = draw(st.integers(-9, 12))
    scale = 10.0**e
    n = draw(st.integers(1, 7))
    values = st.one_of(st.sampled_from([0.1, 0.2, 0.3, 0.7, 1 / 3, 1.0, 3.0]), st.floats(0.01, 10))
    durations = [draw(values) * scale for _ in range(n)]
    speed = draw(st.sampled_from([3.0, 0.3, 1.5, 1.0]))
    k = draw(st.integers(1, n))
    target = exact_makespan(durations, k, speed)
    deadline = float_up(target)
    deadline = draw(
        st.sampled_from(
            [deadline, math.nextafter(deadline, 0.0), math.nextafter(deadline, math.inf)]
        )
    )
    deadline = max(deadline, float_up(Fraction(max(durations)) / Fraction(speed)))
    r = draw(st.integers(max(-6, e - 12), 6))
    return durations, speed, deadline, 10.0**r * draw(st.sampled_from([1.0, 0.3]))


@settings(max_examples=30, deadline=None)
@given(sizings())
def test_answer_meets_the_deadline_exactly(case: tuple[list[float], float, float, float]) -> None:
    """At scales 1e-9..1e12 s, speeds 3, 0.3, 1.5, 1 and resolutions 1e-6..1e6 s, with the
    deadline a hair around an exact optimum: nodes_lower_bound <= the exact minimum (every
    partition tried, in Fractions) <= nodes_needed, proven_optimal only at the minimum, and
    the plan meets the deadline exactly (each node's work summed as Fractions)."""
    durations, speed, deadline, res = case
    truth = fewest_groups(durations, Fraction(deadline) * Fraction(speed))
    ids = [f"j{i}" for i in range(len(durations))]
    r = size(
        durations,
        deadline,
        Node("node", speed=speed),
        job_ids=ids,
        resolution=res,
        time_budget=0.05,
    )
    assert r.nodes_lower_bound <= truth <= r.nodes_needed, (r.nodes_lower_bound, truth)
    assert not r.proven_optimal or r.nodes_needed == truth
    assert plan_problems(r.to_dict(), durations, speed, deadline) == []
    assert Fraction(r.makespan) <= Fraction(deadline)


def test_cost_counts_every_started_unit_exactly() -> None:
    """Billing per started unit (the sizing cost model): a makespan one float above one
    hour, 3600.0000000000005 s, starts a second hour (ceil in Fractions: 2), where a
    tolerance of 1e-9 used to bill one; exactly one hour bills one."""
    above = math.nextafter(3600.0, math.inf)
    assert math.ceil(Fraction(above) / 3600) == 2
    assert cost_of(1, above, 1.0, "hour") == 2.0
    assert cost_of(1, 3600.0, 1.0, "hour") == 1.0
