"""Certificates are statements about the exact numbers sent: checked in exact arithmetic.

Every duration, speed, free_at and deadline is an IEEE double, and every double is an
exact rational. A lower bound, ``proven_optimal``, ``gap == 0`` and ``provably_unreachable``
must hold for those rationals, not merely up to round-off, and a plan must be sound as
stated (no job before its node is free, no overlap, comparing the stated floats exactly).
The references are in ``tests/reference.py`` and use no spanwright code: the exact
depth-first branch and bound (``exact_optimum``, in Fractions), the exact minimum node
count (``exact_min_nodes``), the exact plan check (``check_plan_exact``), brute force
(``brute_force_makespan``) and scipy's HiGHS (``milp_makespan``) as a second opinion. The
named regressions are the cases of the audit of false certificates; the property tests
sweep scales from 1e-9 to 1e12 s and resolutions from 1e-6 to 1e6 s.
"""

from __future__ import annotations

import math
import re
from fractions import Fraction

import pytest
from hypothesis import HealthCheck, assume, given, note, settings
from hypothesis import strategies as st
from reference import (
    brute_force_makespan,
    check_plan_exact,
    exact_min_nodes,
    exact_optimum,
    exact_plan_makespan,
    float_at_or_above,
    float_below,
    float_near,
    milp_makespan,
    tick_count,
)

from service.problems import json_pointer
from tests.bodies import size_body
from workers.planning import Infeasible, Instance, InvalidInstance, Node, solve
from workers.planning.sizing import size

METHODS = ("list", "longest_first", "exact", "auto")
PLAIN = frozenset[str]()
#: every integer up to this many ticks is exact as a float; past it a batch is refused
TICK_LIMIT = 2**53
#: how an error message may spell that limit
LIMIT_SPELLINGS = ("2**53", "2^53", "2⁵³", "9007199254740992", "9,007,199,254,740,992")
#: instances whose tick counts stay below this must be accepted (room for sums of a few)
ACCEPT_TICKS = 2**50
#: instances with one job beyond this many ticks (at any speed up to 4) must be refused
REFUSE_TICKS = 2**56


# -- helpers ---------------------------------------------------------------------------
def ids(n: int) -> list[str]:
    return [f"j{i}" for i in range(n)]


def farm_nodes(spec: list[tuple[float, float, frozenset[str]]]) -> list[Node]:
    return [Node(f"n{k}", speed=s, free_at=f, provides=p) for k, (s, f, p) in enumerate(spec)]


def plan(
    durations: list[float],
    spec: list[tuple[float, float, frozenset[str]]],
    method: str,
    *,
    requires: list[frozenset[str]] | None = None,
    deadline: float | None = None,
    resolution: float = 1.0,
    budget: float = 0.2,
) -> dict:
    """The result dict of spanwright's plan (the code under test)."""
    inst = Instance.build(
        durations,
        farm_nodes(spec),
        job_ids=ids(len(durations)),
        requires=requires,
        deadline=deadline,
        resolution=resolution,
    )
    return solve(inst, method, time_budget=budget).to_dict()


def assert_truthful(
    r: dict,
    opt: Fraction,
    durations: list[float],
    spec: list[tuple[float, float, frozenset[str]]],
    requires: list[frozenset[str]] | None = None,
) -> None:
    """Every claim of result ``r`` holds against the exact optimum ``opt``."""
    assert Fraction(r["lower_bound"]) <= opt, (r["lower_bound"], opt)
    for name, value in r["bounds"].items():
        assert Fraction(value) <= opt, (name, value, float(opt))
    # the stated makespan is the exact one rounded to the nearest float; the plan's own
    # exact makespan must be the optimum itself
    assert (not r["proven_optimal"]) or r["makespan"] == float(opt), (r["makespan"], opt)
    plan_ms = exact_plan_makespan(r, durations, spec, ids(len(durations)))
    assert (not r["proven_optimal"]) or plan_ms == opt, (plan_ms, opt)
    assert (r["gap"] == 0) == r["proven_optimal"], (r["gap"], r["proven_optimal"])
    dl = r["deadline"]
    assert dl is None or (not dl["provably_unreachable"]) or Fraction(dl["deadline"]) < opt, (
        dl,
        float(opt),
    )
    check_plan_exact(r, durations, spec, requires, ids(len(durations)))


