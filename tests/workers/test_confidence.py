"""Deadline confidence by simulation (workers/planning/confidence/).

The references are outside the code under test: the lognormal moments (Johnson, Kotz and
Balakrishnan, Continuous Univariate Distributions vol. 1, 2nd ed. 1994, ch. 14), the normal
distribution function from scipy.stats, the definition of the Wilson (1927) score
interval (and scipy's own Wilson interval), Graham's (1966) list-scheduling bound, LPT
(Graham 1969) and brute-force event simulations written here with heapq, and an independent
Monte-Carlo run with numpy's generator. Monte-Carlo tolerances are computed from the sample
size (a few standard errors), never tuned to the output. Tests that compare a compiled
kernel with its own pure-Python twin, or a seeded run with itself, say so (plumbing).
"""

from __future__ import annotations

import dataclasses
import heapq
import itertools
import json
import math

import numpy as np
import pytest
from scipy import stats

from service.cli import main as cli_main
from service.problems import json_pointer
from service.reading import read_spread
from tests.bodies import size_body
from tests.service.conftest import PRICED_SIZING
from workers import tasks
from workers.planning import Instance, Node
from workers.planning import confidence as cf
from workers.planning.errors import Infeasible, InvalidInstance
from workers.planning.greedy import list_schedule, longest_first_schedule
from workers.planning.kernels import Farm, earliest_finish
from workers.planning.result import Schedule
from workers.planning.sizing import SizingResult

Z90 = stats.norm.ppf(0.9)


def with_p90(inst: Instance, p90: list[float | None]) -> Instance:
    """The same instance with per-job p90 values."""
    return dataclasses.replace(inst, duration_p90=tuple(p90))


def studio_batch(n: int, seed: int) -> np.ndarray:
    """Shot render estimates of an invented episode: lognormal around 20 minutes."""
    return np.random.default_rng(seed).lognormal(math.log(1200), 0.6, n).round(1)


def farm_plan(seed: int = 3) -> Schedule:
    """A heterogeneous plan (speeds, busy nodes, a gpu tag) by earliest finish time."""
    rng = np.random.default_rng(seed)
    d = rng.uniform(100, 900, 40).round()
    nodes = [
        Node("blade-01", speed=1.0),
        Node("blade-02", speed=1.5, free_at=300.0),
        Node("gpu-01", speed=2.0, provides=frozenset({"gpu"})),
        Node("gpu-02", speed=0.8, provides=frozenset({"gpu"}), free_at=120.0),
    ]
    requires = [["gpu"] if j % 3 == 0 else [] for j in range(d.size)]
    inst = Instance.build(d, nodes, requires=requires)
    reqs = inst.requires or ()
    kinds = sorted(set(reqs), key=sorted)
    job_type = np.array([kinds.index(r) for r in reqs], dtype=np.int32)
    eligible = np.array([[r <= nd.provides for nd in nodes] for r in kinds], dtype=np.bool_)
    speeds = np.array([nd.speed for nd in nodes])
    free = np.array([nd.free_at for nd in nodes])
    farm = Farm(speeds, free, job_type, eligible)
    node_of, start = earliest_finish(inst.order_longest_first, d, farm)
    sched = Schedule(inst, node_of, start)
    sched.check()
    return sched


def reference_dispatch(sched: Schedule, durations: np.ndarray) -> np.ndarray:
    """Brute-force node-driven dispatch with heapq: per node its finish time."""
    inst = sched.instance
    order = sorted(range(inst.n), key=lambda j: (sched.start[j], sched.node_of[j], j))
    reqs = inst.requires or (frozenset(),) * inst.n
    left = list(order)
    finish = [nd.free_at for nd in inst.nodes]
    heap = [(nd.free_at, k) for k, nd in enumerate(inst.nodes)]
    heapq.heapify(heap)
    while heap and left:
        t, k = heapq.heappop(heap)
        pick = next((j for j in left if reqs[j] <= inst.nodes[k].provides), None)
        if pick is None:
            continue
        left.remove(pick)
        t = t + durations[pick] / inst.nodes[k].speed
        finish[k] = t
        heapq.heappush(heap, (t, k))
    assert not left
    return np.array(finish)


# -- the normals ---------------------------------------------------------------------------
def test_ziggurat_tables_match_published_constants() -> None:
    """Marsaglia and Tsang (2000), 256 layers: r = 3.6541528853610088 and common area
    v = 0.00492867323399 (both from memory); every layer has area v (the construction)."""
    x, k, f = cf.ziggurat_tables()
    assert x[1] == pytest.approx(3.6541528853610088, rel=1e-12)
    # v = r f(r) + integral of exp(-x^2/2) beyond r = r f(r) + sqrt(2 pi) (1 - Phi(r))
    v = x[1] * f[1] + math.sqrt(2 * math.pi) * stats.norm.sf(x[1])
    assert v == pytest.approx(0.00492867323399, rel=1e-9)
    assert x[0] * f[1] == pytest.approx(v, rel=1e-12)  # base strip: rectangle + tail
    areas = x[1:-1] * (f[2:] - f[1:-1])
    np.testing.assert_allclose(areas, v, rtol=1e-9)
    assert x[-1] == 0.0 and np.all(np.diff(x[1:]) < 0) and np.all(k < 1)


def test_sfc64_step_matches_numpy_bit_for_bit() -> None:
    """Our in-kernel SFC64 step gives exactly numpy's ``SFC64.random_raw`` words, compiled
    and in pure Python, and leaves the state where numpy's generator leaves it."""
    bg = np.random.SFC64(np.random.SeedSequence(42))
    state = np.array(bg.state["state"]["state"], dtype=np.uint64)
    state2 = state.copy()
    expected = bg.random_raw(1000)
    np.testing.assert_array_equal(cf.sfc64_raw(state, 1000), expected)
    with np.errstate(over="ignore"):
        np.testing.assert_array_equal(cf.sfc64_raw.py_func(state2, 1000), expected)
    np.testing.assert_array_equal(state, bg.state["state"]["state"])
    np.testing.assert_array_equal(state2, state)


