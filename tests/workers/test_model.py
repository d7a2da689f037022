"""Validation of batches: every bad input is refused with a pointer to the bad field."""

from __future__ import annotations

import math
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service.problems import json_pointer
from service.reading import read_columns, read_instance
from workers.planning import InvalidInstance


def pointers(body: dict) -> list[str]:
    with pytest.raises(InvalidInstance) as err:
        read_instance(body)
    return [json_pointer(i.path) for i in err.value.issues]


def job(i: int, d: object = 10) -> dict:
    return {"id": f"j{i}", "duration": d}


@pytest.mark.parametrize(
    ("body", "pointer"),
    [
        ({"jobs": [], "node_count": 2}, "/jobs"),
        ({"node_count": 2}, "/jobs"),
        ({"jobs": [job(0, -1)], "node_count": 2}, "/jobs/0/duration"),
        ({"jobs": [job(0, math.nan)], "node_count": 2}, "/jobs/0/duration"),
        ({"jobs": [job(0, math.inf)], "node_count": 2}, "/jobs/0/duration"),
        ({"jobs": [job(0, "10")], "node_count": 2}, "/jobs/0/duration"),
        ({"jobs": [job(0, True)], "node_count": 2}, "/jobs/0/duration"),
        ({"jobs": [{"id": "a"}], "node_count": 2}, "/jobs/0/duration"),
        ({"jobs": [job(0), job(0)], "node_count": 2}, "/jobs/1/id"),
        ({"jobs": [job(0)], "node_count": 0}, "/node_count"),
        ({"jobs": [job(0)], "node_count": 1.5}, "/node_count"),
        ({"jobs": [job(0)]}, "/node_count"),
        ({"jobs": [job(0)], "node_count": 2, "nodes": [{"id": "x"}]}, "/node_count"),
        ({"jobs": [job(0)], "nodes": [{"id": "x", "speed": 0}]}, "/nodes/0/speed"),
        ({"jobs": [job(0)], "nodes": [{"id": "x"}, {"id": "x"}]}, "/nodes/1/id"),
        ({"jobs": [{"id": "a\u0007b", "duration": 1}], "node_count": 1}, "/jobs/0/id"),
        ({"jobs": [{"id": "", "duration": 1}], "node_count": 1}, "/jobs/0/id"),
        ({"jobs": [job(0)], "node_count": 1, "deadline": -5}, "/deadline"),
        ({"jobs": [job(0)], "node_count": 1, "resolution": 0}, "/resolution"),
    ],
)
def test_bad_input_names_the_field(body: dict, pointer: str) -> None:
    """Each malformed batch raises InvalidInstance whose issues point (RFC 6901) at the field."""
    assert pointer in pointers(body)


def test_all_problems_reported_together() -> None:
    """A batch with several faults lists all of them, not only the first."""
    got = pointers({"jobs": [job(0, -1), job(1, "x"), job(1)], "node_count": 0})
    assert {"/jobs/0/duration", "/jobs/1/duration", "/jobs/2/id", "/node_count"} <= set(got)


def test_good_request_round_trips() -> None:
    """A valid body keeps ids, durations, groups and the deadline as given."""
    inst = read_instance(
        {
            "jobs": [{"id": "sh010_f0001", "duration": 1840.5, "group": "sh010"}],
            "node_count": 3,
            "deadline": 28800,
        }
    )
    assert inst.job_ids == ("sh010_f0001",) and inst.durations.tolist() == [1840.5]
    assert inst.m == 3 and inst.deadline == 28800 and inst.groups == ("sh010",)
    assert inst.identical


def test_unicode_ids_are_accepted() -> None:
    """Printable unicode in ids is fine (studios name shots in many scripts)."""
    inst = read_instance({"jobs": [{"id": "場面_07", "duration": 1}], "node_count": 1})
    assert inst.job_ids == ("場面_07",)


def _outcome(build: Any) -> Any:
    """What a reader makes of a body: the instance's fields, or the issues it raises."""
    try:
        inst = build()
    except InvalidInstance as exc:
        return ("invalid", exc.detail, [(json_pointer(i.path), i.detail) for i in exc.issues])
    return (
        inst.job_ids,
        inst.durations.tolist(),
        inst.nodes,
        inst.groups,
        inst.deadline,
        inst.resolution,
    )


_ids = st.one_of(
    st.text(max_size=4),
    st.sampled_from(["a", "a", "b\u0007", "x" * 201, "場面"]),
    st.integers(0, 3),
)
_durations = st.one_of(
    st.integers(0, 10**4),
    st.floats(-5, 1e4),
    st.sampled_from([math.inf, math.nan, -1.0]),
)
_envelopes = st.fixed_dictionaries(
    {},
    optional={
        "node_count": st.one_of(st.integers(-1, 4), st.sampled_from([1.5, "2", True])),
        "nodes": st.lists(
            st.fixed_dictionaries(
                {"id": st.sampled_from(["n1", "n2", ""])},
                optional={"speed": st.sampled_from([1.0, 2.0, 0.0]), "free_at": st.just(5.0)},
            ),
            max_size=3,
        ),
        "deadline": st.sampled_from([100.0, -5.0, math.inf]),
        "resolution": st.sampled_from([1.0, 0.0, 0.5]),
    },
)


@settings(max_examples=300, deadline=None)
@given(
    st.lists(st.tuples(_ids, _durations, st.one_of(st.none(), st.text(max_size=2))), max_size=5),
    _envelopes,
)
def test_columns_read_exactly_like_the_request(
    jobs: list[tuple[Any, Any, Any]], envelope: dict[str, Any]
) -> None:
    """``reading.read_columns`` gives the instance, or the very issues (pointers and
    messages, in order), that ``reading.read_instance`` gives for the same body with its
    jobs written out as objects: the per-job reader is the reference, on random columns
    with bad ids (empty, too long, control characters, duplicates, not strings), bad
    durations (negative, NaN, infinite) and bad node lists, counts, deadlines."""
    ids = [j[0] for j in jobs]
    durations = [j[1] for j in jobs]
    groups = [j[2] for j in jobs]
    objects: list[dict[str, Any]] = [
        {"id": i, "duration": d, **({"group": g} if g is not None else {})}
        for i, d, g in zip(ids, durations, groups, strict=True)
    ]
    body = {**envelope, "jobs": objects}
    want = _outcome(lambda: read_instance(body))
    got = _outcome(lambda: read_columns(envelope, ids, durations, groups))
    assert got == want