def names_tick_limit(exc: InvalidInstance, pointers: re.Pattern[str]) -> bool:
    """Whether the refusal points at an allowed field and states the 2**53-tick limit."""
    text = " ".join([str(exc), *(i.detail for i in exc.issues)])
    return any(pointers.fullmatch(json_pointer(i.path)) for i in exc.issues) and any(
        s in text for s in LIMIT_SPELLINGS
    )


PLAN_FIELDS = re.compile(r"/resolution|/jobs/\d+/duration|/nodes/\d+/(speed|free_at)|/deadline")
SIZING_FIELDS = re.compile(r"/resolution|/jobs/\d+/duration|/node/speed|/deadline")


# -- 1. HiGHS's dual bound is not a proof ------------------------------------------------
AUDIT_FARM = [756104229.0, 606921806.0, 571394725.0, 826744948.0, 548764629.0]
AUDIT_NODES = [(1.0, 0.0, PLAIN), (0.5, 0.0, PLAIN)]


def test_audit_farm_optimum_by_hand() -> None:
    """The reference itself on the audit farm: exact DFS of tests/reference.py, checked
    by hand: node a (speed 1) runs jobs 1, 2 and 4 (756104229 + 606921806 + 826744948 =
    2189770983 s), node b (speed 0.5) jobs 3 and 5 ((571394725 + 548764629) / 0.5 =
    2240318708 s)."""
    by_hand = max(756104229 + 606921806 + 826744948, (571394725 + 548764629) * 2)
    assert by_hand == 2240318708
    assert exact_optimum(AUDIT_FARM, AUDIT_NODES) == 2240318708


@pytest.mark.parametrize("method", METHODS)
def test_audit_farm_bound_is_not_above_the_optimum(method: str) -> None:
    """Jobs of 756104229 ... 548764629 s on a speed-1 and a speed-0.5 node: no bound (the
    MILP's dual bound included) above the optimum 2240318708, no false optimality claim.
    Reference: the exact DFS of tests/reference.py (and the hand check above)."""
    r = plan(AUDIT_FARM, AUDIT_NODES, method)
    assert_truthful(r, Fraction(2240318708), AUDIT_FARM, AUDIT_NODES)


@pytest.mark.parametrize("method", METHODS)
def test_audit_farm_deadline_is_not_provably_unreachable(method: str) -> None:
    """The same farm with a deadline of 2300000000 s: a plan of 2240318708 s meets it, so
    it must not be called provably unreachable. Reference: the exact DFS of
    tests/reference.py (and the hand check above)."""
    r = plan(AUDIT_FARM, AUDIT_NODES, method, deadline=2300000000.0)
    assert r["deadline"]["provably_unreachable"] is False
    assert_truthful(r, Fraction(2240318708), AUDIT_FARM, AUDIT_NODES)


# -- 2. proven_optimal within a relative tolerance ----------------------------------------
NEAR_TIES = {
    "seconds": [1e9 + 3, 1e9 + 3, 1e9 + 2, 1e9 + 2, 1e9 + 2],
    "sub-nanosecond": [3e-10, 3e-10, 2e-10, 2e-10, 2e-10],
}


def test_near_ties_optimum_by_brute_force_and_highs() -> None:
    """The reference on the near ties: the exact DFS of tests/reference.py equals the
    plan {1e9+3, 1e9+3} | {1e9+2, 1e9+2, 1e9+2} by hand, brute force and scipy HiGHS
    (3000000006 s), and at 3e-10/2e-10 s the same split, exactly, in Fractions."""
    seconds = NEAR_TIES["seconds"]
    assert exact_optimum(seconds, 2) == 3000000006
    assert brute_force_makespan(seconds, 2) == 3000000006
    assert milp_makespan(seconds, 2) == pytest.approx(3000000006, abs=0.5)
    tiny = NEAR_TIES["sub-nanosecond"]
    assert exact_optimum(tiny, 2) == max(2 * Fraction(3e-10), 3 * Fraction(2e-10))


