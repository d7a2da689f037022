"""End to end through HTTP against a real redis-server and real ``spanwright worker`` processes.

The API runs in-process (Flask test client) against Redis started by the session fixture
with ``deploy/redis.conf``; workers are subprocesses (``python -m service.cli worker``).
Expected plan values come from Graham's (1969) tight longest-first example: jobs 3,3,2,2,2
on 2 nodes give makespan 7 against an optimum (and mean-load bound) of 6.
"""

from __future__ import annotations

import os
import signal
import time
from typing import Any

import pytest
from live import fine_grained

pytestmark = pytest.mark.slow

GRAHAM = {
    "jobs": [{"id": f"g{i}", "duration": d} for i, d in enumerate([3, 3, 2, 2, 2])],
    "node_count": 2,
    "method": "longest_first",
}


def hard(seed: int = 5, budget: float = 4.0) -> dict[str, Any]:
    """A batch the exact search cannot close within its budget: durations timed to the
    microsecond (see ``live.fine_grained``), so it is still solving when it is cancelled."""
    return {**fine_grained(seed), "method": "exact", "time_budget": budget}


def poll(client: Any, loc: str, pred: Any, timeout: float = 20.0) -> dict[str, Any]:
    end = time.monotonic() + timeout
    doc: dict[str, Any] = {}
    while time.monotonic() < end:
        doc = client.get(loc).get_json()
        if pred(doc):
            return doc
        time.sleep(0.02)
    raise AssertionError(f"condition not met for {loc}: {doc}")


def test_submit_poll_and_wait(real_stack: Any) -> None:
    """202 + Location then poll to done; ``Prefer: wait`` answers 201 with the plan."""
    real_stack.workers.start()
    real_stack.wait_for_workers(1)
    c = real_stack.client
    r = c.post("/v1/plans", json=GRAHAM)
    assert r.status_code == 202
    doc = poll(c, r.headers["Location"], lambda d: d["status"] == "done")
    assert (doc["result"]["makespan"], doc["result"]["lower_bound"]) == (7, 6)
    r = c.post("/v1/plans", json=GRAHAM, headers={"Prefer": "wait=10"})
    assert r.status_code == 201 and r.get_json()["result"]["makespan"] == 7
    assert c.get("/readyz").status_code == 200


def test_idempotent_retry(real_stack: Any) -> None:
    """Same key, same body: one plan; same key, another body: 422."""
    real_stack.workers.start()
    c = real_stack.client
    h = {"Idempotency-Key": '"it-retry-1"', "Prefer": "wait=10"}
    a = c.post("/v1/plans", json=GRAHAM, headers=h)
    b = c.post("/v1/plans", json=GRAHAM, headers=h)
    assert a.get_json()["id"] == b.get_json()["id"] and b.status_code == 200
    other = dict(GRAHAM, node_count=3)
    assert c.post("/v1/plans", json=other, headers=h).status_code == 422
    assert len(c.get("/v1/plans").get_json()["items"]) == 1


def test_cancel_queued_while_the_worker_is_paused(real_stack: Any) -> None:
    """A plan cancelled while queued is skipped by the worker; later plans still run. (An
    exact plan: a small longest-first one is solved by the API before its answer, so it is
    never queued while a worker is up; openapi/openapi.yaml, ``submitPlan``.)"""
    w = real_stack.workers.start()
    real_stack.wait_for_workers(1)
    c = real_stack.client
    os.killpg(w.pid, signal.SIGSTOP)
    try:
        loc = c.post("/v1/plans", json={**GRAHAM, "method": "exact"}).headers["Location"]
        r = c.delete(loc)
        assert r.status_code == 200 and r.get_json()["status"] == "cancelled"
    finally:
        os.killpg(w.pid, signal.SIGCONT)
    after = c.post("/v1/plans", json=GRAHAM, headers={"Prefer": "wait=10"})
    assert after.status_code == 201
    doc = c.get(loc).get_json()
    assert doc["status"] == "cancelled" and doc["result"] is None


def test_cancel_solving_returns_best_so_far(real_stack: Any) -> None:
    """DELETE during an exact search: it stops early with its incumbent, stop_reason cancelled."""
    real_stack.workers.start()
    c = real_stack.client
    body = hard(budget=8.0)
    loc = c.post("/v1/plans", json=body).headers["Location"]
    doc = poll(c, loc, lambda d: d["status"] != "queued", timeout=60.0)
    assert doc["status"] == "solving", doc
    t0 = time.monotonic()
    assert c.delete(loc).status_code == 202
    doc = poll(c, loc, lambda d: d["status"] not in ("queued", "solving"))
    assert time.monotonic() - t0 < 5.0
    res = doc["result"]
    # cancelled, or the search proved optimality between our poll and the cancel
    assert (doc["status"], res["stop_reason"]) in (
        ("cancelled", "cancelled"),
        ("done", "proved_optimal"),
    )
    assert res["makespan"] >= res["lower_bound"] > 0


@pytest.mark.parametrize("real_stack", [2], indirect=True)
def test_results_expire_after_the_retention(real_stack: Any) -> None:
    """With a 2 s retention, a finished plan and its keys are gone after 2 s."""
    real_stack.workers.start()
    real_stack.wait_for_workers(1)
    c = real_stack.client
    r = c.post("/v1/plans", json=GRAHAM, headers={"Prefer": "wait=10"})
    assert r.status_code == 201
    rid = r.get_json()["id"]
    prefix = real_stack.settings.key_prefix
    assert 0 < real_stack.redis.ttl(f"{prefix}:plan:{rid}:result") <= 2
    time.sleep(2.6)
    assert c.get(f"/v1/plans/{rid}").status_code == 404
    assert c.get("/v1/plans").get_json()["items"] == []


def test_readyz_without_workers(real_stack: Any) -> None:
    """No worker on the queue: /readyz is 503; with one started, 200."""
    c = real_stack.client
    assert c.get("/readyz").status_code == 503
    real_stack.workers.start()
    real_stack.wait_for_workers(1)
    assert c.get("/readyz").status_code == 200
