"""The one result shape of the planning core and its dict (JSON) form.

:class:`PlanResult` holds a :class:`Schedule` (which node runs each job, and when) and
its certificate: the best proven lower bound, which rule proved it, every bound that was
computed, the method's a-priori guarantee and why the solver stopped. ``to_dict()`` is the
``result`` object of the API contract and of ``spanwright solve --json``.
"""

from __future__ import annotations

import json
import math
from collections.abc import Mapping
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property
from json.encoder import encode_basestring_ascii
from typing import Any

import numpy as np
import numpy.typing as npt

from . import rounding
from .budget import StopReason
from .certified import MakespanAnswer
from .kernels import chain_starts, pure
from .model import FloatArray, Instance
from .rational import exact_sum

IntArray = npt.NDArray[np.int32]

#: why a solver stopped (the values of :class:`budget.StopReason`)

#: one job of :meth:`Schedule.assignment_json` (``%r`` of a float is ``float.__repr__``,
#: which is how ``json.dumps`` writes floats)
_JOB = '{"id":%s,"start":%r,"end":%r}'
#: the same when every time is a whole number of seconds (written from ints)
_WHOLE_JOB = '{"id":%s,"start":%d.0,"end":%d.0}'


def _whole(a: FloatArray) -> bool:
    """Whether every value's ``repr`` is its integer part then ``.0``: whole, not negative
    zero, below 1e16 (where ``repr`` turns to exponent notation)."""
    return bool(((a >= 0) & (a < 1e16) & (a == np.floor(a))).all() and not np.signbit(a).any())


def _fraction_bits(x: FloatArray) -> int:
    """The fewest binary places after the point that write every value of ``x`` exactly."""
    nz = x[x != 0]
    if not nz.size:
        return 0
    mant, exp = np.frexp(nz)  # nz = mant * 2**exp, 0.5 <= mant < 1
    whole = (mant * 2.0**53).astype(np.int64)  # a whole number below 2**53
    low = whole & -whole  # its lowest set bit, a power of two
    trailing = np.log2(low.astype(np.float64)).astype(np.int64)
    return max(0, int((53 - exp - trailing).max()))


