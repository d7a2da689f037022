"""The HTTP API on fakeredis with the embedded worker thread (fast unit tests).

Protocol references: RFC 9110 (202 + Location, ETag / If-None-Match -> 304), RFC 7240
(``Prefer: wait``), RFC 9457 (problem details, ``errors`` with RFC 6901 pointers) and the
IETF httpapi Idempotency-Key draft (same key + same body -> same resource; other body ->
422). The worked planning example is Graham's (1969) tight instance for longest-first.
"""

from __future__ import annotations

import json
import time
from typing import Any

import pytest

from service.reading import read_instance
from workers.planning import solve

# Graham (1969), "Bounds on multiprocessing timing anomalies": 2 nodes, jobs 3,3,2,2,2.
# Longest-first gives makespan 7 while 3+3 | 2+2+2 gives 6 = total/2, the mean-load bound.
GRAHAM = {
    "jobs": [{"id": f"g{i}", "duration": d} for i, d in enumerate([3, 3, 2, 2, 2])],
    "node_count": 2,
    "method": "longest_first",
}


def small(n: int = 12, m: int = 3, **extra: Any) -> dict[str, Any]:
    return {
        "jobs": [{"id": f"s{i}", "duration": 60 + 7 * i} for i in range(n)],
        "node_count": m,
        **extra,
    }


def poll(client: Any, loc: str, timeout: float = 10.0) -> dict[str, Any]:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        doc = client.get(loc).get_json()
        if doc["status"] in ("done", "failed", "cancelled"):
            return doc  # type: ignore[no-any-return]
        time.sleep(0.01)
    raise AssertionError(f"{loc} did not finish")


def assert_problem(resp: Any, status: int, kind: str) -> dict[str, Any]:
    """RFC 9457: the media type, ``status`` equal to the HTTP status, a stable type/title."""
    assert resp.status_code == status, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    doc = resp.get_json()
    assert doc["status"] == status
    assert doc["type"] == f"/problems/{kind}"
    assert doc["title"]
    return doc  # type: ignore[no-any-return]


def test_submit_then_poll(client: Any) -> None:
    """202 Accepted with Location and a status body (RFC 9110 15.3.3), then the plan."""
    r = client.post("/v1/plans", json=GRAHAM)
    assert r.status_code == 202
    loc = r.headers["Location"]
    assert loc == f"/v1/plans/{r.get_json()['id']}"
    assert r.get_json()["status"] in ("queued", "solving", "done")
    doc = poll(client, loc)
    res = doc["result"]
    assert doc["status"] == "done"
    assert (res["makespan"], res["lower_bound"]) == (7, 6)
    assert res["gap"] == pytest.approx(1 / 6)
    assert sorted(j["id"] for a in res["assignment"] for j in a["jobs"]) == [
        f"g{i}" for i in range(5)
    ]


def test_service_returns_what_the_library_returns(client: Any) -> None:
    """The HTTP result is the core's ``result`` object for the same body, field for field."""
    body = small(40, 4, deadline=900)
    doc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=5"}).get_json()
    lib = solve(read_instance(body), "longest_first").to_dict()
    got = dict(doc["result"])
    for volatile in ("solve_seconds",):
        got.pop(volatile), lib.pop(volatile)
    assert got == json.loads(json.dumps(lib))


def test_prefer_wait_returns_the_finished_plan(client: Any) -> None:
    """RFC 7240 ``wait``: the finished plan in the answer (201), preference echoed."""
    r = client.post("/v1/plans", json=small(), headers={"Prefer": "respond-async, wait=5"})
    assert r.status_code == 201
    assert r.headers["Preference-Applied"] == "wait=5"
    assert r.get_json()["status"] == "done" and r.get_json()["result"]["makespan"] > 0


def test_prefer_wait_times_out_with_202(idle_app: Any) -> None:
    """No worker: after the wait the answer is 202 with the status, not an error."""
    t0 = time.monotonic()
    r = idle_app.test_client().post("/v1/plans", json=small(), headers={"Prefer": "wait=0.3"})
    assert r.status_code == 202 and r.get_json()["status"] == "queued"
    assert 0.29 <= time.monotonic() - t0 < 3


def test_etag_and_if_none_match(client: Any) -> None:
    """An unchanged plan answers 304 with no body (RFC 9110 13.1.2); a changed one 200."""
    r = client.post("/v1/plans", json=small(), headers={"Prefer": "wait=5"})
    loc, tag = r.headers["Location"], r.headers["ETag"]
    again = client.get(loc, headers={"If-None-Match": tag})
    assert again.status_code == 304 and again.get_data() == b""
    assert client.get(loc, headers={"If-None-Match": '"v0"'}).status_code == 200


