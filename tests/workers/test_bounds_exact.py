"""Every reported lower bound holds in exact arithmetic, checked against brute force in
Fractions written here.

Each input float is an exact rational. The references below use only ``itertools`` and
``fractions``: the optimum makespan is found by trying every assignment of the jobs to
the nodes (n <= 7), with each node finishing at ``free_at + sum(duration) / speed``
computed exactly, and the classical bound formulas (mean load, the pigeonhole sums) are
evaluated exactly and rounded down to a float by :func:`float_down` (written here).
Scales run from 1e-9 to 1e12 seconds and resolutions from 1e-6 to 1e6 seconds.
"""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import numpy as np
from hypothesis import given, settings
from hypothesis import strategies as st

from workers.planning import Instance, Node
from workers.planning.bounds import lower_bounds, simple_bounds
from workers.planning.farm_bounds import eligibility, farm_lower_bounds
from workers.planning.rational import array_sum, exact_dot, float_sums_exact

#: tick counts stay well inside what an instance may have (2**53)
TICK_ROOM = 2**50
MANTISSAS = [0.1, 0.2, 0.3, 0.7, 1 / 3, 2 / 3, 1.0, 3.0, 7.0, 0.9999999999999999]


# -- references (no spanwright code) ---------------------------------------------------
def float_down(x: Fraction) -> float:
    """The largest float not above ``x``."""
    f = float(x)
    return math.nextafter(f, -math.inf) if Fraction(f) > x else f


def float_up(x: Fraction) -> float:
    """The smallest float not below ``x``."""
    f = float(x)
    return math.nextafter(f, math.inf) if Fraction(f) < x else f


def exact_optimum(
    durations: list[float],
    speeds: list[float],
    free: list[float],
    allowed: list[list[int]] | None = None,
) -> Fraction:
    """Least makespan over every assignment, in Fractions; a node that runs nothing ends
    at its ``free_at``. ``allowed[j]`` lists the nodes job j may run on (default all)."""
    m = len(speeds)
    choices = allowed if allowed is not None else [list(range(m))] * len(durations)
    d = [Fraction(x) for x in durations]
    s = [Fraction(x) for x in speeds]
    best: Fraction | None = None
    for assign in itertools.product(*choices):
        work = [Fraction(0)] * m
        for j, k in enumerate(assign):
            work[k] += d[j]
        ms = max(Fraction(free[k]) + work[k] / s[k] for k in range(m))
        if best is None or ms < best:
            best = ms
    assert best is not None
    return best


def tick_count(
    durations: list[float], speeds: list[float], free: list[float], res: float
) -> Fraction:
    """A generous count of the ticks a plan of these jobs can span."""
    horizon = max(Fraction(f) for f in free) + sum(Fraction(x) for x in durations) / min(
        Fraction(s) for s in speeds
    )
    return horizon * max(1, max(Fraction(s) for s in speeds)) / Fraction(res)


@st.composite
def batches(draw: st.DrawFn, max_jobs: int = 7) -> tuple[list[float], float, float]:
    """(durations, scale, resolution): durations around 10**e seconds, e in -9..12, and a
    resolution in 1e-6..1e6 s (sometimes 0.3 times a power of ten) that keeps the tick
    counts of the batch below TICK_ROOM."""
    e = draw(st.integers(-9, 12))
    scale = 10.0**e
    n = draw(st.integers(1, max_jobs))
    values = st.one_of(st.sampled_from(MANTISSAS), st.floats(0.01, 10.0))
    durations = [draw(values) * scale for _ in range(n)]
    r = draw(st.integers(max(-6, e - 12), 6))
    res = 10.0**r * draw(st.sampled_from([1.0, 0.3]))
    return durations, scale, res


# -- the exact sums themselves ------------------------------------------------------------
@settings(max_examples=200, deadline=None)
@given(
    st.lists(
        st.floats(-1e300, 1e300, allow_nan=False, allow_infinity=False, allow_subnormal=True),
        max_size=40,
    ),
    st.lists(st.floats(0, 1e200, allow_nan=False, allow_infinity=False), max_size=40),
)
def test_array_sum_and_exact_dot_are_exact(a: list[float], b: list[float]) -> None:
    """array_sum and exact_dot (error-free extraction, Dekker's product) equal the sums
    of Python Fractions, from subnormal to 1e300."""
    x = np.array(a, dtype=np.float64)
    assert array_sum(x) == sum((Fraction(v) for v in a), Fraction(0))
    k = min(len(a), len(b))
    y = np.array(b[:k], dtype=np.float64)
    want = sum((Fraction(u) * Fraction(v) for u, v in zip(a[:k], b[:k], strict=True)), Fraction(0))
    assert exact_dot(x[:k], y) == want


