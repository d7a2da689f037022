"""The one result family (issue 15, point 3): plans and sizings state value, bound, gap,
proven flag and stop reason through the same base, decided in exact arithmetic."""

from __future__ import annotations

from fractions import Fraction

from tests.bodies import size_body
from workers.planning import Instance, solve
from workers.planning.budget import StopReason
from workers.planning.certified import Certified


def test_lpt_worst_case_gap_is_exact() -> None:
    """Graham (1969): on m = 2 nodes the jobs 3, 3, 2, 2, 2 give LPT 7 against an optimum
    of 6 (3+3 | 2+2+2), the 4/3 - 1/(3m) worst case; the mean-load bound is 12 / 2 = 6, so
    the gap is exactly 1/6 and nothing is proven."""
    res = solve(Instance.build([3, 3, 2, 2, 2], 2), "longest_first")
    assert isinstance(res, Certified)
    assert res.exact_value == 7 and res.exact_lower_bound == 6
    assert res.gap == float(Fraction(1, 6))
    assert not res.proven_optimal
    assert res.stop_reason is StopReason.HEURISTIC


def test_sizing_with_a_forced_answer_is_proven() -> None:
    """Pigeonhole (common practice): three 60 s jobs and a 60 s deadline need three nodes
    and three suffice, so the sizing is proven with gap 0 through the same base."""
    body = {"jobs": [{"id": f"sh{k}", "duration": 60} for k in range(3)], "deadline": 60}
    res = size_body(body, time_budget=0.5)
    assert isinstance(res, Certified)
    assert (res.exact_value, res.exact_lower_bound) == (3, 3)
    assert res.proven_optimal and res.gap == 0.0
    assert res.to_dict()["gap"] == 0.0
    assert res.stop_reason is StopReason.PROVED_OPTIMAL
