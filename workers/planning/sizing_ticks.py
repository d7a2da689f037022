"""Deadline sizing in whole ticks: a node's capacity and the limit on tick counts.

Ticks are int64 and exact as floats only up to ``rational.MAX_TICKS``: a capacity or a
total work past it is refused (``/resolution``), naming the finest resolution that works
(see :mod:`.sizing`, "Rounding").
"""

from __future__ import annotations

import math
from fractions import Fraction

import numpy as np
import numpy.typing as npt

from .errors import Issue
from .rational import MAX_TICKS, array_sum, decimal_up, dyadic_unit, ticks

F64 = npt.NDArray[np.float64]


#: each duration in whole ticks: (rounded down, rounded up), exactly (kept under this name
#: for its importers; the one algorithm is rational.ticks)
work_ticks = ticks


def capacity_ticks(deadline: float, speed: float, resolution: float) -> int:
    """floor(deadline * speed / resolution), exactly."""
    return math.floor(Fraction(deadline) * Fraction(speed) / Fraction(resolution))


def solver_grid(durations: F64, resolution: float) -> float:
    """The tick the sizing searches count in: ``resolution``, or a coarser power of two
    that every duration is a whole multiple of (whole seconds, say, against a resolution
    of 0.0136 s). On that grid each duration is a whole number of ticks, exactly, and a
    node's capacity ``floor(deadline * speed / grid)`` loses nothing: a set of jobs fits
    a node in seconds exactly when its ticks fit in the capacity, so bounds and packings
    in ticks are the bounds and packings of the real jobs (no rounding either way)."""
    unit = dyadic_unit(durations)
    if unit is None:
        return resolution
    grid = math.ldexp(1.0, unit)
    return grid if grid > resolution else resolution


def _tick_limit(durations: F64, limit: Fraction, resolution: float) -> list[Issue]:
    """Refuse a capacity or a total work past ``MAX_TICKS`` ticks of ``resolution``.

    Every job is already known to fit the node (at most ``limit`` seconds of speed-1
    work), so each job's ticks are at most the capacity's plus one. Names the finest
    resolution that works: with ``W`` the larger of the capacity and the total work in
    seconds and ``n`` jobs, any ``r >= W / (MAX_TICKS - n)`` keeps both below the limit
    (ceilings add at most one tick per job), and none below ``W / MAX_TICKS`` does.
    """
    tick = Fraction(resolution)
    cap = math.floor(limit / tick)
    total = array_sum(durations)
    n = int(durations.size)
    if cap <= MAX_TICKS and total / tick + n <= MAX_TICKS:
        return []
    if cap <= MAX_TICKS:
        hi = ticks(durations, resolution)[1]  # each fits int64: at most cap + 1
        work = sum(hi.tolist())
        if work <= MAX_TICKS:
            return []
    else:
        work = math.ceil(total / tick)
    finest = max(limit, total) / max(1, MAX_TICKS - n)
    shown = decimal_up(finest)
    return [
        Issue(
            ("resolution",),
            f"too fine: at {resolution:g} s a node holds {cap} ticks and the jobs need "
            f"{work}, above the limit of 2**53 ({MAX_TICKS}) ticks; use a resolution of at "
            f"least {shown} s",
        )
    ]