@dataclass(frozen=True, eq=False)
class Schedule:
    """A complete assignment: ``node_of[j]`` runs job ``j`` from ``start[j]``."""

    instance: Instance
    node_of: IntArray
    start: FloatArray

    def __post_init__(self) -> None:
        # arrays made by a compiled kernel carry dtype objects of their own, on which
        # numpy's ufunc.at (:attr:`loads`) leaves its fast path: ten times slower. A view
        # with numpy's own dtype costs nothing.
        object.__setattr__(self, "start", np.asarray(self.start, dtype=np.float64).view(np.float64))
        object.__setattr__(self, "node_of", np.asarray(self.node_of).view(self.node_of.dtype.type))

    @classmethod
    def sequenced(
        cls,
        instance: Instance,
        node_of: npt.NDArray[np.integer[Any]],
        order: npt.NDArray[np.intp] | None = None,
    ) -> Schedule:
        """Every node runs its jobs back to back from its ``free_at``, in ``order``
        (default: longest first, ties by position in the batch).

        The one way a plan given as "node of each job" becomes times: each node keeps its
        own clock (:func:`kernels.chain_starts`), so no job starts before its node is free
        and no two jobs of a node overlap, exactly, at any scale.
        """
        nodes = np.ascontiguousarray(node_of, dtype=np.int32)
        if order is None:
            order = instance.order_longest_first
        speeds = np.array([nd.speed for nd in instance.nodes], dtype=np.float64)
        free = np.array([nd.free_at for nd in instance.nodes], dtype=np.float64)
        run = instance.durations / speeds[nodes]
        # small plans: plain Python beats loading the compiled kernel (CLI start-up)
        rule = chain_starts if instance.n > 2_000 else pure(chain_starts)
        start = rule(np.ascontiguousarray(order, dtype=np.intp), nodes, run, free)
        return cls(instance, nodes, start)

    @cached_property
    def _speeds(self) -> FloatArray:
        return np.array([nd.speed for nd in self.instance.nodes], dtype=np.float64)

    @cached_property
    def _free(self) -> FloatArray:
        return np.array([nd.free_at for nd in self.instance.nodes], dtype=np.float64)

    @cached_property
    def run(self) -> FloatArray:
        """Running time of every job on the node it was given (``duration / speed``)."""
        return self.instance.durations / self._speeds[self.node_of]

    @cached_property
    def end(self) -> FloatArray:
        """End time of every job on the node it was given."""
        return self.start + self.run

    @cached_property
    def loads(self) -> FloatArray:
        """Finish time of every node (its ``free_at`` when it runs nothing)."""
        out = self._free.copy()
        np.maximum.at(out, self.node_of, self.end)
        return out

    @cached_property
    def makespan(self) -> float:
        """When the last node finishes, in the floating-point times of the plan (computed
        once, like :attr:`loads`; the searches compare it many times)."""
        return float(self.loads.max()) if self.loads.size else 0.0

    def exact_finish(self, k: int) -> Fraction:
        """Node ``k``'s finish time in exact arithmetic: ``free_at + sum(p) / speed``."""
        nd = self.instance.nodes[k]
        mine = self.instance.durations[self.node_of == k]
        return Fraction(nd.free_at) + exact_sum(mine) / Fraction(nd.speed)

    @cached_property
    def makespan_exact(self) -> Fraction:
        """The makespan of this assignment in exact arithmetic on the stated numbers.

        Every certificate compares against this value. When every running time and
        ``free_at`` is a multiple of one power of two and every clock stays below 2**53
        of them (whole seconds, halves, speeds 1, 2, 0.5 ...), the floating-point clocks
        are exact and this is :attr:`makespan`. Otherwise each clock is within
        ``(jobs + 2) * 2**-52`` of its value relative to it, and only the nodes that may
        be last by that margin are summed again exactly.
        """
        loads = self.loads
        if not loads.size:
            return Fraction(0)
        s = self._speeds[self.node_of]
        powers = bool((np.frexp(self._speeds)[0] == 0.5).all())
        if powers and np.array_equal(self.run * s, self.instance.durations):
            bits = max(_fraction_bits(self.run), _fraction_bits(self._free))
            if bits < 1000 and math.ldexp(float(loads.max()), bits) < 2.0**53:
                return Fraction(float(loads.max()))
        counts = np.bincount(self.node_of, minlength=self.instance.m)
        err = (counts + 2) * 2.0**-52 * loads
        floor = float((loads - err).max())
        candidates = np.flatnonzero(loads + err >= floor).tolist()
        return max(self.exact_finish(k) for k in candidates)

    def jobs_per_node(self) -> npt.NDArray[np.int64]:
        """How many jobs each node runs."""
        return np.bincount(self.node_of, minlength=self.instance.m)

    def check(self) -> None:
        """Raise AssertionError unless every job runs once, on a node, no earlier than the
        node's ``free_at`` and never while another job of that node runs (the stated
        floating-point times, compared exactly)."""
        inst = self.instance
        assert self.node_of.shape == (inst.n,) and self.start.shape == (inst.n,)
        assert ((self.node_of >= 0) & (self.node_of < inst.m)).all()
        assert (self.start >= self._free[self.node_of]).all(), "a job starts before free_at"
        order = np.lexsort((self.start, self.node_of))
        same = self.node_of[order][1:] == self.node_of[order][:-1]
        gaps = self.start[order][1:] - self.end[order][:-1]
        assert (gaps[same] >= 0).all(), "jobs overlap on a node"

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

    def assignment_json(self, grid: int | None = None) -> str:
        """:meth:`to_assignment` as compact JSON text, built from the arrays directly.

        ``json.loads(assignment_json()) == to_assignment()``: the same nodes, jobs, ids and
        floats (each float written as ``json.dumps`` writes it, ``float.__repr__``), without
        making a dict per job first; several times faster for big batches. Non-finite
        times are refused like ``json.dumps(..., allow_nan=False)`` refuses them. With
        ``grid``, every time is written rounded up on the grid ``10**-grid`` s
        (``rounding.ceil_array``, as ``rounding.round_plan`` rounds a parsed plan).
        """
        inst = self.instance
        order = np.lexsort((self.start, self.node_of))
        start, end = self.start[order], self.end[order]
        loads = self.loads
        if grid is not None:
            start, end = rounding.ceil_array(start, grid), rounding.ceil_array(end, grid)
            loads = rounding.ceil_array(loads, grid)
        if not (np.isfinite(start).all() and np.isfinite(end).all() and np.isfinite(loads).all()):
            raise ValueError("Out of range float values are not JSON compliant")
        cuts = np.searchsorted(self.node_of[order], np.arange(inst.m + 1)).tolist()
        enc = encode_basestring_ascii
        # one %-template for the whole document, filled from one flat tuple (C loops only):
        # per node its id and load, then id, start and end of each of its jobs in order
        jobs: list[Any] = [None] * (3 * inst.n)
        jobs[0::3] = map(enc, map(inst.job_ids.__getitem__, order.tolist()))
        if _whole(start) and _whole(end):  # "%d.0" of the int is the float's repr, faster
            template = _WHOLE_JOB
            jobs[1::3] = start.astype(np.int64).tolist()
            jobs[2::3] = end.astype(np.int64).tolist()
        else:
            template = _JOB
            jobs[1::3] = start.tolist()
            jobs[2::3] = end.tolist()
        values: list[Any] = []
        parts: list[str] = []
        for k, (nd, load) in enumerate(zip(inst.nodes, loads.tolist(), strict=True)):
            lo, hi = cuts[k], cuts[k + 1]
            parts.append('{"node":%s,"load":%r,"jobs":[' + ",".join([template] * (hi - lo)) + "]}")
            values += (enc(nd.id), load)
            values += jobs[3 * lo : 3 * hi]
        return ("[" + ",".join(parts) + "]") % tuple(values)