@pytest.mark.parametrize("scale", NEAR_TIES)
@pytest.mark.parametrize("method", METHODS)
def test_near_ties_not_proven_optimal_one_unit_above(method: str, scale: str) -> None:
    """Two identical nodes, jobs 1e9+3, 1e9+3, 1e9+2, 1e9+2, 1e9+2 s (and the same shape
    at 3e-10/2e-10 s): longest first ends one unit above the optimum, so a makespan above
    it must not be called optimal, and gap == 0 only with proven_optimal. Reference: the
    exact DFS of tests/reference.py (brute force and HiGHS agree, test above)."""
    durations = NEAR_TIES[scale]
    spec = [(1.0, 0.0, PLAIN)] * 2
    opt = exact_optimum(durations, 2)
    r = plan(durations, spec, method)
    assert_truthful(r, opt, durations, spec)


# -- 3. tick counts past 2**53: refused, never an OverflowError ---------------------------
@pytest.mark.parametrize("method", METHODS)
def test_923_jobs_at_micro_resolution_refused(method: str) -> None:
    """923 jobs of 1e10 s on one node at resolution 1e-6 s: 1e16 ticks a job, past 2**53
    (and 9.2e18 in all, past int64): refused with InvalidInstance naming the resolution or
    a duration and the limit, never an OverflowError. Reference: arithmetic (1e10 / 1e-6 =
    1e16 > 2**53 = 9007199254740992)."""
    assert Fraction(1e10) / Fraction(1e-6) > TICK_LIMIT
    with pytest.raises(InvalidInstance) as info:
        inst = Instance.build([1e10] * 923, 1, resolution=1e-6)
        solve(inst, method, time_budget=0.2)
    assert names_tick_limit(info.value, PLAN_FIELDS), info.value.issues


def test_sizing_past_the_tick_limit_refused() -> None:
    """The audit's sizing body (jobs of 1e10 and 5e9 s, deadline 1e10 s, speed 1000,
    resolution 1e-6): 1e16 ticks of work and 1e19 of capacity, past 2**53: refused with
    InvalidInstance naming the field and the limit, never an OverflowError. Reference:
    arithmetic (1e10 / 1e-6 = 1e16 > 2**53)."""
    body = {
        "jobs": [{"id": "a", "duration": 1e10}, {"id": "b", "duration": 5e9}],
        "deadline": 1e10,
        "node": {"speed": 1000},
        "resolution": 1e-6,
    }
    with pytest.raises(InvalidInstance) as info:
        size_body(body, time_budget=0.2)
    assert names_tick_limit(info.value, SIZING_FIELDS), info.value.issues


@pytest.mark.parametrize("farm", [False, True], ids=["identical", "farm"])
@pytest.mark.parametrize("method", METHODS)
def test_durations_of_1e18_refused_by_every_method(method: str, farm: bool) -> None:
    """Durations of 1e18 s at the default resolution of 1 s are 1e18 ticks, past 2**53:
    every method refuses them with InvalidInstance naming the field and the limit, on
    identical nodes and on a farm. Reference: arithmetic (1e18 > 2**53)."""
    spec = [(1.0, 0.0, PLAIN), (0.5, 0.0, PLAIN)] if farm else [(1.0, 0.0, PLAIN)] * 2
    durations = [1e18, 2e18, 3e18, 1.5e18, 2.5e18]
    with pytest.raises(InvalidInstance) as info:
        plan(durations, spec, method)
    assert names_tick_limit(info.value, PLAN_FIELDS), info.value.issues


def test_durations_of_1e18_refused_by_sizing() -> None:
    """Sizing with durations of 1e18 s at resolution 1 s: refused with InvalidInstance
    naming the field and the limit. Reference: arithmetic (1e18 > 2**53)."""
    with pytest.raises(InvalidInstance) as info:
        size([1e18, 2e18, 3e18], 4e18, Node("node"), time_budget=0.2)
    assert names_tick_limit(info.value, SIZING_FIELDS), info.value.issues


# -- 4. farm plans sound in floating point -----------------------------------------------
BUSY_FARMS = {
    "overlap": (
        [
            1716098749.3899765,
            2783321319.641365,
            1436885453.8304634,
            1278547410.3963053,
            1279491569.9333577,
            1189661526.953712,
        ],
        [(3.0, 1598805148.162042, PLAIN), (2.0, 1974518402.0660257, PLAIN)],
    ),
    "before-free-at": (
        [
            1868343670.9075675,
            2221773946.8876033,
            2826022106.4757967,
            2933212735.5415177,
            1954019553.105434,
        ],
        [(3.0, 1858238927.0, PLAIN), (2.0, 1042707268.3050083, PLAIN)],
    ),
}


