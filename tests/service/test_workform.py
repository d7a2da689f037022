"""The stored canonical form (``service/workform.py``; issue 15: "the stored request is the
canonical validated form, so the worker never parses again").

Two checks: the objects the edge's checks made come back from their stored form equal,
field by field (the reference is the objects themselves, compared here by a walk of
their fields, not by the encoder), and a worker solves every kind of body with every
request reader of ``service/reading`` replaced by a test double that fails.
"""

from __future__ import annotations

import dataclasses
import json
import math
import time
from collections.abc import Callable
from fractions import Fraction
from typing import Any

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st

from service import reading, workform
from service.demo import DEMO_DIR
from service.routes.plans import read_plan
from service.routes.sizings import read_sizing
from service.settings import Settings
from tests.service.test_rentals import RENTAL, TAGGED
from workers.planning.model import Node, identical_nodes

S = Settings(max_jobs=500, max_nodes=50, max_time_budget=5.0, default_time_budget=0.5)

#: jobs of an invented episode with tags, p90 estimates and a farm of mixed nodes
FARM: dict[str, Any] = {
    "name": "ep07 fx: tagged caches",
    "jobs": [
        {"id": "ep07_sh010_fx", "duration": 1800, "requires": ["gpu"], "duration_p90": 2400},
        {"id": "ep07_sh020_fx", "duration": 950.5, "group": "ep07_sq01"},
        {"id": "ep07_sh030_fx", "duration": 600, "duration_p90": 600},
    ],
    "nodes": [
        {"id": "gpu-01", "provides": ["gpu"], "speed": 1.5},
        {"id": "cpu-01", "free_at": 120},
    ],
    "deadline": 4000,
    "confidence_samples": 200,
    "method": "exact",
}
#: plain jobs under a licence limit, on the clock
PLAIN_STAGED: dict[str, Any] = {
    "jobs": [{"id": f"ep07_sh{i:03d}_comp", "duration": 300 + 41 * i} for i in range(6)],
    "nodes": [{"id": "node-01", "slots": 2}, {"id": "node-02"}],
    "limits": {"comp_licence": 2},
    "start_at": "2026-12-03T20:00:00+01:00",
    "deadline_at": "2026-12-03T21:30:00+01:00",
    "method": "exact",
}
SIZING: dict[str, Any] = {
    "jobs": [{"id": f"ep07_tx{i:02d}", "duration": 200 + 37 * i} for i in range(9)],
    "deadline": 900,
    "node_hour_cost": 1.25,
}


def same(a: Any, b: Any) -> bool:
    """Equal values, dataclasses field by field, arrays element by element with their
    dtype, floats bit for bit (a signed zero and a NaN count)."""
    if dataclasses.is_dataclass(a) and not isinstance(a, type):
        return type(a) is type(b) and all(
            same(getattr(a, f.name), getattr(b, f.name)) for f in dataclasses.fields(a)
        )
    if isinstance(a, np.ndarray):
        return (
            isinstance(b, np.ndarray)
            and a.dtype == b.dtype
            and a.shape == b.shape
            and a.tobytes() == b.tobytes()
        )
    if isinstance(a, float):
        return (isinstance(b, float) and (a, math.copysign(1, a)) == (b, math.copysign(1, b))) or (
            math.isnan(a) and isinstance(b, float) and math.isnan(b)
        )
    if isinstance(a, tuple | list):
        return type(a) is type(b) and len(a) == len(b) and all(map(same, a, b))
    if isinstance(a, dict):
        return isinstance(b, dict) and a.keys() == b.keys() and all(same(a[k], b[k]) for k in a)
    return type(a) is type(b) and bool(a == b)


def stage_graph() -> dict[str, Any]:
    body: dict[str, Any] = json.loads(
        (DEMO_DIR / "quillfern_vale_ep04_stage_graph.json").read_text()
    )
    return body


@pytest.mark.parametrize(
    ("read", "body"),
    [
        (read_plan, FARM),
        (read_plan, PLAIN_STAGED),
        (read_plan, {"jobs": [{"id": "a", "duration": 5}], "node_count": 1}),
        (read_plan, "stage graph"),
        (read_sizing, SIZING),
        (read_sizing, {k: v for k, v in RENTAL.items() if k != "time_budget"}),
        (read_sizing, TAGGED),
    ],
    ids=["farm", "plain-staged", "plain", "stage-graph", "sizing", "rental", "frontier"],
)
def test_the_checked_objects_come_back_equal(read: Callable[..., Any], body: Any) -> None:
    """What the checks made (the problem or sizing arguments, what to simulate, the clock
    block, the grid) reads back from its stored form equal to itself."""
    body = stage_graph() if body == "stage graph" else body
    checked = read(body, S)
    made = checked.work
    if checked.columns is not None:  # a plan of plain jobs: its checked problem, whole
        made = dataclasses.replace(made, core=read_plan(body, Settings()).problem)
        made = dataclasses.replace(made, plain=None, stages=None)
    back = workform.decode(checked.stored_work())
    assert same(back, made)


