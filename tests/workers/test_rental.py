"""Renting to a deadline (issue 18): checked against an assignment MILP we write for
scipy.optimize.milp (HiGHS), a brute force in exact fractions, and today's single-kind
sizing. Expected values never come from the rental code."""

from __future__ import annotations

import itertools
import math
from fractions import Fraction

import numpy as np
import pytest
from scipy.optimize import Bounds, LinearConstraint, milp

from workers.planning.budget import Budget
from workers.planning.errors import Infeasible, InvalidInstance
from workers.planning.model import Instance, Node
from workers.planning.rental import CAUTION, Kind, RentalArgs, rent, rental_instance
from workers.planning.rental_bounds import pattern_bound, work_bound
from workers.planning.rental_cover import cover_bound
from workers.planning.sizing_request import SizingArgs, size_request

UNIT = {"second": 1, "minute": 60, "hour": 3600}


def _nodes(args: RentalArgs) -> list[tuple[float, float, frozenset[str], float | None]]:
    """(speed, start, provides, hour cost or None) of every node a plan may use: the farm,
    then each kind up to min(max_count, jobs) copies."""
    inst = args.instance
    costs = args.farm_hour_cost or (None,) * inst.m
    out = [(nd.speed, nd.free_at, nd.provides, c) for nd, c in zip(inst.nodes, costs, strict=True)]
    for k in args.kinds:
        out += [(k.speed, k.boot, k.provides, k.hour_cost)] * min(k.max_count, inst.n)
    return out


def milp_cost(args: RentalArgs) -> float | None:
    """Cheapest cost by an assignment MILP solved by scipy.optimize.milp (HiGHS).

    x[j, v] job j on node v, y[v] node v used, h[v] its billed units (integers):
    sum_v x = 1; x = 0 where v lacks a tag j requires; sum_j p_j x <= s_v (D - start_v);
    x <= y; unit h >= start y + sum_j p_j x / s_v; unit h >= min_billed y; minimise
    sum_v price_v unit h_v / 3600. None when infeasible."""
    inst = args.instance
    p = inst.durations.tolist()
    req = inst.requires or (frozenset(),) * inst.n
    nodes = _nodes(args)
    n, m = inst.n, len(nodes)
    unit = UNIT[args.billing]
    d = float(inst.deadline)  # type: ignore[arg-type]
    nx = n * m
    nv = nx + 2 * m  # x, y, h
    c = np.zeros(nv)
    lb, ub = np.zeros(nv), np.ones(nv)
    ub[nx + m :] = math.ceil(max(d, args.min_billed) / unit) + 1
    rows: list[np.ndarray] = []
    lo: list[float] = []
    hi: list[float] = []
    for j in range(n):
        r = np.zeros(nv)
        r[[j * m + v for v in range(m)]] = 1
        rows.append(r)
        lo.append(1)
        hi.append(1)
        for v, (_, _, prov, _) in enumerate(nodes):
            if not req[j] <= prov:
                ub[j * m + v] = 0
    for v, (s, start, _, price) in enumerate(nodes):
        r = np.zeros(nv)
        for j in range(n):
            r[j * m + v] = p[j]
        rows.append(r)
        lo.append(-np.inf)
        hi.append(max(0.0, s * (d - start)))
        if price is None:
            ub[nx + m + v] = 0
            continue
        c[nx + m + v] = price * unit / 3600
        for j in range(n):
            r = np.zeros(nv)
            r[j * m + v], r[nx + v] = 1, -1
            rows.append(r)
            lo.append(-np.inf)
            hi.append(0)
        r = np.zeros(nv)
        for j in range(n):
            r[j * m + v] = p[j] / s
        r[nx + v], r[nx + m + v] = start, -unit
        rows.append(r)
        lo.append(-np.inf)
        hi.append(0)
        r = np.zeros(nv)
        r[nx + v], r[nx + m + v] = args.min_billed, -unit
        rows.append(r)
        lo.append(-np.inf)
        hi.append(0)
    res = milp(
        c,
        constraints=LinearConstraint(np.array(rows), lo, hi),
        integrality=np.ones(nv),
        bounds=Bounds(lb, ub),
        options={"time_limit": 30, "mip_rel_gap": 0},
    )
    if res.status == 2 or res.x is None:
        return None
    assert res.status == 0, res.message
    return float(res.fun)


