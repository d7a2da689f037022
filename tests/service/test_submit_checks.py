"""What a submit refuses at once (422) instead of accepting a plan that can only fail.

Reference: the contract in openapi/openapi.yaml and the README ("a job that no node can
run is refused by name (422, exit 2)").
"""

from __future__ import annotations

from typing import Any

BODY = {
    "jobs": [
        {"id": "lh_moss_beauty", "duration": 300, "requires": ["gpu"]},
        {"id": "lh_moss_comp", "duration": 120},
    ],
    "nodes": [{"id": "cpu-01"}, {"id": "cpu-02", "provides": ["ssd"]}],
}


def test_unrunnable_job_is_refused_at_submit_by_name(client: Any) -> None:
    """A job requiring a tag no node provides: 422 ``infeasible`` naming the job and its
    ``requires`` pointer, and no record is made."""
    r = client.post("/v1/plans", json=BODY)
    assert r.status_code == 422 and r.mimetype == "application/problem+json"
    doc = r.get_json()
    assert doc["type"].endswith("infeasible")
    assert doc["jobs"] == ["lh_moss_beauty"]
    assert [e["pointer"] for e in doc["errors"]] == ["/jobs/0/requires"]
    assert client.get("/v1/plans").get_json()["items"] == []


def test_runnable_tagged_job_is_accepted(client: Any) -> None:
    """The same batch with a node that provides the tag is planned (the control case)."""
    body = {**BODY, "nodes": [*BODY["nodes"], {"id": "gpu-01", "provides": ["gpu"]}]}
    r = client.post("/v1/plans", json=body, headers={"Prefer": "wait=5"})
    assert r.status_code == 201, r.get_json()


def _with_text(where: str, text: str) -> dict[str, Any]:
    body: dict[str, Any] = {
        "jobs": [{"id": "lh_reed_010", "duration": 60}, {"id": "lh_reed_020", "duration": 30}],
        "node_count": 2,
    }
    if where == "id":
        body["jobs"][0]["id"] = text
    elif where == "group":
        body["jobs"][0]["group"] = text
    elif where == "requires":
        body["jobs"][0]["requires"] = [text]
    elif where == "name":
        body["name"] = text
    return body


POINTERS = {
    "id": "/jobs/0/id",
    "group": "/jobs/0/group",
    "requires": "/jobs/0/requires/0",
    "name": "/name",
}


def test_hostile_text_is_refused_by_pointer(client: Any) -> None:
    """Lone surrogates (not Unicode text: a page cannot encode them), control characters
    and the bidirectional controls of UAX #9 (the "Trojan Source" paper, Boucher and
    Anderson 2021) are refused in ids, groups, tags and names with 422 by pointer."""
    for text in ("\ud800x", "a\x00b", "esc\x1b[2J", "abc\u202edcba", "x\u2066y"):
        for where, pointer in POINTERS.items():
            r = client.post("/v1/plans", json=_with_text(where, text))
            assert r.status_code == 422, (where, repr(text), r.status_code)
            pointers = [e["pointer"] for e in r.get_json()["errors"]]
            assert pointer in pointers, (where, repr(text), pointers)


def test_a_body_of_countless_empty_objects_is_refused_before_parsing(
    settings: Any, conn: Any
) -> None:
    """``{"zzz":[{},{},...]}`` (two million empty objects, 6 MB) under the shipped limits
    (200,000 jobs, 10,000 nodes, 32 MiB bodies): 422 limit-exceeded before a Python
    object is made for each (the hostile case of the availability audit); a real batch of
    5,000 jobs is not refused by it (control case)."""
    import dataclasses

    from service.app import create_app
    from service.settings import Settings

    shipped = Settings()
    app = create_app(
        dataclasses.replace(
            settings,
            max_jobs=shipped.max_jobs,
            max_nodes=shipped.max_nodes,
            max_request_bytes=shipped.max_request_bytes,
        ),
        connection=conn,
    )
    client = app.test_client()
    raw = b'{"zzz":[' + b",".join([b"{}"] * 2_000_000) + b"]}"
    r = client.post("/v1/plans", data=raw, content_type="application/json")
    assert r.status_code == 422
    assert r.get_json()["type"].endswith("limit-exceeded")
    jobs = [{"id": f"lh_dune_{i:06d}_beauty_layer_a", "duration": 60 + i % 7} for i in range(5000)]
    ok = client.post("/v1/plans", json={"jobs": jobs, "node_count": 40})
    assert ok.status_code == 202
