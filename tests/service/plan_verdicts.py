"""Shared by the property tests that compare a fast reading path with the per-job path it
replaces (``test_schemas``, ``test_jobscan``): the envelope fields a plan body is drawn
with, and what a reading path's outcome is compared as."""

from __future__ import annotations

from collections.abc import Callable
from typing import Any

from hypothesis import strategies as st

from service.problems import LimitExceeded, json_pointer
from workers.planning.errors import InvalidInstance


def envelopes(most_nodes: int, **more: st.SearchStrategy[Any]) -> st.SearchStrategy[Any]:
    """Plan-body envelopes (every field but ``jobs``), each field present or not, valid or
    not: a ``node_count`` up to ``most_nodes`` or of a wrong type, node ids, methods, time
    budgets and deadlines in and out of range, a name, an unknown field; ``more`` adds
    fields (before the name and the unknown field)."""
    return st.fixed_dictionaries(
        {},
        optional={
            "node_count": st.one_of(
                st.integers(0, most_nodes), st.sampled_from([2.0, 2.5, "2", True])
            ),
            "nodes": st.lists(
                st.fixed_dictionaries({"id": st.sampled_from(["n", "m", ""])}), max_size=2
            ),
            "method": st.sampled_from(["longest_first", "list", "bogus"]),
            "time_budget": st.sampled_from([0.5, 9.0, -1.0]),
            "deadline": st.sampled_from([100.0, 0.0, None]),
            **more,
            "name": st.text(max_size=2),
            "colour": st.just("red"),
        },
    )


def verdict(run: Callable[[], Any]) -> Any:
    """``("ok", what run returns)``, or the problem it raises: its class name, detail and
    issues (pointers and messages, in order)."""
    try:
        data = run()
    except (InvalidInstance, LimitExceeded) as exc:
        return (
            type(exc).__name__,
            exc.detail,
            [(json_pointer(i.path), i.detail) for i in exc.issues],
        )
    return ("ok", data)
