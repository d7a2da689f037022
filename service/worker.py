"""The RQ worker class for ``spanwright worker``: RQ's ``SimpleWorker``, fewer round trips.

A heuristic plan takes a millisecond or two to solve, and RQ's ``SimpleWorker`` spends
several times that on its own bookkeeping: about 30 Redis round trips per job, most of them
single commands (a heartbeat is three). :class:`LeanWorker` keeps RQ's model and every key
RQ's tools and our crash recovery read (the queue, its intermediate list, the job hash,
the started registry, executions, worker state and heartbeats, the failure path with its
retry and callback untouched) and writes them in fewer round trips:

* one pipeline starts a job (RQ's two: the execution, then the job's start);
* one pipeline ends a successful job that RQ would delete anyway (``result_ttl=0``, no
  dependents, repeats, group or rate limit, first attempt): the execution and the job's
  keys go, the worker's counters and state are updated. Anything else takes RQ's own path;
* a heartbeat outside a pipeline is one pipelined round trip, and is skipped when the last
  one is under :attr:`LeanWorker.heartbeat_every` seconds old (the worker key lives
  ``worker_ttl + 60`` seconds, or the job's timeout + 60 while it works);
* the worker state is not rewritten when it has not changed, and the suspension flag
  (``rq suspend``) is read at most every :attr:`LeanWorker.suspension_check_every` seconds.

With our task's two round trips (``Store.claim``, ``Store.finish``) a plan costs the
worker six: dequeue, fetch, start, claim, finish, end.
"""

from __future__ import annotations

import time
from datetime import timedelta
from typing import Any

from redis.client import Pipeline
from rq import SimpleWorker
from rq.executions import Execution
from rq.job import Job, JobStatus
from rq.queue import Queue
from rq.registry import StartedJobRegistry
from rq.results import Result
from rq.utils import now
from rq.worker import WorkerStatus


class LeanWorker(SimpleWorker):
    """RQ's ``SimpleWorker`` with its per-job writes batched (see the module docstring)."""

    #: seconds between heartbeats outside a job's own writes
    heartbeat_every: float = 5.0
    #: seconds between reads of RQ's suspension flag
    suspension_check_every: float = 1.0

    def __init__(self, *args: Any, **kwargs: Any) -> None:
        super().__init__(*args, **kwargs)
        self._beaten_at = float("-inf")
        self._suspension_checked_at = float("-inf")
        self._started_in_pipeline: str | None = None

    # -- fewer standalone writes -------------------------------------------------------
    def heartbeat(self, timeout: int | None = None, pipeline: Pipeline | None = None) -> None:
        """RQ's heartbeat; outside a pipeline, one round trip and at most every few seconds."""
        if pipeline is not None:
            super().heartbeat(timeout, pipeline=pipeline)
            return
        beat = time.monotonic()
        if timeout is None and beat - self._beaten_at < self.heartbeat_every:
            return
        with self.connection.pipeline() as pipe:
            super().heartbeat(timeout, pipeline=pipe)
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
        """The execution (RQ's ``prepare_execution``) and the job's start (RQ's
        ``prepare_job_execution``) in one transaction."""
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
            pipe.execute()
        self._started_in_pipeline = job.id
        return execution

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
