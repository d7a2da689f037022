"""Whole ticks: every time of a stage plan is an integer count of ``instance.resolution``.

A job of duration ``p`` (seconds on a speed-1 node) runs on a node of speed ``s`` for

    d = ceil(p / (s * resolution))  ticks,

computed exactly: every double is an exact rational, and the quotient is settled in
fractions wherever floating point cannot tell which side of a whole number it lies on.
Node ``k``'s slots are free from ``F_k = ceil(free_at_k / resolution)`` ticks.

Rounding *up* is what makes a plan safe: a job given ``d`` ticks has at least its stated
``p / s`` seconds, and a node is never used before its stated ``free_at``, so a plan that
is feasible in ticks is feasible for the stated durations. Plans, bounds and the
optimum therefore all refer to one problem, **the tick-rounded problem**: running times
``d_jk`` and node start times ``F_k`` as above, starts at whole ticks. (Because its data
are integers, starting at whole ticks loses nothing: any schedule can be shifted left
to integer starts.) The makespan of a plan is the latest job end or node start time
``max(max_j end_j, max_k F_k)``: a node still busy finishes no earlier than its
``free_at``, as in the rest of spanwright.

A graph that starts while jobs still run (a re-planned one: :mod:`.carried`) adds, in
ticks rounded the same way: a start time per *slot* (``slot_free``: ``F_k``, or later where
a carried job keeps the slot), a **release** per job (it may not start earlier), and the
holds of limits by carried jobs (``held_limit``, ``held_end``: one of the limit's places is
taken until then). The makespan then counts every slot's start time:
``max(max_j end_j, max_s slot_free_s)`` (with no carried job, ``max_k F_k`` as above).

The tables are refused (:class:`~workers.planning.errors.InvalidInstance`) when a plan
could span more than :data:`~workers.planning.rational.MAX_TICKS` ticks: the latest node
start plus every job at its slowest eligible speed.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from fractions import Fraction

import numpy as np
import numpy.typing as npt

from ..errors import InvalidInstance, Issue
from ..farm_bounds import eligibility
from ..model import FloatArray, Instance
from ..rational import MAX_TICKS
from .carried import Carried

I64 = npt.NDArray[np.int64]
BoolArray = npt.NDArray[np.bool_]


def ceil_ticks(values: FloatArray, speed: float, resolution: float, *, down: bool = False) -> I64:
    """``ceil(v / (speed * resolution))`` for every value, exactly (``floor`` with
    ``down``).

    Two correctly rounded divisions are within about two units in the last place of the
    true quotient, so the float ceiling is right except for quotients within a few units
    of a whole number; those are settled with exact fractions. Values must be finite and
    ``>= 0``; a quotient beyond :data:`MAX_TICKS` raises :class:`InvalidInstance`.
    """
    x = values / speed / resolution
    if x.size and not float(x.max()) <= 2.0 * MAX_TICKS:
        raise _too_many_ticks(float(x.max()))
    out = (np.floor(x) if down else np.ceil(x)).astype(np.int64)
    near = np.flatnonzero(np.abs(x - np.rint(x)) <= 8 * np.spacing(np.maximum(np.abs(x), 1.0)))
    if near.size:
        scale = Fraction(speed) * Fraction(resolution)
        settle = math.floor if down else math.ceil
        for j in near.tolist():
            out[j] = settle(Fraction(float(values[j])) / scale)
    return out


def _too_many_ticks(ticks: float) -> InvalidInstance:
    return InvalidInstance(
        "too many ticks for the stage plan",
        [
            Issue(
                ("resolution",),
                f"a plan may span about {ticks:.3g} ticks, above the limit of 2**53; "
                "use a coarser resolution",
            )
        ],
    )


@dataclass(frozen=True, eq=False)
class Timing:
    """The tick tables of an instance (see the module docstring).

    ``run[j, c]`` is job ``j``'s running time at ``speeds[c]`` (distinct speeds, fastest
    first) and ``speed_col[k]`` node ``k``'s column; ``free[k]`` is ``F_k``;
    ``eligible[job_type[j], k]`` says whether job ``j`` may run on node ``k``;
    ``dmin[j]`` / ``dmax[j]`` are its running times on its fastest / slowest eligible
    nodes. ``slot_base[k]:slot_base[k + 1]`` are node ``k``'s slots in ``slot_free``
    (when each is free); ``release[j]`` is the tick before which job ``j`` may not start;
    ``held_limit[h]`` / ``held_end[h]`` a limit place held until then (module docstring).
    """

    resolution: float
    speeds: tuple[float, ...]
    speed_col: I64
    run: I64
    free: I64
    job_type: npt.NDArray[np.int32]
    eligible: BoolArray
    dmin: I64
    dmax: I64
    slot_base: I64
    slot_free: I64
    release: I64
    held_limit: I64
    held_end: I64

    @property
    def all_eligible(self) -> bool:
        """Whether every job may run on every node."""
        return bool(self.eligible.all())

    def ticks_on(self, j: int, k: int) -> int:
        """Job ``j``'s running time on node ``k``."""
        return int(self.run[j, self.speed_col[k]])

    @property
    def node_ready(self) -> I64:
        """Per node, the earliest tick one of its slots is free (``F_k`` unless a
        carried job keeps every slot longer)."""
        out: I64 = np.minimum.reduceat(self.slot_free, self.slot_base[:-1])
        return out

    @property
    def carried_free(self) -> bool:
        """Whether nothing is carried in: every slot free from its node's ``F_k``, no
        release, no hold."""
        return not (self.held_end.size or self.release.any()) and bool(
            (self.slot_free == np.repeat(self.free, np.diff(self.slot_base))).all()
        )

    def seconds(self, t: int) -> Fraction:
        """``t`` ticks as exact seconds."""
        return t * Fraction(self.resolution)