def brute_cost(args: RentalArgs) -> Fraction | None:
    """Cheapest cost by trying every assignment, in exact fractions (rented copies of a
    kind opened in order)."""
    inst = args.instance
    p = [Fraction(x) for x in inst.durations.tolist()]
    req = inst.requires or (frozenset(),) * inst.n
    nodes = _nodes(args)
    kind_of = [None] * inst.m + [
        i for i, k in enumerate(args.kinds) for _ in range(min(k.max_count, inst.n))
    ]
    copy = [0] * inst.m + [c for k in args.kinds for c in range(min(k.max_count, inst.n))]
    d, unit, mb = Fraction(inst.deadline), UNIT[args.billing], Fraction(args.min_billed)  # type: ignore[arg-type]
    best: Fraction | None = None
    for assign in itertools.product(range(len(nodes)), repeat=inst.n):
        used = set(assign)
        if any(kind_of[v] is not None and copy[v] > 0 and v - 1 not in used for v in used):
            continue
        cost = Fraction(0)
        for v in used:
            s, start, prov, price = nodes[v]
            jobs = [j for j in range(inst.n) if assign[j] == v]
            if not all(req[j] <= prov for j in jobs):
                break
            end = Fraction(start) + sum((p[j] for j in jobs), Fraction(0)) / Fraction(s)
            if end > d:
                break
            if price is not None:
                cost += Fraction(price) * math.ceil(max(end, mb) / unit) * unit / 3600
        else:
            best = cost if best is None or cost < best else best
    return best


def _random_args(seed: int, n: int, billing: str) -> RentalArgs:
    rng = np.random.default_rng(seed)
    d = rng.integers(1, 40, n).astype(float) * 60
    req = [frozenset({"gpu"}) if rng.random() < 0.25 else frozenset() for _ in range(n)]
    farm = [
        Node(
            f"farm-{i}",
            float(rng.choice([1.0, 2.0])),
            frozenset({"gpu"}) if i == 0 else frozenset(),
            float(rng.integers(0, 40) * 60),
        )
        for i in range(int(rng.integers(0, 4)))
    ]
    kinds = (
        Kind(
            "cpu-small",
            1.0,
            frozenset(),
            float(rng.choice([0.5, 1.0])),
            float(rng.integers(0, 4) * 60),
            10,
        ),
        Kind("cpu-large", 3.0, frozenset(), float(rng.choice([1.5, 2.5])), 120.0, 10),
        Kind("gpu-small", 2.0, frozenset({"gpu"}), 4.0, 180.0, 10),
    )
    deadline = float(rng.choice([3600.0, 5400.0, 7200.0]))
    return RentalArgs(
        rental_instance(d, farm, deadline, requires=req),
        kinds[: 2 + int(rng.integers(0, 2))] if any(req) is False else kinds,
        billing,
        float(rng.choice([0.0, 600.0])),
    )


def _check(res: object, opt: float) -> None:
    cost, bound = res.exact_value, res.exact_lower_bound  # type: ignore[attr-defined]
    tol = 1e-6 * max(1.0, opt)
    assert float(bound) <= opt + tol
    assert opt <= float(cost) + tol
    assert not res.proven_optimal or abs(float(cost) - opt) <= tol  # type: ignore[attr-defined]


@pytest.mark.parametrize("billing", ["hour", "minute", "second"])
@pytest.mark.parametrize("seed", range(8))
def test_small_cases_against_milp(seed: int, billing: str) -> None:
    """bound <= optimum <= our cost, equal when proven; the optimum from the assignment
    MILP of :func:`milp_cost` (scipy.optimize.milp, HiGHS)."""
    args = _random_args(seed, 4 + seed % 5, billing)
    opt = milp_cost(args)
    assert opt is not None
    res = rent(args, Budget(2.0))
    _check(res, opt)
    mk = args.check()
    for value in (work_bound(mk)[0], pattern_bound(mk, Budget(2.0))[0]):
        assert float(value) <= opt + 1e-6 * max(1.0, opt)
    cov = cover_bound(mk, None, Budget(2.0))
    assert not cov.complete or float(cov.value) <= opt + 1e-6 * max(1.0, opt)


@pytest.mark.parametrize("seed", range(6))
def test_tiny_cases_against_brute_force(seed: int) -> None:
    """The exact cheapest cost by brute force in fractions (:func:`brute_cost`):
    bound <= optimum <= cost exactly, equal when proven."""
    args = _random_args(100 + seed, 3 + seed % 2, ["hour", "minute", "second"][seed % 3])
    kinds = tuple(Kind(k.name, k.speed, k.provides, k.hour_cost, k.boot, 2) for k in args.kinds)
    args = RentalArgs(args.instance, kinds, args.billing, args.min_billed)
    opt = brute_cost(args)
    if opt is None:
        with pytest.raises((Infeasible, InvalidInstance)):
            rent(args, Budget(1.0))
        return
    res = rent(args, Budget(2.0))
    assert res.exact_lower_bound <= opt <= res.exact_value
    assert not res.proven_optimal or res.exact_value == opt