def _normals(n: int, seed: int) -> np.ndarray:
    x, k, f = cf.ziggurat_tables()
    state = np.array(np.random.SFC64(seed).state["state"]["state"], dtype=np.uint64)
    z = np.empty(n)
    cf.fill_normals(state, z, x, k, f)
    return z


def test_normals_pass_kolmogorov_smirnov_and_tail_checks() -> None:
    """300,000 ziggurat normals against scipy's standard normal: KS distance below the
    0.1% critical value 1.949/sqrt(N) (Smirnov's asymptotic table), mean and variance
    within 5 standard errors, and the share beyond the tail start r within 5 binomial
    standard errors of 2 (1 - Phi(r)); the tail itself (|z| > r) against the normal's
    conditional tail by KS as well."""
    n = 300_000
    z = _normals(n, 11)
    r = cf.ziggurat_tables()[0][1]
    assert stats.kstest(z, "norm").statistic < 1.949 / math.sqrt(n)
    assert abs(z.mean()) < 5 / math.sqrt(n)
    assert abs(z.var() - 1) < 5 * math.sqrt(2 / n)
    p_tail = 2 * stats.norm.sf(r)
    assert abs((np.abs(z) > r).mean() - p_tail) < 5 * math.sqrt(p_tail / n)
    assert abs(np.mean(z > 0) - 0.5) < 5 * math.sqrt(0.25 / n)
    # the tail: P(|Z| > t | |Z| > r) = sf(t) / sf(r)
    tail = np.abs(_normals(4_000_000, 12))
    tail = tail[tail > r]
    d = stats.kstest(tail, lambda t: 1 - stats.norm.sf(t) / stats.norm.sf(r)).statistic
    assert d < 1.949 / math.sqrt(tail.size)


def test_pure_python_kernels_agree_with_compiled() -> None:
    """Plumbing: the `.py_func` path (no numba) gives the same numbers as the compiled
    kernels (the numbers themselves are checked against references in the tests below)."""
    x, k, f = cf.ziggurat_tables()
    st0 = np.array(np.random.SFC64(5).state["state"]["state"], dtype=np.uint64)
    a, b = np.empty(3000), np.empty(3000)
    s1, s2 = st0.copy(), st0.copy()
    cf.fill_normals(s1, a, x, k, f)
    with np.errstate(over="ignore"):
        cf.fill_normals.py_func(s2, b, x, k, f)
    np.testing.assert_array_equal(a, b)
    np.testing.assert_array_equal(s1, s2)

    sched = farm_plan()
    inst = sched.instance
    model = cf.SpreadModel.from_instance(inst, 0.4)
    speed = np.array([nd.speed for nd in inst.nodes])
    free = np.array([nd.free_at for nd in inst.nodes])
    rows = 20
    weight = inst.durations / speed[sched.node_of]
    args = (sched.node_of, weight, sched.loads)
    ms1, ms2 = np.empty(rows), np.empty(rows)
    cr1, cr2 = np.empty(rows, np.int32), np.empty(rows, np.int32)

    def draws() -> cf.Draws:
        return cf.Draws(st0.copy(), model.sigma, model.shift, x, k, f)

    cf.static_rows(draws(), *args, ms1, cr1)
    with np.errstate(over="ignore"):
        cf.static_rows.py_func(draws(), *args, ms2, cr2)
    # numpy's and libm's float32 exp may differ in the last bit: equal to 1e-6
    np.testing.assert_allclose(ms1, ms2, rtol=1e-6)
    np.testing.assert_array_equal(cr1, cr2)

    tables = cf.dispatch_tables(sched)
    dargs = (inst.durations, speed, free, tables)
    cf.dynamic_rows(draws(), *dargs, ms1, cr1)
    with np.errstate(over="ignore"):
        cf.dynamic_rows.py_func(draws(), *dargs, ms2, cr2)
    np.testing.assert_allclose(ms1, ms2, rtol=1e-6)
    np.testing.assert_array_equal(cr1, cr2)
    fin1, fin2 = np.empty(inst.m), np.empty(inst.m)
    dur = inst.durations * 1.3
    cf.dispatch_row(dur, speed, free, tables, fin1)
    cf.dispatch_row.py_func(dur, speed, free, tables, fin2)
    np.testing.assert_array_equal(fin1, fin2)


# -- zero spread is the deterministic answer -----------------------------------------------
def heap_makespan(times: list[float], m: int) -> float:
    """Graham's (1966) list scheduling with heapq: each job in the given order onto the
    least-loaded of m nodes; the makespan, whatever the ties."""
    heap = [0.0] * m
    for t in times:
        heapq.heapreplace(heap, heap[0] + t)
    return max(heap)


@pytest.mark.parametrize("policy", ["static", "dynamic"])
@pytest.mark.parametrize(
    ("make", "order"),
    [(longest_first_schedule, lambda d: sorted(d, reverse=True)), (list_schedule, list)],
)
def test_zero_spread_gives_the_plan_exactly(policy: str, make: object, order: object) -> None:
    """No spread: every sample is the plan's makespan bit for bit, P is exactly 1 at the
    makespan and exactly 0 just below it, the interval is that point; that makespan is the
    one of list scheduling (batch order, Graham 1966) or LPT (Graham 1969) written here
    with heapq. For dynamic dispatch this holds because a list schedule on identical
    nodes starts jobs in non-decreasing time (the least load only grows; Graham 1966), so
    dispatching in planned-start order replays the plan."""
    d = studio_batch(300, 1)
    inst = Instance.build(d, 17)
    sched = make(inst)  # type: ignore[operator]
    ms = heap_makespan(order(d.tolist()), 17)  # type: ignore[operator]
    assert sched.makespan == ms
    res = cf.simulate(sched, samples=64, deadline=ms, policy=policy)  # type: ignore[arg-type]
    assert np.all(res.makespans == ms)
    assert res.deadline_probability == 1.0 and res.interval == (1.0, 1.0)
    assert res.standard_error == 0.0
    assert res.quantile(0.5) == res.quantile(0.9) == res.quantile(0.99) == ms
    below = cf.simulate(
        sched,
        samples=64,
        deadline=math.nextafter(ms, 0),
        policy=policy,  # type: ignore[arg-type]
    )
    assert below.deadline_probability == 0.0
    assert res.to_dict()["model"]["distribution"] == "deterministic"


