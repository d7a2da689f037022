"""``POST /v1/plans/{id}/replan`` and the ``confidence`` block, through HTTP (fakeredis).

Checks: every job of the original batch is accounted for exactly once (finished, kept
running on its node, or planned again), a lost node's jobs all move (common practice for
re-planning: nothing lost, nothing duplicated); and with zero estimate spread the
deadline probability is exactly 1 or 0 (the contract's "Estimate spread" section).
"""

from __future__ import annotations

import time
from typing import Any


def poll(client: Any, loc: str, timeout: float = 15.0) -> dict[str, Any]:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        doc = client.get(loc).get_json()
        if doc["status"] in ("done", "failed", "cancelled"):
            return doc
        time.sleep(0.02)
    raise AssertionError(f"{loc} did not finish")


def batch() -> dict[str, Any]:
    return {
        "jobs": [{"id": f"r{i:02d}", "duration": 300 + 40 * (i % 7)} for i in range(24)],
        "nodes": [{"id": f"blade-{k}"} for k in range(4)],
        "method": "longest_first",
    }


def test_replan_accounts_for_every_job(client: Any) -> None:
    """A lost node's jobs are re-planned, running jobs keep their node, finished ones go."""
    first = client.post("/v1/plans", json=batch(), headers={"Prefer": "wait=10"})
    plan = poll(client, first.headers["Location"])
    assignment = plan["result"]["assignment"]
    lost = assignment[0]["node"]
    keep = assignment[1]
    running = {"job": keep["jobs"][1]["id"], "node": keep["node"], "started_at": 350.0}
    finished = [keep["jobs"][0]["id"]]
    events = {
        "elapsed": 400.0,
        "finished": finished,
        "running": [running],
        "lost_nodes": [lost],
        "added_nodes": [{"id": "blade-new"}],
    }
    resp = client.post(f"{first.headers['Location']}/replan", json=events)
    assert resp.status_code == 202, resp.get_json()
    info = resp.get_json()["replan"]
    assert info["of"] == plan["id"] and info["lost_nodes"] == [lost]
    new = poll(client, resp.headers["Location"])
    assert new["status"] == "done"
    placed = {j["id"]: a["node"] for a in new["result"]["assignment"] for j in a["jobs"]}
    original = {j["id"] for j in batch()["jobs"]}
    kept = {r["job"]: r["node"] for r in info["running"]}
    assert kept == {running["job"]: running["node"]}  # stays where it runs
    assert not set(kept) & set(placed)
    assert set(placed) | set(kept) == original - set(finished)  # none lost or duplicated
    assert lost not in set(placed.values())
    on_lost = {j["id"] for j in assignment[0]["jobs"]}
    assert on_lost - set(finished) <= set(placed)


def test_replan_of_unknown_or_unfinished_plan(idle_app: Any) -> None:
    """An unknown id is a 404, a plan still queued is a 409 ``not-finished``."""
    client = idle_app.test_client()
    assert (
        client.post("/v1/plans/0123456789abcdef01234/replan", json={"elapsed": 1}).status_code
        == 404
    )
    loc = client.post("/v1/plans", json=batch()).headers["Location"]
    resp = client.post(f"{loc}/replan", json={"elapsed": 1})
    assert resp.status_code == 409
    assert resp.mimetype == "application/problem+json"
    assert resp.get_json()["type"].endswith("not-finished")


def test_bad_events_name_the_field(client: Any) -> None:
    """Events without ``elapsed`` are refused with a pointer to it (422)."""
    loc = client.post("/v1/plans", json=batch(), headers={"Prefer": "wait=10"}).headers["Location"]
    poll(client, loc)
    resp = client.post(f"{loc}/replan", json={"finished": ["r00"]})
    assert resp.status_code == 422
    assert "/elapsed" in [e["pointer"] for e in resp.get_json()["errors"]]


def test_confidence_block_with_zero_spread_is_exact(client: Any) -> None:
    """Zero spread: P(meet deadline) is exactly 1 when the plan meets it, 0 when not."""
    for deadline, expected in ((10_000.0, 1.0), (1_000.0, 0.0)):
        body = dict(batch(), deadline=deadline, spread=0.0, confidence_samples=200)
        loc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).headers["Location"]
        res = poll(client, loc)["result"]
        assert res["confidence"]["deadline_probability"] == expected
        assert res["confidence"]["makespan_p50"] == res["makespan"]


