"""Real answers of the API are instances of the typed schemas of openapi/openapi.yaml.

Reference: the OpenAPI 3.1 document itself, read by openapi-schema-validator (JSON Schema
2020-12 with the OpenAPI formats), and RFC 9651 section 3.3.3 for the characters of an
``Idempotency-Key`` (a Structured Field string: ``%x20-21 / %x23-5B / %x5D-7E``).

"Typed" is checked strictly: the test's copy of the document closes every object schema
that lists ``properties`` and says nothing of others (``unevaluatedProperties: false``),
so a field that an answer carries and the contract does not declare fails here, anywhere
in the answer (the result, its certificate, search, stages, plan, curve, progress, lists).
Each answer is checked against the schema the contract gives for its operation, status
code and media type.
"""

from __future__ import annotations

import copy
import re
from collections.abc import Callable
from pathlib import Path
from typing import Any

import pytest
import yaml
from openapi_schema_validator import OAS31Validator

ROOT = Path(__file__).resolve().parents[2]
DOC: dict[str, Any] = yaml.safe_load((ROOT / "openapi" / "openapi.yaml").read_text("utf-8"))


def _closed(node: Any) -> Any:
    """A copy of a schema tree whose object schemas with ``properties`` allow no others."""
    if isinstance(node, list):
        return [_closed(v) for v in node]
    if not isinstance(node, dict):
        return node
    out = {k: _closed(v) for k, v in node.items()}
    if isinstance(node.get("properties"), dict) and not (
        {"additionalProperties", "unevaluatedProperties"} & node.keys()
    ):
        out["unevaluatedProperties"] = False
    return out


STRICT = {"components": _closed(copy.deepcopy(DOC["components"]))}


def _validator(schema: dict[str, Any]) -> OAS31Validator:
    return OAS31Validator({**STRICT, **schema}, format_checker=OAS31Validator.FORMAT_CHECKER)


def check(path: str, method: str, resp: Any) -> dict[str, Any]:
    """Validate ``resp`` against the contract's schema for its operation and status;
    returns the body."""
    op = DOC["paths"][path][method]
    declared = op["responses"][str(resp.status_code)]
    if "$ref" in declared:
        declared = DOC["components"]["responses"][declared["$ref"].rsplit("/", 1)[1]]
    schema = declared["content"][resp.mimetype]["schema"]
    body: dict[str, Any] = resp.get_json()
    errors = [f"{list(e.absolute_path)}: {e.message}" for e in _validator(schema).iter_errors(body)]
    assert errors == [], (path, method, resp.status_code, errors)
    return body


J = [{"id": f"shot{i:02d}", "duration": 10.1 * (i % 5 + 1)} for i in range(9)]
TAGGED = [dict(j, requires=["gpu"]) if i == 0 else j for i, j in enumerate(J)]
FARM = [{"id": "gpu-node", "speed": 1.5, "provides": ["gpu"]}, {"id": "cpu-node", "free_at": 3.3}]
STAGES = [
    {"id": "layout", "duration": 5.5},
    {"id": "light", "duration": 3.3, "after": ["layout"], "uses": ["lic"]},
    {"id": "comp", "duration": 2.2, "uses": ["lic"]},
]
CLOCK = {"start_at": "2026-12-04T02:00:00+01:00", "deadline_at": "2026-12-04T02:00:30+01:00"}

PLANS: dict[str, dict[str, Any]] = {
    "longest_first": {"jobs": J, "node_count": 3},
    "list_with_deadline": {"jobs": J, "node_count": 3, "method": "list", "deadline": 40},
    "exact_identical": {"jobs": J, "node_count": 4, "method": "exact", "time_budget": 0.3},
    "exact_farm": {"jobs": TAGGED, "nodes": FARM, "method": "exact", "time_budget": 0.3},
    "stage_graph_on_a_clock": {"jobs": STAGES, "node_count": 2, "limits": {"lic": 1}, **CLOCK},
    "confidence": {
        "jobs": J,
        "node_count": 3,
        "spread": 0.2,
        "confidence_samples": 50,
        "deadline": 60,
    },
}
SIZINGS: dict[str, dict[str, Any]] = {
    "node_count_with_confidence": {
        "jobs": J,
        "deadline": 60,
        "node_hour_cost": 1.8,
        "spread": 0.2,
        "confidence": 0.5,
        "confidence_samples": 50,
    },
    "rental": {
        "jobs": J,
        "deadline": 60,
        "kinds": [{"name": "fast", "hour_cost": 2, "speed": 2}, {"name": "slow", "hour_cost": 1}],
        "farm": [{"id": "own", "hour_cost": 0.5}],
        "time_budget": 0.3,
    },
    "stage_graph": {"jobs": STAGES, "limits": {"lic": 1}, "deadline": 20},
}


def _finished(client: Any, drain: Callable[[], None], kind: str, body: dict[str, Any]) -> Any:
    queued = client.post(f"/v1/{kind}", json=body)
    check(f"/v1/{kind}", "post", queued)
    assert queued.status_code == 202
    drain()
    return client.get(queued.headers["Location"])