def test_etag_changes_when_status_changes(idle_app: Any, drain: Any) -> None:
    """The tag of a queued plan no longer matches once the plan is done."""
    c = idle_app.test_client()
    r = c.post("/v1/plans", json=small())
    loc, tag = r.headers["Location"], r.headers["ETag"]
    assert c.get(loc, headers={"If-None-Match": tag}).status_code == 304
    drain()
    r2 = c.get(loc, headers={"If-None-Match": tag})
    assert r2.status_code == 200 and r2.get_json()["status"] == "done"


def test_idempotent_retry_returns_the_same_plan(client: Any) -> None:
    """Same Idempotency-Key and body: the same plan, marked as a replay (IETF draft)."""
    h = {"Idempotency-Key": '"3f6c1e1a-7c55-4c0e-9d59-1b1d6b1f0a01"', "Prefer": "wait=5"}
    first = client.post("/v1/plans", json=small(), headers=h)
    second = client.post("/v1/plans", json=small(), headers=h)
    assert first.status_code == 201 and second.status_code == 200
    assert first.get_json()["id"] == second.get_json()["id"]
    assert second.headers["Idempotent-Replayed"] == "true"
    assert second.get_json()["result"] == first.get_json()["result"]
    listed = client.get("/v1/plans").get_json()["items"]
    assert [i["id"] for i in listed] == [first.get_json()["id"]]


def test_idempotency_key_reused_with_another_body(client: Any) -> None:
    """The draft: a key reused with a different payload is refused with 422."""
    h = {"Idempotency-Key": '"key-1"'}
    assert client.post("/v1/plans", json=small(), headers=h).status_code == 202
    r = client.post("/v1/plans", json=small(13), headers=h)
    assert_problem(r, 422, "idempotency-key-reused")


def test_in_flight_duplicate_points_at_the_queued_plan(idle_app: Any) -> None:
    """A retry while the first is still queued gets that plan's status (202), not a twin."""
    c = idle_app.test_client()
    h = {"Idempotency-Key": "retry-me"}
    a = c.post("/v1/plans", json=small(), headers=h)
    b = c.post("/v1/plans", json=small(), headers=h)
    assert (a.status_code, b.status_code) == (202, 202)
    assert a.get_json()["id"] == b.get_json()["id"]
    assert len(c.get("/v1/plans").get_json()["items"]) == 1


def test_bad_idempotency_key(client: Any) -> None:
    """A key that is not a printable ASCII string is a 400."""
    r = client.post("/v1/plans", json=small(), headers={"Idempotency-Key": '"' + "x" * 300 + '"'})
    assert_problem(r, 400, "bad-request")


def test_cancel_queued_plan(idle_app: Any, drain: Any) -> None:
    """DELETE on a queued plan ends it as cancelled; the worker skips it; a second DELETE is 409."""
    c = idle_app.test_client()
    loc = c.post("/v1/plans", json=small()).headers["Location"]
    r = c.delete(loc)
    assert r.status_code == 200 and r.get_json()["status"] == "cancelled"
    drain()
    doc = c.get(loc).get_json()
    assert doc["status"] == "cancelled" and doc["result"] is None
    assert_problem(c.delete(loc), 409, "already-finished")


def test_list_newest_first_with_filter_and_cursor(idle_app: Any, drain: Any) -> None:
    """``GET /v1/plans``: newest first, ``status`` filter, ``next`` cursor until null."""
    c = idle_app.test_client()
    ids = []
    for k in range(5):
        ids.append(c.post("/v1/plans", json=small(k + 1)).get_json()["id"])
        time.sleep(0.002)
    c.delete(f"/v1/plans/{ids[1]}")
    drain()
    page = c.get("/v1/plans?limit=2").get_json()
    assert [i["id"] for i in page["items"]] == ids[::-1][:2]
    rest = c.get(f"/v1/plans?limit=10&cursor={page['next']}").get_json()
    assert [i["id"] for i in rest["items"]] == ids[::-1][2:] and rest["next"] is None
    done = c.get("/v1/plans?status=done").get_json()["items"]
    assert [i["id"] for i in done] == [i for i in ids[::-1] if i != ids[1]]
    assert done[0]["summary"]["jobs"] == 5
    assert_problem(c.get("/v1/plans?status=bogus"), 400, "bad-request")
    assert_problem(c.get("/v1/plans?limit=0"), 400, "bad-request")
    assert_problem(c.get("/v1/plans?cursor=zz"), 400, "bad-request")


