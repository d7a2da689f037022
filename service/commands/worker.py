"""``spanwright worker``: an RQ worker on the service's queue (needs ``REDIS_URL``)."""

from __future__ import annotations

import argparse
import os
import sys

NAME = "worker"
HELP = "run a worker that solves queued plans (RQ, JSON serializer) against REDIS_URL"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--worker-class",
        choices=("simple", "fork"),
        default="simple",
        help="simple: run jobs in this process, with RQ's bookkeeping batched into few round "
        "trips (fast, the default); fork: one child per job (isolates a crashing job from "
        "the worker, costs a fork per job)",
    )
    p.add_argument(
        "--maintenance-interval",
        type=int,
        default=30,
        help="seconds between registry clean-ups (re-queues jobs of dead workers); default 30",
    )
    p.add_argument("--burst", action="store_true", help="quit when the queue is empty")
    p.add_argument("--name", help="worker name (default: RQ's)")
    p.add_argument("--log-level", default="INFO", help="DEBUG, INFO, WARNING, ...")


def run(args: argparse.Namespace) -> int:
    import contextlib
    import logging
    import time

    import redis
    from rq import Queue, Worker
    from rq.serializers import JSONSerializer

    from ..app import connect
    from ..embedded import warm_up
    from ..logs import configure_logging
    from ..queue import WORKER_TTL, JobQueue
    from ..settings import Settings
    from ..worker import JOB_MONITORING_INTERVAL, LeanWorker
    from ..wsgi import sentinel_connection

    log = logging.getLogger("spanwright.worker")
    settings = Settings.from_env(os.environ)
    sentinel = sentinel_connection(settings)
    if settings.embedded and sentinel is None:
        print("spanwright: set REDIS_URL (e.g. redis://127.0.0.1:6379/0)", file=sys.stderr)
        return 2
    configure_logging(args.log_level)
    warm_up()
    conn = sentinel if sentinel is not None else connect(settings)
    queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
    base = LeanWorker if args.worker_class == "simple" else Worker
    jobs = JobQueue(conn, settings)

    class ReapingWorker(base):  # type: ignore[valid-type,misc]
        """RQ's maintenance, plus handing back the plans of dead workers on this host, so
        recovery does not wait for API traffic (see ``JobQueue.reap``)."""

        def run_maintenance_tasks(self, *a: object, **kw: object) -> None:
            super().run_maintenance_tasks(*a, **kw)
            with contextlib.suppress(redis.RedisError):
                jobs.reap()

    delay = 1.0
    worker = None
    while True:  # a lost Redis (a restart, a failover) is waited for, never a reason to exit
        began = time.monotonic()
        try:
            worker = ReapingWorker(
                [queue],
                connection=conn,
                serializer=JSONSerializer,
                name=args.name,
                maintenance_interval=args.maintenance_interval,
                # heartbeats of a running job: a worker killed on any host is seen within 70 s
                job_monitoring_interval=JOB_MONITORING_INTERVAL,
                # an idle worker beats every WORKER_TTL - 15 s, so /readyz can tell it is alive
                worker_ttl=WORKER_TTL,
            )
            worker.work(burst=args.burst, logging_level=args.log_level)
            break
        except (redis.exceptions.ConnectionError, redis.exceptions.TimeoutError) as exc:
            if worker is not None and worker._shutdown_requested_date is not None:
                break  # a stop was asked for (SIGTERM): do not start again
            if time.monotonic() - began > 60:
                delay = 1.0  # it had been working: a new outage starts the backoff again
            log.warning("Redis is unreachable (%s); trying again in %.0f s", exc, delay)
            time.sleep(delay)
            delay = min(2 * delay, 30.0)
    return 0