@pytest.mark.parametrize("name", list(PLANS))
def test_plan_answers_are_typed(name: str, idle_app: Any, drain: Callable[[], None]) -> None:
    """A finished plan of each kind (identical nodes, a list plan with a deadline, the
    exact search, a farm with speeds, tags and a busy node, a stage graph on a clock,
    a confidence block) is a ``PlanStatus`` with every field declared."""
    client = idle_app.test_client()
    doc = check("/v1/plans/{id}", "get", _finished(client, drain, "plans", PLANS[name]))
    assert doc["status"] == "done" and doc["result"]["assignment"]


@pytest.mark.parametrize("name", list(SIZINGS))
def test_sizing_answers_are_typed(name: str, idle_app: Any, drain: Callable[[], None]) -> None:
    """A finished sizing of each shape (a node count with a confidence sizing, a rental,
    a stage graph) is a ``SizingStatus`` with every field declared."""
    client = idle_app.test_client()
    doc = check("/v1/sizings/{id}", "get", _finished(client, drain, "sizings", SIZINGS[name]))
    assert doc["status"] == "done" and doc["result"]["plan"]


def test_lists_replans_and_unfinished_records_are_typed(
    idle_app: Any, drain: Callable[[], None]
) -> None:
    """A queued record (no progress, no result), a cancelled one, a re-plan's result with
    its accounting, both lists and a problem document keep to the contract."""
    client = idle_app.test_client()
    queued = client.post("/v1/plans", json=PLANS["longest_first"])
    check("/v1/plans/{id}", "get", client.get(queued.headers["Location"]))
    check("/v1/plans/{id}", "delete", client.delete(queued.headers["Location"]))
    sizing = client.post("/v1/sizings", json=SIZINGS["stage_graph"])
    check("/v1/sizings/{id}", "get", client.get(sizing.headers["Location"]))

    done = _finished(client, drain, "plans", {"jobs": J, "nodes": FARM})
    plan = check("/v1/plans/{id}", "get", done)
    first = plan["result"]["assignment"][0]
    events = {
        "elapsed": 5,
        "running": [{"job": first["jobs"][0]["id"], "node": first["node"], "started_at": 0}],
        "lost_nodes": ["cpu-node"],
        "added_nodes": [{"id": "spare"}],
    }
    replan = client.post(f"/v1/plans/{plan['id']}/replan", json=events)
    accounted = check("/v1/plans/{id}/replan", "post", replan)
    assert accounted["replan"]["lost_nodes"] == ["cpu-node"]
    drain()
    again = check("/v1/plans/{id}", "get", client.get(replan.headers["Location"]))
    assert again["status"] == "done"

    drain()
    assert check("/v1/plans", "get", client.get("/v1/plans"))["items"]
    assert check("/v1/sizings", "get", client.get("/v1/sizings"))["items"]
    check("/v1/plans/{id}", "get", client.get("/v1/plans/" + "0" * 21))


def test_the_plan_request_is_one_typed_model() -> None:
    """A generator makes one request model of ``PlanRequest``: no ``oneOf``/``anyOf``/
    ``allOf`` at its top and a type (or a reference) for every field; "exactly one of
    ``nodes`` and ``node_count``" still holds for a JSON Schema validator."""
    req = DOC["components"]["schemas"]["PlanRequest"]
    assert {"oneOf", "anyOf", "allOf"} & req.keys() == set()
    assert [k for k, v in req["properties"].items() if not ({"type", "$ref"} & v.keys())] == []
    v = _validator({"$ref": "#/components/schemas/PlanRequest"})
    jobs = [{"id": "a", "duration": 1}]
    assert v.is_valid({"jobs": jobs, "node_count": 2})
    assert v.is_valid({"jobs": jobs, "nodes": [{"id": "n"}]})
    assert not v.is_valid({"jobs": jobs})
    assert not v.is_valid({"jobs": jobs, "node_count": 2, "nodes": [{"id": "n"}]})
    assert not v.is_valid({"jobs": jobs, "node_count": "2"})


#: RFC 9651 section 3.3.3: the characters of an sf-string other than the two escapes
SF_CHARS = "".join(chr(c) for c in [0x20, 0x21, *range(0x23, 0x5C), *range(0x5D, 0x7F)])
KEYS_OK = [
    '"8e03978e-40d5-43e8-bc93-6894a57f9324"',
    "8e03978e-40d5-43e8-bc93-6894a57f9324",
    "a",
    '" padded inside "',
    "  spaced outside  ",
    "x" * 255,
    '"' + "x" * 255 + '"',
    '"' + SF_CHARS[:255] + '"',
    SF_CHARS[1:256],
]
KEYS_BAD = ['""', '"', '"open', 'in"side', "back\\slash", "x" * 256, '"' + "x" * 256 + '"', "é"]


@pytest.mark.parametrize("key", KEYS_OK + KEYS_BAD)
def test_idempotency_key_pattern_is_what_the_service_takes(key: str, idle_app: Any) -> None:
    """The contract's pattern for ``Idempotency-Key`` admits a key exactly when the
    service takes it (a 202; anything else is a 400 ``bad-request``), and admits every
    RFC 9651 string of 1 to 255 characters."""
    param = DOC["components"]["parameters"]["IdempotencyKey"]
    assert param["name"] == "Idempotency-Key"
    pattern = param["schema"]["pattern"]
    resp = idle_app.test_client().post(
        "/v1/plans", json=PLANS["longest_first"], headers={"Idempotency-Key": key}
    )
    assert resp.status_code == (202 if key in KEYS_OK else 400)
    assert (re.search(pattern, key) is not None) == (key in KEYS_OK)
