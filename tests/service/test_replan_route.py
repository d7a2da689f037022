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
