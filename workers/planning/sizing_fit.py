"""Whether a sizing's plan meets the deadline in exact arithmetic, and its repair.

A float packing can meet the deadline only in floating point; :class:`Fit` checks every
node exactly (work <= deadline x speed, as fractions) and moves jobs until the plan truly
meets it (see ``DEVELOPERS.md``, "What a certificate may rest on").
"""

from __future__ import annotations

from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from .binpacking import bin_starts
from .rational import array_sum, down, float_sums_exact, up

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]


def starts(
    bin_of: npt.NDArray[np.int32],
    times: F64,
    m: int,
    order: npt.NDArray[np.intp] | None = None,
) -> F64:
    """Start times when each node runs its jobs longest first, back to back.

    ``order`` (all jobs longest first, ties by index) may be given to save the sort:
    visiting the jobs in it, each node sees its own jobs longest first.
    """
    if order is None:
        order = np.argsort(-times, kind="stable")
    return bin_starts(order.astype(np.int64), bin_of.astype(np.int32), times, m)


class Fit:
    """Whether a plan meets the deadline, exactly, and repairs for those that do not.

    A node meets the deadline when its work ``sum(duration)`` is at most
    ``deadline * speed`` in exact arithmetic and its floating-point times, back to back
    in the order of ``order``, end by the deadline. The exact test is settled cheaply
    where it can be: by whole ticks rounded up (at most the capacity), by the float sum
    when every sum of the durations is exact in floating point (whole seconds, say), or
    by the float sum with room for its round-off; only the nodes left in doubt are summed
    exactly.
    """

    def __init__(
        self,
        durations: F64,
        times: F64,
        speed: float,
        deadline: float,
        q_hi: I64,
        cap: int,
        order: npt.NDArray[np.intp],
    ) -> None:
        self.d, self.times, self.deadline = durations, times, deadline
        self.limit = Fraction(deadline) * Fraction(speed)
        self.limit_down, self.limit_up = down(self.limit), up(self.limit)
        self.sums_exact = float_sums_exact(durations)
        self.q_hi = q_hi.astype(np.float64)  # whole numbers below 2**53: sums stay exact
        self.cap, self.order = cap, order
        self.rank = np.empty(order.size, dtype=np.int64)
        self.rank[order] = np.arange(order.size)

    def work_fits(self, bin_of: npt.NDArray[np.int32], m: int) -> npt.NDArray[np.bool_]:
        """Per node: its exact work is at most deadline * speed."""
        ok = np.bincount(bin_of, weights=self.q_hi, minlength=m)[:m] <= self.cap
        if ok.all():
            return ok
        load = np.bincount(bin_of, weights=self.d, minlength=m)[:m]
        if self.sums_exact:  # each load is exact: a float at most the limit is at most
            return load <= self.limit_down  # the largest float at most the limit
        count = np.bincount(bin_of, minlength=m)[:m]
        # a running sum of c non-negative terms is within (c - 1) units in the last
        # place of its exact value (relative); allow eight times that, and do not trust
        # sums small enough to have underflowed
        err = (count + 4) * 2.0**-50
        trusted = load > 2.0**-960
        ok |= (count == 0) | (trusted & (load * (1.0 + err) <= self.limit_down))
        over = trusted & (load * (1.0 - err) > self.limit_up)
        doubt = np.flatnonzero(~ok & ~over)
        if doubt.size:
            idx = np.argsort(bin_of, kind="stable")
            cuts = np.searchsorted(bin_of[idx], np.arange(m + 1))
            for k in doubt.tolist():
                ok[k] = array_sum(self.d[idx[cuts[k] : cuts[k + 1]]]) <= self.limit
        return ok

    def _node_ok(self, jobs: list[int]) -> bool:
        """One node running ``jobs`` meets the deadline (exact work and float times)."""
        if array_sum(self.d[jobs]) > self.limit:
            return False
        clock = 0.0
        for j in sorted(jobs, key=self.rank.__getitem__):
            clock = clock + float(self.times[j])
        return clock <= self.deadline

    def settle(self, bin_of: npt.NDArray[np.int32], m: int) -> tuple[Any, int, F64]:
        """A plan that meets the deadline exactly, from ``bin_of`` on ``m`` nodes: the same
        plan when it does; else the nodes that miss give up their shortest jobs until they
        meet it, and those go, longest first, to the first node they fit (a new node when
        none). Returns (node of each job, nodes used, starts)."""
        start = starts(bin_of, self.times, m, self.order)
        late = np.zeros(m, dtype=np.bool_)
        late[bin_of[start + self.times > self.deadline]] = True
        bad = ~self.work_fits(bin_of, m) | late
        if not bad.any():
            return bin_of, m, start
        bin_of = bin_of.copy()
        idx = np.argsort(bin_of, kind="stable")
        cuts = np.searchsorted(bin_of[idx], np.arange(m + 1))
        members: dict[int, list[int]] = {}

        def jobs_of(k: int) -> list[int]:
            if k not in members:
                members[k] = idx[cuts[k] : cuts[k + 1]].tolist()
            return members[k]

        moved: list[int] = []
        for k in np.flatnonzero(bad).tolist():
            keep = sorted(jobs_of(k), key=lambda j: (self.d[j], j))  # shortest first
            while keep and not self._node_ok(keep):
                gone = next((i for i, j in enumerate(keep) if self.d[j] > 0), 0)
                moved.append(keep.pop(gone))
            members[k] = keep
        load = np.bincount(bin_of, weights=self.times, minlength=m)[:m].tolist()
        for j in moved:
            load[bin_of[j]] -= float(self.times[j])
        for j in sorted(moved, key=lambda j: (-self.d[j], j)):
            t = float(self.times[j])
            for k in range(len(load)):
                if load[k] + t <= self.deadline * (1.0 + 2.0**-40) and self._node_ok(
                    [*jobs_of(k), j]
                ):
                    break
            else:
                k = len(load)
                load.append(0.0)
                members[k] = []
            members[k].append(j)
            load[k] += t
            bin_of[j] = k
        m = len(load)
        start = starts(bin_of, self.times, m, self.order)
        if not self.meets(bin_of, m, start):  # pragma: no cover - each node was checked
            raise AssertionError("a repaired sizing plan misses the deadline")
        return bin_of, m, start

    def meets(self, bin_of: npt.NDArray[np.int32], m: int, start: F64) -> bool:
        """Every node of the plan meets the deadline, exactly and in its float times."""
        if bin_of.size == 0:
            return True
        if int(bin_of.max()) >= m or (start + self.times).max() > self.deadline:
            return False
        return bool(self.work_fits(bin_of, m).all())
