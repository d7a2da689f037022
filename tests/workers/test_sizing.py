"""Deadline sizing: fewest nodes for a deadline, checked against MILP optima and hand cases."""

from __future__ import annotations

import itertools
import json
import math
from pathlib import Path

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from scipy.optimize import Bounds, LinearConstraint, milp

from service.cli import main as cli_main
from service.problems import json_pointer
from tests.bodies import size_body
from tests.workers.test_binpacking import brute_force_bins
from workers.planning.errors import Infeasible, InvalidInstance
from workers.planning.model import Node
from workers.planning.sizing import (
    COST_MODEL,
    SizingProgress,
    capacity_ticks,
    cost_of,
    size,
    work_ticks,
)


def milp_bins(durations: list[float], cap: float, upper: int) -> int:
    """Fewest bins by the assignment MILP, solved by scipy.optimize.milp (HiGHS).

    Variables: y_b (bin b used) and x_jb (job j in bin b); minimise sum y_b subject to
    sum_b x_jb = 1, sum_j p_j x_jb <= cap * y_b, y_b >= y_(b+1).
    """
    n, m = len(durations), upper
    nv = m + n * m
    c = np.zeros(nv)
    c[:m] = 1.0
    rows, lo, hi = [], [], []
    for j in range(n):
        r = np.zeros(nv)
        r[m + j * m : m + (j + 1) * m] = 1.0
        rows.append(r)
        lo.append(1.0)
        hi.append(1.0)
    for b in range(m):
        r = np.zeros(nv)
        r[b] = -cap
        for j in range(n):
            r[m + j * m + b] = durations[j]
        rows.append(r)
        lo.append(-np.inf)
        hi.append(0.0)
    for b in range(m - 1):
        r = np.zeros(nv)
        r[b], r[b + 1] = 1.0, -1.0
        rows.append(r)
        lo.append(0.0)
        hi.append(np.inf)
    res = milp(
        c,
        constraints=LinearConstraint(np.array(rows), lo, hi),
        integrality=np.ones(nv),
        bounds=Bounds(0, 1),
        options={"time_limit": 20},
    )
    assert res.status == 0, res.message
    return round(res.fun)


def check_plan(result, durations, speed: float, deadline: float) -> None:  # type: ignore[no-untyped-def]
    """The plan runs every job once on nodes_needed nodes and ends by the deadline."""
    sched = result.schedule
    sched.check()
    assert sched.instance.m == result.nodes_needed
    assert sched.makespan <= deadline
    assert np.allclose(sched.end - sched.start, np.asarray(durations) / speed)
    plan = result.to_dict()["plan"]
    assert sorted(j["id"] for nd in plan for j in nd["jobs"]) == sorted(sched.instance.job_ids)


@pytest.mark.parametrize("seed", range(14))
def test_equals_milp_optimum_on_random_small_cases(seed: int) -> None:
    """On random small batches the answer equals the bin-packing optimum found by
    scipy.optimize.milp (HiGHS) on the assignment model, and is proven."""
    rng = np.random.default_rng(100 + seed)
    n = int(rng.integers(6, 13))
    deadline = float(rng.integers(100, 400))
    d = rng.integers(10, int(deadline) + 1, n).astype(float).tolist()
    r = size(d, deadline, time_budget=5.0)
    opt = milp_bins(d, deadline, r.nodes_needed)
    assert r.nodes_lower_bound <= opt <= r.nodes_needed
    assert r.proven_optimal and r.nodes_needed == opt
    assert r.stop_reason == "proved_optimal"
    check_plan(r, d, 1.0, deadline)


@settings(max_examples=25, deadline=None)
@given(
    st.lists(st.floats(0.05, 7.5, allow_nan=False), min_size=2, max_size=8),
    st.sampled_from([0.25, 0.1, 1.0, 0.3]),
    st.sampled_from([1.0, 1.5, 0.75]),
)
def test_real_durations_and_speed_keep_both_sides_valid(
    d: list[float], resolution: float, speed: float
) -> None:
    """Real (non-integral) durations, any resolution and node speed: the lower bound never
    exceeds the true optimum of the jobs scaled by the speed (scipy.optimize.milp, HiGHS)
    and the plan meets the deadline on the true durations."""
    deadline = 10.0
    r = size(d, deadline, Node("n", speed=speed), time_budget=1.0, resolution=resolution)
    times = [x / speed for x in d]
    opt = milp_bins(times, deadline, r.nodes_needed)
    assert r.nodes_lower_bound <= opt <= r.nodes_needed
    check_plan(r, d, speed, deadline)