def test_validation_problems_have_pointers(client: Any) -> None:
    """Shape errors: 422 with an ``errors`` list of {pointer, detail} (RFC 9457 section 3)."""
    body = {
        "jobs": [{"id": "a", "duration": "long"}, {"id": "b", "duration": 5, "x": 1}],
        "node_count": 0,
    }
    doc = assert_problem(client.post("/v1/plans", json=body), 422, "invalid-request")
    assert {e["pointer"] for e in doc["errors"]} == {"/jobs/0/duration", "/jobs/1/x", "/node_count"}


def test_semantic_problems_come_from_the_core(client: Any) -> None:
    """Duplicate job ids pass the shape check and are refused by ``reading.read_instance``."""
    body = {"jobs": [{"id": "a", "duration": 1}, {"id": "a", "duration": 2}], "node_count": 1}
    doc = assert_problem(client.post("/v1/plans", json=body), 422, "invalid-request")
    assert doc["errors"][0]["pointer"] == "/jobs/1/id"


def test_limits(client: Any, settings: Any) -> None:
    """Configured limits: body size 413; jobs, nodes and time budget 422 naming the field."""
    huge = small(settings.max_jobs + 1)
    doc = assert_problem(client.post("/v1/plans", json=huge), 422, "limit-exceeded")
    assert doc["errors"][0]["pointer"] == "/jobs"
    doc = assert_problem(
        client.post("/v1/plans", json=small(time_budget=settings.max_time_budget + 1)),
        422,
        "limit-exceeded",
    )
    assert doc["errors"][0]["pointer"] == "/time_budget"
    big = b'{"jobs": [' + b" " * settings.max_request_bytes + b"]}"
    assert_problem(
        client.post("/v1/plans", data=big, content_type="application/json"),
        413,
        "payload-too-large",
    )


def test_unreadable_bodies(client: Any) -> None:
    """Not JSON: 400; NaN is not JSON (RFC 8259 section 6); another media type: 415."""
    post = client.post
    assert_problem(post("/v1/plans", data="{", content_type="application/json"), 400, "bad-request")
    nan = '{"jobs": [{"id": "a", "duration": NaN}], "node_count": 1}'
    assert_problem(post("/v1/plans", data=nan, content_type="application/json"), 400, "bad-request")
    assert_problem(
        post("/v1/plans", data="jobs", content_type="text/plain"), 415, "unsupported-media-type"
    )


def test_unknown_routes_and_methods_are_problems(client: Any) -> None:
    """Even werkzeug's own errors come out as problem+json."""
    assert_problem(client.get("/v1/nothing"), 404, "not-found")
    assert_problem(client.get("/v1/plans/0123456789abcdef01234"), 404, "not-found")
    r = client.put("/v1/plans")
    assert_problem(r, 405, "method-not-allowed")
    assert "POST" in r.headers["Allow"]


def test_problem_types_are_documented(client: Any) -> None:
    """Each problem ``type`` reference resolves to a description (RFC 9457 section 3.1.1)."""
    doc = client.post("/v1/plans", json={"jobs": []}).get_json()
    r = client.get(doc["type"])
    assert r.status_code == 200 and "422" in r.get_data(as_text=True)


def test_other_tenants_plans_are_not_found(app: Any) -> None:
    """A plan of another tenant is a 404 and is not listed (the contract's tenant rule)."""
    store = app.extensions["spanwright"].store
    rid = store.create("plan", "another-studio", b"{}", {"method": "list"})
    c = app.test_client()
    assert_problem(c.get(f"/v1/plans/{rid}"), 404, "not-found")
    assert_problem(c.delete(f"/v1/plans/{rid}"), 404, "not-found")
    assert c.get("/v1/plans").get_json()["items"] == []


def test_health_and_readiness(idle_app: Any, worker: Any) -> None:
    """/healthz needs nothing; /readyz needs Redis and a worker (503 without one)."""
    c = idle_app.test_client()
    assert c.get("/healthz").get_json() == {"status": "pass"}
    r = c.get("/readyz")
    assert r.status_code == 200 and r.get_json()["checks"]["workers"] == 1
    worker.stop(timeout=5)
    from rq import Worker

    for w in Worker.all(connection=idle_app.extensions["spanwright"].store.conn):
        w.register_death()
    r = c.get("/readyz")
    assert r.status_code == 503 and r.get_json()["status"] == "fail"


def test_openapi_json_is_the_spec(client: Any) -> None:
    """/openapi.json serves openapi/openapi.yaml."""
    doc = client.get("/openapi.json").get_json()
    assert doc["openapi"].startswith("3.1") and "/v1/plans" in doc["paths"]