@pytest.mark.parametrize("case", BUSY_FARMS)
@pytest.mark.parametrize("method", METHODS)
def test_busy_farm_plan_is_sound_in_floats(method: str, case: str) -> None:
    """Jobs of 1.2e9 to 2.9e9 s on two busy nodes of speeds 3 and 2 (free at about 1e9 to
    2e9 s): every job starts at or after its node's free_at and no two overlap on a node,
    comparing the stated floats exactly, and every claim holds. Reference: check_plan_exact
    and the exact DFS of tests/reference.py."""
    durations, spec = BUSY_FARMS[case]
    r = plan(durations, spec, method)
    assert_truthful(r, exact_optimum(durations, spec), durations, spec)


# -- 5. sizing in exact arithmetic --------------------------------------------------------
def test_sizing_one_node_cannot_hold_work_a_hair_above_the_deadline() -> None:
    """Jobs of 0.2, 0.2 and 1.0 s on speed-0.5 nodes: exactly 2.8000000000000000444 s of
    work on one node (0.2 is 0.2000000000000000111 as a double), while a float sum rounds
    it to 2.8. With the deadline at the largest double below the exact work, one node
    cannot do it: two are needed. Reference: exact_min_nodes of tests/reference.py, and
    arithmetic in Fractions."""
    durations, speed = [0.2, 0.2, 1.0], 0.5
    work = sum(map(Fraction, durations)) / Fraction(speed)
    deadline = float_below(work)
    assert exact_min_nodes(durations, deadline, speed) == 2
    r = size(durations, deadline, Node("node", speed), job_ids=ids(3), time_budget=0.2)
    d = r.to_dict()
    assert d["nodes_lower_bound"] <= 2 <= d["nodes_needed"]
    check_plan_exact(
        d, durations, [(speed, 0.0, PLAIN)] * d["nodes_needed"], None, ids(3), deadline
    )


def test_sizing_job_a_hair_longer_than_the_deadline_is_infeasible() -> None:
    """A job of 1 s on a speed-3 node runs exactly 1/3 s; the deadline float(1/3) is
    0.33333333333333331483 s, below it, so no node count meets it (a float division rounds
    the run time down to the deadline). Reference: exact_min_nodes of tests/reference.py."""
    deadline = 1.0 / 3.0
    assert Fraction(deadline) < Fraction(1, 3)
    assert exact_min_nodes([1.0, 1.0, 1.0], deadline, 3.0) is None
    with pytest.raises(Infeasible):
        size([1.0, 1.0, 1.0], deadline, Node("node", 3.0), time_budget=0.2)


# -- property tests ----------------------------------------------------------------------
RESOLUTIONS = st.sampled_from([1e-6, 1e-3, 0.1, 1.0, 7.0, 60.0, 1e3, 1e6])
BUDGETS = st.sampled_from([0.05, 0.1, 0.2])
WHERE = st.sampled_from(["below", "at", "under", "over"])


@st.composite
def durations_st(draw: st.DrawFn, n: int) -> list[float]:
    """``n`` durations of one flavour (many ties, near ties as 1e9+3 vs 1e9+2, or spread),
    the longest about 2**E s for E from -30 to 40 (1e-9 to 1e12 s), written either as
    whole multiples of a power of two (every sum exact) or as decimals (3e-10: not)."""
    flavour = draw(st.sampled_from(["ties", "near", "spread"]))
    if flavour == "ties":
        ints = draw(st.lists(st.integers(1, 12), min_size=n, max_size=n))
    elif flavour == "near":
        base = draw(st.sampled_from([2**30, 10**9]))
        ints = [base + d for d in draw(st.lists(st.integers(0, 6), min_size=n, max_size=n))]
    else:
        ints = draw(st.lists(st.integers(1, 2**20), min_size=n, max_size=n))
    top = draw(st.integers(-30, 40))
    if draw(st.booleans()):
        shift = top - max(ints).bit_length()
        return [math.ldexp(i, shift) for i in ints]
    exp10 = round(top * math.log10(2)) - len(str(max(ints))) + 1
    return [float(f"{i}e{exp10}") for i in ints]


