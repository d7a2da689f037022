"""Back-pressure on fakeredis: per-tenant request rate, per-tenant and global queue depth.

Protocol references: RFC 6585 section 4 (429 Too Many Requests, "MAY include a
Retry-After header") and RFC 9110 section 10.2.3 (Retry-After as delta-seconds). The
invariant checked each time: a refused request stores and queues nothing, and nothing
that was accepted before is removed or changed.
"""

from __future__ import annotations

import os
import threading
from dataclasses import replace
from typing import Any

import pytest

from service.app import create_app
from service.settings import Settings
from tests.trust.conftest import bearer, small_batch


def assert_429(resp: Any, most: int) -> int:
    assert resp.status_code == 429, resp.get_data(as_text=True)
    assert resp.mimetype == "application/problem+json"
    doc = resp.get_json()
    assert doc["type"] == "/problems/too-many-requests" and doc["status"] == 429
    retry = int(resp.headers["Retry-After"])  # delta-seconds (RFC 9110 10.2.3)
    assert 1 <= retry <= most
    return retry


def ids(client: Any, tenant: str) -> list[str]:
    doc = client.get("/v1/plans?limit=200", headers=bearer(tenant)).get_json()
    return [it["id"] for it in doc["items"]]


def test_tenant_depth_limit(keyed_app: Any, drain_queue: Any) -> None:
    """The 6th queued plan of a tenant (limit 5) is refused with 429 and is not stored; the
    5 accepted stay queued; another tenant is not affected; once the queue drains the
    tenant may submit again."""
    c = keyed_app.test_client()
    for _ in range(5):
        assert (
            c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code
            == 202
        )
    before = ids(c, "quillfernvale")
    r = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
    assert_429(r, 60)
    assert ids(c, "quillfernvale") == before
    for rid in before:
        assert c.get(f"/v1/plans/{rid}", headers=bearer("quillfernvale")).json["status"] == "queued"
    assert c.post("/v1/plans", json=small_batch(), headers=bearer("brightwater")).status_code == 202
    drain_queue()
    for rid in before:
        assert c.get(f"/v1/plans/{rid}", headers=bearer("quillfernvale")).json["status"] == "done"
    assert (
        c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code == 202
    )


def test_global_depth_limit(keyed_app: Any) -> None:
    """With 8 records queued over all tenants (global limit 8) every tenant gets 429, and
    the 8 stay queued."""
    c = keyed_app.test_client()
    for t in ("quillfernvale",) * 5 + ("brightwater",) * 3:
        assert c.post("/v1/plans", json=small_batch(), headers=bearer(t)).status_code == 202
    r = c.post("/v1/plans", json=small_batch(), headers=bearer("brightwater"))
    assert_429(r, 60)
    assert "service" in r.get_json()["detail"]
    assert len(ids(c, "quillfernvale")) == 5 and len(ids(c, "brightwater")) == 3


def test_cancelled_records_free_their_slot(keyed_app: Any) -> None:
    """A cancelled queued plan no longer counts (it is finished), so a new one is admitted."""
    c = keyed_app.test_client()
    locs = [
        c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).headers["Location"]
        for _ in range(5)
    ]
    assert (
        c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code == 429
    )
    assert c.delete(locs[0], headers=bearer("quillfernvale")).status_code == 200
    assert (
        c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code == 202
    )


def test_reserved_slot_without_record_is_not_pruned(keyed_app: Any) -> None:
    """The race behind an overshoot, made deterministic: five submits hold their slots but
    have not stored their records yet (admission comes before the first write). A sixth
    submit finds the tenant full, prunes, and must still be refused: a missing record only
    counts as expired once it is older than any submit takes. A slot whose record has been
    missing for longer is freed."""
    from service import limits

    c = keyed_app.test_client()
    with keyed_app.app_context():
        for k in range(5):
            limits.admit("quillfernvale", "plan", f"{k:021x}")  # slots taken, no record yet
    r = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
    assert_429(r, 60)
    conn = keyed_app.extensions["spanwright"].store.conn
    key = "swtrust:active:quillfernvale"
    old = limits.time.time() - 2 * limits._UNWRITTEN_GRACE
    conn.zadd(key, {f"plan:{0:021x}": old})  # that submit died long ago, before storing
    r = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
    assert r.status_code == 202, r.get_data(as_text=True)
    assert conn.zcard(key) == 5


