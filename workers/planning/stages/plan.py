"""A stage plan: which node and slot run each job, and from which tick.

Times are whole ticks of ``instance.resolution`` (see :mod:`.timing`): job ``j`` on node
``k`` runs ``[start_j, start_j + d_jk)``. :meth:`StagePlan.violations` checks every rule
in integers, so a plan that passes is feasible exactly, for the tick-rounded problem
and therefore for the stated durations. With jobs carried in (:mod:`.carried`) a slot is
used no earlier than it is free, a job starts no earlier than its release, and a limit's
places held by carried jobs count until they end.
"""

from __future__ import annotations

from dataclasses import dataclass
from fractions import Fraction
from functools import cached_property
from typing import Any

import numpy as np
import numpy.typing as npt

from ..rational import up
from .problem import StageProblem

I64 = npt.NDArray[np.int64]


@dataclass(frozen=True, eq=False)
class StagePlan:
    """``node[j]``, ``slot[j]`` (index within the node) and ``start[j]`` (ticks) per job."""

    problem: StageProblem
    node: I64
    slot: I64
    start: I64

    @cached_property
    def run(self) -> I64:
        """Each job's running time on its node, in ticks."""
        t = self.problem.timing
        return t.run[np.arange(self.problem.n), t.speed_col[self.node]]

    @cached_property
    def end(self) -> I64:
        """Each job's end, in ticks (exact)."""
        return self.start + self.run

    @cached_property
    def makespan_ticks(self) -> int:
        """The latest job end or slot start time (a busy node ends no earlier than its
        ``free_at``, a slot kept by a carried job no earlier than that job), in ticks."""
        top = int(self.problem.timing.slot_free.max())
        return max(int(self.end.max()) if self.end.size else 0, top)

    @property
    def makespan_exact(self) -> Fraction:
        """The makespan in seconds, exactly."""
        return self.problem.timing.seconds(self.makespan_ticks)

    @property
    def makespan(self) -> float:
        """The makespan in seconds, rounded up to a float (never below the exact one)."""
        return up(self.makespan_exact)

    # -- checking -----------------------------------------------------------------------
    def violations(self) -> list[str]:
        """Every broken rule, in words (empty for a feasible plan), checked in integers:
        each job once on a valid slot, eligibility, no start before the node's ``F_k``,
        waits (finish-to-start), slots never running two jobs at once, limits never above
        capacity at any instant."""
        p = self.problem
        t = p.timing
        n, m = p.n, p.m
        out: list[str] = []
        ids = p.instance.job_ids
        if not (self.node.shape == self.slot.shape == self.start.shape == (n,)):
            return ["node, slot and start must hold one entry per job"]
        if ((self.node < 0) | (self.node >= m)).any():
            return ["a job is on a node that does not exist"]
        bad = np.flatnonzero((self.slot < 0) | (self.slot >= p.slots[self.node]))
        out += [f"job {ids[j]!r} is on slot {int(self.slot[j])}, not on its node" for j in bad[:5]]
        bad = np.flatnonzero(~t.eligible[t.job_type, self.node])
        out += [f"job {ids[j]!r} may not run on node {int(self.node[j])}" for j in bad[:5]]
        bad = np.flatnonzero(self.start < t.free[self.node])
        out += [f"job {ids[j]!r} starts before its node is free" for j in bad[:5]]
        if not out:
            slot_at = t.slot_free[t.slot_base[self.node] + self.slot]
            bad = np.flatnonzero(self.start < slot_at)
            out += [f"job {ids[j]!r} starts before its slot is free" for j in bad[:5]]
        bad = np.flatnonzero(self.start < t.release)
        out += [f"job {ids[j]!r} starts before a carried job it waits for ends" for j in bad[:5]]
        preds = p.after_idx
        jobs = np.repeat(np.arange(n), np.diff(p.after_ptr))
        bad = np.flatnonzero(self.start[jobs] < self.end[preds])
        out += [f"job {ids[jobs[a]]!r} starts before job {ids[preds[a]]!r} ends" for a in bad[:5]]
        if out:
            return out
        out += self._overlaps(self.node * (int(p.slots.max()) + 1) + self.slot, "a slot")
        for lim, name in enumerate(p.limit_names):
            users = np.flatnonzero(_uses(p, lim))
            until = t.held_end[t.held_limit == lim]  # places held from 0 by carried jobs
            peak = _peak(
                np.concatenate((self.start[users], np.zeros_like(until))),
                np.concatenate((self.end[users], until)),
            )
            if peak > p.capacities[lim]:
                out.append(f"limit {name!r} runs {peak} jobs at once, above {p.capacities[lim]}")
        return out

    def check(self) -> None:
        """Raise ``ValueError`` naming what is broken unless the plan is feasible."""
        bad = self.violations()
        if bad:
            raise ValueError("infeasible stage plan: " + "; ".join(bad))

    def _overlaps(self, key: I64, what: str) -> list[str]:
        """Whether two jobs with the same key overlap in time (zero-length jobs never do)."""
        pos = np.flatnonzero(self.run > 0)
        order = pos[np.lexsort((self.start[pos], key[pos]))]
        same = key[order[1:]] == key[order[:-1]]
        clash = same & (self.start[order[1:]] < self.end[order[:-1]])
        ids = self.problem.instance.job_ids
        return [
            f"jobs {ids[order[a]]!r} and {ids[order[a + 1]]!r} overlap on {what}"
            for a in np.flatnonzero(clash)[:5]
        ]

    # -- output -------------------------------------------------------------------------
    def to_assignment(self) -> list[dict[str, Any]]:
        """One row per job: ``{job, node, slot, start, end}``, times in seconds (each the
        float nearest the exact tick time; rounding to nearest keeps every order)."""
        p = self.problem
        res = Fraction(p.instance.resolution)
        node_ids = [nd.id for nd in p.instance.nodes]
        return [
            {
                "job": p.instance.job_ids[j],
                "node": node_ids[k],
                "slot": s,
                "start": float(a * res),
                "end": float(b * res),
            }
            for j, (k, s, a, b) in enumerate(self.rows())
        ]

    def rows(self) -> list[tuple[int, int, int, int]]:
        """``(node, slot, start, end)`` per job, in ticks."""
        return list(
            zip(
                self.node.tolist(),
                self.slot.tolist(),
                self.start.tolist(),
                self.end.tolist(),
                strict=True,
            )
        )


def _uses(p: StageProblem, lim: int) -> npt.NDArray[np.bool_]:
    """Which jobs use limit ``lim``."""
    jobs = np.repeat(np.arange(p.n), np.diff(p.uses_ptr))
    mask = np.zeros(p.n, dtype=bool)
    mask[jobs[p.uses_idx == lim]] = True
    return mask


def _peak(start: I64, end: I64) -> int:
    """Most intervals ``[start, end)`` open at one instant (empty ones count nowhere):
    ends are taken before starts at equal times."""
    keep = end > start
    times = np.concatenate((start[keep], end[keep]))
    delta = np.concatenate(
        (np.ones(int(keep.sum()), np.int64), -np.ones(int(keep.sum()), np.int64))
    )
    order = np.lexsort((delta, times))  # at equal times -1 (an end) sorts first
    return int(np.cumsum(delta[order]).max()) if times.size else 0
