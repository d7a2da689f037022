"""Shape validation of request bodies (marshmallow 4), before the core's semantic checks."""

from __future__ import annotations

import json
from typing import Any

import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from marshmallow import ValidationError

from service.problems import LimitExceeded, json_pointer
from service.reading import read_instance
from service.schemas import JobList, JobSchema, load_plan_request, messages_to_issues
from service.settings import Settings
from tests.service.plan_verdicts import envelopes, verdict
from workers.planning.errors import InvalidInstance

S = Settings(max_jobs=10, max_nodes=4, max_time_budget=3.0, default_time_budget=1.0)


def pointers(body: Any) -> set[str]:
    with pytest.raises(InvalidInstance) as err:
        load_plan_request(body, S)
    return {json_pointer(i.path) for i in err.value.issues}


def test_unknown_fields_are_refused_with_pointers() -> None:
    """Unknown members anywhere are errors (additionalProperties: false), as RFC 6901 pointers."""
    body = {
        "jobs": [{"id": "a", "duration": 1, "colour": "red"}],
        "node_count": 2,
        "priority": 1,
    }
    assert pointers(body) == {"/jobs/0/colour", "/priority"}


@pytest.mark.parametrize(
    ("job", "where"),
    [
        ({"id": "a", "duration": True}, "/jobs/0/duration"),
        ({"id": "a", "duration": "60"}, "/jobs/0/duration"),
        ({"id": "a", "duration": -1}, "/jobs/0/duration"),
        ({"id": "a", "duration": float("inf")}, "/jobs/0/duration"),
        ({"id": "", "duration": 1}, "/jobs/0/id"),
        ({"id": 7, "duration": 1}, "/jobs/0/id"),
        ({"id": "a", "duration": 1, "requires": "gpu"}, "/jobs/0/requires"),
        ({"id": "a"}, "/jobs/0/duration"),
    ],
)
def test_wrong_types_and_ranges(job: dict[str, Any], where: str) -> None:
    """Booleans and strings are not numbers, durations are finite and >= 0, ids non-empty."""
    assert where in pointers({"jobs": [job], "node_count": 1})


def test_integral_floats_are_integers() -> None:
    """JSON has one number type: ``2.0`` is the integer 2 (JSON Schema says so), ``2.5`` is not."""
    ok = load_plan_request({"jobs": [{"id": "a", "duration": 1}], "node_count": 2.0}, S)
    assert ok["node_count"] == 2 and isinstance(ok["node_count"], int)
    for bad in (2.5, "2", True):
        assert "/node_count" in pointers({"jobs": [{"id": "a", "duration": 1}], "node_count": bad})


def test_nodes_or_node_count_not_both() -> None:
    """Exactly one of ``nodes`` and ``node_count`` (the contract)."""
    both = {"jobs": [{"id": "a", "duration": 1}], "node_count": 1, "nodes": [{"id": "n"}]}
    assert "/node_count" in pointers(both)
    assert "/node_count" in pointers({"jobs": [{"id": "a", "duration": 1}]})


def test_limits_are_their_own_problem() -> None:
    """Jobs per batch, nodes and the time-budget ceiling are limits of the deployment."""
    body = {
        "jobs": [{"id": str(i), "duration": 1} for i in range(11)],
        "node_count": 5,
        "time_budget": 4,
    }
    with pytest.raises(LimitExceeded) as err:
        load_plan_request(body, S)
    assert {json_pointer(i.path) for i in err.value.issues} == {
        "/jobs",
        "/node_count",
        "/time_budget",
    }
    assert err.value.status == 422


def test_defaults_filled_in() -> None:
    """A body without method or time budget gets the service's defaults."""
    out = load_plan_request({"jobs": [{"id": "a", "duration": 1}], "node_count": 1}, S)
    assert out["method"] == "longest_first"
    assert out["time_budget"] == S.default_time_budget


def test_pointer_escaping() -> None:
    """RFC 6901 section 3: '~' is written '~0' and '/' is written '~1' in a reference token."""
    issues = messages_to_issues({"a/b": ["x"], "c~d": {"_schema": ["y"]}})
    assert {json_pointer(i.path) for i in issues} == {"/a~1b", "/c~0d"}


_values = st.one_of(
    st.none(),
    st.booleans(),
    st.integers(-5, 5),
    st.floats(allow_nan=True, allow_infinity=True),
    st.text(max_size=3),
    st.lists(st.one_of(st.text(max_size=2), st.integers()), max_size=2),
)
_jobs = st.lists(
    st.one_of(
        st.dictionaries(
            st.sampled_from(["id", "duration", "group", "requires", "duration_p90", "x"]),
            _values,
            max_size=5,
        ),
        st.fixed_dictionaries({"id": st.text(max_size=3), "duration": _values}),
        _values,
    ),
    max_size=4,
)


