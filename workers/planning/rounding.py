"""Times written on a decimal grid, each rounded in the direction that keeps it true.

The numbers a plan states come from sums and quotients of doubles, so their shortest
decimal form carries float noise (``118.8 + 0.1`` is ``118.89999999999999``). An answer
writes each time on the grid of the request's resolution instead: a multiple of
``10**-d`` seconds, ``d`` being the decimals of ``resolution`` as written
(:func:`grid_decimals`), and, like every JSON number, it means the double it reads as.
Rounding never weakens a certificate (``openapi/openapi.yaml``, ``PlanResult``):

* a lower bound goes **down** (:func:`floor_to`): the largest grid number whose double is
  not above it, so it stays a bound;
* a time of the plan goes **up** (:func:`ceil_to`): the smallest grid number whose double
  is not below it, so it still says "by then"; the map is monotone, so a node's jobs keep
  their order and equal times stay equal;
* a slack (deadline minus the exact makespan) goes down, so its sign is the verdict;
* an estimate that is no bound goes to the nearest grid number.

Flags (``proven_optimal``, ``gap``, ``met``, ``provably_unreachable``) are decided on the
exact values before any of this and are never recomputed from rounded numbers.
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Mapping
from decimal import Decimal
from fractions import Fraction
from typing import Any

import numpy as np
import numpy.typing as npt

from . import rational

#: no grid finer than this many decimals (resolution is at least 1e-6 s)
MAX_DECIMALS = 12
#: a value this many grid steps from 0 (or more) is left as a double: the grid is finer
#: than the double's own spacing there, so there is no noise to remove
_BIG = 2.0**52

_NEAREST = ("makespan_p50", "makespan_p90", "makespan_p99", "makespan_mean", "makespan_sd")


def grid_decimals(resolution: float) -> int:
    """``d`` of the grid ``10**-d`` s: the decimals of ``resolution`` as written
    (``1`` and ``5`` give 0, ``0.25`` gives 2, ``1e-06`` gives 6)."""
    exponent = Decimal(repr(float(resolution))).normalize().as_tuple().exponent
    assert isinstance(exponent, int)
    return min(max(0, -exponent), MAX_DECIMALS)


def _scale(x: float | Fraction, d: int) -> Fraction | None:
    """``x * 10**d`` exactly, or None when it is too large for the grid to matter."""
    q = Fraction(x) * 10**d
    return None if abs(q) >= _BIG else q


def floor_to(x: float | Fraction, d: int) -> float:
    """The largest number ``k / 10**d`` whose double is not above ``x`` (exact), as that
    double; ``x`` rounded down to a double when the grid is finer than doubles there."""
    if d == 0 and type(x) is float and -_BIG < x < _BIG:  # whole seconds: floor is exact
        return float(math.floor(x))  # (below 2**52 every integer is a double)
    q = _scale(x, d)
    if q is None:
        return rational.down(Fraction(x))
    k = math.floor(q)
    c = float(Fraction(k, 10**d))
    if Fraction(c) > x:  # the decimal is below x but its double is above it
        c = float(Fraction(k - 1, 10**d))
    elif Fraction(float(Fraction(k + 1, 10**d))) <= x:  # the next one's double still fits
        c = float(Fraction(k + 1, 10**d))
    return c


def ceil_to(x: float | Fraction, d: int) -> float:
    """The smallest number ``k / 10**d`` whose double is not below ``x`` (exact)."""
    return -floor_to(-Fraction(x), d) + 0.0  # + 0.0: never "-0.0"


def nearest_to(x: float, d: int) -> float:
    """``x`` rounded to the nearest grid number (an estimate, no bound)."""
    return x if abs(x) * 10**d >= _BIG else round(x, d)


def ceil_many(values: Iterable[float], d: int) -> list[float]:
    """:func:`ceil_to` of many doubles at once (a plan's job times), vectorised."""
    a = np.fromiter(values, dtype=np.float64)
    return [float(v) for v in ceil_array(a, d).tolist()]


def ceil_array(a: npt.NDArray[np.float64], d: int) -> npt.NDArray[np.float64]:
    """:func:`ceil_to` of every value of ``a``, as a new array."""
    if not a.size:
        return a.copy()
    if d >= 0 and bool((a == np.floor(a)).all()):  # whole seconds are on every such grid
        return a.copy()
    s = float(10**d)
    small = np.abs(a) * s < _BIG
    k = np.ceil(np.where(small, a, 0.0) * s)  # within one of the true ceiling
    k = np.where(k / s < a, k + 1, k)
    k = np.where((k - 1) / s >= a, k - 1, k)
    out: npt.NDArray[np.float64] = np.where(small, k / s, a)
    return out


def _round_assignment(nodes: list[dict[str, Any]], d: int) -> float:
    """Round every node's ``load`` and its jobs' ``start`` and ``end`` up, in place;
    returns the largest rounded load (0 without nodes)."""
    times: list[float] = []
    for nd in nodes:
        times.append(nd["load"])
        for job in nd["jobs"]:
            times += (job["start"], job["end"])
    it = iter(ceil_many(times, d))
    top = 0.0
    for nd in nodes:
        nd["load"] = next(it)
        top = max(top, nd["load"])
        for job in nd["jobs"]:
            job["start"], job["end"] = next(it), next(it)
    return top


def _round_confidence(block: dict[str, Any], d: int) -> None:
    """A confidence block (and its ``dynamic`` part): planned makespan up, estimates to
    the nearest, each quantile's interval outwards."""
    for part in (block, block.get("dynamic")):
        if not isinstance(part, dict):
            continue
        if isinstance(part.get("planned_makespan"), float):
            part["planned_makespan"] = ceil_to(part["planned_makespan"], d)
        for key in _NEAREST:
            if isinstance(part.get(key), float):
                part[key] = nearest_to(part[key], d)
        for key, (lo, hi) in list((part.get("quantile_intervals") or {}).items()):
            part["quantile_intervals"][key] = [floor_to(lo, d), ceil_to(hi, d)]


def _round_confidence_sizing(block: dict[str, Any], d: int) -> None:
    rows = [block.get("chosen"), block.get("fewer"), *block.get("curve", [])]
    for row in rows:
        if isinstance(row, dict):
            row["planned_makespan"] = ceil_to(row["planned_makespan"], d)
            row["makespan_p90"] = nearest_to(row["makespan_p90"], d)


def _seconds(doc: dict[str, Any]) -> None:
    for key in ("solve_seconds", "first_answer_seconds"):
        if isinstance(doc.get(key), float):
            doc[key] = round(doc[key], 4)


def _makespan(
    doc: dict[str, Any], plan: Any, exact: Fraction | None, d: int, top: float = 0.0
) -> Fraction | None:
    """Round ``doc["makespan"]`` up (from ``exact`` when known) and the plan's times; the
    makespan is never below a rounded load (nor ``top``, the largest rounded load of a
    plan written apart). Returns the makespan an exact slack is taken from: ``exact``,
    else the stated (rounded up) one; None without a makespan."""
    if isinstance(plan, list):
        top = max(top, _round_assignment(plan, d))
    if not isinstance(doc.get("makespan"), int | float):
        return None
    stated = ceil_to(exact if exact is not None else doc["makespan"], d)
    doc["makespan"] = max(stated, top)
    return exact if exact is not None else Fraction(doc["makespan"])


def _slack(deadline: Any, made: Fraction | None, d: int) -> float | None:
    """deadline - makespan, rounded down (None without both)."""
    if made is None or not isinstance(deadline, int | float):
        return None
    return floor_to(Fraction(deadline) - made, d)


def round_plan(
    result: dict[str, Any],
    d: int,
    exact_makespan: Fraction | None,
    *,
    copy: bool = True,
    top: float = 0.0,
) -> dict[str, Any]:
    """A plan's ``result`` object written on the grid ``10**-d`` (``exact_makespan``: the
    plan's makespan in exact arithmetic): a copy, or ``result`` itself changed in place
    when ``copy`` is false. ``top`` is the largest load, rounded up, of an assignment
    written apart (``Schedule.assignment_json``)."""
    doc: dict[str, Any] = _copy(result) if copy else result
    made = _makespan(doc, doc.get("assignment"), exact_makespan, d, top)
    if isinstance(doc.get("lower_bound"), int | float):
        doc["lower_bound"] = floor_to(doc["lower_bound"], d)
    if isinstance(doc.get("bounds"), dict):
        doc["bounds"] = {k: floor_to(v, d) for k, v in doc["bounds"].items()}
    block = doc.get("deadline")
    if isinstance(block, dict) and (slack := _slack(block.get("deadline"), made, d)) is not None:
        block["slack"] = slack
    if isinstance(doc.get("confidence"), dict):
        _round_confidence(doc["confidence"], d)
    _seconds(doc)
    return doc


def round_sizing(
    result: dict[str, Any], d: int, exact_makespan: Fraction | None, *, copy: bool = True
) -> dict[str, Any]:
    """A sizing's ``result`` object with its times on the grid ``10**-d`` (a copy, or in
    place as for :func:`round_plan`); node counts and costs are no times and stay."""
    doc: dict[str, Any] = _copy(result) if copy else result
    made = _makespan(doc, doc.get("plan"), exact_makespan, d)  # a rental states none
    if "slack" in doc and (slack := _slack(doc.get("deadline"), made, d)) is not None:
        doc["slack"] = slack
    for row in doc.get("curve") or []:
        row["makespan"] = ceil_to(row["makespan"], d)
        row["lower_bound"] = floor_to(row["lower_bound"], d)
    if isinstance(doc.get("confidence"), dict):
        _round_confidence(doc["confidence"], d)
    if isinstance(doc.get("confidence_sizing"), dict):
        _round_confidence_sizing(doc["confidence_sizing"], d)
    _seconds(doc)
    return doc


def round_progress(progress: Mapping[str, Any], d: int) -> dict[str, Any]:
    """A progress report: the best makespan up, the best bound down."""
    out = dict(progress)
    if isinstance(out.get("best_makespan"), float):
        out["best_makespan"] = ceil_to(out["best_makespan"], d)
    if isinstance(out.get("best_lower_bound"), float):
        out["best_lower_bound"] = floor_to(out["best_lower_bound"], d)
    return out


def exact_makespan_of(answer: Any) -> Fraction | None:
    """The exact makespan of an answer's plan: a plan's own (``exact_value``), a node
    count's schedule or a stage graph's plan; None for a rental, which states none."""
    schedule = getattr(answer, "schedule", None)
    if schedule is not None and hasattr(schedule, "makespan_exact"):
        return Fraction(schedule.makespan_exact)
    exact = getattr(getattr(answer, "plan", None), "exact_value", None)
    return None if exact is None else Fraction(exact)


def _copy(x: Any) -> Any:
    """A deep copy of JSON data (dicts and lists; the rest is immutable)."""
    if isinstance(x, Mapping):
        return {k: _copy(v) for k, v in x.items()}
    if isinstance(x, list):
        return [_copy(v) for v in x]
    return x
