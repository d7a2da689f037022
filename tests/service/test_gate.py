"""The CPU gate (service/gate.py): one thread of the process inside at a time, re-entrant,
let go around waits, and never taken for a body past its size."""

from __future__ import annotations

import threading
import time

from service.gate import GATE_MAX_BYTES, Gate


def test_threads_take_the_gate_one_at_a_time() -> None:
    """Mutual exclusion, checked by counting who is inside (common practice, from memory:
    a shared counter no thread may ever see above one)."""
    gate, inside, most = Gate(), [0], [0]
    lock = threading.Lock()

    def work() -> None:
        for _ in range(200):
            with gate.held(100):
                with lock:
                    inside[0] += 1
                    most[0] = max(most[0], inside[0])
                time.sleep(0)
                with lock:
                    inside[0] -= 1

    threads = [threading.Thread(target=work) for _ in range(4)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    assert most[0] == 1 and inside[0] == 0


def test_nested_holds_and_waits_let_others_in() -> None:
    """A nested hold does not deadlock; ``released`` lets another thread in for the wait
    and takes the gate back after it; a large body does not take it at all."""
    gate = Gate()
    entered = threading.Event()

    def other() -> None:
        with gate.held():
            entered.set()

    with gate.held():
        with gate.held():  # re-entrant
            assert gate.holding()
        t = threading.Thread(target=other)
        t.start()
        assert not entered.wait(0.05)  # held: the other thread waits
        with gate.released():
            assert not gate.holding()
            assert entered.wait(5)  # it got in during the wait
        assert gate.holding()
        t.join()
    assert not gate.holding()
    ran = threading.Event()

    def large() -> None:
        with gate.held(GATE_MAX_BYTES + 1):
            ran.set()

    with gate.held():
        beside = threading.Thread(target=large)
        beside.start()
        assert ran.wait(5)  # a large body runs beside the holder
        beside.join()


def test_a_stuck_holder_delays_others_by_the_wait_at_most() -> None:
    """A holder that never lets go (a store call hanging on Redis) holds another request up
    for the gate's wait, then that request runs beside it, and letting go afterwards does
    not release a gate it never took."""
    gate = Gate(wait=0.2)
    stuck, release = threading.Event(), threading.Event()

    def holder() -> None:
        with gate.held():
            stuck.set()
            release.wait(10)

    t = threading.Thread(target=holder)
    t.start()
    assert stuck.wait(5)
    t0 = time.monotonic()
    with gate.held():
        assert not gate.holding()  # running beside the holder
        with gate.released():  # nothing to let go
            pass
    waited = time.monotonic() - t0
    assert 0.15 <= waited < 2.0
    release.set()
    t.join()
    with gate.held():  # the holder let go: the gate is free again
        assert gate.holding()