def build_timing(
    inst: Instance,
    *,
    down: bool = False,
    slots: I64 | None = None,
    carried: Carried | None = None,
) -> Timing:
    """The tick tables of ``inst`` (``slots`` per node, 1 each by default; ``carried``:
    the jobs running at time 0, see :mod:`.carried`); raises :class:`InvalidInstance`
    past ``MAX_TICKS`` and :class:`~workers.planning.errors.Infeasible` for a job no node
    may run.

    With ``down``, every running time and node start is rounded *down* instead: the
    tables of a relaxation whose optimum is at most the stated problem's (each job and
    node no longer than stated, so every schedule of the stated problem is one of it);
    bounds computed on it hold for the durations as given (:mod:`.result`)."""
    elig = eligibility(inst)
    res = inst.resolution
    node_speeds = [nd.speed for nd in inst.nodes]
    speeds = tuple(sorted(set(node_speeds), reverse=True))
    col = {s: c for c, s in enumerate(speeds)}
    speed_col = np.array([col[s] for s in node_speeds], dtype=np.int64)
    free_at = np.array([nd.free_at for nd in inst.nodes], dtype=np.float64)
    free = ceil_ticks(free_at, 1.0, res, down=down)
    run = np.empty((inst.n, len(speeds)), dtype=np.int64)
    for c, s in enumerate(speeds):
        run[:, c] = ceil_ticks(inst.durations, s, res, down=down)
    # fastest / slowest eligible column per job type (columns are fastest first)
    ntypes = elig.eligible.shape[0]
    fast = np.empty(ntypes, dtype=np.int64)
    slow = np.empty(ntypes, dtype=np.int64)
    for t in range(ntypes):
        cols = speed_col[elig.eligible[t]]
        fast[t], slow[t] = cols.min(), cols.max()
    jt = elig.job_type
    rows = np.arange(inst.n)
    dmin = run[rows, fast[jt]]
    dmax = run[rows, slow[jt]]
    slot_counts = np.ones(inst.m, dtype=np.int64) if slots is None else slots
    slot_base = np.concatenate(([0], np.cumsum(slot_counts))).astype(np.int64)
    slot_free = np.repeat(free, slot_counts)
    release = np.zeros(inst.n, dtype=np.int64)
    held_limit = held_end = np.zeros(0, dtype=np.int64)
    if carried is not None:
        free, ends = carried.ticks(res, down=down)  # node starts, exactly (carried.py)
        top = max([0, *free.tolist(), *ends.tolist()])
        if top > MAX_TICKS:
            raise _too_many_ticks(float(top))
        slot_free = carried.slot_free(free, slot_counts, ends)
        release = carried.release(ends)
        held_limit, held_end = carried.held(ends)
    start = max(int(slot_free.max()), int(release.max()) if release.size else 0)
    approx = float(start) + float(dmax.sum(dtype=np.float64))
    if approx > 2.0 * MAX_TICKS or start + int(dmax.sum()) > MAX_TICKS:
        raise _too_many_ticks(approx)  # (the float test first keeps the int64 sum in range)
    return Timing(
        resolution=res,
        speeds=speeds,
        speed_col=speed_col,
        run=run,
        free=free,
        job_type=jt,
        eligible=elig.eligible,
        dmin=np.ascontiguousarray(dmin),
        dmax=np.ascontiguousarray(dmax),
        slot_base=slot_base,
        slot_free=slot_free,
        release=release,
        held_limit=held_limit,
        held_end=held_end,
    )
