"""The RQ task and the queueing: progress, cancel, failures, retry, the crash guard.

Some tests replace the core's solve with a small test double (named as such) to hold a
job in the solving state on purpose; the adapter code under test is the real one.
"""

from __future__ import annotations

import importlib.util
import itertools
import json
import math
import threading
import time
from typing import Any

import pytest
from rq.job import Job
from rq.serializers import JSONSerializer

from service.queue import rq_job_id
from workers import tasks
from workers.planning.solve import Progress

BODY = {"jobs": [{"id": f"j{i}", "duration": 100 + i} for i in range(30)], "node_count": 4}


def poll(client: Any, loc: str, pred: Any, timeout: float = 10.0) -> dict[str, Any]:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        doc = client.get(loc).get_json()
        if pred(doc):
            return doc  # type: ignore[no-any-return]
        time.sleep(0.01)
    raise AssertionError(f"condition not met for {loc}: {doc}")


def test_job_is_queued_with_json_timeout_and_retry(idle_app: Any, settings: Any) -> None:
    """RQ job: JSON arguments, timeout = budget + margin (a crash guard), one retry."""
    c = idle_app.test_client()
    doc = c.post("/v1/plans", json={**BODY, "time_budget": 1.5}).get_json()
    conn = idle_app.extensions["spanwright"].store.conn
    job = Job.fetch(rq_job_id("plan", doc["id"]), connection=conn, serializer=JSONSerializer)
    assert job.timeout == math.ceil(1.5) + settings.job_timeout_margin
    assert job.retries_left == 1
    assert job.func_name == "workers.tasks.run_job"
    assert job.kwargs["record_id"] == doc["id"]
    json.dumps(job.kwargs)  # everything the worker needs is plain JSON


def test_core_input_errors_fail_the_plan_with_a_problem(idle_app: Any, drain: Any) -> None:
    """A body the core refuses at solve time ends as ``failed`` with its problem document."""
    svc = idle_app.extensions["spanwright"]
    bad = json.dumps({"jobs": [{"id": "a", "duration": -1}], "node_count": 1}).encode()
    rid = svc.store.create("plan", "local", bad, {"method": "longest_first", "time_budget": "1"})
    svc.queue.enqueue("plan", rid, 1.0)
    drain()
    doc = idle_app.test_client().get(f"/v1/plans/{rid}").get_json()
    assert doc["status"] == "failed" and doc["result"] is None
    assert doc["error"]["type"] == "/problems/invalid-request"
    assert doc["error"]["errors"][0]["pointer"] == "/jobs/0/duration"


