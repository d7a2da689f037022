"""The result object's dict form is the contract's ``result`` (../shared/contract.md)."""

from __future__ import annotations

import json

import pytest

from workers.planning import Instance, solve

CONTRACT_KEYS = {
    "makespan", "lower_bound", "bound_source", "bounds", "gap", "proven_optimal", "method",
    "worst_case_ratio", "stop_reason", "solve_seconds", "deadline", "assignment",
}  # fmt: skip


def test_result_has_contract_fields() -> None:
    """Every field the contract names is present, JSON-serialisable, and consistent:
    gap = (makespan - lower_bound) / lower_bound, the optimum in [lower_bound, makespan]."""
    inst = Instance.build([7, 7, 6, 6, 5, 5, 4, 4, 4], 3, deadline=15)
    d = solve(inst, "longest_first").to_dict()
    assert d.keys() >= CONTRACT_KEYS
    json.dumps(d, allow_nan=False)
    assert d["gap"] == pytest.approx((d["makespan"] - d["lower_bound"]) / d["lower_bound"])
    assert d["bounds"][d["bound_source"]] == d["lower_bound"]
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
