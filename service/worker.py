"""The RQ worker class for ``spanwright worker``: RQ's ``SimpleWorker``, fewer round trips.

A heuristic plan takes a millisecond or two to solve, and RQ's ``SimpleWorker`` spends
several times that on its own bookkeeping: about 30 Redis round trips per job, most of them
single commands (a heartbeat is three). :class:`LeanWorker` keeps RQ's model and every key
RQ's tools and our crash recovery read (the queue, its intermediate list, the job hash,
the started registry, executions, worker state and heartbeats, the failure path with its
retry and callback untouched) and writes them in fewer round trips:

* one pipeline starts a job (RQ's two: the execution, then the job's start) and claims
  our record (a third, in the task);
* one pipeline ends a successful job that RQ would delete anyway (``result_ttl=0``, no
  dependents, repeats, group or rate limit, first attempt): the execution and the job's
  keys go, the worker's counters and state are updated. Anything else takes RQ's own path;
* a heartbeat outside a pipeline is one pipelined round trip, and is skipped when the last
  one is under :attr:`LeanWorker.heartbeat_every` seconds old (the worker key lives
  ``worker_ttl + 60`` seconds, or the job's timeout + 60 while it works);
* the worker state is not rewritten when it has not changed, and the suspension flag
  (``rq suspend``) is read at most every :attr:`LeanWorker.suspension_check_every` seconds.

One thing is added, for crash recovery across hosts. RQ's ``SimpleWorker`` cannot beat
while its job runs in the same thread, so it gives the job's started-registry entry the
whole job timeout + 60 s to live, and a worker killed on another host is only noticed
when that entry expires: up to ``time_budget + SPANWRIGHT_JOB_TIMEOUT_MARGIN + 60`` s
(150 s for a 60 s budget). :class:`LeanWorker` beats like RQ's forking ``Worker`` does: a
daemon thread refreshes the running job's entry every ``job_monitoring_interval`` seconds
(RQ's setting; :data:`JOB_MONITORING_INTERVAL` by default) with a time to live of that
interval + 60 s (RQ's ``BaseWorker.get_heartbeat_ttl``). So a dead worker's entry expires
at most :data:`JOB_MONITORING_INTERVAL` + 60 = 70 s after its death, whatever the budget;
jobs shorter than the interval cost no extra write.

Our task's record is claimed (``Store.claim``) in the transaction that starts its job,
and the task stores its outcome in one more (``Store.finish``): a plan costs the worker
five round trips: dequeue, fetch, start and claim, finish, end. A worker killed between
the start and the finish leaves the job in the started registry and the record
``solving``, as before: the retry claims it again.
"""

from __future__ import annotations

import logging
import threading
import time
from datetime import timedelta
from typing import Any

import redis
from redis.client import Pipeline
from rq import SimpleWorker, worker_registration
from rq.exceptions import StopRequested
from rq.executions import Execution
from rq.job import Job, JobStatus
from rq.queue import Queue
from rq.registry import StartedJobRegistry
from rq.results import Result
from rq.utils import now
from rq.worker import BaseWorker, WorkerStatus

from .queue import TASK
from .store import Claim, Store

log = logging.getLogger("spanwright.worker")

#: claims made in the transaction that started a job, by RQ job id (see :func:`take_claim`)
_CLAIMS: dict[str, Claim | None] = {}


def take_claim(job_id: str) -> tuple[Claim | None] | None:
    """The claim :class:`LeanWorker` made for job ``job_id`` when it started it, once:
    ``(claim,)`` (``(None,)``: nothing to solve), or None when it made none (another
    worker class, or Redis without the script), and the task claims the record itself."""
    if job_id not in _CLAIMS:
        return None
    return (_CLAIMS.pop(job_id),)


#: seconds between heartbeats of a running job (RQ's ``job_monitoring_interval``): a
#: killed worker's job is seen abandoned at most this + 60 s after the kill
JOB_MONITORING_INTERVAL = 10