def test_equal_long_jobs_need_one_node_each() -> None:
    """Hand-checkable: n equal jobs longer than half the deadline cannot share a node, so
    n nodes are needed and proven (the |J1| + |J2| term of Martello and Toth's L2, 1990)."""
    r = size([4000.0] * 9, 7200.0, time_budget=1.0)
    assert r.nodes_needed == 9 and r.nodes_lower_bound == 9
    assert r.bound_source in ("L2", "cardinality")
    assert r.bounds["total_work"] == math.ceil(9 * 4000 / 7200)


def test_speed_scales_durations() -> None:
    """A node twice as fast runs a job in half the time (the contract: duration is the run
    time on a speed-1 node): sizing at speed 2 equals sizing halved durations at speed 1."""
    d = [3600.0, 3000.0, 2400.0, 2000.0, 1800.0, 1500.0, 1200.0, 900.0, 600.0]
    fast = size(d, 3600.0, Node("n", speed=2.0), time_budget=1.0)
    half = size([x / 2 for x in d], 3600.0, time_budget=1.0)
    assert fast.nodes_needed == half.nodes_needed
    assert fast.nodes_lower_bound == half.nodes_lower_bound
    check_plan(fast, d, 2.0, 3600.0)
    assert fast.nodes_needed == math.ceil(sum(d) / 2 / 3600) or not fast.proven_optimal


def test_job_longer_than_deadline_is_named() -> None:
    """A job that cannot finish by the deadline on this node makes the question
    unanswerable: Infeasible names exactly those jobs (contract, 'Sizing a farm')."""
    body = {
        "jobs": [
            {"id": "ep4_sh010_sim", "duration": 9000},
            {"id": "ep4_sh020_comp", "duration": 600},
            {"id": "ep4_sh030_sim", "duration": 7300},
        ],
        "deadline": 7200,
    }
    with pytest.raises(Infeasible) as exc:
        size_body(body, time_budget=1.0)
    assert exc.value.jobs == ["ep4_sh010_sim", "ep4_sh030_sim"]
    assert {json_pointer(i.path) for i in exc.value.issues} == {
        "/jobs/0/duration",
        "/jobs/2/duration",
    }
    body["node"] = {"speed": 1.5}  # 9000 / 1.5 = 6000 s now fits
    assert size_body(body, time_budget=1.0).nodes_needed >= 2


def test_missing_tag_is_named() -> None:
    """A job requiring a tag the node kind lacks can run on no node of that kind."""
    body = {
        "jobs": [{"id": "fx", "duration": 60, "requires": ["gpu"]}, {"id": "c", "duration": 60}],
        "deadline": 100,
        "node": {"provides": ["cpu"]},
    }
    with pytest.raises(Infeasible) as exc:
        size_body(body, time_budget=0.5)
    assert exc.value.jobs == ["fx"]
    body["node"] = {"provides": ["gpu"]}
    assert size_body(body, time_budget=0.5).nodes_needed == 2


def test_invalid_fields_are_pointed_at() -> None:
    """Every bad field is reported at once with a JSON Pointer (RFC 6901) into the body."""
    body = {
        "jobs": [{"id": "a", "duration": -1}],
        "node": {"speed": 0},
        "max_nodes": 0,
        "billing": "fortnight",
        "curve_nodes": [0],
        "node_hour_cost": -2,
    }
    with pytest.raises(InvalidInstance) as exc:
        size_body(body, time_budget=1.0)
    pointers = {json_pointer(i.path) for i in exc.value.issues}
    assert {
        "/deadline",
        "/max_nodes",
        "/billing",
        "/curve_nodes/0",
        "/node_hour_cost",
        "/jobs/0/duration",
    } <= pointers
    # the node is checked once the jobs are well formed (model validation order)
    with pytest.raises(InvalidInstance) as exc:
        size_body(
            {"jobs": [{"id": "a", "duration": 1}], "deadline": 10, "node": {"speed": 0}},
            time_budget=1.0,
        )
    assert [json_pointer(i.path) for i in exc.value.issues] == ["/node/speed"]


def test_more_than_max_nodes_is_an_error() -> None:
    """When even the lower bound exceeds max_nodes the request is refused, naming the field."""
    with pytest.raises(Infeasible) as exc:
        size([100.0] * 50, 100.0, max_nodes=10)
    assert [json_pointer(i.path) for i in exc.value.issues] == ["/max_nodes"]


