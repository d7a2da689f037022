"""Enqueueing records for the workers, with RQ: one queue, JSON serializer, crash guard.

The task is ``workers.tasks.run_job(kind=, record_id=, prefix=, retention=,
progress_interval=)``; everything it needs travels in its (JSON) arguments, so a worker
process needs nothing but the Redis URL. ``job_timeout`` is the time budget plus a margin
(plus the simulation a request asks for, :func:`simulation_allowance`): the solver stops
itself on its budget, the timeout only catches a hung or runaway job. ``Retry(max=1)``
re-runs a job once after a crash (a killed worker, an out-of-memory horse); the solver is
deterministic, so a re-run gives the same plan. :meth:`JobQueue.reap` (run by the API at
most every 2 s) hands back jobs of killed workers on its host within seconds; elsewhere a
dead worker's entry in the started registry lapses once its heartbeat stops (at most about
70 s, ``service/worker.py``) and the same clean-up re-queues it.
"""

from __future__ import annotations

import math
import os
import socket
import time
from typing import Any

import redis
from redis.client import Pipeline
from rq import Callback, Queue, Retry, Worker, worker_registration
from rq.job import Job
from rq.registry import StartedJobRegistry
from rq.serializers import JSONSerializer
from rq.timeouts import TimerDeathPenalty
from rq.utils import parse_composite_key

from .settings import Settings

TASK = "workers.tasks.run_job"
ON_FAILURE = "workers.tasks.on_failure"


#: seconds one Monte-Carlo draw (one job in one sample) may cost, generously: measured
#: about 10 ns static and 45 ns dynamic on a 2-core machine (bench/RESULTS.md), times 4
SECONDS_PER_DRAW = 2e-7
#: node counts a sizing "to a confidence" may simulate (gallop, bisect, step down)
CONFIDENCE_COUNTS = 40


def simulation_allowance(kind: str, body: Any, *, plain: bool = False) -> float:
    """Seconds of Monte-Carlo simulation a request asks for on top of its time budget.

    The confidence block (``workers/planning/confidence.py``) runs after the solve and
    outside the budget: the static and the dynamic policy over ``confidence_samples``
    samples of every job, and for a sizing with a ``confidence`` target, up to
    :data:`CONFIDENCE_COUNTS` node counts more. The job timeout, a crash guard only, must
    not cut that work short. ``plain``: every job is a plain ``{id, duration[, group]}``
    (the body was read in columns), so no job is looked at for a ``duration_p90``.
    """
    if not isinstance(body, dict) or not isinstance(body.get("jobs"), list):
        return 0.0
    jobs = body["jobs"]
    asked = any(k in body for k in ("spread", "confidence_samples", "confidence")) or (
        not plain and any(isinstance(j, dict) and "duration_p90" in j for j in jobs)
    )
    if not asked:
        return 0.0
    samples = body.get("confidence_samples", 1000)
    samples = samples if isinstance(samples, int) and samples > 0 else 1000
    runs = 2 + (CONFIDENCE_COUNTS if kind == "sizing" and "confidence" in body else 0)
    return samples * len(jobs) * runs * SECONDS_PER_DRAW


def rq_job_id(kind: str, rid: str) -> str:
    """RQ's id of the job computing record ``rid`` (letters, digits, ``_`` and ``-``)."""
    return f"{kind}-{rid}"


#: an idle ``spanwright worker`` beats at least every WORKER_TTL - 15 s (RQ's dequeue
#: timeout) and a busy one every JOB_MONITORING_INTERVAL; a worker whose last beat is
#: older than this is taken for dead by ``/readyz``
WORKER_TTL = 60
FRESH_HEARTBEAT = WORKER_TTL + 15


