"""The one result shape of the planning core and its dict (JSON) form.

:class:`PlanResult` holds a :class:`Schedule` (which node runs each job, and when) and
its certificate: the best proven lower bound, which rule proved it, every bound that was
computed, the method's a-priori guarantee and why the solver stopped. ``to_dict()`` is the
``result`` object of the API contract and of ``spanwright solve --json``.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from functools import cached_property
from typing import Any

import numpy as np
import numpy.typing as npt

from .model import FloatArray, Instance

IntArray = npt.NDArray[np.int32]

#: why a solver stopped
STOP_REASONS = ("heuristic", "proved_optimal", "time_budget", "cancelled")

#: relative tolerance under which makespan and bound count as equal (float round-off)
EQUAL_RTOL = 1e-9


@dataclass(frozen=True, eq=False)
class Schedule:
    """A complete assignment: ``node_of[j]`` runs job ``j`` from ``start[j]``."""

    instance: Instance
    node_of: IntArray
    start: FloatArray

    @cached_property
    def end(self) -> FloatArray:
        """End time of every job on the node it was given."""
        speeds = np.array([nd.speed for nd in self.instance.nodes], dtype=np.float64)
        return self.start + self.instance.durations / speeds[self.node_of]

    @cached_property
    def loads(self) -> FloatArray:
        """Finish time of every node (its ``free_at`` when it runs nothing)."""
        out = np.array([nd.free_at for nd in self.instance.nodes], dtype=np.float64)
        np.maximum.at(out, self.node_of, self.end)
        return out

    @property
    def makespan(self) -> float:
        """When the last node finishes."""
        return float(self.loads.max()) if self.loads.size else 0.0

    def jobs_per_node(self) -> npt.NDArray[np.int64]:
        """How many jobs each node runs."""
        return np.bincount(self.node_of, minlength=self.instance.m)

    def check(self) -> None:
        """Raise AssertionError unless every job runs once, without overlap, after free_at."""
        inst = self.instance
        assert self.node_of.shape == (inst.n,) and self.start.shape == (inst.n,)
        assert ((self.node_of >= 0) & (self.node_of < inst.m)).all()
        free = np.array([nd.free_at for nd in inst.nodes])
        assert (self.start >= free[self.node_of] - 1e-9).all()
        order = np.lexsort((self.start, self.node_of))
        same = self.node_of[order][1:] == self.node_of[order][:-1]
        gaps = self.start[order][1:] - self.end[order][:-1]
        assert (gaps[same] >= -1e-6 * max(1.0, self.makespan)).all(), "jobs overlap on a node"

    def to_assignment(self) -> list[dict[str, Any]]:
        """Per node, in node order: ``{node, load, jobs: [{id, start, end}, ...]}``."""
        inst = self.instance
        order = np.lexsort((self.start, self.node_of))
        bounds = np.searchsorted(self.node_of[order], np.arange(inst.m + 1))
        ids, start, end, loads = inst.job_ids, self.start.tolist(), self.end.tolist(), self.loads
        out = []
        for k, nd in enumerate(inst.nodes):
            idx = order[bounds[k] : bounds[k + 1]].tolist()
            out.append(
                {
                    "node": nd.id,
                    "load": float(loads[k]),
                    "jobs": [{"id": ids[j], "start": start[j], "end": end[j]} for j in idx],
                }
            )
        return out


@dataclass(frozen=True)
class Certificate:
    """A proven lower bound on the optimum makespan and the evidence for it."""

    value: float
    source: str
    bounds: dict[str, float]
    evidence: dict[str, Any] = field(default_factory=dict)


@dataclass(frozen=True, eq=False)
class PlanResult:
    """A plan and how far it may be from the best possible one, for the given estimates."""

    schedule: Schedule
    method: str
    certificate: Certificate
    worst_case_ratio: float | None
    stop_reason: str
    solve_seconds: float
    extras: dict[str, Any] = field(default_factory=dict)

    def __post_init__(self) -> None:
        if self.stop_reason not in STOP_REASONS:
            raise ValueError(f"stop_reason {self.stop_reason!r} not understood")
        if self.solve_seconds < 0:
            raise ValueError("negative solve time not understood")
        if self.certificate.value > self.makespan * (1 + EQUAL_RTOL) + 1e-9:
            raise ValueError("lower bound above the makespan: a bound is wrong")

    @property
    def makespan(self) -> float:
        return self.schedule.makespan

    @property
    def lower_bound(self) -> float:
        return min(self.certificate.value, self.makespan)

    @property
    def gap(self) -> float:
        """(makespan - lower_bound) / lower_bound; 0 when they are equal."""
        lb, ms = self.lower_bound, self.makespan
        if self.proven_optimal:
            return 0.0
        return (ms - lb) / lb if lb > 0 else float("inf")

    @property
    def proven_optimal(self) -> bool:
        return self.makespan - self.certificate.value <= EQUAL_RTOL * max(1.0, self.makespan)

    def deadline_dict(self) -> dict[str, Any] | None:
        d = self.schedule.instance.deadline
        if d is None:
            return None
        return {
            "deadline": d,
            "met": self.makespan <= d,
            "slack": d - self.makespan,
            "provably_unreachable": self.lower_bound > d,
        }

    def to_dict(self, *, with_assignment: bool = True) -> dict[str, Any]:
        """The contract's ``result`` object."""
        out: dict[str, Any] = {
            "makespan": self.makespan,
            "lower_bound": self.lower_bound,
            "bound_source": self.certificate.source,
            "bounds": dict(self.certificate.bounds),
            "gap": self.gap,
            "proven_optimal": self.proven_optimal,
            "method": self.method,
            "worst_case_ratio": self.worst_case_ratio,
            "stop_reason": self.stop_reason,
            "solve_seconds": self.solve_seconds,
            "deadline": self.deadline_dict(),
            "nodes": self.schedule.instance.m,
            "jobs": self.schedule.instance.n,
            "resolution": self.schedule.instance.resolution,
            "certificate": dict(self.certificate.evidence),
        }
        out.update(self.extras)
        if with_assignment:
            out["assignment"] = self.schedule.to_assignment()
        return out

    def summary(self) -> str:
        """A few human-readable lines."""
        lines = [
            f"method          {self.method} (stopped: {self.stop_reason})",
            f"makespan        {self.makespan:.6g} s on {self.schedule.instance.m} node(s), "
            f"{self.schedule.instance.n} job(s)",
            f"lower bound     {self.lower_bound:.6g} s ({self.certificate.source})",
            "gap             "
            + ("0 (proven optimal)" if self.proven_optimal else f"{100 * self.gap:.3f} %"),
        ]
        if self.worst_case_ratio is not None:
            lines.append(f"a-priori ratio  {self.worst_case_ratio:.6g}")
        dl = self.deadline_dict()
        if dl is not None:
            verdict = "met" if dl["met"] else "missed"
            if dl["provably_unreachable"]:
                verdict += " (no plan can meet it)"
            lines.append(
                f"deadline        {dl['deadline']:.6g} s: {verdict}, slack {dl['slack']:.6g} s"
            )
        lines.append(f"solve time      {self.solve_seconds:.4f} s")
        return "\n".join(lines)
