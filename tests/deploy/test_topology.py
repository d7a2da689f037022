"""The shipped topology, run for real: redis-server with deploy/redis.conf, gunicorn with
deploy/gunicorn.conf.py (the API unit's ExecStart), two workers with the worker unit's
ExecStart, then a bounded run of 500 small ``longest_first`` plans from a few concurrent
clients.

Checked: every plan ends ``done`` and none is lost (each id is listed once, the queue and
RQ registries are empty); each result is a valid schedule of exactly the submitted jobs
whose makespan obeys Graham's list-scheduling bound ``C <= sum(p)/m + (1 - 1/m) max(p)``
(R. L. Graham, "Bounds for certain multiprocessing anomalies", Bell System Technical
Journal 45, 1966) and is at least the trivial bound ``max(sum(p)/m, max(p))``; ``/metrics``
parses with prometheus_client's parser and its counters equal what the clients sent.
"""

from __future__ import annotations

import json
import random
import threading
import time
from collections import Counter
from collections.abc import Iterator
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass, field
from typing import Any

import pytest
from live import require
from spanwright_topology import Topology, http, samples

PLANS = 500
CLIENTS = 4
RUN_LIMIT = 150.0  # seconds for submitting and finishing every plan


def make_body(i: int, rng: random.Random) -> dict[str, Any]:
    """Batch ``i`` of an invented studio's nightly comp renders (seconds per shot)."""
    n = rng.randint(8, 40)
    jobs = [
        {"id": f"nightfall_ep{i % 9 + 1:02d}_sh{k:03d}", "duration": rng.randint(60, 3600)}
        for k in range(n)
    ]
    return {
        "jobs": jobs,
        "node_count": rng.randint(2, 8),
        "method": "longest_first",
        "name": f"nightfall-{i:03d}",
    }


@dataclass
class Run:
    topo: Topology
    bodies: list[dict[str, Any]]
    ids: list[str | None]
    finals: list[dict[str, Any] | None]
    sent: Counter[tuple[str, str, str]] = field(default_factory=Counter)
    metrics_text: str = ""
    listed: list[str] = field(default_factory=list)
    elapsed: float = 0.0
    errors: list[str] = field(default_factory=list)


def _drive(topo: Topology) -> Run:
    rng = random.Random(2026)
    bodies = [make_body(i, rng) for i in range(PLANS)]
    run = Run(topo, bodies, [None] * PLANS, [None] * PLANS)
    lock = threading.Lock()
    deadline = time.monotonic() + RUN_LIMIT

    def count(method: str, route: str, status: int) -> None:
        with lock:
            run.sent[(method, route, str(status))] += 1

    def one(i: int) -> None:
        headers = {"Idempotency-Key": f'"nightfall-{i:03d}"', "Prefer": "wait=10"}
        status, _, raw = http("POST", topo.base + "/v1/plans", bodies[i], headers)
        count("POST", "/v1/plans", status)
        if status not in (201, 202):
            run.errors.append(f"plan {i}: POST {status} {raw[:200]!r}")
            return
        doc = json.loads(raw)
        run.ids[i] = doc["id"]
        while doc["status"] in ("queued", "solving") and time.monotonic() < deadline:
            time.sleep(0.05)
            status, _, raw = http("GET", f"{topo.base}/v1/plans/{doc['id']}")
            count("GET", "/v1/plans/<rid>", status)
            doc = json.loads(raw)
        run.finals[i] = doc

    t0 = time.monotonic()
    with ThreadPoolExecutor(CLIENTS) as pool:
        list(pool.map(one, range(PLANS)))
    run.elapsed = time.monotonic() - t0
    cursor: str | None = None
    while True:
        url = topo.base + "/v1/plans?limit=200" + (f"&cursor={cursor}" if cursor else "")
        status, _, raw = http("GET", url)
        count("GET", "/v1/plans", status)
        page = json.loads(raw)
        run.listed += [it["id"] for it in page["items"]]
        cursor = page["next"]
        if not cursor:
            break
    status, _, raw = http("GET", topo.base + "/metrics")
    assert status == 200
    run.metrics_text = raw.decode()
    return run


@pytest.fixture(scope="module")
def run(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Run]:
    """Start the topology, drive the 500 plans, stop everything (and check it stopped)."""
    require("redis-server", "gunicorn")
    topo = Topology(tmp_path_factory.mktemp("topology"), workers=2)
    topo.start()
    try:
        yield _drive(topo)
    finally:
        topo.stop()
        alive = [name for name, p in topo.procs.items() if p.poll() is None]
        assert not alive, f"still running after stop: {alive}"


