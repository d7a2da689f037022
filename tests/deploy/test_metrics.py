"""``/metrics``: worker-side histograms in Redis, the scrape-time census, HTTP metrics.

The exposition is read back with prometheus_client's own parser
(``text_string_to_metric_families``), and every figure is compared with a count kept by
the test itself (Prometheus histogram semantics: bucket ``le=b`` counts the observations
``<= b``, cumulatively, from the Prometheus exposition-format documentation).
"""

from __future__ import annotations

import math
import random
import subprocess
import sys
import textwrap
from pathlib import Path
from typing import Any

import fakeredis
import pytest
from spanwright_topology import samples

from service.app import create_app
from service.metrics import (
    GAP_BUCKETS,
    SOLVE_SECONDS_BUCKETS,
    HttpMetrics,
    RedisCollector,
    exposition,
    init_metrics,
    record_finish,
)
from service.queue import JobQueue
from service.settings import Settings
from service.store import STATUSES, Store

REPO = Path(__file__).resolve().parents[2]


def scrape(conn: fakeredis.FakeRedis, settings: Settings, cap: int = 20_000) -> dict[Any, float]:
    http = HttpMetrics.build(None)
    return samples(exposition(http, RedisCollector(conn, settings, cap=cap)).decode())


def test_record_finish_histograms_match_a_direct_count(
    fake_conn: fakeredis.FakeRedis, settings: Settings
) -> None:
    """Buckets of solve seconds and gap equal the number of results <= each bound (cumulative,
    Prometheus semantics), sums equal the exact sums, and done/cancelled/stop reasons add up."""
    rng = random.Random(7)
    results: list[dict[str, Any]] = []
    for i in range(150):
        secs = rng.choice([0.0, 0.01, 5.0, 200.0, rng.expovariate(10.0)])  # includes bounds
        gap = rng.choice([0.0, 0.01, None, rng.random() * 0.3, float("inf")])
        stop = rng.choice(["heuristic", "proved_optimal", "time_budget", "cancelled"])
        results.append(
            {"solve_seconds": secs, "gap": gap, "stop_reason": stop, "proven_optimal": i % 3 == 0}
        )
    for r in results:
        record_finish(fake_conn, settings.key_prefix, "plan", r)
    got = scrape(fake_conn, settings)

    for name, field, bounds in (
        ("spanwright_solve_seconds", "solve_seconds", SOLVE_SECONDS_BUCKETS),
        ("spanwright_gap_at_finish", "gap", GAP_BUCKETS),
    ):
        values = [r[field] for r in results if r[field] is not None and math.isfinite(r[field])]
        for b in (*bounds, math.inf):
            le = "+Inf" if math.isinf(b) else repr(b)
            key = (name + "_bucket", (("kind", "plan"), ("le", le)))
            assert got[key] == sum(1 for v in values if v <= b), (name, le)
        assert got[(name + "_count", (("kind", "plan"),))] == len(values)
        assert math.isclose(got[(name + "_sum", (("kind", "plan"),))], math.fsum(values))
    cancelled = sum(r["stop_reason"] == "cancelled" for r in results)
    assert got[("spanwright_finished_total", (("kind", "plan"), ("status", "cancelled")))] == (
        cancelled
    )
    assert got[("spanwright_finished_total", (("kind", "plan"), ("status", "done")))] == (
        len(results) - cancelled
    )
    for stop in ("heuristic", "proved_optimal", "time_budget", "cancelled"):
        key = ("spanwright_stop_reason_total", (("kind", "plan"), ("stop_reason", stop)))
        assert got[key] == sum(r["stop_reason"] == stop for r in results)
    unknown = sum(1 for r in results if r["gap"] is None or not math.isfinite(r["gap"]))
    assert got[("spanwright_gap_unknown_total", (("kind", "plan"),))] == unknown
    assert got[("spanwright_proven_optimal_total", (("kind", "plan"),))] == 50


def test_census_counts_stored_records_by_status_and_reports_truncation(
    fake_conn: fakeredis.FakeRedis, settings: Settings
) -> None:
    """``spanwright_records`` equals the statuses the store was driven to, across tenants;
    with a cap below the record count it counts exactly the cap and says it was truncated."""
    store = Store(fake_conn, prefix=settings.key_prefix, retention=3600)
    want = dict.fromkeys(STATUSES, 0)
    rng = random.Random(3)
    for i in range(60):
        rid = store.create("plan", f"tenant{i % 3}", b"{}", {"method": "list"})
        target = rng.choice(STATUSES)
        if target != "queued":
            store.mark_solving("plan", rid)
        if target in ("done", "failed", "cancelled"):
            store.finish("plan", rid, target)
        want[target] += 1
    got = scrape(fake_conn, settings)
    for status, n in want.items():
        assert got[("spanwright_records", (("kind", "plan"), ("status", status)))] == n
    assert got[("spanwright_records_census_truncated", (("kind", "plan"),))] == 0
    capped = scrape(fake_conn, settings, cap=25)
    total = sum(capped[("spanwright_records", (("kind", "plan"), ("status", s)))] for s in STATUSES)
    assert total == 25
    assert capped[("spanwright_records_census_truncated", (("kind", "plan"),))] == 1