class Pulse:
    """Refreshes the heartbeat of the job a worker is running, from one daemon thread.

    :meth:`start` and :meth:`stop` bracket a job (no Redis call: a job shorter than the
    interval costs nothing); while a job runs, the thread calls the worker's
    ``maintain_heartbeats`` (RQ's, as its forking worker does) every ``interval`` seconds.
    A beat holds the lock, so once :meth:`stop` returns no beat of that job follows; RQ's
    heartbeat writes only update entries that exist (``ZADD XX``), so a beat racing the
    job's end cannot bring it back.
    """

    def __init__(self, worker: BaseWorker, interval: float) -> None:
        self.worker = worker
        self.interval = interval
        self._cv = threading.Condition()
        self._running: tuple[Job, Execution] | None = None
        self._generation = 0
        self._thread: threading.Thread | None = None
        self._closed = False

    def start(self, job: Job, execution: Execution) -> None:
        with self._cv:
            self._running = (job, execution)
            self._generation += 1
            if self._thread is None:
                self._thread = threading.Thread(
                    target=self._run, name=f"heartbeat {self.worker.name}", daemon=True
                )
                self._thread.start()
            self._cv.notify_all()

    def stop(self) -> None:
        with self._cv:
            self._running = None
            self._generation += 1
            self._cv.notify_all()

    def close(self) -> None:
        """End the thread (the worker is shutting down)."""
        with self._cv:
            self._closed = True
            self._running = None
            self._cv.notify_all()
        if self._thread is not None:
            self._thread.join(timeout=5)

    def _run(self) -> None:
        with self._cv:
            while not self._closed:
                if self._running is None:
                    self._cv.wait()
                    continue
                generation = self._generation
                self._cv.wait(timeout=self.interval)
                if self._running is None or self._generation != generation:
                    continue  # the job ended (or another began) meanwhile
                job, execution = self._running
                try:
                    self.worker.maintain_heartbeats(job, execution)
                except (redis.RedisError, StopRequested) as exc:
                    # Redis away: the entry may expire and the job be handed back, which
                    # RQ's retry and the deterministic solver make safe; stopping: done
                    log.warning("heartbeat of %s not written: %r", job.id, exc)