def test_zero_spread_static_on_a_heterogeneous_plan() -> None:
    """Speeds, busy nodes and tags: the static policy with zero spread still gives the
    planned makespan exactly, and p90 equal to the estimate means zero spread too."""
    sched = farm_plan()
    p90 = [float(d) for d in sched.instance.durations]
    inst = with_p90(sched.instance, p90)  # type: ignore[arg-type]
    sched2 = Schedule(inst, sched.node_of, sched.start)
    res = cf.simulate(sched2, spread=0.0, samples=32, deadline=sched.makespan)
    assert np.all(res.makespans == sched.makespan) and res.deadline_probability == 1.0


def test_dynamic_dispatch_on_a_farm_matches_brute_force() -> None:
    """On a heterogeneous farm the plan (earliest finish) need not equal dispatch even at
    zero spread; what holds is that the kernel's dispatch equals a brute-force event
    simulation written with heapq, at zero spread and for scaled durations."""
    sched = farm_plan()
    inst = sched.instance
    res = cf.simulate(sched, samples=8, policy="dynamic")
    ref = reference_dispatch(sched, inst.durations)
    assert np.all(res.makespans == ref.max())
    speed = np.array([nd.speed for nd in inst.nodes])
    free = np.array([nd.free_at for nd in inst.nodes])
    tables = cf.dispatch_tables(sched)
    rng = np.random.default_rng(2)
    for _ in range(5):
        dur = inst.durations * rng.lognormal(0, 0.5, inst.n)
        fin = np.empty(inst.m)
        assert cf.dispatch_row(dur, speed, free, tables, fin) == inst.n
        np.testing.assert_allclose(fin, reference_dispatch(sched, dur), rtol=1e-12)


def test_plain_dispatch_matches_the_heap_and_brute_force() -> None:
    """Without tags the grouped dispatch (dispatch_row_plain) runs; on a farm with speeds
    and busy nodes it equals the brute-force heapq simulation and the general heap kernel,
    compiled and in pure Python, for several node counts (groups of 4 up to 14 nodes)."""
    rng = np.random.default_rng(12)
    for m in (1, 3, 7, 50, 200):
        nodes = [
            Node(f"blade-{k:03d}", speed=float(rng.choice([0.75, 1.0, 1.6])),
                 free_at=float(rng.choice([0.0, 0.0, 900.0])))
            for k in range(m)
        ]  # fmt: skip
        inst = Instance.build(studio_batch(400, m), nodes)
        speeds = np.array([nd.speed for nd in nodes])
        free = np.array([nd.free_at for nd in nodes])
        farm = Farm(speeds, free, np.zeros(inst.n, np.int32), np.ones((1, m), np.bool_))
        node_of, start = earliest_finish(inst.order_longest_first, inst.durations, farm)
        sched = Schedule(inst, node_of, start)
        tables = cf.dispatch_tables(sched)
        group = max(4, int(math.sqrt(m)))
        for _ in range(3):
            dur = inst.durations * rng.lognormal(0, 0.5, inst.n)
            a, b, c = np.empty(m), np.empty(m), np.empty(m)
            cf.dispatch_row_plain(dur, speeds, free, tables.type_jobs, group, a)
            cf.dispatch_row_plain.py_func(dur, speeds, free, tables.type_jobs, group, b)
            cf.dispatch_row(dur, speeds, free, tables, c)
            np.testing.assert_array_equal(a, b)
            np.testing.assert_array_equal(a, c)
            np.testing.assert_allclose(a, reference_dispatch(sched, dur), rtol=1e-12)
        res = cf.simulate(sched, samples=4, policy="dynamic")
        assert np.all(res.makespans == reference_dispatch(sched, inst.durations).max())


def test_dynamic_samples_respect_grahams_list_bound() -> None:
    """Graham (1966): any list schedule on m identical nodes ends by sum/m + (1 - 1/m) max.
    Dispatch of sampled durations is a list schedule, so each sample obeys it for its own
    durations; we check both dispatch kernels on independent lognormal draws."""
    inst = Instance.build(studio_batch(120, 4), 9)
    sched = longest_first_schedule(inst)
    tables = cf.dispatch_tables(sched)
    rng = np.random.default_rng(8)
    ones, zeros = np.ones(inst.m), np.zeros(inst.m)
    for _ in range(20):
        dur = inst.durations * rng.lognormal(0, 0.7, inst.n)
        fin = np.empty(inst.m)
        cf.dispatch_row(dur, ones, zeros, tables, fin)
        bound = dur.sum() / inst.m + (1 - 1 / inst.m) * dur.max()
        assert fin.max() <= bound * (1 + 1e-12)
        cf.dispatch_row_plain(dur, ones, zeros, tables.type_jobs, 4, fin)
        assert fin.max() <= bound * (1 + 1e-12)


# -- one node: the distribution of a sum ----------------------------------------------------
def lognormal_cumulants(mu: np.ndarray, s: np.ndarray) -> tuple[float, float, float]:
    """Mean, variance and fourth cumulant of a sum of independent lognormals, from the
    raw moments E[D^k] = exp(k mu + k^2 s^2 / 2) (Johnson-Kotz-Balakrishnan ch. 14)."""
    m1, m2, m3, m4 = (np.exp(k * mu + 0.5 * k * k * s * s) for k in (1, 2, 3, 4))
    var = m2 - m1**2
    mu4 = m4 - 4 * m3 * m1 + 6 * m2 * m1**2 - 3 * m1**4  # central fourth moment
    k4 = mu4 - 3 * var**2
    return float(m1.sum()), float(var.sum()), float(k4.sum())