@settings(max_examples=300, deadline=None)
@given(_jobs)
def test_fast_job_list_agrees_with_the_reference_schema(jobs: list[Any]) -> None:
    """The fast job-list field gives exactly marshmallow's ``List(Nested(JobSchema))`` verdict.

    Reference: marshmallow's own nested-schema validation of the same documented schema.
    """
    from marshmallow import Schema, fields, validate

    class Reference(Schema):
        jobs = fields.List(fields.Nested(JobSchema), required=True, validate=validate.Length(min=1))

    class Fast(Schema):
        jobs = JobList(required=True)

    def verdict(schema: Schema) -> Any:
        try:
            schema.load({"jobs": jobs})
        except ValidationError as exc:
            return json.dumps(exc.messages, sort_keys=True, default=str)
        return None

    assert verdict(Fast()) == verdict(Reference())


_plain_jobs = st.lists(
    st.one_of(
        st.fixed_dictionaries(
            {
                "id": st.one_of(st.text(min_size=1, max_size=3), st.sampled_from(["a", "a\n"])),
                "duration": st.one_of(st.integers(0, 10**4), st.floats(0, 1e4)),
            },
            optional={"group": st.one_of(st.text(max_size=2), st.none())},
        ),
        st.fixed_dictionaries({"id": st.just("x"), "duration": _values}),
        st.fixed_dictionaries({"id": _values, "duration": st.just(1)}),
        _values,
    ),
    max_size=4,
)
_envelope = envelopes(5)


@settings(max_examples=400, deadline=None)
@given(_plain_jobs, _envelope)
def test_read_once_in_columns_agrees_with_the_per_job_path(
    jobs: list[Any], envelope: dict[str, Any]
) -> None:
    """``read_plan`` (jobs read in columns when they are all plain) gives exactly the verdict
    of the per-job path it replaces, marshmallow's ``load_plan_request`` then the core's
    ``reading.read_instance``: the same loaded body, or the same problem with the same
    issues (pointers and messages, in order). When it stores a worker's copy, that copy
    builds the very instance ``read_instance`` builds from the body."""
    from service import workform
    from service.routes.plans import read_plan

    body = {**envelope, "jobs": jobs}

    def reference() -> Any:
        data = load_plan_request(body, S)
        read_instance(data)
        return data

    got = verdict(lambda: read_plan(body, S).data)
    assert got == verdict(reference)
    # the form stored for the worker reads back to the per-job path's instance
    work = read_plan(body, S).stored_work() if got[0] == "ok" else None
    copies = [] if work is None else [workform.decode(work).core]
    pairs = [(inst, read_instance(body)) for inst in copies]
    assert all(
        inst.job_ids == ref.job_ids
        and inst.groups == ref.groups
        and inst.durations.tolist() == ref.durations.tolist()
        and (inst.nodes, inst.deadline, inst.resolution)
        == (ref.nodes, ref.deadline, ref.resolution)
        for inst, ref in pairs
    )


def test_the_worker_gets_the_checked_objects_of_every_plan() -> None:
    """Jobs that are all plain ``{id, duration[, group]}`` objects are stored for the
    worker in columns, a job with another field (``requires``) as the objects the checks
    made; either reads back to the body's own ids, durations, groups, tags and nodes, in
    order (checked against the body itself)."""
    from service import workform
    from service.routes.plans import read_plan

    jobs = [{"id": "sh010_f1", "duration": 1840}, {"id": "sh010_f2", "duration": 2.5, "group": "g"}]
    work = read_plan({"jobs": jobs, "node_count": 2}, S).stored_work()
    assert work is not None
    assert b'["sh010_f1","sh010_f2"]\n[null,"g"]\n' in work  # the jobs in columns
    inst = workform.decode(work).core
    assert inst.job_ids == ("sh010_f1", "sh010_f2") and inst.durations.tolist() == [1840.0, 2.5]
    assert inst.groups == (None, "g") and inst.m == 2
    tagged = [{"id": "a", "duration": 1, "requires": ["gpu"]}]
    nodes = [{"id": "n", "provides": ["gpu"], "speed": 2}]
    got = workform.decode(read_plan({"jobs": tagged, "nodes": nodes}, S).stored_work() or b"")
    inst = got.core
    assert inst.job_ids == ("a",) and inst.requires == (frozenset({"gpu"}),)
    assert [(n.id, n.speed, n.provides) for n in inst.nodes] == [("n", 2.0, frozenset({"gpu"}))]