def test_queue_depth_and_worker_count(fake_conn: fakeredis.FakeRedis, settings: Settings) -> None:
    """Queue depth equals the jobs enqueued and not taken; the worker gauge counts a
    registered RQ worker."""
    from rq import SimpleWorker
    from rq.serializers import JSONSerializer

    queue = JobQueue(fake_conn, settings)
    for i in range(7):
        queue.enqueue("plan", f"{i:021x}", 1.0)
    worker = SimpleWorker([queue.queue], connection=fake_conn, serializer=JSONSerializer)
    worker.register_birth()
    got = scrape(fake_conn, settings)
    q = settings.queue_name
    assert got[("spanwright_queue_jobs", (("queue", q), ("state", "queued")))] == 7
    assert got[("spanwright_queue_jobs", (("queue", q), ("state", "started")))] == 0
    assert got[("spanwright_workers", (("queue", q),))] == 1
    assert got[("spanwright_redis_up", ())] == 1


def test_http_metrics_count_what_was_sent(
    fake_conn: fakeredis.FakeRedis, settings: Settings
) -> None:
    """Request counters and latency histogram counts per (method, route template, status)
    equal the requests the test sent; unknown paths share one ``unmatched`` route."""
    app = create_app(settings, connection=fake_conn)
    init_metrics(app, settings, fake_conn)
    client = app.test_client()
    sent: dict[tuple[str, str, str], int] = {}

    def send(method: str, path: str, route: str, **kw: Any) -> None:
        resp = client.open(path, method=method, **kw)
        key = (method, route, str(resp.status_code))
        sent[key] = sent.get(key, 0) + 1

    for _ in range(5):
        send("GET", "/healthz", "/healthz")
    for i in range(3):
        send("GET", f"/no/such/{i}", "unmatched")
    for _ in range(4):
        send("POST", "/v1/plans", "/v1/plans", data="not json", content_type="application/json")
    send("GET", "/v1/plans/0123456789abcdef01234", "/v1/plans/<rid>")
    got = samples(client.get("/metrics").get_data(as_text=True))
    for (method, route, status), n in sent.items():
        labels = (("method", method), ("route", route), ("status", status))
        assert got[("spanwright_http_requests_total", labels)] == n
        assert got[("spanwright_http_request_duration_seconds_count", labels)] == n
    routes = {dict(k[1]).get("route") for k in got if k[0] == "spanwright_http_requests_total"}
    assert routes == {r for _, r, _ in sent}  # no raw paths leak into labels


@pytest.mark.slow
def test_multiprocess_files_are_summed_across_processes(tmp_path: Path, settings: Settings) -> None:
    """Two processes (a parent and its fork, as gunicorn's master forks workers) observing
    into PROMETHEUS_MULTIPROC_DIR show up summed in one scrape (prometheus_client's
    MultiProcessCollector)."""
    code = textwrap.dedent(
        """
        import os, sys
        from service.metrics import HttpMetrics
        pid = os.fork()
        m = HttpMetrics.build(sys.argv[1])
        for _ in range(3 if pid == 0 else 4):
            m.observe("GET", "/healthz", 200, 0.001)
        if pid == 0:
            os._exit(0)
        os.waitpid(pid, 0)
        """
    )
    env = {"PROMETHEUS_MULTIPROC_DIR": str(tmp_path), "PYTHONPATH": str(REPO), "PATH": ""}
    subprocess.run([sys.executable, "-c", code, str(tmp_path)], env=env, check=True, timeout=60)
    assert len(list(tmp_path.glob("*.db"))) >= 2  # one file per process and metric type
    conn = fakeredis.FakeRedis(server=fakeredis.FakeServer())
    http = HttpMetrics.build(str(tmp_path))
    got = samples(exposition(http, RedisCollector(conn, settings)).decode())
    labels = (("method", "GET"), ("route", "/healthz"), ("status", "200"))
    assert got[("spanwright_http_requests_total", labels)] == 7
    assert got[("spanwright_http_request_duration_seconds_count", labels)] == 7


def test_metrics_hash_stays_small(fake_conn: fakeredis.FakeRedis, settings: Settings) -> None:
    """However many results are recorded, the worker-side hash holds a bounded set of fields
    (buckets + sums + a few counters), so it never grows with traffic."""
    for i in range(200):
        record_finish(
            fake_conn,
            settings.key_prefix,
            "plan",
            {"solve_seconds": i / 100, "gap": i / 1000, "stop_reason": "heuristic"},
        )
    n_fields = fake_conn.hlen(f"{settings.key_prefix}:metrics:plan")
    bound = len(SOLVE_SECONDS_BUCKETS) + len(GAP_BUCKETS) + 2 + 2 + 10
    assert 0 < n_fields <= bound


def test_census_reuses_the_tenant_list_for_its_ttl(
    fake_conn: fakeredis.FakeRedis, settings: Settings
) -> None:
    """The SCAN for tenant indexes is reused within ``index_ttl`` (a new tenant shows up
    after it expires) and an empty result is never cached."""
    store = Store(fake_conn, prefix=settings.key_prefix, retention=3600)
    collector = RedisCollector(fake_conn, settings, index_ttl=3600)
    http = HttpMetrics.build(None)
    key = ("spanwright_records", (("kind", "plan"), ("status", "queued")))

    def queued(c: RedisCollector) -> float:
        return samples(exposition(http, c).decode())[key]

    assert queued(collector) == 0
    store.create("plan", "alpha", b"{}", {})
    assert queued(collector) == 1  # the empty first answer was not cached
    store.create("plan", "beta", b"{}", {})
    store.create("plan", "alpha", b"{}", {})
    assert queued(collector) == 2  # beta's index is not known yet
    assert queued(RedisCollector(fake_conn, settings, index_ttl=0)) == 3
