"""The CPU gate: one request's Python work at a time in each API process.

Reading and checking a body, a plan solved in the request and its store write are CPU
work in Python. Two threads of one process doing such work at once share its interpreter
lock, and each time the holder lets it go (a numpy call that drops it, a socket call) the
other thread takes it and the first must wait to get it back: on a loaded machine the
lock then changes hands hundreds of times a request, and the same plan costs 30-80 %
more CPU (bench/RESULTS.md, issue 20). Threads of one process therefore take the gate in
turn for that work, so the lock changes hands between requests instead.

What never runs behind the gate: receiving the body from the network (a slow client must
not hold the others up), a wait for a queued record (:meth:`Gate.released`), and the
reading of a body longer than :data:`GATE_MAX_BYTES` (its work would hold every small
request of the process behind it for that long; it runs beside them, as before). The
store write does run behind it (its client work contends too); should Redis hang, the
holder may wait for it up to the socket timeout, so no request waits for the gate more
than :data:`GATE_WAIT_SECONDS`: past that it runs beside the holder, as before the gate.
"""

from __future__ import annotations

import threading
from collections.abc import Iterator
from contextlib import contextmanager

#: bodies up to this many bytes (about 25,000 plain jobs, some tens of milliseconds of
#: work) are read and planned behind the gate; longer ones beside it
GATE_MAX_BYTES = 1 << 20

#: the longest a request waits for the gate (a queue of eight 1,000-job plans is some
#: 40 ms) before it runs beside the holder
GATE_WAIT_SECONDS = 1.0


class Gate:
    """A lock taken for a request's CPU work, held by one thread of the process at a
    time. Re-entrant per thread (a nested :meth:`held` is a no-op), and
    :meth:`released` lets it go around a wait. Waiting for it is bounded by ``wait``
    seconds, after which the block runs without it."""

    def __init__(self, wait: float = GATE_WAIT_SECONDS) -> None:
        self._lock = threading.Lock()
        self._mine = threading.local()
        self.wait = wait

    def holding(self) -> bool:
        """Whether this thread holds the gate."""
        return bool(getattr(self._mine, "held", False))

    @contextmanager
    def held(self, nbytes: int = 0) -> Iterator[None]:
        """Hold the gate for the block (for a body of ``nbytes``; past
        :data:`GATE_MAX_BYTES`, or when this thread holds it already, the block runs
        without taking it)."""
        if nbytes > GATE_MAX_BYTES or self.holding():
            yield
            return
        self._mine.held = self._lock.acquire(timeout=self.wait)
        try:
            yield
        finally:
            if self._mine.held:
                self._mine.held = False
                self._lock.release()

    @contextmanager
    def released(self) -> Iterator[None]:
        """Let the gate go for the block (a wait) if this thread holds it, and take it
        back after."""
        if not self.holding():
            yield
            return
        self._mine.held = False
        self._lock.release()
        try:
            yield
        finally:
            self._mine.held = self._lock.acquire(timeout=self.wait)


#: the gate of this process (each gunicorn worker process has its own)
GATE = Gate()