def check_sum_moments(sample: np.ndarray, mean: float, var: float, k4: float) -> None:
    """Sample mean and variance within 5 standard errors of the closed forms; the
    variance's standard error is sqrt((mu4 - var^2)/N) = sqrt((k4 + 2 var^2)/N)."""
    n = sample.size
    assert abs(sample.mean() - mean) < 5 * math.sqrt(var / n)
    assert abs(sample.var(ddof=1) - var) < 5 * math.sqrt((k4 + 2 * var * var) / n)


@pytest.mark.parametrize("policy", ["static", "dynamic"])
def test_one_node_gives_a_lognormal_sum_from_p90(policy: str) -> None:
    """One node, jobs with p90: each is lognormal with median the estimate and
    sigma = ln(p90/d)/z_0.9; the makespan is their sum, whose mean and variance are the
    sums of exp(mu + s^2/2) and (exp(s^2) - 1) exp(2 mu + s^2)."""
    d = np.array([600.0, 1200.0, 1800.0, 300.0, 2400.0])
    p90 = d * np.array([1.2, 1.5, 2.0, 1.1, 3.0])
    inst = with_p90(Instance.build(d, 1), list(p90))
    res = cf.simulate(longest_first_schedule(inst), samples=20_000, seed=3, policy=policy)  # type: ignore[arg-type]
    s = np.log(p90 / d) / Z90
    mean, var, k4 = lognormal_cumulants(np.log(d), s)
    assert var == pytest.approx(float(np.sum((np.exp(s**2) - 1) * np.exp(2 * np.log(d) + s**2))))
    check_sum_moments(res.makespans, mean, var, k4)


def test_one_node_with_a_batch_spread_keeps_the_mean() -> None:
    """A batch CV c: each job has mean d and sd c d (mean matched, sigma^2 = ln(1 + c^2));
    on one node of speed 2, free at 100 s, the makespan is 100 + sum/2."""
    d = studio_batch(40, 6)
    c = 0.35
    inst = Instance.build(d, [Node("solo", speed=2.0, free_at=100.0)])
    res = cf.simulate(longest_first_schedule_on(inst), spread=c, samples=20_000, seed=9)
    s = math.sqrt(math.log(1 + c * c))
    mean, var, k4 = lognormal_cumulants(np.log(d) - s * s / 2, np.full(d.size, s))
    assert mean == pytest.approx(d.sum())
    assert var == pytest.approx(float((c * d) ** 2 @ np.ones(d.size)))
    check_sum_moments(2 * (res.makespans - 100.0), mean, var, k4)


def longest_first_schedule_on(inst: Instance) -> Schedule:
    """LPT respecting the nodes' speed and free_at (one node: jobs back to back)."""
    return Schedule(inst, np.zeros(inst.n, np.int32), _starts(inst))


def _starts(inst: Instance) -> np.ndarray:
    nd = inst.nodes[0]
    order = inst.order_longest_first
    start = np.empty(inst.n)
    start[order] = (
        nd.free_at + np.concatenate([[0.0], np.cumsum(inst.durations[order])[:-1]]) / nd.speed
    )
    return start


# -- probabilities against closed forms -----------------------------------------------------
@pytest.mark.parametrize("ratio", [1.2, 1.6, 2.5, 4.0])
def test_one_job_probability_is_phi_and_falls_as_spread_grows(ratio: float) -> None:
    """One job of median d, deadline 1.5 d: P = Phi(ln 1.5 / sigma) (the lognormal cdf),
    which falls as sigma grows; the Wilson interval (widened to 4 sigma) covers it."""
    d = 1000.0
    inst = with_p90(Instance.build([d], 1), [ratio * d])
    res = cf.simulate(longest_first_schedule(inst), samples=20_000, seed=1, deadline=1.5 * d)
    sigma = math.log(ratio) / Z90
    exact = stats.norm.cdf(math.log(1.5) / sigma)
    lo, hi = cf.wilson_interval(res.successes, res.samples, z=4.0)
    assert lo <= exact <= hi


def test_probability_falls_as_spread_grows_on_a_plan() -> None:
    """A 400-job plan on 20 nodes, deadline 5% above the plan (above the median makespan
    for small spread): P(meet) falls as the batch CV grows; with common random numbers
    the sequence is monotone and the first and last intervals are disjoint."""
    inst = Instance.build(studio_batch(400, 2), 20)
    sched = longest_first_schedule(inst)
    deadline = 1.05 * sched.makespan
    ps = []
    for c in (0.05, 0.1, 0.2, 0.4, 0.8):
        r = cf.simulate(sched, spread=c, samples=4000, seed=4, deadline=deadline)
        ps.append(r)
    probs = [r.deadline_probability for r in ps]
    assert all(a >= b for a, b in itertools.pairwise(probs)), probs
    assert ps[-1].interval[1] < ps[0].interval[0]  # type: ignore[index]
    assert ps[0].quantile(0.5) < deadline


def test_two_nodes_probability_and_critical_share() -> None:
    """Two nodes with one job each: P(max <= t) = P(D1 <= t) P(D2 <= t), and node 2 is
    the last to finish with probability P(D2 > D1) = Phi((mu2 - mu1)/sqrt(s1^2 + s2^2))
    (difference of independent normal logs)."""
    d = np.array([1000.0, 900.0])
    p90 = np.array([1300.0, 1800.0])
    inst = with_p90(Instance.build(d, 2), list(p90))
    sched = longest_first_schedule(inst)
    assert list(sched.node_of) == [0, 1]
    t = 1400.0
    res = cf.simulate(sched, samples=20_000, seed=2, deadline=t)
    s = np.log(p90 / d) / Z90
    exact = float(np.prod(stats.norm.cdf(np.log(t / d) / s)))
    lo, hi = cf.wilson_interval(res.successes, res.samples, z=4.0)
    assert lo <= exact <= hi
    share2 = stats.norm.cdf((math.log(900) - math.log(1000)) / math.hypot(*s))
    crit = {c["node"]: c["share"] for c in res.critical_nodes()}
    assert abs(crit[inst.nodes[1].id] - share2) < 4 * math.sqrt(share2 * (1 - share2) / 20_000)


