"""Exact arithmetic on the floats we are given: the rule every certificate rests on.

Every duration, speed, ``free_at``, deadline and resolution is an IEEE double, and every
double is an exact rational number. A bound, ``proven_optimal``, ``gap == 0`` or
``provably_unreachable`` must hold for those rationals, not merely up to round-off. So:

* a lower bound is computed exactly (integers or :class:`~fractions.Fraction`) and then
  rounded **down** to a float (:func:`down`): the float we state is never above the bound
  we proved;
* an upper end (a deadline met, a capacity that fits) is rounded **up** (:func:`up`);
* comparisons that decide a flag are made between exact values (a ``Fraction`` compares
  exactly with a float);
* whole ticks of a resolution are taken by exact floor and ceiling (:func:`floor_ticks`),
  never by trusting ``floor(x / r)`` in floating point near a whole number.

Ticks are int64 inside the searches and must also be exact as floats: :data:`MAX_TICKS`
is the largest count of ticks any instance may reach (see ``model.Instance.validate``).
"""

from __future__ import annotations

import math
from collections.abc import Iterable
from fractions import Fraction

import numpy as np
import numpy.typing as npt

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]

#: no count of ticks (a duration, a total, a capacity, a horizon) may exceed this: every
#: integer up to it is exact as a float, and sums of a few of them stay inside int64
MAX_TICKS = 2**53

Exact = Fraction | int


def down(x: Exact) -> float:
    """The largest float not above ``x``."""
    f = float(x)  # int / int and Fraction -> float are correctly rounded (nearest)
    if Fraction(f) > x:
        f = math.nextafter(f, -math.inf)
    return f


def up(x: Exact) -> float:
    """The smallest float not below ``x``."""
    f = float(x)
    if Fraction(f) < x:
        f = math.nextafter(f, math.inf)
    return f


def exact_sum(values: Iterable[float] | F64) -> Fraction:
    """The exact sum of floats, as a fraction (no rounding at all)."""
    if isinstance(values, np.ndarray):
        a = values
        if a.size and (a == np.floor(a)).all() and float(np.abs(a).sum()) < MAX_TICKS:
            return Fraction(int(a.sum()))  # whole numbers: every partial sum is exact
        values = a.tolist()
    num, exp = 0, 0
    for v in values:
        n, d = float(v).as_integer_ratio()  # d is a power of two
        e = d.bit_length() - 1
        if e > exp:
            num <<= e - exp
            exp = e
        num += n << (exp - e)
    return Fraction(num, 1 << exp)


def is_power_of_two(x: float) -> bool:
    """Whether ``x`` is 2**k for a whole k (dividing by it is then exact)."""
    m, _ = math.frexp(x)
    return m == 0.5


def floor_ticks(values: F64, resolution: float) -> I64:
    """``floor(v / resolution)`` for every value, exactly (the caller keeps it in range)."""
    return ticks(values, resolution)[0]


def ticks(values: F64, resolution: float) -> tuple[I64, I64]:
    """Every value in whole ticks of ``resolution``: (rounded down, rounded up), exactly.

    Division by a power of two is exact in floating point (short of underflow, which the
    check below also settles); otherwise a quotient within a few units in the last place
    of a whole number is settled with exact fractions.
    """
    x = values / resolution
    lo = np.floor(x).astype(np.int64)
    hi = np.ceil(x).astype(np.int64)
    exact_division = is_power_of_two(resolution) and not (
        values[(values != 0)].size and np.abs(x[values != 0]).min() < 2.0**-1000
    )
    if not exact_division:
        near = np.flatnonzero(np.abs(x - np.rint(x)) <= 8 * np.spacing(np.maximum(np.abs(x), 1.0)))
        r = Fraction(resolution)
        for j in near.tolist():
            q = Fraction(float(values[j])) / r
            lo[j] = math.floor(q)
            hi[j] = math.ceil(q)
    return lo, hi


def ticks_to_seconds_down(t: int, resolution: float) -> float:
    """``t`` ticks of ``resolution`` as seconds, rounded down (for a lower bound)."""
    return down(t * Fraction(resolution))


def ticks_to_seconds_up(t: int, resolution: float) -> float:
    """``t`` ticks of ``resolution`` as seconds, rounded up (for an upper end)."""
    return up(t * Fraction(resolution))


def ceil_div(a: Exact, b: Exact) -> int:
    """``ceil(a / b)`` exactly, for b > 0."""
    return -math.floor(-Fraction(a) / Fraction(b))


