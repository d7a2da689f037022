"""``/metrics`` in the Prometheus text format, correct under gunicorn's many processes.

Three sources, merged into one registry that is built afresh for every scrape:

* **HTTP latency and counts** (``spanwright_http_request_duration_seconds``,
  ``spanwright_http_requests_total``, by method, route template and status) are observed in
  the API process that served the request. Under gunicorn ``PROMETHEUS_MULTIPROC_DIR`` is
  set by the start-up shell (and wiped before each start), prometheus_client writes each
  process's values to its own file, and :class:`MultiProcessCollector` sums them at scrape
  time; ``child_exit`` in ``deploy/gunicorn.conf.py`` marks dead workers. Without the
  variable the metrics live in a registry private to the app (tests, ``spanwright serve``).
* **Solve seconds and gap at finish** happen in worker processes on other machines, so
  the worker records them into Redis (:func:`finish_counters`: a few
  ``HINCRBY``/``HINCRBYFLOAT`` on one small hash per kind, ``{prefix}:metrics:{kind}``, no
  TTL, applied by the same script that stores the result, so counted exactly once) and
  the API turns that hash into histograms and counters at scrape time. The counts survive
  API restarts and are shared by every API replica; they reset only if the hash is
  deleted (Prometheus treats that as a counter reset).
* **State read from Redis at scrape time**: records by status, queue depth, started and
  failed RQ registries, worker count. See :class:`RedisCollector` for the cost.

Only prometheus_client, redis and rq are used; nothing here imports Flask at module level
except for the type of ``init_metrics``'s app.
"""

from __future__ import annotations

import bisect
import math
import time
from collections.abc import Iterable, Iterator, Mapping
from dataclasses import dataclass
from typing import Any

import redis
from flask import Flask, Response, g, request
from prometheus_client import (
    CONTENT_TYPE_LATEST,
    CollectorRegistry,
    Counter,
    Histogram,
    generate_latest,
)
from prometheus_client.core import (
    CounterMetricFamily,
    GaugeMetricFamily,
    HistogramMetricFamily,
    Metric,
)
from prometheus_client.multiprocess import MultiProcessCollector

from .settings import Settings
from .store import KINDS, STATUSES

#: upper bounds (seconds) of HTTP latency; ``Prefer: wait`` requests reach the 30 s cap
HTTP_BUCKETS: tuple[float, ...] = (
    0.0025,
    0.005,
    0.01,
    0.025,
    0.05,
    0.1,
    0.25,
    0.5,
    1.0,
    2.5,
    5.0,
    10.0,
    30.0,
    60.0,
)
#: upper bounds (seconds) of the solve-time histogram: the HTTP ladder, with a finer first
#: step and room above the default 60 s budget cap
SOLVE_SECONDS_BUCKETS: tuple[float, ...] = (0.001, *HTTP_BUCKETS, 120.0)
#: upper bounds of the relative gap ``(makespan - lower_bound) / lower_bound`` at finish
GAP_BUCKETS: tuple[float, ...] = (0.0, 0.0001, 0.001, 0.005, 0.01, 0.02, 0.05, 0.1, 0.2, 0.5)
#: most records the scrape-time status census reads (newest first, across tenants)
CENSUS_CAP = 20_000
_CENSUS_BATCH = 1_000
#: seconds a scrape reuses the list of tenant index keys found by ``SCAN``
INDEX_SCAN_TTL = 300.0


def metrics_key(prefix: str, kind: str) -> str:
    """The Redis hash holding the worker-side counters and histogram buckets of ``kind``."""
    return f"{prefix}:metrics:{kind}"


def _bucket_index(bounds: tuple[float, ...], value: float) -> int:
    """Index of the first bound >= value (``len(bounds)`` means +Inf)."""
    return bisect.bisect_left(bounds, value)