def test_quantile_intervals_cover_the_true_quantile_about_95_percent() -> None:
    """One lognormal job (median d, sigma from p90): its q-quantile is d exp(sigma z_q).
    Over 300 independent runs of 400 samples the order-statistic interval of p50 and p90
    covers the true value in 95% of runs, within 4 binomial standard errors."""
    d, ratio = 1000.0, 1.8
    inst = with_p90(Instance.build([d], 1), [ratio * d])
    sched = longest_first_schedule(inst)
    sigma = math.log(ratio) / Z90
    runs = 300
    for q in (0.5, 0.9):
        true = d * math.exp(sigma * stats.norm.ppf(q))
        hits = 0
        for seed in range(runs):
            lo, hi = cf.simulate(sched, samples=400, seed=seed).quantile_interval(q)
            hits += lo <= true <= hi
        assert abs(hits / runs - 0.95) < 4 * math.sqrt(0.95 * 0.05 / runs)


@pytest.mark.parametrize(("succ", "n"), [(7, 50), (990, 1000), (3, 10), (1, 2)])
def test_wilson_interval_inverts_the_score_test(succ: int, n: int) -> None:
    """Wilson (1927): with 0 < successes < n both limits are the p0 where |p_hat - p0| =
    z sqrt(p0 (1 - p0) / n), z the normal 97.5% point (scipy.stats), and they are scipy's
    Wilson interval (binomtest(...).proportion_ci(method="wilson"))."""
    lo, hi = cf.wilson_interval(succ, n)
    ph, z = succ / n, stats.norm.ppf(0.975)
    for p0 in (lo, hi):
        assert abs(abs(ph - p0) - z * math.sqrt(p0 * (1 - p0) / n)) < 1e-9
    ref = stats.binomtest(succ, n).proportion_ci(0.95, method="wilson")
    assert (lo, hi) == pytest.approx((ref.low, ref.high), abs=1e-12)
    assert 0 < lo < ph < hi < 1


@pytest.mark.parametrize(("succ", "n", "limits"), [(0, 50, (0.0, None)), (1000, 1000, (None, 1.0))])
def test_wilson_interval_at_no_or_all_successes(
    succ: int, n: int, limits: tuple[float | None, float | None]
) -> None:
    """No successes: the lower limit is 0 exactly (p0 = 0 solves the score equation), the
    upper one scipy's Wilson limit; all successes: the mirror image (Wilson 1927)."""
    lo, hi = cf.wilson_interval(succ, n)
    ref = stats.binomtest(succ, n).proportion_ci(0.95, method="wilson")
    want_lo = ref.low if limits[0] is None else limits[0]
    want_hi = ref.high if limits[1] is None else limits[1]
    assert (lo, hi) == pytest.approx((want_lo, want_hi), abs=1e-12)


# -- reproducibility -----------------------------------------------------------------------
def test_seeded_runs_repeat_exactly_whatever_the_threads() -> None:
    """Same seed, same numbers, bit for bit, with 1 or 2 threads and several chunks;
    another seed gives other numbers."""
    inst = Instance.build(studio_batch(3000, 5), 40)
    sched = longest_first_schedule(inst)
    kw = {"spread": 0.3, "samples": 1500, "deadline": sched.makespan * 1.1}
    a = cf.simulate(sched, seed=7, threads=1, **kw)  # type: ignore[arg-type]
    b = cf.simulate(sched, seed=7, threads=2, **kw)  # type: ignore[arg-type]
    c = cf.simulate(sched, seed=8, threads=1, **kw)  # type: ignore[arg-type]
    assert cf.CHUNK_DRAWS // inst.n < 1500  # more than one chunk
    np.testing.assert_array_equal(a.makespans, b.makespans)
    np.testing.assert_array_equal(a.critical, b.critical)
    assert not np.array_equal(a.makespans, c.makespans)
    d1 = cf.simulate(sched, seed=7, threads=1, policy="dynamic", **kw)  # type: ignore[arg-type]
    d2 = cf.simulate(sched, seed=7, threads=2, policy="dynamic", **kw)  # type: ignore[arg-type]
    np.testing.assert_array_equal(d1.makespans, d2.makespans)


def test_block_has_the_contract_fields_and_is_json() -> None:
    """The contract's confidence block: deadline_probability, makespan_p50/p90/p99,
    samples, model; quantiles ordered; dynamic inside; strict JSON (no NaN)."""
    inst = Instance.build(studio_batch(200, 7), 10, deadline=30_000)
    sched = longest_first_schedule(inst)
    block = cf.confidence_block(sched, spread=0.25, samples=500)
    for key in ("deadline_probability", "makespan_p50", "makespan_p90", "makespan_p99"):
        assert key in block and key in block["dynamic"]
    assert block["samples"] == 500 and block["model"]["distribution"] == "lognormal"
    assert block["makespan_p50"] <= block["makespan_p90"] <= block["makespan_p99"]
    json.dumps(block, allow_nan=False)
    assert block["deadline"] == 30_000


# -- bad input -----------------------------------------------------------------------------
@pytest.mark.parametrize(
    ("kwargs", "pointer"),
    [
        ({"spread": -0.1}, "/spread"),
        ({"spread": float("nan")}, "/spread"),
        ({"samples": 0}, "/confidence_samples"),
        ({"policy": "greedy"}, "/policy"),
        ({"deadline": -5.0}, "/deadline"),
    ],
)
def test_bad_arguments_name_the_field(kwargs: dict[str, object], pointer: str) -> None:
    """Bad spread, sample count, policy or deadline: InvalidInstance with a pointer."""
    sched = longest_first_schedule(Instance.build([10, 20, 30], 2))
    with pytest.raises(InvalidInstance) as exc:
        cf.simulate(sched, **kwargs)  # type: ignore[arg-type]
    assert json_pointer(exc.value.issues[0].path) == pointer


def test_zero_estimate_with_positive_p90_is_refused() -> None:
    """A lognormal with median 0 cannot have a positive p90: refused, naming the job."""
    inst = with_p90(Instance.build([0.0, 10.0], 1), [5.0, None])
    with pytest.raises(InvalidInstance) as exc:
        cf.simulate(longest_first_schedule(inst))
    assert json_pointer(exc.value.issues[0].path) == "/jobs/0/duration_p90"