@settings(max_examples=300, deadline=None)
@given(
    st.lists(
        st.one_of(
            st.integers(0, 2**40).map(float),  # whole seconds
            st.integers(0, 2**20).map(lambda k: k / 64),  # a 1/64 s grid
            st.floats(0, 1e12, allow_nan=False, allow_infinity=False, allow_subnormal=True),
        ),
        max_size=30,
    ),
    st.randoms(use_true_random=False),
)
def test_float_sums_exact_means_every_float_sum_is_exact(a: list[float], rnd: object) -> None:
    """When float_sums_exact says so, every prefix of the values summed in floating point,
    in a random order, equals its sum in Python Fractions (IEEE 754 double addition)."""
    x = np.array(a, dtype=np.float64)
    order = list(range(len(a)))
    rnd.shuffle(order)  # type: ignore[attr-defined]
    claim = float_sums_exact(x)
    run, exact = 0.0, Fraction(0)
    all_exact = True
    for i in order:
        run += a[i]
        exact += Fraction(a[i])
        all_exact = all_exact and Fraction(run) == exact
    assert all_exact or not claim


def test_float_sums_exact_on_known_cases() -> None:
    """Worked by hand: whole seconds sum exactly; 1 + 2**-60 does not fit a double's 53
    bits; 2**52 + 2**52 + 1 needs 54 bits; the empty batch and zeros are trivially exact."""
    assert float_sums_exact(np.array([30.0, 600.0, 5400.0, 0.5]))
    assert not float_sums_exact(np.array([1.0, 2.0**-60]))
    assert not float_sums_exact(np.array([2.0**52, 2.0**52, 1.0]))
    assert float_sums_exact(np.array([2.0**52, 1.0]))
    assert float_sums_exact(np.array([], dtype=np.float64))
    assert float_sums_exact(np.zeros(3))


# -- identical nodes ----------------------------------------------------------------------
@settings(max_examples=60, deadline=None)
@given(batches(), st.integers(1, 3))
def test_identical_bounds_never_above_exact_optimum(
    batch: tuple[list[float], float, float], m: int
) -> None:
    """Every named bound (mean_load with its tick form, longest_job, pigeonhole,
    pigeonhole_k, bin_packing) is <= the optimum found by brute force over every
    assignment in Fractions, at scales 1e-9..1e12 s and resolutions 1e-6..1e6 s."""
    durations, _, res = batch
    opt = exact_optimum(durations, [1.0] * m, [0.0] * m)
    inst = Instance.build(durations, m, resolution=res)
    cert = lower_bounds(inst, upper=float_up(opt))
    over = {k: v for k, v in cert.bounds.items() if Fraction(v) > opt}
    assert not over, (over, float(opt))
    assert Fraction(cert.value) <= opt