@st.composite
def identical_case(draw: st.DrawFn) -> tuple[list[float], list]:
    n, m = draw(st.integers(3, 9)), draw(st.integers(1, 4))
    return draw(durations_st(n)), [(1.0, 0.0, PLAIN)] * m


@st.composite
def farm_case(draw: st.DrawFn) -> tuple[list[float], list, list[frozenset[str]] | None]:
    """Nodes of speeds 0.5, 1, 2 and 3, some busy (free_at on the scale of the jobs),
    some with a GPU; some jobs need the GPU (node 0 has one when any job does)."""
    n, m = draw(st.integers(3, 9)), draw(st.integers(1, 4))
    durations = draw(durations_st(n))
    unit = max(durations)
    tags = draw(st.booleans())
    spec = []
    for k in range(m):
        speed = draw(st.sampled_from([0.5, 1.0, 2.0, 3.0]))
        free_at = draw(st.sampled_from([0.0, 0.0, 0.5, 1.0, 1.7])) * unit
        gpu = tags and (k == 0 or draw(st.booleans()))
        spec.append((speed, free_at, frozenset({"gpu"}) if gpu else PLAIN))
    requires = None
    if tags:
        requires = [frozenset({"gpu"}) if draw(st.booleans()) else PLAIN for _ in range(n)]
    return durations, spec, requires


#: what the every-claim sweeps draw besides the instance
SWEEP = {
    "method": st.sampled_from(METHODS),
    "resolution": RESOLUTIONS,
    "budget": BUDGETS,
    "where": WHERE,
}


def check_every_claim(
    durations: list[float],
    spec: list[tuple[float, float, frozenset[str]]],
    requires: list[frozenset[str]] | None,
    method: str,
    resolution: float,
    budget: float,
    where: str,
) -> None:
    """Plan with a deadline placed ``where`` by the exact optimum (float_near) and check
    every claim of the result against that optimum (assert_truthful)."""
    opt = exact_optimum(durations, spec, requires)
    deadline = float_near(opt, where)
    note(f"durations={durations!r} nodes={spec!r} requires={requires!r} deadline={deadline!r}")
    note(f"method={method} resolution={resolution!r} budget={budget} opt={float(opt)!r}")
    assume(tick_count(durations, spec, resolution, deadline) <= ACCEPT_TICKS)
    r = plan(
        durations,
        spec,
        method,
        requires=requires,
        deadline=deadline,
        resolution=resolution,
        budget=budget,
    )
    assert_truthful(r, opt, durations, spec, requires)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=identical_case(), **SWEEP)
def test_identical_nodes_every_claim_is_exactly_true(
    case: tuple[list[float], list], method: str, resolution: float, budget: float, where: str
) -> None:
    """Identical nodes, scales 1e-9..1e12 s, resolutions 1e-6..1e6 s, deadlines a hair
    below, at and around the optimum, every method: lower bound and every named bound <=
    the optimum, proven_optimal only at the optimum, gap == 0 iff proven_optimal,
    provably_unreachable only for a deadline below the optimum, the plan sound (all
    exactly). Reference: the exact DFS and check_plan_exact of tests/reference.py."""
    durations, spec = case
    check_every_claim(durations, spec, None, method, resolution, budget, where)