def finish_counters(
    prefix: str, kind: str, result_dict: Mapping[str, Any]
) -> tuple[str, list[tuple[str, str, float]]]:
    """The increments that count one finished ``kind`` record: (hash key, [(op, field, by)]).

    ``op`` is ``"i"`` (``HINCRBY``) or ``"f"`` (``HINCRBYFLOAT``). ``result_dict`` is the
    contract's ``result`` object (``PlanResult.to_dict()`` or the sizing's; the assignment
    is not read): ``solve_seconds``, ``gap`` (null when no finite gap exists),
    ``stop_reason`` and ``proven_optimal`` are read when present. Status is ``cancelled``
    when ``stop_reason == "cancelled"``, else ``done``. Never raises on a missing field.
    ``Store.finish`` applies them in its own script; :func:`record_finish` on its own.
    """
    stop = result_dict.get("stop_reason")
    status = "cancelled" if stop == "cancelled" else "done"
    out: list[tuple[str, str, float]] = [("i", f"finished:{status}", 1)]
    if isinstance(stop, str) and stop:
        out.append(("i", f"stop_reason:{stop}", 1))
    if result_dict.get("proven_optimal") is True:
        out.append(("i", "proven_optimal", 1))
    secs = result_dict.get("solve_seconds")
    if isinstance(secs, int | float) and math.isfinite(secs) and secs >= 0:
        out.append(("i", f"solve_seconds:b{_bucket_index(SOLVE_SECONDS_BUCKETS, secs)}", 1))
        out.append(("f", "solve_seconds:sum", float(secs)))
    gap = result_dict.get("gap")
    if isinstance(gap, int | float) and math.isfinite(gap) and gap >= 0:
        out.append(("i", f"gap:b{_bucket_index(GAP_BUCKETS, gap)}", 1))
        out.append(("f", "gap:sum", float(gap)))
    else:
        out.append(("i", "gap:unknown", 1))
    return metrics_key(prefix, kind), out


def failed_counters(prefix: str, kind: str) -> tuple[str, list[tuple[str, str, float]]]:
    """The increment that counts one ``kind`` record ended ``failed``."""
    return metrics_key(prefix, kind), [("i", "finished:failed", 1)]


def record_finish(
    conn: redis.Redis, prefix: str, kind: str, result_dict: Mapping[str, Any]
) -> None:
    """Count one finished ``kind`` record from its result object, on its own (one round
    trip); see :func:`finish_counters`. A Redis error propagates (the caller decides
    whether metrics may fail a job: they should not). The worker counts inside
    ``Store.finish`` instead, in the same script that stores the result."""
    key, increments = finish_counters(prefix, kind, result_dict)
    pipe = conn.pipeline(transaction=False)
    for op, name, amount in increments:
        if op == "f":
            pipe.hincrbyfloat(key, name, amount)
        else:
            pipe.hincrby(key, name, int(amount))
    pipe.execute()


def record_failed(conn: redis.Redis, prefix: str, kind: str) -> None:
    """Count one ``kind`` record that ended ``failed`` (bad input found by the core, or a
    crash after RQ's retry); one ``HINCRBY``."""
    conn.hincrby(metrics_key(prefix, kind), "finished:failed", 1)


def _histogram(
    name: str, doc: str, kind: str, fields: Mapping[str, str], stem: str, bounds: tuple[float, ...]
) -> HistogramMetricFamily:
    fam = HistogramMetricFamily(name, doc, labels=["kind"])
    cumulative = 0
    buckets: list[tuple[str, float]] = []
    for i, ub in enumerate((*bounds, math.inf)):
        cumulative += int(fields.get(f"{stem}:b{i}", 0))
        buckets.append(("+Inf" if math.isinf(ub) else repr(ub), cumulative))
    fam.add_metric([kind], buckets, float(fields.get(f"{stem}:sum", 0.0)))
    return fam