# -- sizing to a confidence ----------------------------------------------------------------
def lpt_loads(times: list[float], m: int) -> list[list[int]]:
    """LPT (Graham 1969) with heapq: per node, the indices of its jobs."""
    heap = [(0.0, k) for k in range(m)]
    jobs: list[list[int]] = [[] for _ in range(m)]
    for j in sorted(range(len(times)), key=lambda j: -times[j]):
        load, k = heapq.heappop(heap)
        jobs[k].append(j)
        heapq.heappush(heap, (load + times[j], k))
    return jobs


def static_probability(d: np.ndarray, m: int, deadline: float, c: float, n: int) -> float:
    """P(the LPT plan on m nodes meets the deadline) by an independent Monte Carlo with
    numpy's default generator: each job lognormal with mean d_j and CV c (sigma^2 =
    ln(1 + c^2), mu = ln d_j - sigma^2 / 2; Johnson-Kotz-Balakrishnan ch. 14), each node
    running its planned jobs back to back."""
    s = math.sqrt(math.log(1 + c * c))
    draws = np.random.default_rng(2024).lognormal(np.log(d) - s * s / 2, s, (n, d.size))
    finish = np.stack([draws[:, jobs].sum(axis=1) for jobs in lpt_loads(d.tolist(), m)])
    return float(np.mean(finish.max(axis=0) <= deadline))


def test_sizing_to_a_confidence_passes_at_the_answer_and_fails_below() -> None:
    """The count returned has a Wilson lower limit >= q and the count below does not, both
    recomputed with scipy from the stated P and sample count; the search starts at the
    mean-load count ceil(work / deadline) (McNaughton 1959); both counts' planned
    makespans are LPT's (heapq), and both P agree, within 4 standard errors of their
    difference, with an independent numpy Monte Carlo of the same static plans."""
    d = studio_batch(600, 8)
    deadline, q, n, c = 1.15 * d.sum() / 30, 0.9, 2000, 0.3
    ans = cf.nodes_for_confidence(d, deadline, q, spread=c, samples=n, seed=1, policy="static")
    assert ans.nodes_lower_bound == math.ceil(d.sum() / deadline) <= ans.nodes
    chosen, fewer = ans.chosen, ans.previous
    assert chosen["nodes"] == ans.nodes == fewer["nodes"] + 1  # type: ignore[index,operator]
    assert wilson_lower(chosen["deadline_probability"], n) >= q  # type: ignore[index,arg-type]
    assert wilson_lower(fewer["deadline_probability"], n) < q  # type: ignore[index,arg-type]
    big = 20_000
    for row in (chosen, fewer):
        m, p = row["nodes"], row["deadline_probability"]  # type: ignore[index]
        assert row["planned_makespan"] == pytest.approx(lpt_makespan(d, m))  # type: ignore[index]
        ref = static_probability(d, m, deadline, c, big)  # type: ignore[arg-type]
        assert abs(p - ref) < 4 * math.sqrt(ref * (1 - ref) * (1 / n + 1 / big))  # type: ignore[operator]


def test_sizing_without_spread_is_the_deterministic_lpt_sizing() -> None:
    """Zero spread: the answer is the fewest nodes whose LPT makespan meets the deadline,
    found here by scanning every count from 1 with LPT written with heapq (lpt_makespan).
    (LPT is not monotone in the node count, Graham 1969, so in general the search's answer
    is only guaranteed to pass with the count below failing; on this batch it is the
    brute-force count.)"""
    d = studio_batch(150, 9)
    deadline = 1.02 * d.sum() / 12
    ans = cf.nodes_for_confidence(d, deadline, 0.99, samples=10)
    brute = next(c for c in range(1, 200) if lpt_makespan(d, c) <= deadline)
    assert ans.nodes == brute
    assert lpt_makespan(d, ans.nodes) <= deadline < lpt_makespan(d, ans.nodes - 1)


def test_sizing_refuses_a_confidence_the_sample_count_cannot_show() -> None:
    """With N samples the Wilson lower limit is at most N/(N + z^2): q above it is refused."""
    with pytest.raises(InvalidInstance) as exc:
        cf.nodes_for_confidence([100.0] * 10, 500.0, 0.999, spread=0.2, samples=500)
    assert json_pointer(exc.value.issues[0].path) == "/confidence_samples"


def test_sizing_names_jobs_no_node_count_can_carry() -> None:
    """A job estimated above the deadline: alone on a node it makes the deadline with
    probability Phi(ln(deadline/d)/sigma) < 1/2 (lognormal cdf, median d), so no count
    reaches q = 0.9: Infeasible naming that job; without spread likewise."""
    d = [600.0] * 20 + [1300.0]
    p90 = [None] * 20 + [1800.0]
    sigma = math.log(1800 / 1300) / Z90
    assert stats.norm.cdf(math.log(1200 / 1300) / sigma) < 0.9
    with pytest.raises(Infeasible) as exc:
        cf.nodes_for_confidence(d, 1200.0, 0.9, duration_p90=p90, spread=0.1, samples=1000)
    assert exc.value.jobs == ["job-20"]
    with pytest.raises(Infeasible) as exc:
        cf.nodes_for_confidence(d, 1200.0, 0.9, samples=10)
    assert exc.value.jobs == ["job-20"]