@dataclass(frozen=True)
class Certificate:
    """A proven lower bound on the optimum makespan and the evidence for it."""

    value: float
    source: str
    bounds: dict[str, float]
    evidence: dict[str, Any] = field(default_factory=dict)
    #: the proven bound in exact arithmetic when it is not a float itself (a speed of 3 or
    #: 1.5 divides work into thirds); ``value`` is it rounded down
    exact: Fraction | None = None

    @property
    def exact_value(self) -> Fraction:
        """The proven bound, exactly: every flag is decided on this."""
        return self.exact if self.exact is not None else Fraction(self.value)


@dataclass(frozen=True, eq=False)
class PlanResult(MakespanAnswer):
    """A plan and how far it may be from the best possible one, for the given estimates.

    The value is the makespan; :class:`~.certified.Certified` decides ``proven_optimal``
    and ``gap`` from it and the certificate's bound, exactly."""

    schedule: Schedule
    method: str
    certificate: Certificate
    worst_case_ratio: float | None
    stop_reason: StopReason
    solve_seconds: float
    extras: dict[str, Any] = field(default_factory=dict)

    @property
    def exact_value(self) -> Fraction:
        return self.schedule.makespan_exact

    @property
    def exact_lower_bound(self) -> Fraction:
        return self.certificate.exact_value

    @property
    def bound_source(self) -> str:  # type: ignore[override]
        return self.certificate.source

    @cached_property
    def makespan(self) -> float:
        """The plan's makespan: its exact value, rounded to the nearest float."""
        return float(self.schedule.makespan_exact)

    @property
    def lower_bound(self) -> float:
        """The best proven bound: never above the optimum, in exact arithmetic."""
        return self.certificate.value

    @property
    def deadline(self) -> float | None:
        return self.schedule.instance.deadline

    def scale(self) -> str:
        inst = self.schedule.instance
        return f"{inst.m} node(s), {inst.n} job(s)"

    def to_dict(self, *, with_assignment: bool = True) -> dict[str, Any]:
        """The contract's ``result`` object."""
        out: dict[str, Any] = {
            **self.contract_head(self.certificate.bounds, self.gap),
            "nodes": self.schedule.instance.m,
            "jobs": self.schedule.instance.n,
            "resolution": self.schedule.instance.resolution,
            "certificate": dict(self.certificate.evidence),
        }
        out.update(self.extras)
        if with_assignment:
            out["assignment"] = self.schedule.to_assignment()
        return out

    def grid_head(self, grid: int) -> dict[str, Any]:
        """``to_dict(with_assignment=False)`` on the grid ``10**-grid`` s, as
        ``rounding.round_plan`` writes it with the assignment beside it."""
        loads = self.schedule.loads
        top = float(rounding.ceil_array(loads, grid).max()) if loads.size else 0.0
        head = self.to_dict(with_assignment=False)
        return rounding.round_plan(head, grid, self.exact_value, copy=False, top=top)

    def to_json(
        self,
        extra: Mapping[str, Any] | None = None,
        grid: int | None = None,
        head: Mapping[str, Any] | None = None,
    ) -> str:
        """``to_dict()`` (then the ``extra`` keys) as compact JSON, fast.

        ``json.loads(to_json(extra)) == {**to_dict(), **extra}``, with the keys in that
        order; the assignment is written by :meth:`Schedule.assignment_json`. With
        ``grid``, it is ``rounding.round_plan`` of that document, without parsing it;
        ``head`` is :meth:`grid_head` of that grid when the caller has it already.
        """
        if head is None:
            head = self.to_dict(with_assignment=False) if grid is None else self.grid_head(grid)
        fields = {k: v for k, v in head.items() if k != "assignment"}
        text = json.dumps(fields, allow_nan=False, separators=(",", ":"))
        out = text[:-1] + ',"assignment":' + self.schedule.assignment_json(grid)
        tail = {k: v for k, v in (extra or {}).items() if k != "assignment"}
        if grid is not None and tail:
            tail = rounding.round_plan(tail, grid, None)  # the confidence block's times
        if tail:
            out += "," + json.dumps(tail, allow_nan=False, separators=(",", ":"))[1:-1]
        return out + "}"