def array_sum(values: F64) -> Fraction:
    """The exact sum of an array of floats, vectorised (for long arrays, where
    :func:`exact_sum` loops in Python).

    Error-free extraction (Rump, Ogita and Oishi 2008, ExtractVector): with ``sigma`` a
    power of two above ``2 n max|x|``, each high part ``q = (sigma + x) - sigma`` is a
    multiple of ``sigma / 2**53`` no larger than ``sigma / n``, so ``sum(q)`` is exact in
    floating point and so is the rest ``x - q``; repeat on the rests until none is left.
    Each round takes about ``52 - log2(n)`` bits: two or three rounds for durations.
    """
    r = np.asarray(values, dtype=np.float64)
    total = Fraction(0)
    if r.size == 0:
        return total
    k = int(r.size).bit_length() + 1  # 2**k >= 2 n
    while True:
        mx = float(np.abs(r).max())
        if mx == 0.0:
            return total
        if not math.isfinite(mx):
            raise ValueError("array_sum of a value that is not finite")
        e = math.frexp(mx)[1]  # mx < 2**e
        if e + k > 1022:  # sigma + x could overflow: finish in Python integers
            return total + exact_sum(r)
        sigma = math.ldexp(1.0, e + k)
        q = (sigma + r) - sigma
        r = r - q
        total += Fraction(float(q.sum()))


def dyadic_unit(values: F64) -> int | None:
    """The largest ``e`` such that every value (finite, non-negative) is a whole multiple
    of ``2**e``; None when all are zero. Whole seconds give ``e >= 0``."""
    v = np.asarray(values, dtype=np.float64)
    v = v[v != 0.0]
    if v.size == 0:
        return None
    mant, ex = np.frexp(v)  # v = mant * 2**ex, 0.5 <= mant < 1: mant * 2**53 is whole
    whole = (mant * 2.0**53).astype(np.int64)
    lowest = whole & -whole  # its lowest set bit, a power of two
    e = ex.astype(np.int64) - 53 + (np.frexp(lowest.astype(np.float64))[1] - 1)
    return int(e.min())


def float_sums_exact(values: F64) -> bool:
    """Whether every sum of any of ``values`` (finite, non-negative), added in any order,
    is exact in floating point.

    True when all are whole multiples of one power of two ``u`` and their total is below
    ``2**53 u``: every partial sum is then a whole number of ``u`` below ``2**53``, which a
    double holds exactly (durations given in whole or half seconds, for example).
    """
    v = np.asarray(values, dtype=np.float64)
    v = v[v != 0.0]
    unit = dyadic_unit(v)
    if unit is None:
        return True
    n = int(v.size)
    # the float total is within n units in the last place of the exact one
    total = float(v.sum()) * (1.0 + n * 2.0**-52)
    return total < math.ldexp(1.0, 53 + unit)


def exact_dot(a: F64, b: F64) -> Fraction:
    """The exact value of ``sum(a * b)``, vectorised.

    Dekker's product (1971): with Veltkamp's split into 26-bit halves, ``a * b`` is
    exactly ``p + e`` for the rounded product ``p`` and an error ``e`` computed from the
    halves, short of overflow and underflow; outside a safe range the products are
    taken in Python integers instead.
    """
    x = np.asarray(a, dtype=np.float64)
    y = np.asarray(b, dtype=np.float64)
    if x.size == 0:
        return Fraction(0)
    both = np.concatenate((np.abs(x), np.abs(y)))
    nonzero = both[both != 0]
    if nonzero.size and not (nonzero.max() <= 2.0**450 and nonzero.min() >= 2.0**-450):
        pairs = zip(x.tolist(), y.tolist(), strict=True)
        return sum((Fraction(u) * Fraction(v) for u, v in pairs), Fraction(0))
    p = x * y
    c = 134217729.0 * x  # 2**27 + 1
    xh = c - (c - x)
    xl = x - xh
    c = 134217729.0 * y
    yh = c - (c - y)
    yl = y - yh
    e = ((xh * yh - p) + xh * yl + xl * yh) + xl * yl
    return array_sum(np.concatenate((p, e)))


def decimal_up(x: Fraction | float, digits: int = 6) -> str:
    """``x`` (> 0) written with ``digits`` significant digits, rounded up (never below)."""
    x = Fraction(x)
    e = math.floor(math.log10(float(x))) - digits + 1
    scale = Fraction(10) ** e
    value = math.ceil(x / scale) * scale
    return f"{float(value):.{digits}g}"