# -- the command line ----------------------------------------------------------------------
def test_cli_prints_the_block_and_exits_2_on_bad_input(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    """`spanwright confidence FILE --json` prints the block; a bad spread exits 2."""
    body = {
        "jobs": [{"id": f"ep1_sc{j:02d}", "duration": 600 + 37 * j} for j in range(30)],
        "node_count": 4,
        "deadline": 6000,
        "spread": 0.2,
        "method": "longest_first",
    }
    body["jobs"][0]["duration_p90"] = 1500
    f = tmp_path / "batch.json"
    f.write_text(json.dumps(body))
    assert cli_main(["confidence", str(f), "--samples", "300", "--json"]) == 0
    block = json.loads(capsys.readouterr().out)
    assert block["samples"] == 300 and 0 <= block["deadline_probability"] <= 1
    assert block["model"]["jobs_with_p90"] == 1
    assert cli_main(["confidence", str(f), "--samples", "50"]) == 0
    assert "P(meet deadline)" in capsys.readouterr().out
    body["spread"] = -1
    f.write_text(json.dumps(body))
    assert cli_main(["confidence", str(f)]) == 2
    assert "/spread" in capsys.readouterr().err


# -- sizings: the answer's confidence, and sizing to a confidence (issue 10) ----------------
def lpt_makespan(times: np.ndarray, m: int) -> float:
    """Longest processing time first (Graham 1969) written with heapq: each job, longest
    first, onto the least-loaded of m nodes; the makespan does not depend on ties."""
    heap = [0.0] * m
    for t in sorted(times.tolist(), reverse=True):
        heapq.heapreplace(heap, heap[0] + t)
    return max(heap)


def sizing_body(d: np.ndarray, deadline: float, **extra: object) -> dict[str, object]:
    """A POST /v1/sizings body for shot estimates ``d`` of an invented episode."""
    jobs = [{"id": f"qv_sh{j:03d}", "duration": float(x)} for j, x in enumerate(d)]
    return {"jobs": jobs, "deadline": deadline, **extra}


def sized(body: dict[str, object]) -> tuple[SizingResult, dict[str, object]]:
    """The sizing of ``body`` and the confidence fields the service adds to it."""
    res = size_body(body, time_budget=0.3)
    asked = read_spread(body)
    assert asked is not None
    return res, cf.sizing_confidence(res.schedule, asked)


def wilson_lower(p: float, n: int) -> float:
    """The 95% Wilson lower limit from scipy (binomtest(...).proportion_ci, 'wilson')."""
    k = round(p * n)
    return float(stats.binomtest(k, n).proportion_ci(0.95, method="wilson").low)


def test_sizing_zero_spread_confidence_is_the_answer_plan_exactly() -> None:
    """Zero spread (the contract): the answer's plan meets its deadline in every sample, so
    P = 1 exactly with the point interval and p50 = p90 = p99 = the plan's makespan bit for
    bit, on a node kind of speed 1.5; dispatching the same plan order equals the
    brute-force heapq simulation (reference_dispatch); no target, no confidence_sizing."""
    d = studio_batch(80, 13)
    body = sizing_body(d, 1.1 * d.sum() / 9, node={"speed": 1.5}, spread=0.0)
    body["confidence_samples"] = 50
    res, extra = sized(body)
    block = extra["confidence"]
    assert isinstance(block, dict) and "confidence_sizing" not in extra
    assert block["deadline_probability"] == 1.0 and block["interval"] == [1.0, 1.0]
    assert block["makespan_p50"] == block["makespan_p90"] == block["makespan_p99"]
    assert block["makespan_p99"] == res.makespan and block["makespan_sd"] == 0.0
    ref = float(reference_dispatch(res.schedule, res.schedule.instance.durations).max())
    dyn = block["dynamic"]
    assert dyn["makespan_p50"] == dyn["makespan_p99"] == ref
    assert dyn["deadline_probability"] == float(ref <= res.deadline)


def test_sizing_on_one_node_simulates_the_lognormal_sum() -> None:
    """7,200 s of work, a 4,000 s deadline, nodes of speed 2: one node does it (7200 / 2 <=
    4000, by hand), so the makespan is sum(D_j) / 2 with p90 jobs (median = estimate) and
    spread jobs (mean = estimate) mixed; its mean and variance are the lognormal sums
    (Johnson-Kotz-Balakrishnan ch. 14), checked within 5 standard errors, both policies."""
    d = np.array([600.0, 1200.0, 1800.0, 300.0, 2400.0, 900.0])
    p90 = [720.0, 1800.0, None, None, 7200.0, None]
    c, n = 0.3, 20_000
    body = sizing_body(d, 4000.0, node={"speed": 2.0}, spread=c)
    body.update(confidence_samples=n, confidence_seed=5)
    for job, q in zip(body["jobs"], p90, strict=True):  # type: ignore[call-overload]
        if q is not None:
            job["duration_p90"] = q
    res, extra = sized(body)
    assert res.nodes_needed == 1
    s_spread = math.sqrt(math.log(1 + c * c))
    s = np.array([math.log(q / x) / Z90 if q else s_spread for x, q in zip(d, p90, strict=True)])
    mu = np.log(d) - np.where([q is None for q in p90], s * s / 2, 0.0)
    mean, var, k4 = lognormal_cumulants(mu, s)
    mean, var, k4 = mean / 2, var / 4, k4 / 16  # the node's speed divides every duration
    block = extra["confidence"]
    assert isinstance(block, dict)
    for part in (block, block["dynamic"]):
        assert abs(part["makespan_mean"] - mean) < 5 * math.sqrt(var / n)
        assert abs(part["makespan_sd"] ** 2 - var) < 5 * math.sqrt((k4 + 2 * var * var) / n)


def test_sizing_to_a_confidence_passes_its_rule_and_the_count_below_fails() -> None:
    """With a target q the answer's Wilson lower limit (recomputed with scipy from its P
    and sample count) is >= q and one node fewer's is < q; both counts' plans are LPT on
    nodes of the sized speed (makespans against a heapq LPT of duration / speed)."""
    d = studio_batch(300, 14)
    speed, q, n = 1.5, 0.9, 2000
    body = sizing_body(d, 1.1 * d.sum() / (speed * 15), node={"speed": speed}, spread=0.3)
    body.update(confidence=q, confidence_samples=n, confidence_seed=3)
    _, extra = sized(body)
    ans = extra["confidence_sizing"]
    assert isinstance(ans, dict)
    chosen, fewer = ans["chosen"], ans["fewer"]
    assert chosen["nodes"] == ans["nodes_needed"] == fewer["nodes"] + 1
    assert wilson_lower(chosen["deadline_probability"], n) >= q
    assert wilson_lower(fewer["deadline_probability"], n) < q
    assert chosen["interval"][0] == pytest.approx(wilson_lower(chosen["deadline_probability"], n))
    for row in (chosen, fewer):
        assert row["planned_makespan"] == pytest.approx(lpt_makespan(d / speed, row["nodes"]))
    assert ans["samples"] == n and ans["seed"] == 3 and ans["confidence"] == q


def test_sizing_to_a_confidence_without_spread_is_the_brute_force_lpt_count() -> None:
    """Zero spread, jobs needing a tag the node kind provides, speed 2: the answer is the
    fewest nodes whose LPT makespan (heapq, duration / 2) meets the deadline, found by
    scanning every count from 1; the plan's own P is exactly 1."""
    d = studio_batch(120, 15)
    deadline = 1.03 * d.sum() / (2 * 10)
    body = sizing_body(d, deadline, node={"speed": 2.0, "provides": ["gpu"]}, confidence=0.95)
    body["confidence_samples"] = 100
    body["jobs"][0]["requires"] = ["gpu"]  # type: ignore[index]
    res, extra = sized(body)
    brute = next(c for c in range(1, 200) if lpt_makespan(d / 2, c) <= deadline)
    ans = extra["confidence_sizing"]
    assert isinstance(ans, dict) and ans["nodes_needed"] == brute
    assert extra["confidence"]["deadline_probability"] == 1.0  # type: ignore[index]
    assert res.schedule.instance.nodes[0].provides == frozenset({"gpu"})


def test_sizing_confidence_repeats_exactly_with_its_seed() -> None:
    """Plumbing (a run against itself): the worker task (tasks.size_farm) twice with one
    seed: identical confidence and confidence_sizing, bit for bit; another seed draws
    other samples."""
    d = studio_batch(200, 16)
    body = sizing_body(d, 1.1 * d.sum() / 12, spread=0.25, confidence=0.8)
    body.update(confidence_samples=500, confidence_seed=11)

    def run(b: dict[str, object]) -> dict[str, object]:
        out = tasks.size_farm(
            b, method="", time_budget=0.2, progress=lambda p: None, should_stop=lambda: False
        )
        return out.result

    a, b = run(body), run(body)
    assert a["confidence"] == b["confidence"] and a["confidence_sizing"] == b["confidence_sizing"]
    other = run({**body, "confidence_seed": 12})
    assert other["confidence"]["makespan_mean"] != a["confidence"]["makespan_mean"]  # type: ignore[index]


def test_sizing_to_a_confidence_beyond_max_nodes_names_max_nodes() -> None:
    """When the deterministic answer fits max_nodes but the confidence needs more nodes,
    the sizing to a confidence is Infeasible with a pointer at /max_nodes."""
    d = studio_batch(200, 17)
    body = sizing_body(d, d.sum() / 10, spread=0.4, confidence=0.95)
    body["confidence_samples"] = 300
    res, extra = sized(body)
    ans = extra["confidence_sizing"]
    assert isinstance(ans, dict) and ans["nodes_needed"] > res.nodes_needed
    with pytest.raises(Infeasible) as exc:
        sized({**body, "max_nodes": res.nodes_needed})
    assert [json_pointer(i.path) for i in exc.value.issues] == ["/max_nodes"]


@pytest.mark.parametrize(
    ("extra", "pointer"),
    [
        ({"confidence": 1.0}, "/confidence"),
        ({"confidence": True}, "/confidence"),
        ({"spread": 0.2, "confidence_seed": -1}, "/confidence_seed"),
        ({"confidence_samples": 2.5}, "/confidence_samples"),
        ({"spread": "0.2"}, "/spread"),
        ({"spread": 0.2, "max_nodes": 0}, "/max_nodes"),
    ],
)
def test_spread_request_names_a_bad_input(extra: dict[str, object], pointer: str) -> None:
    """A body that skipped the API's schema (the command line) gets the same pointers."""
    with pytest.raises(InvalidInstance) as exc:
        read_spread(sizing_body(np.array([60.0]), 100.0, **extra))
    assert [json_pointer(i.path) for i in exc.value.issues] == [pointer]


def test_spread_request_only_when_asked() -> None:
    """No p90, spread, confidence_samples or confidence: no simulation (None); a job's
    p90 alone asks for one, with the defaults 1000 samples and seed 0."""
    body = sizing_body(np.array([60.0, 90.0]), 100.0)
    assert read_spread(body) is None
    body["jobs"][1]["duration_p90"] = 120.0  # type: ignore[index]
    assert read_spread(body) == cf.SpreadRequest(None, 1000, 0)


def test_cli_size_prints_the_confidence_lines(tmp_path, capsys) -> None:  # type: ignore[no-untyped-def]
    """`spanwright size FILE` prints the block's lines and the answer to the confidence;
    --json carries both objects; zero spread: P = 1 and, by hand, 2 nodes for q = 0.9
    (3600 + 1800 + 1800 s, 3600 s deadline: one node takes 7200 s; LPT on two is 3600 s)."""
    body = {
        "jobs": PRICED_SIZING["jobs"],  # the hand-checked batch of tests/service/conftest.py
        "deadline": PRICED_SIZING["deadline"],
        "spread": 0.0,
        "confidence": 0.9,
        "confidence_samples": 50,
    }
    f = tmp_path / "sizing.json"
    f.write_text(json.dumps(body))
    assert cli_main(["size", str(f), "--time-budget", "0.1"]) == 0
    out = capsys.readouterr().out
    assert "P(meet deadline) 1.0000 (95% interval 1.0000 - 1.0000)" in out
    assert "to confidence   0.9: 2 nodes," in out
    assert cli_main(["size", str(f), "--time-budget", "0.1", "--json", "--no-plan"]) == 0
    doc = json.loads(capsys.readouterr().out)
    assert doc["confidence"]["deadline_probability"] == 1.0
    assert doc["confidence_sizing"]["nodes_needed"] == 2
    assert doc["confidence_sizing"]["fewer"]["deadline_probability"] == 0.0
    f.write_text(json.dumps({**body, "confidence": 2}))
    assert cli_main(["size", str(f)]) == 2
    assert "/confidence" in capsys.readouterr().err