def test_curve_is_monotone_and_bounded() -> None:
    """Curve rows: makespan never rises with more nodes (a plan for k nodes is one for
    k + 1), every lower bound is at most the makespan, and counts below the proven node
    bound cannot meet the deadline (definitions)."""
    rng = np.random.default_rng(7)
    d = rng.integers(60, 3600, 300).astype(float)
    r = size(d, 6 * 3600.0, time_budget=1.0, curve_nodes=[1, 40, 2])
    rows = r.curve
    ks = [row.nodes for row in rows]
    assert ks == sorted(ks) and {1, 2, 40, r.nodes_needed} <= set(ks)
    assert all(a.makespan >= b.makespan for a, b in itertools.pairwise(rows))
    for row in rows:
        assert row.lower_bound <= row.makespan
        assert not (row.provably_misses and row.meets_deadline)
        assert row.nodes < r.nodes_needed or row.meets_deadline
    assert rows[0].lower_bound >= d.sum()  # one node runs everything


def test_cost_formula_by_hand() -> None:
    """Cost = nodes * billed hours * price with the makespan rounded up to the billing unit
    (common practice for rented nodes): 3 nodes, 3601 s, per minute -> 61 min each."""
    assert cost_of(3, 3601.0, 1.8, "minute") == pytest.approx(3 * 61 / 60 * 1.8)
    assert cost_of(3, 3601.0, 1.8, "hour") == pytest.approx(3 * 2 * 1.8)
    assert cost_of(3, 3601.0, 1.8, "second") == pytest.approx(3 * 3601 / 3600 * 1.8)
    assert cost_of(3, 3601.0, None) is None
    r = size([1800.0, 1800.0, 1000.0], 3600.0, node_hour_cost=2.0, billing="hour")
    out = r.to_dict()
    assert out["billing"] == "hour" and out["cost_model"] == COST_MODEL
    assert out["estimated_cost"] == pytest.approx(r.nodes_needed * 2.0)


def test_ticks_round_the_safe_way() -> None:
    """Rounding (sizing module docstring): items down and up are the exact floor and ceiling
    of the quotient of the given floating-point numbers (checked with Python's exact
    fractions), even where floating division rounds across a whole number."""
    from fractions import Fraction

    d = np.array([0.3, 0.7, 1.0, 0.05, 2.5, 1e-3])
    for res in (0.1, 0.3, 0.05, 1.0, 0.25):
        lo, hi = work_ticks(d, res)
        exact = [Fraction(float(x)) / Fraction(res) for x in d]
        assert lo.tolist() == [math.floor(e) for e in exact]
        assert hi.tolist() == [math.ceil(e) for e in exact]
        for deadline, speed in ((0.3, 1.0), (7.0, 0.7), (10.0, 1.5)):
            want = math.floor(Fraction(deadline) * Fraction(speed) / Fraction(res))
            assert capacity_ticks(deadline, speed, res) == want
    lo, hi = work_ticks(np.array([1840.0, 3.0]), 1.0)  # whole seconds at 1 s are exact
    assert lo.tolist() == hi.tolist() == [1840, 3]


