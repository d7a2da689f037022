"""The embedded default: an in-process store and a worker thread, for ``spanwright serve``.

With no ``REDIS_URL`` the API and one worker share a fakeredis ``FakeServer`` (two
``FakeRedis`` clients never share data unless they share a server). The worker is RQ's
``SimpleWorker`` (our :class:`service.worker.LeanWorker`) running the very same task as a
separate ``spanwright worker``; it runs in
a thread, so it installs no signal handlers and enforces the job timeout with a timer
instead of SIGALRM (which only works in the main thread).
"""

from __future__ import annotations

import logging
import threading

import fakeredis
from rq import Queue
from rq.exceptions import StopRequested
from rq.serializers import JSONSerializer
from rq.timeouts import TimerDeathPenalty

from .settings import Settings
from .worker import LeanWorker

log = logging.getLogger("spanwright.embedded")


class ThreadWorker(LeanWorker):
    """The worker of ``spanwright worker``, able to live in a non-main thread."""

    death_penalty_class = TimerDeathPenalty
    stop_flag = False

    def _install_signal_handlers(self) -> None:
        """Signals belong to the main thread (the HTTP server); stop with :meth:`stop`."""

    def heartbeat(self, *args: object, **kwargs: object) -> None:
        """RQ beats between dequeue attempts and after each job: the place to stop."""
        if self.stop_flag:
            raise StopRequested()
        super().heartbeat(*args, **kwargs)  # type: ignore[arg-type]


class EmbeddedWorker:
    """One :class:`ThreadWorker` on its own thread, against ``server``."""

    def __init__(self, server: fakeredis.FakeServer, settings: Settings) -> None:
        conn = fakeredis.FakeRedis(server=server)
        queue = Queue(settings.queue_name, connection=conn, serializer=JSONSerializer)
        # worker_ttl 16 s -> it blocks at most 1 s on the queue, so stop() is quick
        self.worker = ThreadWorker(
            [queue], connection=conn, serializer=JSONSerializer, worker_ttl=16
        )
        self.thread = threading.Thread(
            target=self._work, name="spanwright-embedded-worker", daemon=True
        )

    def _work(self) -> None:
        try:
            self.worker.work(logging_level="WARNING")
        except Exception:  # pragma: no cover - logged, the API stays up and /readyz says 503
            log.exception("embedded worker stopped")

    def start(self) -> EmbeddedWorker:
        self.thread.start()
        return self

    def stop(self, timeout: float = 5.0) -> None:
        """Ask the thread to stop (it finishes its job first); wait ``timeout`` seconds."""
        self.worker.stop_flag = True
        if timeout > 0:
            self.thread.join(timeout)


def embedded_store(settings: Settings) -> tuple[fakeredis.FakeRedis, EmbeddedWorker]:
    """A fresh in-process store and a started worker thread on it."""
    server = fakeredis.FakeServer()
    worker = EmbeddedWorker(server, settings).start()
    return fakeredis.FakeRedis(server=server), worker


def warm_up() -> None:
    """Load the core's compiled kernels now, so the first plan is not the slow one; then
    move what the imports left into the collector's permanent generation
    (``gc.freeze``), so that no full collection of those objects lands inside a timed
    answer (one in about 20 rental first answers took 100-280 ms before)."""
    import gc

    from workers.planning.warmup import warm_up_all

    warm_up_all()
    gc.collect()
    gc.freeze()
