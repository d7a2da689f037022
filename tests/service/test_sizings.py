"""``/v1/sizings`` through the shared job machinery (fakeredis, embedded worker).

The worked example is checked by hand: jobs of 3600, 1800 and 1800 s with a 3600 s
deadline need 2 nodes (7200 s of work over 3600 s per node is 2, the total-work bound;
{3600} and {1800, 1800} is a plan with 2 nodes).
"""

from __future__ import annotations

from typing import Any

EXAMPLE = {
    "jobs": [
        {"id": "lh_sq010_beauty", "duration": 3600},
        {"id": "lh_sq010_fx", "duration": 1800},
        {"id": "lh_sq020_fx", "duration": 1800},
    ],
    "deadline": 3600,
    "node_hour_cost": 1.8,
}


def test_sizing_answers_the_fewest_nodes(client: Any) -> None:
    """201 within ``Prefer: wait`` with nodes_needed == nodes_lower_bound == 2 (hand-checked)."""
    r = client.post("/v1/sizings", json=EXAMPLE, headers={"Prefer": "wait=5"})
    assert r.status_code == 201, r.get_json()
    assert r.headers["Location"].startswith("/v1/sizings/")
    res = r.get_json()["result"]
    assert (res["nodes_needed"], res["nodes_lower_bound"], res["proven_optimal"]) == (2, 2, True)
    assert any(row["nodes"] == 2 and row["meets_deadline"] for row in res["curve"])
    listed = client.get("/v1/sizings").get_json()["items"]
    assert listed[0]["summary"]["nodes_needed"] == 2
    assert client.get("/v1/plans").get_json()["items"] == []  # kinds are separate


def test_job_longer_than_the_deadline_is_a_422_naming_it(client: Any) -> None:
    """The contract: no node count can help, so the request is refused, naming the job."""
    body = {**EXAMPLE, "jobs": [*EXAMPLE["jobs"], {"id": "lh_sq030_sim", "duration": 5000}]}
    r = client.post("/v1/sizings", json=body)
    assert r.status_code == 422 and r.mimetype == "application/problem+json"
    doc = r.get_json()
    assert doc["jobs"] == ["lh_sq030_sim"]
    assert doc["errors"][0]["pointer"] == "/jobs/3/duration"


def test_sizing_shape_errors(client: Any) -> None:
    """Unknown fields (a plan's ``node_count``) and a missing deadline are pointed at."""
    r = client.post("/v1/sizings", json={"jobs": EXAMPLE["jobs"], "node_count": 4})
    pointers = {e["pointer"] for e in r.get_json()["errors"]}
    assert r.status_code == 422 and pointers == {"/node_count", "/deadline"}


def test_sizing_cancel_and_etag(idle_app: Any) -> None:
    """DELETE and If-None-Match work for sizings exactly as for plans."""
    c = idle_app.test_client()
    r = c.post("/v1/sizings", json=EXAMPLE)
    assert r.status_code == 202
    loc, tag = r.headers["Location"], r.headers["ETag"]
    assert c.get(loc, headers={"If-None-Match": tag}).status_code == 304
    assert c.delete(loc).get_json()["status"] == "cancelled"