class RedisCollector:
    """Metrics computed from Redis when scraped (used on a per-scrape registry only).

    Cost per scrape, for ``R`` stored records of a kind (capped at :data:`CENSUS_CAP`) and
    ``T`` tenants: one ``ZREVRANGEBYLEX`` per tenant and kind, then ``HGET status`` for each
    of the newest ``R`` ids in pipelines of 1,000 (``R/1000`` round trips, ``R`` O(1)
    commands); plus ``HGETALL`` of the two small metrics hashes, one ``LLEN``, two
    ``ZCARD`` and one ``SMEMBERS`` (worker count). Finding the tenants' index keys takes a
    ``SCAN`` of the whole keyspace (keys/1000 round trips), done at most every
    :data:`INDEX_SCAN_TTL` seconds per API process. Each API process scraped pays this.
    """

    def __init__(
        self,
        conn: redis.Redis,
        settings: Settings,
        *,
        cap: int = CENSUS_CAP,
        index_ttl: float = INDEX_SCAN_TTL,
    ) -> None:
        self.conn = conn
        self.settings = settings
        self.cap = cap
        self.index_ttl = index_ttl
        self._indexes: dict[str, tuple[float, list[bytes]]] = {}

    def _index_keys(self, kind: str) -> list[bytes]:
        """The tenants' index keys of ``kind``: one ``SCAN`` pass, reused for ``index_ttl`` s
        (a tenant's first records may be missed from the census for that long)."""
        now = time.monotonic()
        hit = self._indexes.get(kind)
        if hit is not None and now - hit[0] < self.index_ttl:
            return hit[1]
        # tenant names never contain ':' (they come from the keys file), so the pattern is exact
        pattern = f"{self.settings.key_prefix}:index:*:{kind}"
        keys = sorted(set(self.conn.scan_iter(match=pattern, count=1000)))
        if keys:  # nothing yet: look again next scrape
            self._indexes[kind] = (now, keys)
        return keys

    def _census(self, kind: str) -> tuple[dict[str, int], bool]:
        """Count stored records of ``kind`` by status (newest ``cap`` ids); (counts, truncated)."""
        prefix = self.settings.key_prefix
        counts = dict.fromkeys(STATUSES, 0)
        ids: list[bytes] = []
        truncated = False
        for index in self._index_keys(kind):
            left = self.cap - len(ids)
            if left <= 0:
                truncated = True
                break
            got = self.conn.zrevrangebylex(index, "+", "-", 0, left + 1)
            if len(got) > left:
                truncated = True
            ids.extend(got[:left])
        for start in range(0, len(ids), _CENSUS_BATCH):
            pipe = self.conn.pipeline(transaction=False)
            for rid in ids[start : start + _CENSUS_BATCH]:
                pipe.hget(f"{prefix}:{kind}:{rid.decode()}", "status")
            for status in pipe.execute():
                if status is None:
                    continue  # expired; its index entry is dropped by the next listing
                s = status.decode()
                counts[s] = counts.get(s, 0) + 1
        return counts, truncated

    def collect(self) -> Iterator[Metric]:
        from rq import Queue, Worker
        from rq.registry import FailedJobRegistry, StartedJobRegistry
        from rq.serializers import JSONSerializer

        prefix = self.settings.key_prefix
        up = GaugeMetricFamily("spanwright_redis_up", "1 if Redis answered this scrape")
        try:
            self.conn.ping()
        except redis.RedisError:
            up.add_metric([], 0)
            yield up
            return
        up.add_metric([], 1)
        yield up

        records = GaugeMetricFamily(
            "spanwright_records",
            "stored records by kind and status (read from Redis at scrape time)",
            labels=["kind", "status"],
        )
        truncated = GaugeMetricFamily(
            "spanwright_records_census_truncated",
            f"1 if more than {self.cap} records exist and only the newest were counted",
            labels=["kind"],
        )
        finished = CounterMetricFamily(
            "spanwright_finished",
            "records finished by a worker, by kind and status (recorded in Redis)",
            labels=["kind", "status"],
        )
        stops = CounterMetricFamily(
            "spanwright_stop_reason",
            "records finished by a worker, by kind and stop reason",
            labels=["kind", "stop_reason"],
        )
        optimal = CounterMetricFamily(
            "spanwright_proven_optimal",
            "records whose result was proven optimal",
            labels=["kind"],
        )
        gap_unknown = CounterMetricFamily(
            "spanwright_gap_unknown",
            "finished records without a finite gap (e.g. a zero lower bound)",
            labels=["kind"],
        )
        hists: list[HistogramMetricFamily] = []
        for kind in KINDS:
            counts, cut = self._census(kind)
            for status, n in counts.items():
                records.add_metric([kind, status], n)
            truncated.add_metric([kind], 1 if cut else 0)
            raw = self.conn.hgetall(metrics_key(prefix, kind))
            fields = {k.decode(): v.decode() for k, v in raw.items()}
            for status in ("done", "failed", "cancelled"):
                finished.add_metric([kind, status], int(fields.get(f"finished:{status}", 0)))
            for name, value in sorted(fields.items()):
                if name.startswith("stop_reason:"):
                    stops.add_metric([kind, name.split(":", 1)[1]], int(value))
            optimal.add_metric([kind], int(fields.get("proven_optimal", 0)))
            gap_unknown.add_metric([kind], int(fields.get("gap:unknown", 0)))
            hists.append(
                _histogram(
                    "spanwright_solve_seconds",
                    "solver wall-clock seconds at finish (recorded by the workers)",
                    kind,
                    fields,
                    "solve_seconds",
                    SOLVE_SECONDS_BUCKETS,
                )
            )
            hists.append(
                _histogram(
                    "spanwright_gap_at_finish",
                    "relative gap (makespan - lower_bound) / lower_bound at finish",
                    kind,
                    fields,
                    "gap",
                    GAP_BUCKETS,
                )
            )
        yield records
        yield truncated
        yield finished
        yield stops
        yield optimal
        yield gap_unknown
        # one family per name: merge the per-kind samples
        by_name: dict[str, HistogramMetricFamily] = {}
        for h in hists:
            if h.name in by_name:
                by_name[h.name].samples.extend(h.samples)
            else:
                by_name[h.name] = h
        yield from by_name.values()

        queue = Queue(self.settings.queue_name, connection=self.conn, serializer=JSONSerializer)
        depth = GaugeMetricFamily(
            "spanwright_queue_jobs",
            "RQ jobs of the service queue: waiting, started (solving) and failed",
            labels=["queue", "state"],
        )
        depth.add_metric([queue.name, "queued"], queue.count)
        started = StartedJobRegistry(queue=queue).get_job_count(cleanup=False)
        depth.add_metric([queue.name, "started"], started)
        failed = FailedJobRegistry(queue=queue).get_job_count(cleanup=False)
        depth.add_metric([queue.name, "failed"], failed)
        yield depth
        workers = GaugeMetricFamily(
            "spanwright_workers", "RQ workers listening on the service queue", labels=["queue"]
        )
        workers.add_metric([queue.name], Worker.count(connection=self.conn, queue=queue))
        yield workers

    def describe(self) -> Iterable[Metric]:
        """Nothing up front: the registry must not call :meth:`collect` at registration."""
        return []