@pytest.mark.slow
def test_every_plan_done_and_none_lost(run: Run) -> None:
    """All 500 plans were accepted, finished ``done`` within the time limit, and the listing
    holds each id exactly once; nothing is left queued, started or failed in RQ."""
    assert not run.errors, run.errors[:5]
    assert run.elapsed < RUN_LIMIT
    assert all(run.ids) and len(set(run.ids)) == PLANS
    statuses = Counter(f["status"] if f else "missing" for f in run.finals)
    assert statuses == {"done": PLANS}
    assert sorted(run.listed) == sorted(i for i in run.ids if i)
    got = samples(run.metrics_text)
    for state in ("queued", "started", "failed"):
        assert got[("spanwright_queue_jobs", (("queue", "spanwright"), ("state", state)))] == 0


@pytest.mark.slow
def test_results_are_valid_schedules_within_graham_bound(run: Run) -> None:
    """Each result schedules exactly the submitted jobs, without overlap on a node, and its
    makespan lies between the trivial lower bound and Graham's list-scheduling bound."""
    for body, final in zip(run.bodies, run.finals, strict=True):
        assert final is not None
        res = final["result"]
        durations = {j["id"]: j["duration"] for j in body["jobs"]}
        m = body["node_count"]
        seen: list[str] = []
        for row in res["assignment"]:
            t = 0.0
            for job in sorted(row["jobs"], key=lambda j: j["start"]):
                assert job["start"] >= t - 1e-9
                assert job["end"] - job["start"] == pytest.approx(durations[job["id"]])
                t = job["end"]
                seen.append(job["id"])
            assert row["load"] == pytest.approx(t)
        assert sorted(seen) == sorted(durations)
        total, longest = sum(durations.values()), max(durations.values())
        assert res["makespan"] >= max(total / m, longest) - 1e-9
        assert res["makespan"] <= total / m + (1 - 1 / m) * longest + 1e-9
        assert res["lower_bound"] <= res["makespan"] + 1e-9


@pytest.mark.slow
def test_metrics_agree_with_what_was_sent(run: Run) -> None:
    """``/metrics`` parses; HTTP request counters and latency counts per (method, route,
    status) equal the clients' own tally for the plan routes; the census says 500 done and
    nothing else; both workers are counted."""
    got = samples(run.metrics_text)
    posts = sum(n for (m, r, _), n in run.sent.items() if m == "POST" and r == "/v1/plans")
    assert posts == PLANS
    for (method, route, status), n in run.sent.items():
        labels = (("method", method), ("route", route), ("status", status))
        assert got[("spanwright_http_requests_total", labels)] == n, labels
        assert got[("spanwright_http_request_duration_seconds_count", labels)] == n, labels
    exposed_plan_routes = {
        k[1]
        for k in got
        if k[0] == "spanwright_http_requests_total" and dict(k[1])["route"].startswith("/v1/")
    }
    assert len(exposed_plan_routes) == len(run.sent)
    for status in ("queued", "solving", "failed", "cancelled"):
        assert got[("spanwright_records", (("kind", "plan"), ("status", status)))] == 0
    assert got[("spanwright_records", (("kind", "plan"), ("status", "done")))] == PLANS
    assert got[("spanwright_workers", (("queue", "spanwright"),))] == 2
    assert got[("spanwright_redis_up", ())] == 1


@pytest.mark.slow
def test_worker_side_metrics_agree(run: Run) -> None:
    """Solve seconds and gap at finish, recorded by the workers into Redis (in the script that
    stores each result), count every plan: 500 solve-time observations, 500 finished
    ``done``, and gap observations plus unknown gaps add up to 500."""
    got = samples(run.metrics_text)
    kind = (("kind", "plan"),)
    assert got[("spanwright_solve_seconds_count", kind)] == PLANS
    assert got[("spanwright_finished_total", (("kind", "plan"), ("status", "done")))] == PLANS
    gaps = (
        got[("spanwright_gap_at_finish_count", kind)] + got[("spanwright_gap_unknown_total", kind)]
    )
    assert gaps == PLANS
    stops = sum(v for (name, _), v in got.items() if name == "spanwright_stop_reason_total")
    assert stops == PLANS
