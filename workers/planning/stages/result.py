"""A planned stage graph with its certificate, in the plan contract's shape.

:class:`StageResult` is a :class:`~workers.planning.certified.MakespanAnswer` whose value
is the plan's makespan **for the durations as given**: each job runs from its planned
start (whole ticks) for exactly ``duration / speed`` seconds. Its lower bound is the best
of :mod:`.bounds` on the tick-rounded problem when whole ticks change no stated time, and
otherwise on the problem with every time rounded *down* to ticks
(:meth:`.problem.StageProblem.relaxed`), whose optimum is at most the stated one; so every
flag holds exactly for the numbers the caller gave (DEVELOPERS.md, "What a certificate may
rest on").
"""

from __future__ import annotations

import json
from collections.abc import Mapping
from dataclasses import dataclass
from fractions import Fraction
from functools import cached_property
from typing import Any

import numpy as np

from ..budget import StopReason
from ..certified import MakespanAnswer
from ..rational import down, up
from .bounds import StageBounds
from .plan import StagePlan
from .problem import StageProblem


@dataclass(frozen=True, eq=False)
class StageResult(MakespanAnswer):
    """A stage plan, every bound, the best, and why the search stopped."""

    plan: StagePlan
    #: bounds on the problem the certificate rests on (see the module docstring)
    bounds: StageBounds
    method: str
    #: the priority rule (or ``search``) whose plan this is
    rule: str
    stop_reason: StopReason
    worst_case_ratio: float | None
    rounds: int
    solve_seconds: float

    @property
    def problem(self) -> StageProblem:
        return self.plan.problem

    @cached_property
    def exact_value(self) -> Fraction:
        """The makespan with the stated durations: the latest ``start + duration / speed``
        or stated ``free_at``, exactly (the tick makespan when no time was rounded)."""
        p = self.plan.problem
        if not p.rounded:
            return self.plan.makespan_exact
        inst = p.instance
        res = Fraction(inst.resolution)
        speeds = np.array([nd.speed for nd in inst.nodes], dtype=np.float64)
        approx = self.plan.start * inst.resolution + inst.durations / speeds[self.plan.node]
        top = float(approx.max()) if approx.size else 0.0
        near = np.flatnonzero(approx >= top * (1 - 1e-9) - 1e-9).tolist()
        ends: list[Fraction] = [
            int(self.plan.start[j]) * res
            + Fraction(float(inst.durations[j])) / Fraction(inst.nodes[self.plan.node[j]].speed)
            for j in near
        ]
        free = max((Fraction(nd.free_at) for nd in inst.nodes), default=Fraction(0))
        return max([free, *ends])

    @property
    def exact_lower_bound(self) -> Fraction:
        return self.bounds.exact

    @property
    def bound_source(self) -> str:  # type: ignore[override]
        return self.bounds.best.name

    @property
    def makespan(self) -> float:
        """The makespan, rounded up to a float (never below the exact one)."""
        return up(self.exact_value)

    @property
    def deadline(self) -> float | None:
        return self.problem.instance.deadline

    def scale(self) -> str:
        p = self.problem
        return f"{p.m} node(s), {p.n} job(s), {p.arcs} wait(s)"

    def _bounds_dict(self) -> dict[str, float]:
        res = Fraction(self.bounds.resolution)
        out: dict[str, float] = {}
        for b in self.bounds.bounds:
            name = b.name
            if name == "limit_load" or name in out:
                name = f"{b.name}:{b.evidence.get('limit', len(out))}"
            out[name] = down(b.ticks * res)
        return out

    def to_dict(self, *, with_assignment: bool = True) -> dict[str, Any]:
        """The contract's ``result`` object (a plan), with slots and the graph's evidence."""
        p = self.problem
        best = self.bounds.best
        gap = self.gap if self.gap != float("inf") else None
        out: dict[str, Any] = {
            **self.contract_head(self._bounds_dict(), gap),
            "nodes": p.m,
            "jobs": p.n,
            "resolution": p.instance.resolution,
            "certificate": {
                **best.evidence,
                "problem": "times rounded down to whole ticks of resolution"
                if p.rounded
                else "the times as given (every one a whole number of ticks)",
                "rule": self.rule,
                "rounds": self.rounds,
            },
            "stages": {
                "arcs": p.arcs,
                "limits": dict(zip(p.limit_names, p.capacities.tolist(), strict=True)),
                "slots": int(p.slots.sum()),
                "critical_path": next(
                    (
                        b.evidence.get("jobs")
                        for b in self.bounds.bounds
                        if b.name == "critical_path"
                    ),
                    None,
                ),
            },
        }
        if with_assignment:
            out["assignment"] = self.to_assignment()
        return out

    def to_assignment(self) -> list[dict[str, Any]]:
        """Per node, in node order: ``{node, slots, load, jobs: [{id, slot, start, end}]}``
        (ends with the stated durations; starts on whole ticks)."""
        p = self.problem
        inst = p.instance
        res = inst.resolution
        speeds = np.array([nd.speed for nd in inst.nodes], dtype=np.float64)
        start = self.plan.start * res
        end = start + inst.durations / speeds[self.plan.node]
        order = np.lexsort((self.plan.slot, start, self.plan.node))
        cuts = np.searchsorted(self.plan.node[order], np.arange(inst.m + 1))
        out = []
        for k, nd in enumerate(inst.nodes):
            idx = order[cuts[k] : cuts[k + 1]].tolist()
            load = max([nd.free_at, *(float(end[j]) for j in idx)])
            out.append(
                {
                    "node": nd.id,
                    "slots": int(p.slots[k]),
                    "load": load,
                    "jobs": [
                        {
                            "id": inst.job_ids[j],
                            "slot": int(self.plan.slot[j]),
                            "start": float(start[j]),
                            "end": float(end[j]),
                        }
                        for j in idx
                    ],
                }
            )
        return out

    def to_json(self, extra: Mapping[str, Any] | None = None) -> str:
        """``to_dict()`` then the ``extra`` keys, as compact JSON."""
        out = self.to_dict()
        out.update(extra or {})
        return json.dumps(out, allow_nan=False, separators=(",", ":"))