class LeanWorker(SimpleWorker):
    """RQ's ``SimpleWorker`` with its per-job writes batched (see the module docstring)."""

    #: seconds between heartbeats outside a job's own writes
    heartbeat_every: float = 5.0
    #: seconds between reads of RQ's suspension flag
    suspension_check_every: float = 1.0

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        kwargs.setdefault("job_monitoring_interval", JOB_MONITORING_INTERVAL)
        super().__init__(*args, **kwargs)
        self._beaten_at = float("-inf")
        self._suspension_checked_at = float("-inf")
        self._started_in_pipeline: str | None = None
        self._stores: dict[tuple[str, int], Store] = {}
        self._pulse = Pulse(self, self.job_monitoring_interval)

    # -- heartbeats while a job runs (see the module docstring) --------------------------
    def get_heartbeat_ttl(self, job: Job, working_time: float = 0.0) -> int:
        """RQ's rule for workers that beat during a job (``BaseWorker``): the time left, at
        most ``job_monitoring_interval``, + 60 s; not SimpleWorker's whole timeout + 60."""
        return BaseWorker.get_heartbeat_ttl(self, job, working_time)

    def execute_job(self, job: Job, queue: Queue) -> None:
        """SimpleWorker's ``execute_job`` with the job's heartbeats kept up while it runs."""
        execution = self.prepare_execution(job)
        self._pulse.start(job, execution)
        try:
            self.perform_job(job, queue, execution)
        finally:
            self._pulse.stop()
            _CLAIMS.pop(job.id, None)  # a job that failed before its task took the claim
        self.set_state(WorkerStatus.IDLE)

    def teardown(self) -> None:
        self._pulse.close()
        super().teardown()

    # -- fewer standalone writes -------------------------------------------------------
    def heartbeat(self, timeout: int | None = None, pipeline: Pipeline | None = None) -> None:
        """RQ's heartbeat; outside a pipeline, one round trip and at most every few seconds."""
        if pipeline is not None:
            super().heartbeat(timeout, pipeline=pipeline)
            worker_registration.register(self, pipeline)  # see below
            return
        beat = time.monotonic()
        if timeout is None and beat - self._beaten_at < self.heartbeat_every:
            return
        with self.connection.pipeline() as pipe:
            super().heartbeat(timeout, pipeline=pipe)
            # listed again at every beat (two SADDs): a Redis that restarted without its
            # data forgot the worker, and /readyz would call a live worker dead
            worker_registration.register(self, pipe)
            pipe.execute()
        self._beaten_at = beat

    def set_state(self, state: str, pipeline: Pipeline | None = None) -> None:
        """RQ's ``set_state``, skipped outside a pipeline when the state is unchanged."""
        if pipeline is None and state == self.get_state():
            return
        super().set_state(state, pipeline=pipeline)

    def check_for_suspension(self, burst: bool) -> None:
        """RQ's suspension check (one round trip), at most every second."""
        tick = time.monotonic()
        if tick - self._suspension_checked_at < self.suspension_check_every:
            return
        self._suspension_checked_at = tick
        super().check_for_suspension(burst)

    # -- starting a job: one pipeline --------------------------------------------------
    def prepare_execution(self, job: Job) -> Execution:
        """The execution (RQ's ``prepare_execution``), the job's start (RQ's
        ``prepare_job_execution``) and, for our task, the claim of its record
        (``Store.claim``, handed to the task by :func:`take_claim`) in one transaction."""
        with self.connection.pipeline() as pipe:
            ttl = self.get_heartbeat_ttl(job)
            execution = Execution.create(job, ttl, pipeline=pipe, worker_name=self.name)
            self.executions[execution.id] = execution
            self.set_state(WorkerStatus.BUSY, pipeline=pipe)
            self.heartbeat(ttl, pipeline=pipe)
            job.heartbeat(now(), ttl, pipeline=pipe)
            job.prepare_for_execution(self.name, pipeline=pipe)
            pipe.persist(job.key)
            if len(self.queues) == 1:  # RQ's rule: a single queue's worker tidies its list
                pipe.lrem(self.queues[0].intermediate_queue_key, 1, job.id)
            store = self._store_of(job)
            if store is not None:
                kw = job.kwargs
                store.claim_in(pipe, kw["kind"], kw["record_id"])
            replies = pipe.execute(raise_on_error=store is None)
        if store is not None:
            *rq_replies, got = replies
            for reply in rq_replies:  # RQ's own writes fail as they would without the claim
                if isinstance(reply, Exception):
                    raise reply
            if not isinstance(got, Exception):  # else (no script in Redis) the task claims
                _CLAIMS[job.id] = Store.claimed(got)
        self._started_in_pipeline = job.id
        return execution

    def _store_of(self, job: Job) -> Store | None:
        """Our store for a job of our task (its keys travel in the job's arguments)."""
        kw = job.kwargs
        if job.func_name != TASK or not isinstance(kw.get("record_id"), str):
            return None
        key = (str(kw["prefix"]), int(kw["retention"]))
        store = self._stores.get(key)
        if store is None:
            store = self._stores[key] = Store(self.connection, prefix=key[0], retention=key[1])
        return store

    def prepare_job_execution(self, job: Job, remove_from_intermediate_queue: bool = False) -> None:
        """Done already by :meth:`prepare_execution` for this job; RQ's otherwise."""
        if self._started_in_pipeline == job.id:
            self._started_in_pipeline = None
            return
        super().prepare_job_execution(job, remove_from_intermediate_queue)

    # -- ending a job: one pipeline ----------------------------------------------------
    def _lean_success(self, job: Job) -> bool:
        """Whether RQ would simply delete this finished job (nothing else depends on it)."""
        return (
            job.get_result_ttl(self.default_result_ttl) == 0
            and not job.number_of_retries
            and job.repeats_left is None
            and not job.group_id
            and not job.has_rate_limit
        )

    def handle_execution_ended(self, job: Job, queue: Queue, heartbeat_ttl: int) -> None:
        """The job's last heartbeat is not written when the job is deleted right after."""
        self._pulse.stop()  # the job has returned: no more beats before its end is written
        if job.get_status(refresh=False) == JobStatus.STARTED and self._lean_success(job):
            job.ended_at = now()
            return
        super().handle_execution_ended(job, queue, heartbeat_ttl)

    def handle_job_success(
        self,
        job: Job,
        queue: Queue,
        started_job_registry: StartedJobRegistry,
        execution: Execution,
    ) -> None:
        """Delete the finished job, its execution and its keys, count it, go idle: one
        transaction. Jobs RQ must keep or follow up take RQ's own path."""
        if not self._lean_success(job):
            super().handle_job_success(job, queue, started_job_registry, execution)
            return
        with self.connection.pipeline() as pipe:
            self.increment_successful_job_count(pipeline=pipe)
            if job.started_at is not None and job.ended_at is not None:
                self.increment_total_working_time(job.ended_at - job.started_at, pipe)
            else:
                self.increment_total_working_time(timedelta(0), pipe)
            self.cleanup_execution(job, pipeline=pipe, execution=execution)
            pipe.delete(
                job.key,
                job.dependents_key,
                job.dependencies_key,
                Result.get_key(job.id),
                job.execution_registry.key,
            )
            self.set_state(WorkerStatus.IDLE, pipeline=pipe)
            pipe.execute()
        self.log.debug("Worker %s: job %s done and deleted (result_ttl=0)", self.name, job.id)
