"""Times in the service's JSON are written on the grid of the request's resolution without
weakening a certificate (openapi/openapi.yaml, ``PlanResult``: lower bounds down, plan
times up, slack down, flags decided on exact values).

References: exact rational arithmetic of the standard library (``fractions``: every JSON
number is the exact value of its double, RFC 8259 section 6 with IEEE 754) and, for the
optimum, brute force over every assignment of the jobs to the nodes. Nothing here takes
an expected number from the service's code.
"""

from __future__ import annotations

import itertools
from collections.abc import Callable
from decimal import Decimal
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.planning.rounding import ceil_array, ceil_to, floor_to, grid_decimals


def on_grid(x: float, d: int) -> bool:
    """The shortest decimal form of ``x`` has at most ``d`` decimals (no float noise)."""
    return (Decimal(repr(x)) * 10**d) % 1 == 0


def grid_neighbour(c: float, d: int, step: int) -> Fraction:
    """The double of the grid number ``step`` steps from ``c``, exactly."""
    k = round(Fraction(c) * 10**d)
    return Fraction(float(Fraction(k + step, 10**d)))


times = st.floats(min_value=0, max_value=1e9, allow_nan=False)


@settings(max_examples=300, deadline=None)
@given(times, times, st.integers(min_value=0, max_value=6))
def test_directed_rounding_is_tight_and_safe(a: float, b: float, d: int) -> None:
    """For an exact sum of two doubles (a plan time or a bound), the floor is the largest
    grid number whose double is not above it and the ceiling the smallest not below it:
    both on the grid, both within one grid step."""
    x = Fraction(a) + Fraction(b)
    lo, hi = floor_to(x, d), ceil_to(x, d)
    assert Fraction(lo) <= x <= Fraction(hi)
    assert on_grid(lo, d) and on_grid(hi, d)
    assert grid_neighbour(lo, d, 1) > x
    assert grid_neighbour(hi, d, -1) < x


@settings(max_examples=300, deadline=None)
@given(
    st.lists(st.one_of(times, st.integers(0, 4 * 10**9).map(float)), min_size=1, max_size=20),
    st.integers(min_value=0, max_value=6),
)
def test_array_ceiling_is_tight_and_safe(values: list[float], d: int) -> None:
    """``ceil_array`` (a plan's times at once) gives each value's smallest grid number
    whose double is not below it, checked in exact rational arithmetic: on the grid, not
    below the value, and one grid step lower is below it; arrays of whole seconds (the
    common case, returned as they are) included. Values stay below 2**52 / 10**6, where
    every grid step of six decimals is still a double of its own."""
    for x, hi in zip(values, ceil_array(np.array(values), d).tolist(), strict=True):
        assert Fraction(hi) >= Fraction(x) and on_grid(hi, d)
        assert grid_neighbour(hi, d, -1) < Fraction(x)


@settings(max_examples=400, deadline=None)
@given(st.floats(allow_nan=False, allow_infinity=False))
def test_whole_second_floor_of_a_double(x: float) -> None:
    """On the grid of whole seconds a double's floor is the largest integer not above it
    (checked in exact rational arithmetic, ``fractions.Fraction``), written as a double:
    ``float(floor(x))`` is exact below 2**53; never ``-0.0``."""
    lo = floor_to(x, 0)
    assert Fraction(lo).denominator == 1 and Fraction(lo) <= Fraction(x)
    assert Fraction(float(Fraction(lo) + 1)) > Fraction(x) or abs(x) >= 2.0**52
    assert repr(lo) != "-0.0"


