"""Axis ticks of the charts: round steps chosen from an axis's range, and labels printed
at the precision of the step, so that no two ticks of an axis read the same.

A tick step is a multiple of the label's unit (whole hours, minutes, seconds, or a
decimal fraction of a second), and a label never drops a unit its step needs: a 10 s
step over 10h30 prints ``10h30m10s``, never ``10h30`` twice (issue 19 point 7).
:func:`axis_ticks` checks the labels it returns and takes a coarser step if two would
still read the same.
"""

from __future__ import annotations

import math
from collections.abc import Callable
from typing import Literal

AxisKind = Literal["time", "integer", "number"]

#: round steps of a time axis, in seconds
TIME_STEPS = (1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 900, 1800, 3600, 7200, 10800, 21600)


def fmt_tick(seconds: float) -> str:
    """Compact axis labels of whole-minute steps: 0, 45s, 30m, 2h, 2h30 (the seconds are
    dropped from hours: see :func:`time_tick_text` for finer steps)."""
    s = round(seconds)
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    if h:
        return f"{h}h{m:02d}" if m else f"{h}h"
    if m:
        return f"{m}m{sec:02d}" if sec else f"{m}m"
    return f"{sec}s" if sec else "0"


def fmt_fine_tick(seconds: float, decimals: int) -> str:
    """Axis labels with every unit down to the second (and ``decimals`` places of it):
    3725.25 -> '1h02m05.25s', 5.5 -> '5.5s', 37810 with 0 places -> '10h30m10s'."""
    rounded = round(seconds, decimals)
    whole = math.floor(rounded)
    frac = f"{rounded - whole:.{decimals}f}"[1:] if decimals else ""
    h, rem = divmod(whole, 3600)
    m, sec = divmod(rem, 60)
    if h:
        return f"{h}h{m:02d}m{sec:02d}{frac}s"
    if m:
        return f"{m}m{sec:02d}{frac}s"
    return f"{sec}{frac}s"


def decimals_of(step: float) -> int:
    """Decimal places that show every multiple of ``step`` exactly (at most 6)."""
    d = 0
    while d < 6 and abs(step * 10**d - round(step * 10**d)) > 1e-6:
        d += 1
    return d


def time_tick_text(step: float) -> Callable[[float], str]:
    """The label of a time tick on an axis of step ``step`` seconds: :func:`fmt_tick` when
    the step is whole minutes (or every tick is under an hour, where it keeps seconds),
    else every unit down to the step's precision."""
    if step >= 1 and step % 60 == 0:
        return fmt_tick
    if step >= 1:
        return lambda v: fmt_tick(v) if abs(v) < 3600 else fmt_fine_tick(v, 0)
    decimals = decimals_of(step)
    return lambda v: fmt_fine_tick(v, decimals)


def tick_text(kind: AxisKind, step: float) -> Callable[[float], str]:
    """The label of a tick on an axis of ``kind`` with step ``step``."""
    if kind == "time":
        return time_tick_text(step)
    if kind == "integer":
        return lambda v: f"{round(v)}"
    decimals = decimals_of(step)
    return lambda v: f"{v:,.{decimals}f}"


def nice_step(raw: float, kind: AxisKind = "number") -> float:
    """The smallest round step >= ``raw``: time units on a time axis, else 1-2-2.5-5 x 10^k."""
    if raw <= 0 or not math.isfinite(raw):
        return 1.0
    if kind == "time" and raw >= 1:
        return float(next((s for s in TIME_STEPS if s >= raw), 3600 * math.ceil(raw / 3600)))
    exp = 10.0 ** math.floor(math.log10(raw))
    step = next(m * exp for m in (1, 2, 2.5, 5, 10) if m * exp >= raw * (1 - 1e-9))
    return max(step, 1.0) if kind == "integer" else step


def multiples(lo: float, hi: float, step: float) -> list[float]:
    """The multiples of ``step`` from ``lo`` to ``hi`` (both ends included, with round-off)."""
    out, k = [], math.ceil(lo / step - 1e-9)
    while k * step <= hi + 1e-9 * max(1.0, abs(hi)):
        out.append(k * step)
        k += 1
    return out


def axis_ticks(
    lo: float, hi: float, step: float, kind: AxisKind
) -> tuple[float, list[float], list[str]]:
    """(step, tick values, their labels) of an axis from ``lo`` to ``hi``: the multiples of
    ``step``, each label different from every other; a step whose labels would repeat
    (which the formats above never give, but a float's round-off might) is made coarser."""
    for _ in range(64):
        values = multiples(lo, hi, step)
        text = tick_text(kind, step)
        labels = [text(v) for v in values]
        if len(set(labels)) == len(labels):
            return step, values, labels
        step = nice_step(step * 1.5, kind)
    return step, [lo], [tick_text(kind, step)(lo)]  # pragma: no cover - 64 coarser steps


def axis_range(
    lo: float, hi: float, kind: AxisKind, count: int, pad: bool
) -> tuple[float, float, float]:
    """(low end, high end, tick step) of an axis showing ``lo`` .. ``hi`` with about
    ``count`` ticks: the step is chosen from the range."""
    if kind == "integer":
        step = nice_step((hi - lo) / count, kind)
        return lo - 0.5, hi + 0.5, step
    if hi - lo <= 0:
        spread = abs(hi) * 0.05 or 1.0
        lo, hi = lo - spread, hi + spread
    if pad:
        extra = 0.04 * (hi - lo)
        lo, hi = lo - extra, hi + extra
    step = nice_step((hi - lo) / count, kind)
    lo = math.floor(lo / step + 1e-9) * step
    hi = math.ceil(hi / step - 1e-9) * step
    return lo, hi, step


def time_ticks(span: float, count: int = 8) -> tuple[list[float], list[str]]:
    """Ticks of a time axis from 0 to about ``span`` seconds (the timeline's): round time
    steps, fractions of a second on a span of a few seconds or less."""
    if not span > 0:
        return [0.0], ["0"]
    step = nice_step(span / count, "time")
    _, values, labels = axis_ticks(0.0, span, step, "time")
    return values, labels


def nice_ticks(hi: float, count: int = 8) -> list[float]:
    """Round tick positions from 0 to about ``hi`` seconds (see :func:`time_ticks`)."""
    return time_ticks(hi, count)[0]
