"""Enqueueing records for the workers, with RQ: one queue, JSON serializer, crash guard.

The task is ``workers.tasks.run_job(kind=, record_id=, prefix=, retention=,
progress_interval=)``; everything it needs travels in its (JSON) arguments, so a worker
process needs nothing but the Redis URL. ``job_timeout`` is the time budget plus a margin:
the solver stops itself on its budget, the timeout only catches a hung or runaway job.
``Retry(max=1)`` re-runs a job once after a crash (a killed worker, an out-of-memory horse);
the solver is deterministic, so a re-run gives the same plan.
"""

from __future__ import annotations

import math

import redis
from rq import Callback, Queue, Retry, Worker
from rq.serializers import JSONSerializer

from .settings import Settings

TASK = "workers.tasks.run_job"
ON_FAILURE = "workers.tasks.on_failure"


def rq_job_id(kind: str, rid: str) -> str:
    """RQ's id of the job computing record ``rid`` (letters, digits, ``_`` and ``-``)."""
    return f"{kind}-{rid}"


class JobQueue:
    """The one queue between the API and the workers."""

    def __init__(self, conn: redis.Redis, settings: Settings) -> None:
        self.settings = settings
        self.queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)

    def enqueue(self, kind: str, rid: str, time_budget: float) -> None:
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
            job_timeout=math.ceil(time_budget) + s.job_timeout_margin,
            retry=Retry(max=1),
            result_ttl=0,  # the result lives under our own keys with our own retention
            failure_ttl=s.retention,
            on_failure=Callback(ON_FAILURE),
            description=f"{kind} {rid}",
        )

    def workers(self) -> int:
        """How many workers listen on the queue."""
        return int(Worker.count(connection=self.queue.connection, queue=self.queue))

    def depth(self) -> int:
        return int(self.queue.count)