def test_worked_examples() -> None:
    """By hand with exact doubles: 118.8 + 0.1 is 118.89999999999999716... < 118.9, so at
    one decimal a bound is 118.8 and a plan time 118.9; 2.2 + 1.1 is
    3.30000000000000026... > 3.3, so a bound is 3.3 and a plan time 3.4 (a plan time of
    3.3 would claim an end before the true one); 118.8 alone is its own double and stays."""
    s = Fraction(118.8) + Fraction(0.1)
    assert Decimal.from_float(118.8) + Decimal.from_float(0.1) == Decimal(s.numerator) / Decimal(
        s.denominator
    )
    assert (floor_to(s, 1), ceil_to(s, 1)) == (118.8, 118.9)
    t = Fraction(2.2) + Fraction(1.1)
    assert t > Fraction(3.3)
    assert (floor_to(t, 1), ceil_to(t, 1), ceil_to(t, 0), floor_to(t, 0)) == (3.3, 3.4, 4, 3)
    assert floor_to(118.8, 1) == ceil_to(118.8, 1) == 118.8
    assert ceil_to(0.0, 3) == 0.0 and repr(ceil_to(0.0, 3)) == "0.0"


@pytest.mark.parametrize(
    ("resolution", "d"), [(1, 0), (5, 0), (0.1, 1), (0.25, 2), (1e-3, 3), (1e-6, 6), (1e6, 0)]
)
def test_grid_is_the_decimals_of_the_resolution(resolution: float, d: int) -> None:
    """The grid's decimals are those of the resolution as written in JSON."""
    assert grid_decimals(resolution) == d


# --- real answers of the API, checked against exact arithmetic and brute force ---------

CASES: list[dict[str, Any]] = [
    # the noise: 356.4 = 118.8 * 3 summed on one node
    {"jobs": [118.8, 118.8, 118.8, 0.1], "speeds": [1], "resolution": 0.1, "deadline": 356.5},
    {"jobs": [118.8, 118.8, 118.8, 0.1], "speeds": [1, 1], "resolution": 1, "deadline": 240},
    {
        "jobs": [3.3, 2.2, 1.1],
        "speeds": [1, 1],
        "resolution": 1,
        "method": "exact",
        "deadline": 3.3,
    },
    {
        "jobs": [3.3, 2.2, 1.1],
        "speeds": [1, 1],
        "resolution": 0.1,
        "method": "exact",
        "deadline": 4,
    },
    {
        "jobs": [10.1, 20.2, 30.3, 40.4, 50.5, 10.1, 20.2],
        "speeds": [1, 1, 1],
        "resolution": 0.25,
        "deadline": 60.6,
    },
    {"jobs": [7.7, 6.6, 5.5, 4.4, 3.3], "speeds": [1.5, 1], "resolution": 0.001, "deadline": 9.9},
    {"jobs": [7, 7, 6, 6, 5, 5, 4, 4, 4], "speeds": [1, 1, 1], "resolution": 1, "deadline": 15},
]


def body(case: dict[str, Any]) -> dict[str, Any]:
    out: dict[str, Any] = {
        "jobs": [{"id": f"j{i}", "duration": p} for i, p in enumerate(case["jobs"])],
        "nodes": [{"id": f"n{k}", "speed": s} for k, s in enumerate(case["speeds"])],
        "resolution": case["resolution"],
        "method": case.get("method", "longest_first"),
        "time_budget": 0.5,
        "deadline": case["deadline"],
    }
    return out


def optimum(jobs: list[float], speeds: list[float]) -> Fraction:
    """The shortest makespan over every assignment, exactly."""
    best = None
    for nodes in itertools.product(range(len(speeds)), repeat=len(jobs)):
        loads = [Fraction(0)] * len(speeds)
        for p, k in zip(jobs, nodes, strict=True):
            loads[k] += Fraction(p) / Fraction(speeds[k])
        top = max(loads)
        best = top if best is None else min(best, top)
    assert best is not None
    return best


