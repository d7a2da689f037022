"""Jobs carried into a stage graph: running at its time 0, not planned, but still holding.

A re-planned stage graph (:mod:`.replan`) starts at the re-planning moment, while some
jobs of the original batch still run. They are not jobs of the new graph, yet they hold
three things until they end, and :class:`Carried` records them:

* a **slot** of their node: node ``k``'s slots are free from ``F_k``, except that each
  job carried on ``k`` keeps one slot until it ends (``max(F_k, end)``);
* the **limits** they use: a limit held by ``h`` carried jobs at time ``t`` (those not yet
  ended) has room for ``capacity - h`` of the graph's jobs then;
* the **jobs that wait for them**: job ``j`` of the graph may start only after every
  carried job it waits for has ended, i.e. from its **release** ``max end``.

A re-planned graph's nodes are free from their stated ``free_at`` shifted to the new time
0, which is rarely a float: :attr:`Carried.node_free` holds it exactly and stands in for
the instance's ``free_at`` (which holds it rounded up, for display).

Ends are exact seconds after time 0 (``Fraction``, at least 0); :meth:`Carried.ticks`
turns them (and ``node_free``) into whole ticks, *up* for plans (a slot, a limit or a
wait is never used before the stated end) and *down* for the relaxation whose bounds
hold for the times as given (:meth:`.problem.StageProblem.relaxed`).
:func:`.timing.build_timing` folds them into the tick tables: ``Timing.slot_free``,
``Timing.release``, ``Timing.held_limit`` and ``Timing.held_end``.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction
from typing import TypeVar

import numpy as np
import numpy.typing as npt

I64 = npt.NDArray[np.int64]
#: times as ticks (plans, bounds) or as seconds (the confidence simulation)
T = TypeVar("T", npt.NDArray[np.int64], npt.NDArray[np.float64])


@dataclass(frozen=True, eq=False)
class Carried:
    """Jobs running at time 0 (see the module docstring), with CSR rows:

    ``node_free[k]``                     when node ``k`` is free (exact seconds after 0);
    ``node[c]``                          the node carried job ``c`` runs on;
    ``end[c]``                           when it ends, in exact seconds after time 0;
    ``uses_idx[uses_ptr[c]:uses_ptr[c + 1]]``  the limits it holds;
    ``wait_idx[wait_ptr[j]:wait_ptr[j + 1]]``  the carried jobs job ``j`` of the graph
                                          waits for (``wait_ptr`` has ``n + 1`` entries).
    """

    job_ids: tuple[str, ...]
    node_free: tuple[Fraction, ...]
    node: I64
    end: tuple[Fraction, ...]
    uses_ptr: I64
    uses_idx: I64
    wait_ptr: I64
    wait_idx: I64

    @property
    def count(self) -> int:
        """Number of carried jobs."""
        return len(self.job_ids)

    def ticks(self, resolution: float, *, down: bool = False) -> tuple[I64, I64]:
        """Each node's start and each carried job's end in whole ticks of ``resolution``:
        ``ceil`` (``floor`` with ``down``), exactly."""
        res = Fraction(resolution)
        settle = math.floor if down else math.ceil
        free = np.asarray([settle(x / res) for x in self.node_free], dtype=np.int64)
        ends = np.asarray([settle(e / res) for e in self.end], dtype=np.int64)
        return free.reshape(-1), ends.reshape(-1)

    def seconds(self) -> tuple[npt.NDArray[np.float64], npt.NDArray[np.float64]]:
        """Each node's start and each carried job's end in seconds, rounded up to floats
        (never before the exact time)."""
        return _up(self.node_free), _up(self.end)

    def slot_free(self, free: T, slots: I64, end: T) -> T:
        """Per slot (node by node, slots in order): when it is free, from the nodes'
        ``free`` ticks and the carried ``end`` ticks; each carried job takes one slot of
        its node, the latest ending on the lowest slot."""
        out = np.repeat(free, slots)
        base = np.concatenate(([0], np.cumsum(slots)))
        used = np.zeros(free.size, dtype=np.int64)
        for c in np.lexsort((np.arange(self.count), -end)).tolist():
            k = int(self.node[c])
            s = int(base[k] + used[k])
            used[k] += 1
            out[s] = max(out[s], end[c])
        return out

    def release(self, end: T) -> T:
        """Per job of the graph: the latest end of the carried jobs it waits for (0 for
        none)."""
        n = self.wait_ptr.size - 1
        out = np.zeros(n, dtype=end.dtype)
        rows = np.repeat(np.arange(n, dtype=np.int64), np.diff(self.wait_ptr))
        np.maximum.at(out, rows, end[self.wait_idx])
        return out

    def held(self, end: T) -> tuple[I64, T]:
        """The limit and the end of every hold (one per carried job and limit it uses)."""
        return self.uses_idx.copy(), np.repeat(end, np.diff(self.uses_ptr))


def _up(values: tuple[Fraction, ...]) -> npt.NDArray[np.float64]:
    """Exact times as the smallest floats not below them."""
    out = np.asarray([float(x) for x in values], dtype=np.float64).reshape(-1)
    low = np.asarray([Fraction(float(x)) < x for x in values], dtype=bool).reshape(-1)
    out[low] = np.nextafter(out[low], np.inf)
    return out