@settings(max_examples=150, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(case=farm_case(), **SWEEP)
def test_farms_every_claim_is_exactly_true(
    case: tuple[list[float], list, list[frozenset[str]] | None],
    method: str,
    resolution: float,
    budget: float,
    where: str,
) -> None:
    """Farms (speeds 0.5, 1, 2, 3; busy nodes; GPU tags), scales 1e-9..1e12 s, every
    method: the same claims as on identical nodes, all exactly true. Reference: the exact
    DFS and check_plan_exact of tests/reference.py."""
    durations, spec, requires = case
    check_every_claim(durations, spec, requires, method, resolution, budget, where)


@settings(max_examples=40, deadline=None)
@given(
    case=farm_case(),
    method=st.sampled_from(METHODS),
    resolution=st.sampled_from([1e-6, 1e-3, 1.0]),
    top=st.integers(60, 62),
)
def test_past_the_tick_limit_every_method_refuses(
    case: tuple[list[float], list, list[frozenset[str]] | None],
    method: str,
    resolution: float,
    top: int,
) -> None:
    """A batch whose longest job is past 2**56 ticks of the resolution (so past 2**53 on
    any node up to speed 4 too) is refused by every method with InvalidInstance naming
    the field and the limit; never an OverflowError. Reference: arithmetic in Fractions."""
    durations, spec, requires = case
    scale = Fraction(resolution) * 2**top / Fraction(max(durations))
    durations = [float(Fraction(d) * scale) for d in durations]
    spec = [(s, float(Fraction(f) * scale), p) for s, f, p in spec]
    note(f"durations={durations!r} nodes={spec!r} requires={requires!r}")
    note(f"method={method} resolution={resolution!r}")
    assert Fraction(max(durations)) / Fraction(resolution) > REFUSE_TICKS
    with pytest.raises(InvalidInstance) as info:
        plan(durations, spec, method, requires=requires, resolution=resolution, budget=0.05)
    assert names_tick_limit(info.value, PLAN_FIELDS), info.value.issues


@settings(max_examples=100, deadline=None, suppress_health_check=[HealthCheck.too_slow])
@given(
    durations=st.integers(3, 9).flatmap(durations_st),
    speed=st.sampled_from([0.5, 1.0, 2.0, 3.0]),
    nodes=st.integers(1, 9),
    where=WHERE,
    resolution=RESOLUTIONS,
    budget=BUDGETS,
)
def test_sizing_interval_contains_the_exact_minimum(
    durations: list[float], speed: float, nodes: int, where: str, resolution: float, budget: float
) -> None:
    """Sizing on nodes of speed 0.5, 1, 2 or 3 for a deadline a hair below, at or around
    the exact optimum on ``nodes`` nodes (never below the longest job, so feasible):
    nodes_lower_bound <= the exact minimum <= nodes_needed, proven_optimal only at the
    minimum, and the plan sound with every node's work within the deadline, exactly. Reference:
    exact_min_nodes (brute force over node counts of the exact DFS) and check_plan_exact
    of tests/reference.py."""
    n = len(durations)
    spec = [(speed, 0.0, PLAIN)]
    longest = Fraction(max(durations)) / Fraction(speed)
    deadline = max(
        float_near(exact_optimum(durations, spec * min(nodes, n)), where),
        float_at_or_above(longest),
    )
    assume(tick_count(durations, spec, resolution, deadline) <= ACCEPT_TICKS)
    truth = exact_min_nodes(durations, deadline, speed)
    note(f"durations={durations!r} speed={speed!r} deadline={deadline!r} minimum={truth}")
    note(f"resolution={resolution!r} budget={budget}")
    r = size(
        durations,
        deadline,
        Node("node", speed),
        job_ids=ids(n),
        resolution=resolution,
        time_budget=budget,
    ).to_dict()
    assert r["nodes_lower_bound"] <= truth <= r["nodes_needed"], (r["nodes_lower_bound"], truth)
    assert (not r["proven_optimal"]) or r["nodes_needed"] == truth
    assert Fraction(r["makespan"]) <= Fraction(deadline)
    check_plan_exact(r, durations, spec * r["nodes_needed"], None, ids(n), deadline)


@settings(max_examples=30, deadline=None)
@given(
    durations=st.integers(3, 9).flatmap(durations_st),
    speed=st.sampled_from([0.5, 1.0, 2.0, 3.0]),
)
def test_sizing_deadline_a_hair_below_the_longest_job_is_infeasible(
    durations: list[float], speed: float
) -> None:
    """A deadline one float below the longest job's run time on the node cannot be met
    by any number of nodes: Infeasible, exactly. Reference: exact_min_nodes of
    tests/reference.py (None)."""
    deadline = float_below(Fraction(max(durations)) / Fraction(speed))
    assume(deadline > 0)
    assert exact_min_nodes(durations, deadline, speed) is None
    with pytest.raises(Infeasible):
        size(durations, deadline, Node("node", speed), time_budget=0.05)