@pytest.mark.parametrize("case", CASES, ids=[f"case{i}" for i in range(len(CASES))])
def test_answers_keep_every_certificate(
    case: dict[str, Any], idle_app: Any, drain: Callable[[], None]
) -> None:
    """For a finished plan: every time is on the grid; ``lower_bound`` and each of
    ``bounds`` are not above the brute-force optimum; each job's stated start and end keep
    the node's order and are within one grid step (and float noise) above its exact ones
    (sums of the request's doubles on the node's clock); ``makespan`` is not below any of
    them nor the plan's exact makespan, which no job's exact end is above;
    ``gap`` is 0 exactly when ``proven_optimal``, which holds only when the plan's exact
    makespan is the optimum; slack is below 0 exactly when the deadline is missed, and
    never above the exact slack; the list's summary and the progress say the same."""
    client = idle_app.test_client()
    queued = client.post("/v1/plans", json=body(case))
    assert queued.status_code == 202, queued.get_json()
    drain()
    doc = client.get(queued.headers["Location"]).get_json()
    res = doc["result"]
    d = len(str(Decimal(repr(float(case["resolution"]))).normalize()).partition(".")[2])
    jobs, speeds = case["jobs"], case["speeds"]
    opt = optimum(jobs, speeds)

    step = Fraction(1, 10**d)
    exact_ends = []
    for k, node in enumerate(res["assignment"]):
        clock = Fraction(0)
        last = 0.0
        for job in node["jobs"]:
            assert job["start"] >= last  # the node's order, back to back
            assert clock - step / 1000 <= Fraction(job["start"]) < clock + step
            clock += Fraction(jobs[int(job["id"][1:])]) / Fraction(speeds[k])
            assert clock - step / 1000 <= Fraction(job["end"]) < clock + step
            assert on_grid(job["start"], d) and on_grid(job["end"], d)
            last = job["end"]
        exact_ends.append(clock)
        assert on_grid(node["load"], d) and node["load"] == last
        assert Fraction(res["makespan"]) >= clock and res["makespan"] >= node["load"]
    made = max(exact_ends)
    assert Fraction(res["makespan"]) >= made >= opt >= Fraction(res["lower_bound"])
    assert on_grid(res["makespan"], d) and on_grid(res["lower_bound"], d)
    assert all(Fraction(v) <= opt and on_grid(v, d) for v in res["bounds"].values())
    assert (res["gap"] == 0) == res["proven_optimal"]
    assert made == opt or not res["proven_optimal"]  # proven only when optimal, exactly

    dl = res["deadline"]
    true_slack = Fraction(case["deadline"]) - made
    assert dl["met"] == (true_slack >= 0) == (dl["slack"] >= 0)
    assert Fraction(dl["slack"]) <= true_slack and on_grid(dl["slack"], d)
    assert dl["provably_unreachable"] == (opt > Fraction(case["deadline"]))

    (item,) = [i for i in client.get("/v1/plans").get_json()["items"] if i["id"] == doc["id"]]
    assert item["summary"]["makespan"] == res["makespan"] == doc["progress"]["best_makespan"]
    assert item["summary"]["lower_bound"] == res["lower_bound"]
    assert doc["progress"]["best_lower_bound"] == res["lower_bound"]


def test_sizing_answers_keep_their_times(idle_app: Any, drain: Callable[[], None]) -> None:
    """A sizing's plan, makespan, slack and curve follow the same rule: the stated
    makespan is not below the exact one of its plan (sums of the request's doubles), the
    slack not above the exact slack, each curve row's bound not above its makespan."""
    jobs = [118.8, 60.6, 60.6, 30.3, 0.1]
    client = idle_app.test_client()
    req = {
        "jobs": [{"id": f"j{i}", "duration": p} for i, p in enumerate(jobs)],
        "deadline": 150.5,
        "resolution": 0.1,
    }
    queued = client.post("/v1/sizings", json=req)
    assert queued.status_code == 202, queued.get_json()
    drain()
    res = client.get(queued.headers["Location"]).get_json()["result"]
    made = max(
        sum((Fraction(jobs[int(j["id"][1:])]) for j in n["jobs"]), Fraction(0)) for n in res["plan"]
    )
    assert Fraction(res["makespan"]) >= made and on_grid(res["makespan"], 1)
    assert Fraction(res["slack"]) <= Fraction(150.5) - made and on_grid(res["slack"], 1)
    assert res["curve"] and all(
        r["lower_bound"] <= r["makespan"] and on_grid(r["makespan"], 1) for r in res["curve"]
    )