@pytest.mark.parametrize("seed", range(5))
def test_single_kind_no_farm_agrees_with_sizing(seed: int) -> None:
    """One kind, no farm, hour billing and a deadline within the hour: every rented node
    costs one hour, so the cheapest cost is the fewest nodes times the hour cost. Today's
    sizing (``size_request``) gives that count; the rental must give the same answer
    (the issue: "the classic single-kind case must give today's answers unchanged"), and
    the brute-force-free check that its bound never passes the sizing's proven count."""
    rng = np.random.default_rng(seed)
    d = rng.integers(300, 2000, 12).astype(float)
    node = Node("cpu-small", 1.0)
    sizing = size_request(
        SizingArgs(Instance.build(d, [node], deadline=3000.0), 100, 0.5, "hour", ()),
        time_budget=2.0,
    )
    res = rent(
        RentalArgs(
            rental_instance(d, [], 3000.0),
            (Kind("cpu-small", 1.0, frozenset(), 0.5, 0.0, 100),),
            "hour",
        ),
        Budget(2.0),
    )
    assert sizing.proven_optimal
    assert res.exact_value == Fraction(sizing.nodes_needed) * Fraction(0.5)
    assert res.rent == {"cpu-small": sizing.nodes_needed}
    assert res.exact_lower_bound <= res.exact_value
    assert res.proven_optimal


@pytest.mark.parametrize("seed", range(40))
def test_cover_bound_against_milp(seed: int) -> None:
    """The ``cover`` relaxation (searched cheapest offer last) never passes the cheapest
    cost of the assignment MILP (:func:`milp_cost`, scipy.optimize.milp, HiGHS), on
    farms and kinds drawn at random, every billing unit."""
    billing = ["hour", "minute", "second"][seed % 3]
    args = _random_args(300 + seed, 3 + seed % 4, billing)
    opt = milp_cost(args)
    assert opt is not None
    cov = cover_bound(args.check(), None, Budget(5.0))
    assert cov.complete
    assert float(cov.value) <= opt + 1e-6 * max(1.0, opt)


def test_plan_meets_deadline_exactly_and_dict_contract() -> None:
    """Every job of the plan ends by the deadline, in exact arithmetic on the stated
    numbers (recomputed here from the assignment), and the bill of each node by hand."""
    args = _random_args(7, 9, "minute")
    res = rent(args, Budget(1.0))
    out = res.to_dict()
    for key in (
        "farm",
        "kinds",
        "billing",
        "min_billed",
        "rent",
        "cost",
        "cost_lower_bound",
        "bound_source",
        "proven_optimal",
        "gap",
        "stop_reason",
        "solve_seconds",
        "plan",
        "single_kind",
        "caution",
    ):
        assert key in out
    assert out["caution"] == CAUTION
    p = dict(zip(args.instance.job_ids, args.instance.durations.tolist(), strict=True))
    nodes = {nd.id: nd for nd in res.schedule.instance.nodes}
    seen, total = set(), Fraction(0)
    kinds = {k.name: k for k in args.kinds}
    for row in out["plan"]:
        nd = nodes[row["node"]]
        end = Fraction(nd.free_at) + sum(
            (Fraction(p[j["id"]]) for j in row["jobs"]), Fraction(0)
        ) / Fraction(nd.speed)
        assert end <= Fraction(args.instance.deadline)  # type: ignore[arg-type]
        seen |= {j["id"] for j in row["jobs"]}
        name = row["node"].rsplit("-", 1)[0]
        if row["jobs"] and name in kinds:
            t = max(end, Fraction(args.min_billed))
            total += Fraction(kinds[name].hour_cost) * math.ceil(t / 60) * 60 / 3600
    assert seen == set(args.instance.job_ids)
    assert total == res.exact_value


def test_refusals_name_jobs_and_kinds() -> None:
    """A job no node provides for, a job too long everywhere, and too few nodes by
    max_count (work 3 x 3000 s beyond no farm, two nodes of 3600 s allowed)."""
    kinds = (Kind("cpu-small", 1.0, frozenset(), 1.0, 0.0, 2),)
    with pytest.raises(Infeasible) as e:
        rent(
            RentalArgs(rental_instance([10.0], [], 100.0, requires=[frozenset({"gpu"})]), kinds),
            Budget(1),
        )
    assert e.value.jobs == ["job-0"]
    with pytest.raises(Infeasible) as e:
        rent(RentalArgs(rental_instance([10.0, 200.0], [], 100.0), kinds), Budget(1))
    assert e.value.jobs == ["job-1"]
    with pytest.raises(InvalidInstance) as e2:
        rent(RentalArgs(rental_instance([3000.0] * 3, [], 3600.0), kinds), Budget(1))
    assert [i.path for i in e2.value.issues] == [("kinds", 0, "max_count")]