@pytest.mark.slow
def test_concurrent_submits_do_not_overshoot(redis_server: str, trust_settings: Settings) -> None:
    """20 concurrent submits of one tenant with limit 5, on a real redis-server (a Lua
    script runs atomically there; fakeredis does not promise it across threads): exactly
    5 accepted, 15 refused."""
    prefix = f"lim{os.getpid()}"
    s = replace(trust_settings, redis_url=redis_server, key_prefix=prefix, queue_name=prefix)
    app = create_app(s)
    codes: list[int] = []
    lock = threading.Lock()
    go = threading.Barrier(20)

    def one() -> None:
        c = app.test_client()
        go.wait()
        r = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale"))
        with lock:
            codes.append(r.status_code)

    threads = [threading.Thread(target=one) for _ in range(20)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert sorted(codes) == [202] * 5 + [429] * 15


def test_request_rate_limit(keyed_app: Any) -> None:
    """40 requests per 60 s window: the 41st of a tenant is 429 with Retry-After at most the
    window; another tenant still gets through; open paths are not counted."""
    c = keyed_app.test_client()
    seen = []
    for _ in range(40):
        seen.append(c.get("/v1/plans", headers=bearer("quillfernvale")).status_code)
        c.get("/healthz")
    assert seen == [200] * 40
    assert_429(c.get("/v1/plans", headers=bearer("quillfernvale")), 60)
    assert_429(c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")), 60)
    assert c.get("/v1/plans", headers=bearer("brightwater")).status_code == 200
    assert c.get("/healthz").status_code == 200


def test_idempotent_retry_at_the_limit_gets_its_own_plan(keyed_app: Any) -> None:
    """A retry of a submit whose Idempotency-Key is already bound returns that plan (202,
    ``Idempotent-Replayed: true``, same Location) although the tenant is at its limit: it
    needs no new slot (IETF httpapi Idempotency-Key draft: a retry returns the first
    result). A new key is still refused with 429, and the same key with another body is a
    422; neither stores anything nor takes a slot."""
    c = keyed_app.test_client()
    key = {"Idempotency-Key": '"lh-ep01-sh010-0001"', **bearer("quillfernvale")}
    first = c.post("/v1/plans", json=small_batch(), headers=key)
    assert first.status_code == 202
    for _ in range(4):
        assert (
            c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code
            == 202
        )
    before = ids(c, "quillfernvale")
    conn = keyed_app.extensions["spanwright"].store.conn
    slots = conn.zrange("swtrust:active:quillfernvale", 0, -1)
    assert len(slots) == 5
    retry = c.post("/v1/plans", json=small_batch(), headers=key)
    assert retry.status_code == 202, retry.get_data(as_text=True)
    assert retry.headers["Idempotent-Replayed"] == "true"
    assert retry.headers["Location"] == first.headers["Location"]
    fresh = {"Idempotency-Key": '"lh-ep01-sh010-0002"', **bearer("quillfernvale")}
    assert_429(c.post("/v1/plans", json=small_batch(), headers=fresh), 60)
    other = c.post("/v1/plans", json=small_batch(n=5), headers=key)
    assert other.status_code == 422
    assert other.get_json()["type"] == "/problems/idempotency-key-reused"
    assert ids(c, "quillfernvale") == before
    assert conn.zrange("swtrust:active:quillfernvale", 0, -1) == slots


def test_replan_is_admitted_like_a_submit(keyed_app: Any, drain_queue: Any) -> None:
    """``POST /v1/plans/{id}/replan`` queues a new plan, so it passes the same queue-depth
    admission as ``POST /v1/plans`` (RFC 6585 section 4: 429 with Retry-After, nothing
    stored); a retry with its bound Idempotency-Key still gets its plan at the limit; and
    it counts against the per-tenant request rate like every keyed request."""
    c = keyed_app.test_client()
    loc = c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).headers[
        "Location"
    ]
    drain_queue()
    events = {"elapsed": 10.0, "finished": ["sh010_f000"]}
    key = {"Idempotency-Key": '"lh-replan-0001"', **bearer("quillfernvale")}
    first = c.post(f"{loc}/replan", json=events, headers=key)
    assert first.status_code == 202, first.get_data(as_text=True)
    for _ in range(4):
        assert (
            c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code
            == 202
        )
    before = ids(c, "quillfernvale")
    assert_429(c.post(f"{loc}/replan", json=events, headers=bearer("quillfernvale")), 60)
    assert ids(c, "quillfernvale") == before
    retry = c.post(f"{loc}/replan", json=events, headers=key)
    assert retry.status_code == 202 and retry.headers["Idempotent-Replayed"] == "true"
    assert retry.headers["Location"] == first.headers["Location"]
    while c.get("/v1/plans", headers=bearer("quillfernvale")).status_code != 429:
        pass  # spend the rest of the window's 40 requests
    assert_429(c.post(f"{loc}/replan", json=events, headers=key), 60)


def test_finished_records_leave_the_depth_sets_at_once(keyed_app: Any, drain_queue: Any) -> None:
    """A plan that finishes gives its queue slot back in the same script that stores its
    result, so the depth sets hold only queued and solving work (they do not wait for a
    prune, and do not grow with finished plans while no limit is near)."""
    c = keyed_app.test_client()
    for _ in range(3):
        assert (
            c.post("/v1/plans", json=small_batch(), headers=bearer("quillfernvale")).status_code
            == 202
        )
    conn = keyed_app.extensions["spanwright"].store.conn
    assert conn.zcard("swtrust:active:quillfernvale") == 3 and conn.zcard("swtrust:active") == 3
    drain_queue()
    assert conn.zcard("swtrust:active:quillfernvale") == 0 and conn.zcard("swtrust:active") == 0


def test_a_plan_solved_in_the_request_is_counted_and_refused_by_its_store_script(
    keyed_app: Any, trust_settings: Settings, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A small longest-first plan solved by the API (a worker registered, RQ's set of its
    workers) may have its request counted by the script that stores it
    (``limits.DEFER_MARGIN``; here 0, so every such count waits for the store): the
    41st request of the 40-per-window tenant is still 429 with Retry-After (RFC 6585
    section 4, RFC 9110 10.2.3) and stores nothing; a refused body (422) is counted too."""
    from service import limits

    monkeypatch.setattr(limits, "DEFER_MARGIN", 0)
    conn = keyed_app.extensions["spanwright"].store.conn
    conn.sadd(f"rq:workers:{trust_settings.queue_name}", "rq:worker:standing-by")
    c = keyed_app.test_client()
    who = bearer("quillfernvale")
    assert c.get("/v1/plans", headers=who).status_code == 200  # the count is seen: 1
    bad = {"jobs": [{"id": "sh010_f001", "duration": -1}], "node_count": 1}
    assert c.post("/v1/plans", json=bad, headers=who).status_code == 422  # 2
    answers = [c.post("/v1/plans", json=small_batch(), headers=who) for _ in range(38)]
    assert [(r.status_code, r.get_json()["status"]) for r in answers] == [(202, "done")] * 38
    assert_429(c.post("/v1/plans", json=small_batch(), headers=who), 60)
    listed = c.get("/v1/plans?limit=200&tenant=quillfernvale", headers=bearer("ops"))
    assert len(listed.get_json()["items"]) == 38