class JobQueue:
    """The one queue between the API and the workers."""

    def __init__(self, conn: redis.Redis, settings: Settings) -> None:
        self.settings = settings
        self.queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
        self._last_reap = float("-inf")
        self._workers_seen = (float("-inf"), False)
        self._push_back = conn.register_script(_PUSH_BACK)

    def enqueue(
        self,
        kind: str,
        rid: str,
        time_budget: float,
        pipeline: Pipeline | None = None,
        extra_seconds: float = 0.0,
    ) -> None:
        """Queue the job of record ``rid``; with ``pipeline`` (in a transaction) RQ only adds
        its writes to it (RQ's documented ``pipeline`` argument), the caller executes.
        ``extra_seconds`` is work the request asks for beyond its budget (see
        :func:`simulation_allowance`), added to the crash-guard timeout."""
        s = self.settings
        self.queue.enqueue(
            TASK,
            kwargs={
                "kind": kind,
                "record_id": rid,
                "prefix": s.key_prefix,
                "retention": s.retention,
                "progress_interval": s.progress_interval,
            },
            job_id=rq_job_id(kind, rid),
            job_timeout=math.ceil(time_budget + extra_seconds) + s.job_timeout_margin,
            retry=Retry(max=1),
            result_ttl=0,  # the result lives under our own keys with our own retention
            failure_ttl=s.retention,
            on_failure=Callback(ON_FAILURE),
            description=f"{kind} {rid}",
            pipeline=pipeline,
        )

    def workers(self) -> int:
        """How many workers listen on the queue and are alive: their heartbeat is at most
        :data:`FRESH_HEARTBEAT` seconds old. (RQ keeps a killed worker's key until its TTL
        ends, so counting keys would call a farm with every worker dead ready.)"""
        from datetime import UTC, datetime

        now = datetime.now(UTC)
        alive = 0
        for w in Worker.all(connection=self.queue.connection, queue=self.queue):
            beat = w.last_heartbeat
            if beat is None:
                continue
            if beat.tzinfo is None:
                beat = beat.replace(tzinfo=UTC)
            if (now - beat).total_seconds() <= FRESH_HEARTBEAT:
                alive += 1
        return alive

    def has_workers(self, max_age: float = 1.0) -> bool:
        """Whether any worker is registered on the queue (RQ's set of its workers), read at
        most every ``max_age`` seconds per queue object."""
        now = time.monotonic()
        if now - self._workers_seen[0] >= max_age:
            key = worker_registration.WORKERS_BY_QUEUE_KEY % self.queue.name
            self._workers_seen = (now, int(self.queue.connection.scard(key)) > 0)
        return self._workers_seen[1]

    def depth(self) -> int:
        return int(self.queue.count)

    def reap(self) -> int:
        """Hand jobs of dead workers back to RQ now; returns how many were found.

        RQ notices a killed worker only when its started-registry entry expires (its last
        heartbeat plus 60 s; ``LeanWorker`` beats every 10 s) *and* a worker then runs its
        maintenance (an idle worker may sit in a blocking dequeue for minutes). Here a
        worker on this host whose process is gone (``kill(pid, 0)`` fails) has its entries
        expired at once; then ``StartedJobRegistry.cleanup()`` runs RQ's own abandoned-job
        path (``Retry(max=1)`` re-queues it, else it fails via ``on_failure``). Workers on
        other hosts are left to the entry's expiry, which this cleanup also serves, so a
        dead worker's plan is never left ``solving`` for more than that expiry (or, should a
        worker die while it holds the queue's maintenance lock, than that lock's 15 minutes).
        """
        conn = self.queue.connection
        # the failure callback runs under a death penalty: a timer, since API threads
        # cannot install signal handlers (only the main thread can)
        reg = StartedJobRegistry(queue=self.queue, death_penalty_class=TimerDeathPenalty)
        here = socket.gethostname()
        dead = 0
        members: list[bytes] = list(conn.zrange(reg.key, 0, -1))  # type: ignore[arg-type]
        for member in members:
            job_id, _ = parse_composite_key(member.decode())
            name = _text(conn.hget(Job.key_for(job_id), "worker_name"))
            wkey = Worker.redis_worker_namespace_prefix + name
            host, pid = (_text(v) for v in conn.hmget(wkey, ["hostname", "pid"]))
            if host == here and pid.isdigit() and not _alive(int(pid)):
                conn.zadd(reg.key, {member: 0}, xx=True)
                dead += 1
        # RQ's cleanup reads the expired entries, handles each, then removes them: two at
        # once would retry one job twice (two runs, a third attempt). Workers clean under
        # the queue's maintenance lock; so does this (if a worker holds it, that worker's
        # cleanup or the next reap takes what was expired here).
        if self.queue.acquire_maintenance_lock():
            try:
                reg.cleanup()
            finally:
                self.queue.release_maintenance_lock()
        return dead + self._rescue_stranded()

    def _rescue_stranded(self, after: float = 5.0) -> int:
        """Put back on the queue the jobs stranded in RQ's intermediate list.

        A worker moves a job from the queue into ``{queue}:intermediate`` (``BLMOVE``) and
        then into the started registry. A worker that dies in between (killed, or its Redis
        restarted under it) leaves the job there; RQ's own sweeper *fails* such a job after
        a minute, and only when a worker runs maintenance. Here a job seen in the list, not
        started, for more than ``after`` seconds on two looks is pushed back (at-least-once:
        the solver is deterministic).
        """
        conn = self.queue.connection
        ikey = self.queue.key + ":intermediate"
        reg = StartedJobRegistry(queue=self.queue)
        started = {parse_composite_key(_text(m))[0] for m in conn.zrange(reg.key, 0, -1)}
        moved = 0
        now = time.time()
        for raw in conn.lrange(ikey, 0, -1):
            job_id = _text(raw)
            if job_id in started:
                continue
            seen = f"{self.settings.key_prefix}:stranded:{job_id}"
            if conn.set(seen, repr(now), nx=True, ex=3600):
                continue
            if now - float(_text(conn.get(seen)) or now) < after:
                continue
            if _text(conn.hget(Job.key_for(job_id), "status")) == "queued":
                moved += int(self._push_back(keys=[ikey, self.queue.key], args=[job_id]))
            conn.delete(seen)
        return moved

    def reap_if_due(self, every: float = 2.0) -> None:
        """:meth:`reap` at most every ``every`` seconds across all API processes."""
        now = time.monotonic()
        if now - self._last_reap < every:
            return
        self._last_reap = now
        lock = f"{self.settings.key_prefix}:reaper"
        if self.queue.connection.set(lock, b"1", nx=True, px=int(every * 1000)):
            self.reap()


# KEYS[1] intermediate list, KEYS[2] queue list; ARGV[1] job id: back to the front, atomically
_PUSH_BACK = """
if redis.call('LREM', KEYS[1], 1, ARGV[1]) == 1 then
  redis.call('LPUSH', KEYS[2], ARGV[1])  -- at the front: it was next
  return 1
end
return 0
"""


def _text(v: object) -> str:
    return v.decode() if isinstance(v, bytes) else "" if v is None else str(v)


def _alive(pid: int) -> bool:
    """Whether process ``pid`` exists on this host and is not a zombie (killed, not reaped)."""
    try:
        os.kill(pid, 0)
    except ProcessLookupError:
        return False
    except PermissionError:  # exists, another user's
        return True
    try:
        with open(f"/proc/{pid}/stat", "rb") as f:
            state = f.read().rsplit(b")", 1)[1].split()[0]
    except (OSError, IndexError):
        return True  # no /proc (not Linux): trust kill(pid, 0)
    return state not in (b"Z", b"X")