def test_confidence_falls_with_spread(client: Any) -> None:
    """With spread, a deadline at the plan's makespan is met less than always (lognormal)."""
    probe = poll(
        client,
        client.post("/v1/plans", json=batch(), headers={"Prefer": "wait=10"}).headers["Location"],
    )
    body = dict(batch(), deadline=probe["result"]["makespan"] * 1.02, spread=0.3)
    res = poll(
        client,
        client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).headers["Location"],
    )["result"]
    assert 0.0 < res["confidence"]["deadline_probability"] < 1.0


def finished_plan(client: Any) -> tuple[str, dict[str, Any]]:
    loc = client.post("/v1/plans", json=batch(), headers={"Prefer": "wait=10"}).headers["Location"]
    return loc, poll(client, loc)


def test_unknown_event_fields_are_refused_with_pointers(client: Any) -> None:
    """The events body is checked against openapi's ReplanRequest, which allows no other
    field (``additionalProperties: false``): each unknown field, at the top and inside a
    running job, and each wrong type is a 422 problem naming it by JSON Pointer (RFC 6901),
    and no plan is queued."""
    loc, _ = finished_plan(client)
    before = client.get("/v1/plans?limit=200").get_json()["items"]
    events = {
        "elapsed": 10,
        "lost_node": ["blade-0"],  # a misspelt lost_nodes must not be silently ignored
        "running": [{"job": "r01", "node": "blade-1", "started_at": 5, "eta": 9}],
        "finished": "r00",
    }
    resp = client.post(f"{loc}/replan", json=events)
    assert resp.status_code == 422 and resp.mimetype == "application/problem+json"
    pointers = {e["pointer"] for e in resp.get_json()["errors"]}
    assert {"/lost_node", "/running/0/eta", "/finished"} <= pointers
    assert client.get("/v1/plans?limit=200").get_json()["items"] == before


def test_replan_honours_prefer_wait_and_idempotency_key(client: Any) -> None:
    """Like ``POST /v1/plans`` (RFC 7240 ``Prefer: wait``; the IETF httpapi
    Idempotency-Key draft): a wait answers 201 with the finished new plan; a retry with
    the same key and body answers the same plan (200, ``Idempotent-Replayed: true``) with
    the same ``replan`` block; the same key with other events is a 422."""
    loc, _ = finished_plan(client)
    events = {"elapsed": 100.0, "finished": ["r00"]}
    headers = {"Prefer": "wait=10", "Idempotency-Key": '"lh-replan-0001"'}
    first = client.post(f"{loc}/replan", json=events, headers=headers)
    assert first.status_code == 201, first.get_json()
    assert first.get_json()["status"] == "done"
    assert first.headers["Preference-Applied"].startswith("wait=")  # capped by max_wait
    again = client.post(f"{loc}/replan", json=events, headers=headers)
    assert again.status_code == 200
    assert again.headers["Idempotent-Replayed"] == "true"
    assert again.headers["Location"] == first.headers["Location"]
    assert again.get_json()["replan"] == first.get_json()["replan"]
    other = client.post(f"{loc}/replan", json={"elapsed": 200.0}, headers=headers)
    assert other.status_code == 422
    assert other.get_json()["type"].endswith("idempotency-key-reused")


def test_events_schema_matches_the_spec() -> None:
    """The marshmallow ReplanRequestSchema and openapi's ReplanRequest name the same fields
    (required ones too, nested running jobs included) and both refuse others."""
    from pathlib import Path

    import yaml

    from service.schemas import REPLAN_SCHEMA, RunningJobSchema

    spec = yaml.safe_load(
        (Path(__file__).resolve().parents[2] / "openapi" / "openapi.yaml").read_text()
    )
    doc = spec["components"]["schemas"]["ReplanRequest"]
    assert doc["additionalProperties"] is False
    assert set(doc["properties"]) == set(REPLAN_SCHEMA.fields)
    assert set(doc["required"]) == {n for n, f in REPLAN_SCHEMA.fields.items() if f.required}
    running = doc["properties"]["running"]["items"]
    assert running["additionalProperties"] is False
    assert set(running["properties"]) == set(RunningJobSchema().fields)
    assert set(running["required"]) == set(RunningJobSchema().fields)