def test_search_closes_what_ffd_leaves_open() -> None:
    """Triplets (Falkenauer 1996 construction, three jobs filling each node exactly, so the
    optimum is n / 3 by construction): with 15 jobs the search proves 5 nodes, where
    first fit decreasing asks for more or equal."""
    rng = np.random.default_rng(11)
    a = rng.integers(380, 491, 5)
    b = rng.integers(250, 1 + (1000 - a) // 2)
    d = np.concatenate([a, b, 1000 - a - b]).astype(float)
    r = size(d, 1000.0, time_budget=5.0)
    assert r.nodes_needed == 5 and r.proven_optimal
    assert r.upper_bounds["ffd"] >= 5
    assert r.to_dict()["ffd_excess"] == r.upper_bounds["ffd"] - 5


@pytest.mark.parametrize("seed", range(3))
def test_triplets_are_sized_to_the_total_work_bound(seed: int) -> None:
    """Falkenauer's triplets (J. Heuristics 2, 1996): 900 jobs whose planted optimum runs
    three jobs per node that fill the 6 h deadline to the second, so the optimum is 300
    nodes by construction and equals the total-work bound. The sizing proves 300 within
    its budget with a plan that meets the deadline; first fit decreasing needs more."""
    rng = np.random.default_rng(40 + seed)
    cap, k = 21_600, 300
    a = rng.integers(int(0.38 * cap), int(0.49 * cap) + 1, k)
    b = rng.integers(int(0.25 * cap), 1 + (cap - a) // 2)
    d = np.concatenate([a, b, cap - a - b]).astype(float)
    rng.shuffle(d)
    r = size(d, float(cap), time_budget=5.0)
    assert (r.nodes_needed, r.nodes_lower_bound, r.bound_source) == (k, k, "total_work")
    assert r.proven_optimal and r.stop_reason == "proved_optimal"
    assert r.upper_bounds["ffd"] > k
    check_plan(r, d, 1.0, float(cap))


def test_planted_cuts_with_real_durations_and_speed() -> None:
    """Planted instance (../shared/references.md section 2.5: 40 nodes of a 2 h deadline on a
    speed-1.5 node, i.e. 10 800 s of speed-1 work each, cut at random points into 2 to 5
    jobs, then jobs shortened by a few seconds): the optimum is 40 by construction (the
    cut nodes hold the jobs; the total still needs 40). Durations are not whole seconds
    at resolution 0.5 s; the sizing proves 40 and its plan meets the deadline on the true
    durations."""
    rng = np.random.default_rng(7)
    work = 10_800.0
    jobs: list[float] = []
    for _ in range(40):
        cuts = np.sort(rng.uniform(60.0, work - 60.0, int(rng.integers(1, 5))))
        jobs.extend(np.diff(np.concatenate(([0.0], cuts, [work]))).tolist())
    d = np.array(jobs) - rng.uniform(0.0, 3.0, len(jobs))
    r = size(d, 7200.0, Node("n", speed=1.5), time_budget=5.0, resolution=0.5)
    assert r.nodes_needed == r.nodes_lower_bound == 40 and r.proven_optimal
    check_plan(r, d.tolist(), 1.5, 7200.0)


def test_progress_and_cancel() -> None:
    """Progress reports narrow the interval monotonically; a cancel check that says stop
    ends an open search with stop_reason 'cancelled' and a valid plan (contract)."""
    rng = np.random.default_rng(5)
    a = rng.integers(380, 491, 200)
    b = rng.integers(250, 1 + (1000 - a) // 2)
    d = np.concatenate([a, b, 1000 - a - b]).astype(float)
    seen: list[SizingProgress] = []
    r = size(d, 1000.0, time_budget=3.0, progress=seen.append, should_stop=lambda: True)
    assert seen
    ups = [p.nodes_needed for p in seen]
    lows = [p.nodes_lower_bound for p in seen]
    assert ups == sorted(ups, reverse=True) and lows == sorted(lows)
    assert r.proven_optimal or r.stop_reason == "cancelled"
    check_plan(r, d, 1.0, 1000.0)


def test_cli_size(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``spanwright size FILE --json`` prints the sizing result; bad input exits 2 naming
    the job (contract, 'Command line')."""
    body = {
        "jobs": [{"id": f"ep5_sh{k:03d}", "duration": 1200 + 100 * k} for k in range(12)],
        "deadline": 3600,
        "node_hour_cost": 1.8,
    }
    f = tmp_path / "sizing.json"
    f.write_text(json.dumps(body))
    assert cli_main(["size", str(f), "--json", "--time-budget", "1"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["nodes_needed"] >= out["nodes_lower_bound"] >= 1
    assert len(out["plan"]) == out["nodes_needed"] and out["billing"] == "second"
    assert cli_main(["size", str(f)]) == 0
    assert "nodes needed" in capsys.readouterr().out
    body["deadline"] = 1500
    f.write_text(json.dumps(body))
    assert cli_main(["size", str(f)]) == 2
    assert "ep5_sh011" in capsys.readouterr().err


@pytest.mark.parametrize("seed", range(6))
def test_whole_second_jobs_at_a_fine_resolution_are_sized_exactly(seed: int) -> None:
    """Whole-second durations that fill nodes to the second, at a resolution of 0.0136 s
    (which no whole second is a multiple of): the answer is the fewest bins found by
    brute force over subsets in integers (tests/workers/test_binpacking.py), proven, as at
    a resolution of 1 s. Planted: triplets summing to the deadline exactly (Falkenauer
    1996), shuffled."""
    rng = np.random.default_rng(seed)
    cap = int(rng.integers(200, 400))
    items: list[int] = []
    for _ in range(4):
        a = int(rng.integers(cap // 4, cap // 2))
        b = int(rng.integers(cap // 4, cap - a - cap // 4))
        items += [a, b, cap - a - b]
    rng.shuffle(items)
    want = brute_force_bins(items, cap)
    got = size(np.array(items, dtype=np.float64), float(cap), time_budget=2.0, resolution=0.0136)
    assert got.nodes_needed == want
    assert got.proven_optimal
