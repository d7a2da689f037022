"""The result object's dict form is the contract's ``result`` (openapi/openapi.yaml);
expected values are worked by hand in each docstring or come from Python's json module."""

from __future__ import annotations

import json

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.planning import Instance, solve

CONTRACT_KEYS = {
    "makespan", "lower_bound", "bound_source", "bounds", "gap", "proven_optimal", "method",
    "worst_case_ratio", "stop_reason", "solve_seconds", "deadline", "assignment",
}  # fmt: skip


def test_result_has_contract_fields() -> None:
    """Every field the contract names is present and JSON-serialisable, with values worked
    by hand: jobs 7 7 6 6 5 5 4 4 4 on 3 nodes, longest first (Graham 1969): 7 | 7 | 6,
    then 6 on the third (12), 5 and 5 on the first two (12, 12), the three 4s one each:
    every node at 16. The mean load is 48 / 3 = 16 (McNaughton 1959), so the plan is
    optimal, gap 0; the deadline 15 is missed by 1 s and provably unreachable."""
    inst = Instance.build([7, 7, 6, 6, 5, 5, 4, 4, 4], 3, deadline=15)
    d = solve(inst, "longest_first").to_dict()
    assert d.keys() >= CONTRACT_KEYS
    json.dumps(d, allow_nan=False)
    assert d["makespan"] == d["lower_bound"] == 16 and d["gap"] == 0 and d["proven_optimal"]
    assert d["bound_source"] == "mean_load" and d["bounds"]["mean_load"] == 16
    assert [a["load"] for a in d["assignment"]] == [16, 16, 16]
    assert d["deadline"] == {
        "deadline": 15,
        "met": False,
        "slack": -1,
        "provably_unreachable": True,
    }
    assert d["assignment"][0].keys() == {"node", "load", "jobs"}
    assert d["assignment"][0]["jobs"][0].keys() == {"id", "start", "end"}


def test_deadline_block() -> None:
    """Deadline: met iff makespan <= deadline; slack = deadline - makespan; provably
    unreachable only when the lower bound already exceeds it (contract)."""
    inst = Instance.build([10, 10, 10], 2, deadline=15)
    d = solve(inst, "longest_first").to_dict()["deadline"]
    assert d == {"deadline": 15, "met": False, "slack": -5, "provably_unreachable": True}
    d = solve(Instance.build([10, 10, 10], 2, deadline=25), "list").to_dict()["deadline"]
    assert d == {"deadline": 25, "met": True, "slack": 5, "provably_unreachable": False}


def test_zero_work_batch() -> None:
    """A batch of zero-length jobs has makespan 0, bound 0, gap 0 and is optimal."""
    d = solve(Instance.build([0.0, 0.0], 2), "longest_first").to_dict()
    assert d["makespan"] == 0 and d["gap"] == 0 and d["proven_optimal"]


# positive: zero-length jobs are left out here, they are not about writing JSON
_times = st.one_of(
    st.integers(1, 10**6),  # whole seconds: the common case, written from ints
    st.floats(1e-3, 1e6),
    st.sampled_from([0.1, 1e15, 2.0**53, 9999999999999998.0, 1e16, 3e17]),
)


@settings(max_examples=150, deadline=None)
@given(
    st.lists(_times, min_size=1, max_size=60),
    st.integers(1, 7),
    st.sampled_from(["longest_first", "list"]),
    st.text(max_size=4),
)
def test_json_text_is_the_dict_written_by_json_dumps(
    durations: list[float], m: int, method: str, suffix: str
) -> None:
    """``to_json()`` is byte for byte ``json.dumps(to_dict())`` (compact separators), and so
    parses back to the same dict: checked against the standard library's encoder on random
    batches, whole and fractional times, times past 1e16 (where float repr turns to exponent
    notation), and ids with quotes, backslashes and non-ASCII characters."""
    ids = [f'j{i}"\\\u00e9{suffix}' for i in range(len(durations))]
    # a resolution of 1e4 s keeps times up to 3e17 s within the 2**53 ticks a batch may span
    inst = Instance.build(durations, m, job_ids=ids, deadline=5000, resolution=1e4)
    res = solve(inst, method)
    reference = json.dumps(res.to_dict(), allow_nan=False, separators=(",", ":"))
    assert res.to_json() == reference
    extra = {"confidence": {"samples": 10}}
    assert json.loads(res.to_json(extra)) == {**res.to_dict(), **extra}


def test_json_text_refuses_non_finite_times_like_json_dumps() -> None:
    """A non-finite time is not JSON: ``to_json`` raises ValueError, as ``json.dumps(...,
    allow_nan=False)`` does (Python's json module is the reference)."""
    res = solve(Instance.build([1.0, 2.0], 1), "longest_first")
    res.schedule.start[0] = float("inf")
    with pytest.raises(ValueError):
        json.dumps(res.schedule.to_assignment(), allow_nan=False)
    with pytest.raises(ValueError):
        res.schedule.assignment_json()


@settings(max_examples=150, deadline=None)
@given(
    st.lists(st.floats(0.001, 5000.0), min_size=1, max_size=30),
    st.lists(st.tuples(st.sampled_from([1.0, 1.5, 2.0, 3.0]), st.floats(0.0, 99.9)), max_size=4),
    st.integers(1, 4),
    st.sampled_from([0.001, 0.1, 0.25, 1.0, 5.0]),
    st.sampled_from(["longest_first", "list"]),
)
def test_the_grid_written_from_arrays_is_the_parsed_document_rounded(
    durations: list[float],
    farm: list[tuple[float, float]],
    m: int,
    resolution: float,
    method: str,
) -> None:
    """The worker writes a plan's times on the grid of its resolution straight from the
    arrays (``PlanResult.to_json(grid=...)``); that text parses to exactly the document
    ``rounding.round_plan`` makes of the plan's JSON (whose rules tests/service/
    test_rounding.py checks against exact fractions), keys in the same order."""
    from workers.planning import rounding
    from workers.planning.model import Node

    nodes: int | list[Node] = m
    if farm:
        nodes = [Node(f"n{k}", speed=s, free_at=f) for k, (s, f) in enumerate(farm)]
    inst = Instance.build(durations, nodes, resolution=resolution, deadline=sum(durations) / 3)
    res = solve(inst, method)
    grid = rounding.grid_decimals(resolution)
    slow = rounding.round_plan(json.loads(res.to_json()), grid, res.exact_value, copy=False)
    fast = json.loads(res.to_json(grid=grid))
    assert json.dumps(fast) == json.dumps(slow)