def test_unexpected_errors_are_retried_once_then_fail(
    idle_app: Any, drain: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A crash is retried once (RQ ``Retry(max=1)``), then the plan fails with a 500 problem."""
    calls = []

    def broken(body: Any, **kw: Any) -> Any:  # test double: a core that crashes
        calls.append(1)
        raise RuntimeError("disk on fire")

    monkeypatch.setitem(tasks.RUNNERS, "plan", broken)
    c = idle_app.test_client()
    loc = c.post("/v1/plans", json=BODY).headers["Location"]
    drain()
    doc = c.get(loc).get_json()
    assert len(calls) == 2
    assert doc["status"] == "failed"
    assert doc["error"]["status"] == 500 and "disk on fire" in doc["error"]["detail"]


def test_progress_is_published_and_cancel_reaches_the_solver(
    app: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """While solving, GET shows progress; DELETE sets the flag the solver's should_stop reads."""
    stop_seen = threading.Event()

    def slow_core(body: Any, *, progress: Any, should_stop: Any, **kw: Any) -> Any:
        # test double of an anytime search: reports an incumbent until told to stop
        for k in range(2000):
            progress(Progress(elapsed=0.01 * k, best_makespan=500.0 - k, best_lower_bound=400.0))
            if should_stop():
                stop_seen.set()
                break
            time.sleep(0.005)
        return tasks.Outcome({"stop_reason": "cancelled"}, {"makespan": 480.0}, cancelled=True)

    monkeypatch.setitem(tasks.RUNNERS, "plan", slow_core)
    c = app.test_client()
    loc = c.post("/v1/plans", json={**BODY, "method": "exact", "time_budget": 1}).headers[
        "Location"
    ]
    doc = poll(c, loc, lambda d: (d["progress"] or {}).get("best_makespan") is not None)
    assert doc["status"] == "solving" and doc["progress"]["best_lower_bound"] == 400.0
    r = c.delete(loc)
    # 202 while the solver has not yet seen the flag; 200 if it stopped before we re-read
    assert (r.status_code, r.get_json()["cancel_requested"]) in ((202, True), (200, True))
    doc = poll(c, loc, lambda d: d["status"] != "solving")
    assert stop_seen.is_set()
    assert doc["status"] == "cancelled" and doc["result"]["stop_reason"] == "cancelled"


@pytest.mark.skipif(
    importlib.util.find_spec("workers.planning.exact") is None, reason="exact solver not landed"
)
def test_cancel_stops_a_real_search(client: Any) -> None:
    """With the exact search: a cancelled solve ends early with its best plan so far."""
    import random

    rnd = random.Random(3)
    jobs = [{"id": f"x{i}", "duration": rnd.randint(1000, 9999)} for i in range(60)]
    body = {"jobs": jobs, "node_count": 7, "method": "exact", "time_budget": 2}
    loc = client.post("/v1/plans", json=body).headers["Location"]
    doc = poll(client, loc, lambda d: d["status"] != "queued")
    if doc["status"] == "solving":
        client.delete(loc)
    doc = poll(client, loc, lambda d: d["status"] in ("done", "cancelled", "failed"))
    # done before the cancel arrived, or cancelled with a certificate that still holds
    assert (doc["status"] == "done") or (doc["result"]["stop_reason"] == "cancelled")
    assert doc["status"] in ("done", "cancelled")
    assert doc["result"]["makespan"] >= doc["result"]["lower_bound"]


def test_simulation_widens_the_crash_guard_only_when_asked() -> None:
    """The job timeout is a crash guard (RQ's ``job_timeout``): a request that asks for a
    confidence simulation gets room for it on top of its budget, in proportion to samples
    x jobs (static and dynamic policy; a sizing target adds the node counts it may
    simulate); a request without spread inputs gets none."""
    from service.queue import CONFIDENCE_COUNTS, SECONDS_PER_DRAW, simulation_allowance

    jobs = [{"id": f"j{i}", "duration": 60} for i in range(500)]
    assert simulation_allowance("plan", {"jobs": jobs, "node_count": 4}) == 0.0
    plan = {"jobs": jobs, "node_count": 4, "spread": 0.3, "confidence_samples": 2000}
    assert simulation_allowance("plan", plan) == pytest.approx(2000 * 500 * 2 * SECONDS_PER_DRAW)
    p90 = {"jobs": [*jobs[:-1], {"id": "x", "duration": 60, "duration_p90": 90}]}
    assert simulation_allowance("plan", p90) == pytest.approx(1000 * 500 * 2 * SECONDS_PER_DRAW)
    sizing = {"jobs": jobs, "deadline": 3600, "spread": 0.3, "confidence": 0.9}
    want = 1000 * 500 * (2 + CONFIDENCE_COUNTS) * SECONDS_PER_DRAW
    assert simulation_allowance("sizing", sizing) == pytest.approx(want)


def test_progress_moves_while_the_search_does_not_improve(
    app: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """Issue 19: elapsed time is published at least every 0.5 s (tasks.HEARTBEAT) even when
    the search reports nothing new; a test double reports one plan, then only polls its
    cancel check for 1.6 s, as a stuck search would."""
    seen: list[float] = []

    def quiet_core(body: Any, *, progress: Any, should_stop: Any, **kw: Any) -> Any:
        progress(Progress(elapsed=0.0, best_makespan=500.0, best_lower_bound=400.0))
        end = time.perf_counter() + 1.6
        while time.perf_counter() < end:
            should_stop()
            time.sleep(0.25)  # the core's Budget polls at most every 0.25 s
        return tasks.Outcome({"stop_reason": "time_budget"}, {"makespan": 500.0}, cancelled=False)

    monkeypatch.setitem(tasks.RUNNERS, "plan", quiet_core)
    c = app.test_client()
    loc = c.post("/v1/plans", json={**BODY, "method": "exact", "time_budget": 2}).headers[
        "Location"
    ]
    t_end = time.perf_counter() + 10
    while time.perf_counter() < t_end:
        doc = c.get(loc).get_json()
        if doc["status"] != "solving" and doc["status"] != "queued":
            break
        elapsed = (doc.get("progress") or {}).get("elapsed")
        if elapsed is not None and (not seen or elapsed != seen[-1]):
            seen.append(elapsed)
        time.sleep(0.05)
    assert len(seen) >= 3  # 1.6 s of silence gives at least three heartbeats
    assert max(b - a for a, b in itertools.pairwise(seen)) <= 0.8


def lpt_makespan(durations: list[int], nodes: int) -> int:
    """Longest processing time first (Graham 1969), by hand: each job, longest first, on
    the node that is free first (the lowest-numbered on ties)."""
    loads = [0] * nodes
    for d in sorted(durations, reverse=True):
        i = loads.index(min(loads))
        loads[i] += d
    return max(loads)


def test_small_heuristic_plans_are_finished_in_the_request(app: Any, settings: Any) -> None:
    """With a worker up, a small longest-first plan whose client waits is solved by the
    API itself: nothing is queued, the answer is 201 ``done`` with the makespan of
    longest-first worked out by hand; the stored record reads back the same, is listed,
    counted in the metrics and bound to its Idempotency-Key (a retry gets the same plan
    back)."""
    conn = app.extensions["spanwright"].store.conn
    end = time.monotonic() + 10
    while not conn.scard(f"rq:workers:{settings.queue_name}"):  # the worker registered
        assert time.monotonic() < end, "the embedded worker did not start"
        time.sleep(0.01)
    durations = [3600 - 97 * i for i in range(25)]
    body = {
        "jobs": [{"id": f"ep02_sh{i:03d}", "duration": d} for i, d in enumerate(durations)],
        "node_count": 4,
        "method": "longest_first",
    }
    c = app.test_client()
    head = {"Idempotency-Key": "ep02-nightly", "Prefer": "wait=5"}
    r = c.post("/v1/plans", json=body, headers=head)
    doc = r.get_json()
    assert r.status_code == 201 and doc["status"] == "done", doc
    assert doc["result"]["makespan"] == lpt_makespan(durations, 4)
    assert conn.llen(f"rq:queue:{settings.queue_name}") == 0
    assert not conn.exists(f"rq:job:{rq_job_id('plan', doc['id'])}")
    assert c.get(r.headers["Location"]).get_json() == doc
    again = c.post("/v1/plans", json=body, headers=head)
    assert again.status_code == 200 and again.headers["Idempotent-Replayed"] == "true"
    assert again.get_json() == doc
    items = c.get("/v1/plans").get_json()["items"]
    assert [(it["id"], it["status"]) for it in items] == [(doc["id"], "done")]
    metrics = conn.hgetall(f"{settings.key_prefix}:metrics:plan")
    assert metrics[b"finished:done"] == b"1"


def test_small_heuristic_plans_are_finished_in_the_request_without_a_wait(
    app: Any, settings: Any
) -> None:
    """Issue 20 (build 1): a client that does not wait gets the same in-request solving;
    RFC 7240 and the contract (openapi/openapi.yaml) keep ``201`` for an answered wait, so
    the answer is ``202`` with the record already ``done`` (no ``Retry-After``: nothing to
    poll for), the makespan of longest-first worked out by hand (Graham 1969), nothing on
    the queue, and the record reads back the same."""
    conn = app.extensions["spanwright"].store.conn
    end = time.monotonic() + 10
    while not conn.scard(f"rq:workers:{settings.queue_name}"):
        assert time.monotonic() < end, "the embedded worker did not start"
        time.sleep(0.01)
    durations = [2400 + 61 * i for i in range(17)]
    body = {
        "jobs": [{"id": f"ep03_sh{i:03d}", "duration": d} for i, d in enumerate(durations)],
        "node_count": 3,
        "method": "longest_first",
    }
    c = app.test_client()
    r = c.post("/v1/plans", json=body)
    doc = r.get_json()
    assert r.status_code == 202 and doc["status"] == "done", doc
    assert "Retry-After" not in r.headers
    assert doc["result"]["makespan"] == lpt_makespan(durations, 3)
    assert conn.llen(f"rq:queue:{settings.queue_name}") == 0
    assert c.get(r.headers["Location"]).get_json() == doc


def test_solving_in_the_request_can_be_turned_off(idle_app: Any, settings: Any) -> None:
    """``solve_here_max_jobs = 0`` (``SPANWRIGHT_SOLVE_HERE_MAX_JOBS``, service/settings.py)
    queues every plan, as RQ's documented ``Queue.enqueue`` does for any job: a worker
    registered on the queue (RQ's set of its workers) does not make the API solve it."""
    import dataclasses

    from service.app import create_app

    conn = idle_app.extensions["spanwright"].store.conn
    conn.sadd(f"rq:workers:{settings.queue_name}", "rq:worker:standing-by")
    app = create_app(dataclasses.replace(settings, solve_here_max_jobs=0), connection=conn)
    body = {**BODY, "method": "longest_first"}
    r = app.test_client().post("/v1/plans", json=body, headers={"Prefer": "wait=0.1"})
    assert r.status_code == 202 and r.get_json()["status"] == "queued"
    assert conn.llen(f"rq:queue:{settings.queue_name}") == 1