@settings(max_examples=80, deadline=None)
@given(batches(max_jobs=12), st.integers(1, 4))
def test_simple_bounds_are_the_exact_formulas_rounded_down(
    batch: tuple[list[float], float, float], m: int
) -> None:
    """mean_load, longest_job, pigeonhole and pigeonhole_k equal their formulas (McNaughton;
    Dell'Amico and Martello 1995, L1 and its km+1 form) evaluated in Fractions here and
    rounded down: never above them, and no float lower."""
    durations = batch[0]
    p = sorted(durations, reverse=True)
    exact = [Fraction(x) for x in p]
    n = len(p)
    b = simple_bounds(np.array(p), m)
    want = {"mean_load": float_down(sum(exact, Fraction(0)) / m), "longest_job": p[0]}
    if n > m:
        windows = [
            sum(exact[k * m - k : k * m + 1], Fraction(0)) for k in range(1, (n - 1) // m + 1)
        ]
        want["pigeonhole"] = float_down(exact[m - 1] + exact[m])
        want["pigeonhole_k"] = float_down(max(windows))
    got = {k: v for k, v in b.items() if not k.startswith("_")}
    assert got == want, (durations, m)


def test_pigeonhole_k_without_cancellation_at_1e12() -> None:
    """Regression: jobs 1e12, 0.3 x 5 on 2 nodes. Among the 5 longest some node runs 3, so
    OPT >= 3 x 0.3 (exactly 0.899999999999999966693...). Prefix sums at 1e12 lost the small
    jobs and reported 0.900146484375; the bound must be that exact sum rounded down.
    Mean load likewise: (1e12 + 5 x 0.3) / 2 rounded down. Reference: Fractions here."""
    p = np.array([1e12, 0.3, 0.3, 0.3, 0.3, 0.3])
    b = simple_bounds(p, 2)
    assert b["pigeonhole_k"] == float_down(3 * Fraction(0.3)) and b["_k"] == 2
    assert b["mean_load"] == float_down((Fraction(1e12) + 5 * Fraction(0.3)) / 2)


def test_regressions_of_float_bounds_above_the_optimum() -> None:
    """Batches where the float formulas rounded above the exact optimum (found by random
    search against this file's brute force): the mean load of 1e-9, 3e-9, 7e-9 on one node;
    pigeonhole_k of 7e6, 5077172.505113161, 3e6, 7e6 on three; the bin-packing bound of
    1/3, 0.7, 0.3, 0.3, 0.7, 0.3 on three at 1e-6 s (1e6 ticks of 1e-6 is just below 1).
    Every bound <= the exact optimum (brute force in Fractions)."""
    cases = [
        ([1e-9, 3e-9, 7e-9], 1, 1e-5),
        ([7000000.0, 5077172.505113161, 3000000.0, 7000000.0], 3, 1e10),
        ([1 / 3, 0.7, 0.3, 0.3, 0.7, 0.3], 3, 1e-6),
    ]
    for durations, m, res in cases:
        opt = exact_optimum(durations, [1.0] * m, [0.0] * m)
        cert = lower_bounds(Instance.build(durations, m, resolution=res), upper=float_up(opt))
        assert max(Fraction(v) for v in cert.bounds.values()) <= opt, (durations, cert.bounds)


# -- farms: speeds, free_at, tags ----------------------------------------------------------
@st.composite
def farms(draw: st.DrawFn) -> tuple[list[float], list[Node], list[list[str]], float]:
    """A small farm: speeds from {3, 0.3, 1.5, 1, 2, 0.7}, some nodes busy until a
    multiple of the batch's scale, some providing "gpu"; node 0 provides it, so every
    job has a node."""
    durations, scale, res = draw(batches(max_jobs=6))
    m = draw(st.integers(1, 3))
    nodes = []
    for k in range(m):
        speed = draw(st.sampled_from([3.0, 0.3, 1.5, 1.0, 2.0, 0.7]))
        free = draw(st.sampled_from([0.0, 0.0, 0.1, 0.7, 1 / 3, 2.0])) * scale
        gpu = k == 0 or draw(st.booleans())
        nodes.append(
            Node(f"n{k}", speed=speed, free_at=free, provides=frozenset({"gpu"} if gpu else ()))
        )
    requires = [["gpu"] if draw(st.booleans()) else [] for _ in durations]
    return durations, nodes, requires, res


@settings(max_examples=80, deadline=None)
@given(farms())
def test_farm_bounds_never_above_exact_optimum(
    farm: tuple[list[float], list[Node], list[list[str]], float],
) -> None:
    """Every farm bound (busy_nodes, mean_load, longest_job, k_longest, pigeonhole,
    eligibility_group, bin_packing) is <= the optimum found by brute force over every
    eligible assignment in Fractions (division by speeds 3 and 0.3 included), with
    free_at and tags."""
    durations, nodes, requires, res = farm
    speeds = [nd.speed for nd in nodes]
    free = [nd.free_at for nd in nodes]
    allowed = [[k for k, nd in enumerate(nodes) if set(r) <= nd.provides] for r in requires]
    assert tick_count(durations, speeds, free, res) <= TICK_ROOM * 64
    opt = exact_optimum(durations, speeds, free, allowed)
    inst = Instance.build(durations, nodes, requires=requires, resolution=res)
    cert = farm_lower_bounds(inst, eligibility(inst), upper=float_up(opt))
    over = {k: v for k, v in cert.bounds.items() if Fraction(v) > opt}
    assert not over, (over, float(opt))


def test_farm_regressions_of_float_bounds_above_the_optimum() -> None:
    """Farms where the float formulas rounded above the exact optimum (found by random
    search against this file's brute force): longest_job with two nodes of speed 3;
    pigeonhole and bin_packing on one node of speed 1.5 busy until 70000 s; mean_load on
    one node of speed 0.3 busy until 10000 s. Every bound <= the exact optimum."""
    cases = [
        ([34384981.47908198, 33333333.333333332], [3.0, 3.0], [0.0, 0.0], 1e7),
        ([20000.0, 10000.0, 70000.0], [1.5], [70000.0], 1000.0),
        ([70000.0, 24049.36039137613, 20618.916838226407], [0.3], [10000.0], 1e5),
    ]
    for durations, speeds, free, res in cases:
        nodes = [
            Node(f"n{k}", speed=s, free_at=f)
            for k, (s, f) in enumerate(zip(speeds, free, strict=True))
        ]
        opt = exact_optimum(durations, speeds, free)
        inst = Instance.build(durations, nodes, resolution=res)
        cert = farm_lower_bounds(inst, eligibility(inst), upper=float_up(opt))
        assert max(Fraction(v) for v in cert.bounds.values()) <= opt, (durations, cert.bounds)


def test_speed_point_three_divides_exactly() -> None:
    """One job of 1 s on nodes of speed 0.3: it takes 1 / 0.3 s, which is
    3.333333333333333456790... (0.3 is a little below 3/10), and the float quotient
    3.3333333333333335 is above it. longest_job and k_longest must not exceed the exact
    quotient (Fractions); longest_job is that quotient rounded down."""
    nodes = [Node("a", speed=0.3), Node("b", speed=0.3)]
    inst = Instance.build([1.0], nodes)
    cert = farm_lower_bounds(inst, eligibility(inst), upper=4.0)
    exact = Fraction(1) / Fraction(0.3)
    assert cert.bounds["longest_job"] == float_down(exact)
    assert max(Fraction(v) for v in cert.bounds.values()) <= exact