#: nodes of any name, speed, tags and start (the request's ranges are the reader's concern)
NODES = st.builds(
    Node,
    st.text(max_size=4),
    st.floats(allow_nan=False),
    st.frozensets(st.text(max_size=3), max_size=2),
    st.floats(allow_nan=False),
)


@settings(max_examples=150, deadline=None)
@given(
    st.recursive(
        st.one_of(
            st.none(),
            st.booleans(),
            st.integers(),
            st.floats(),
            st.text(max_size=5),
            st.fractions(),
        ),
        lambda inner: st.one_of(
            st.lists(inner, max_size=4),
            st.lists(inner, max_size=4).map(tuple),
            st.frozensets(st.text(max_size=3), max_size=3),
            st.lists(st.frozensets(st.text(max_size=3), max_size=2), max_size=4).map(tuple),
            st.lists(NODES, max_size=3).map(tuple),
            st.integers(1, 12).map(identical_nodes),
            st.dictionaries(st.text(max_size=3), inner, max_size=3),
            st.lists(st.floats(), max_size=4).map(lambda x: np.asarray(x, dtype=np.float64)),
            st.lists(st.integers(-(2**62), 2**62), max_size=4).map(
                lambda x: np.asarray(x, dtype=np.int64)
            ),
        ),
        max_leaves=12,
    )
)
def test_values_come_back_exactly(value: Any) -> None:
    """Any value of the kinds the core's request objects hold (JSON's own, tuples,
    frozensets of tags and tuples of them, nodes, mappings, float64 and int64 arrays,
    fractions, non-finite floats) comes back equal and of the same type: the Python value
    given is the reference."""
    stored = workform.encode(workform.Work(value))
    got = workform.decode(stored).core
    assert same(got, value) and (not isinstance(value, Fraction) or got == value)


def test_the_worker_reads_no_request_again(app: Any, monkeypatch: pytest.MonkeyPatch) -> None:
    """With every reader of ``service/reading`` replaced by a test double that fails where
    the worker looks them up (the module's attributes; the routes hold their own names),
    a worker still solves a farm plan with spread, a plain plan under a limit on the
    clock, a stage graph, a sizing and a stage graph's re-plan: it builds them from the
    stored objects alone."""

    def refuse(*a: Any, **k: Any) -> Any:
        raise AssertionError("the worker read a request again")

    for name in (
        "read_columns",
        "with_stages",
        "read_spread",
        "read_plan_body",
        "read_problem",
        "read_events",
        "read_sizing_request",
        "read_instance",
    ):
        monkeypatch.setattr(reading, name, refuse)
    c = app.test_client()
    sent = [("/v1/plans", FARM), ("/v1/plans", PLAIN_STAGED), ("/v1/plans", stage_graph())]
    sent.append(("/v1/sizings", SIZING))
    docs = [finished(c, c.post(p, json={**b, "time_budget": 0.3})) for p, b in sent]
    events = {"elapsed": 600, "time_budget": 0.3}
    docs.append(finished(c, c.post(f"/v1/plans/{docs[2]['id']}/replan", json=events)))
    assert [d["status"] for d in docs] == ["done"] * 5, docs
    assert docs[1]["result"]["clock"]["start_at"] == "2026-12-03T20:00:00+01:00"


def finished(c: Any, answer: Any) -> dict[str, Any]:
    """The record of a 202 answer once it is finished (polled for up to 20 s)."""
    assert answer.status_code == 202, answer.get_json()
    loc, end = answer.headers["Location"], time.monotonic() + 20
    doc: dict[str, Any] = answer.get_json()
    while doc["status"] in ("queued", "solving") and time.monotonic() < end:
        time.sleep(0.02)
        doc = c.get(loc).get_json()
    return doc


def test_records_stored_by_an_older_api_still_run(idle_app: Any, drain: Callable[[], None]) -> None:
    """A record queued by an API before the stored form (its jobs as
    ``spanwright-columns/1``, or no copy at all: the raw body) is read by the worker as
    before and gets the same answer (makespan and clock) as one stored in the new form,
    which is the reference here (the search is deterministic)."""
    from service import payload

    store = idle_app.extensions["spanwright"].store
    c = idle_app.test_client()
    body = {**PLAIN_STAGED, "time_budget": 0.3}
    ids = [c.post("/v1/plans", json=body).get_json()["id"] for _ in range(3)]
    old_columns = payload.Columns(
        {k: v for k, v in body.items() if k != "jobs"},
        [j["id"] for j in body["jobs"]],
        np.asarray([j["duration"] for j in body["jobs"]], dtype=np.float64),
    )
    store.conn.set(store.key("plan", ids[1], "work"), bytes(payload.encode(old_columns)))
    store.conn.delete(store.key("plan", ids[2], "work"))  # the raw body only
    drain()
    docs = [c.get(f"/v1/plans/{rid}").get_json() for rid in ids]
    assert [d["status"] for d in docs] == ["done"] * 3, docs
    plans = [(d["result"]["makespan"], d["result"]["clock"]) for d in docs]
    assert plans[1] == plans[0] and plans[2] == plans[0]