@dataclass
class HttpMetrics:
    """The per-process HTTP metrics of one app (files under multiprocess, else private)."""

    latency: Histogram
    requests: Counter
    registry: CollectorRegistry | None
    multiprocess_dir: str | None

    @classmethod
    def build(cls, multiprocess_dir: str | None) -> HttpMetrics:
        registry = None if multiprocess_dir else CollectorRegistry()
        labels = ["method", "route", "status"]
        latency = Histogram(
            "spanwright_http_request_duration_seconds",
            "HTTP request latency by method, route template and status",
            labels,
            buckets=HTTP_BUCKETS,
            registry=registry,
        )
        requests = Counter(
            "spanwright_http_requests",
            "HTTP requests by method, route template and status",
            labels,
            registry=registry,
        )
        return cls(latency, requests, registry, multiprocess_dir)

    def observe(self, method: str, route: str, status: int, seconds: float) -> None:
        labels = (method, route, str(status))
        self.latency.labels(*labels).observe(seconds)
        self.requests.labels(*labels).inc()


def route_of(rule: Any) -> str:
    """The route template (``/v1/plans/<rid>``), never the raw path (bounded cardinality)."""
    return str(rule.rule) if rule is not None else "unmatched"


def exposition(http: HttpMetrics, collector: RedisCollector) -> bytes:
    """The text of one scrape: a fresh registry with the process files and Redis state."""
    registry = CollectorRegistry(support_collectors_without_names=True)
    if http.multiprocess_dir:
        MultiProcessCollector(registry, path=http.multiprocess_dir)
    else:
        assert http.registry is not None
        registry.register(_Forward(http.registry))
    registry.register(collector)  # type: ignore[arg-type]
    out: bytes = generate_latest(registry)
    return out


class _Forward:
    """Collects another registry's metrics into this one (single-process mode)."""

    def __init__(self, registry: CollectorRegistry) -> None:
        self.registry = registry

    def collect(self) -> Iterator[Metric]:
        yield from self.registry.collect()

    def describe(self) -> Iterable[Metric]:
        return []


def init_metrics(
    app: Flask,
    settings: Settings,
    connection: redis.Redis,
    *,
    multiprocess_dir: str | None = None,
) -> HttpMetrics:
    """Time every request of ``app`` and serve ``GET /metrics``.

    ``multiprocess_dir`` is ``PROMETHEUS_MULTIPROC_DIR`` as the start-up process found it
    (``service/wsgi.py`` passes it); it must have been set before prometheus_client was
    first imported, which the start-up shell guarantees.
    """
    http = HttpMetrics.build(multiprocess_dir)
    collector = RedisCollector(connection, settings)

    def _start_timer() -> None:
        g.spanwright_t0 = time.perf_counter()

    # first of all before-request hooks, so requests refused by authentication (401) or a
    # rate limit (429) are timed and counted too
    app.before_request_funcs.setdefault(None, []).insert(0, _start_timer)

    @app.after_request
    def _observe(resp: Response) -> Response:
        t0 = g.pop("spanwright_t0", None)
        if t0 is not None:
            http.observe(
                request.method,
                route_of(request.url_rule),
                resp.status_code,
                time.perf_counter() - t0,
            )
        return resp

    def metrics_view() -> Response:
        return Response(exposition(http, collector), 200, {"Content-Type": CONTENT_TYPE_LATEST})

    app.add_url_rule("/metrics", "metrics", metrics_view, methods=["GET"])
    app.extensions["spanwright_metrics"] = http
    return http
