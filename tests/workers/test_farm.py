"""Real farms (speeds, requires/provides tags, busy nodes) against outside references.

The exact reference is a MILP written here, independently of ``farm_milp``, and solved by
HiGHS through ``scipy.optimize.milp``, or the branch and bound in Fractions of
tests/reference.py; greedy plans are compared with the rules written here from their
definitions (Graham 1966 and 1969 for list scheduling and LPT, earliest finish for
uniform machines as in Gonzalez, Ibarra and Sahni 1977); guarantees are the published ones
named in each docstring. Tests that compare a compiled kernel with its own pure-Python twin
say so (plumbing), and anchor their answer on a reference written here.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from fractions import Fraction

import numpy as np
import pytest
from reference import check_plan_exact, exact_optimum, exact_plan_makespan
from scipy.optimize import Bounds, LinearConstraint, milp

from service.problems import json_pointer
from workers.planning import Infeasible, Instance, Node, solve
from workers.planning.farm import node_classes
from workers.planning.farm_bounds import eligibility, farm_lower_bounds
from workers.planning.farm_kernels import _sift_down, earliest_finish_classes, improve
from workers.planning.kernels import Farm, earliest_finish, pure


def reference_optimum(inst: Instance) -> float:
    """Optimum makespan by a dense MILP (HiGHS): y[j, k] binary, ineligible pairs fixed to
    0 by their bounds, C >= f_k + sum_j y[j, k] p_j / s_k and C >= f_k for every node."""
    n, m = inst.n, inst.m
    nv = n * m + 1
    c = np.zeros(nv)
    c[-1] = 1.0
    assign = np.zeros((n, nv))
    for j in range(n):
        assign[j, j * m : (j + 1) * m] = 1.0
    node = np.zeros((m, nv))
    for k, nd in enumerate(inst.nodes):
        for j in range(n):
            node[k, j * m + k] = inst.durations[j] / nd.speed
        node[k, -1] = -1.0
    ub = np.ones(nv)
    ub[-1] = np.inf
    for j in range(n):
        req = inst.requires[j] if inst.requires is not None else frozenset()
        for k, nd in enumerate(inst.nodes):
            if not req <= nd.provides:
                ub[j * m + k] = 0.0
    free = np.array([nd.free_at for nd in inst.nodes])
    lb = np.zeros(nv)
    lb[-1] = free.max()
    integ = np.ones(nv)
    integ[-1] = 0
    res = milp(
        c,
        constraints=[LinearConstraint(assign, 1, 1), LinearConstraint(node, -np.inf, -free)],
        integrality=integ,
        bounds=Bounds(lb, ub),
        options={"mip_rel_gap": 0.0},
    )
    assert res.status == 0, res.message
    return float(res.fun)


def random_farm(
    rng: np.random.Generator,
    *,
    n: int,
    m: int,
    speeds: bool = True,
    tags: bool = True,
    busy: bool = True,
) -> Instance:
    """A small farm of our own invention: blades of three speeds, some with a GPU."""
    nodes = []
    for k in range(m):
        provides = frozenset({"gpu"}) if tags and (k == 0 or rng.random() < 0.3) else frozenset()
        if tags and rng.random() < 0.3:
            provides = provides | {"bigmem"}
        nodes.append(
            Node(
                f"blade-{k:02d}",
                speed=float(rng.choice([0.5, 1.0, 1.5, 2.0])) if speeds else 1.0,
                provides=provides,
                free_at=float(rng.integers(0, 60)) if busy and rng.random() < 0.5 else 0.0,
            )
        )
    d = rng.integers(1, 100, n).astype(float)
    req = None
    if tags:
        options = [[], [], ["gpu"]] + (
            [["bigmem"]] if any("bigmem" in x.provides for x in nodes) else []
        )
        req = [options[int(rng.integers(0, len(options)))] for _ in range(n)]
    return Instance.build(d, nodes, requires=req, job_ids=[f"sh{j:03d}" for j in range(n)])


def reference_greedy(
    durations: Sequence[float],
    nodes: Sequence[Node],
    order: Sequence[int],
    requires: Sequence[Sequence[str]] | None = None,
) -> tuple[list[int], list[Fraction]]:
    """Earliest finish, written from its definition in exact arithmetic: each job, in
    ``order``, goes to the eligible node where it would finish first, free_at + load +
    duration / speed (lowest node index on ties). On identical nodes this is Graham's list
    scheduling (1966), and with the jobs longest first his LPT (1969). Returns per job its
    node and start time."""
    load = [Fraction(nd.free_at) for nd in nodes]
    node_of = [-1] * len(durations)
    start = [Fraction(0)] * len(durations)
    for j in order:
        need = set(requires[j]) if requires is not None else set()
        ends = [
            (load[k] + Fraction(durations[j]) / Fraction(nd.speed), k)
            for k, nd in enumerate(nodes)
            if need <= nd.provides
        ]
        end, k = min(ends)
        node_of[j], start[j] = k, load[k]
        load[k] = end
    return node_of, start


def longest_first(durations: Sequence[float]) -> list[int]:
    """Job indices longest first, equal durations in batch order (a stable sort)."""
    return sorted(range(len(durations)), key=lambda j: -durations[j])


CASES = [
    random_farm(np.random.default_rng(seed), n=3 + seed % 6, m=2 + seed % 3) for seed in range(40)
]


@pytest.mark.parametrize("inst", CASES[:30])
def test_exact_equals_reference_milp(inst: Instance) -> None:
    """``exact`` on small mixed farms (speeds, tags, free_at) reaches the optimum of an
    independent MILP solved by HiGHS (scipy.optimize.milp) and says it is proven."""
    opt = reference_optimum(inst)
    res = solve(inst, "exact", time_budget=10)
    res.schedule.check()
    assert res.makespan == pytest.approx(opt, rel=1e-6)
    assert res.proven_optimal and res.stop_reason == "proved_optimal"
    assert res.lower_bound <= opt * (1 + 1e-9)


@pytest.mark.parametrize("inst", CASES)
def test_bounds_never_above_reference_optimum(inst: Instance) -> None:
    """Every named farm bound is <= the HiGHS optimum (scipy.optimize.milp reference)."""
    opt = reference_optimum(inst)
    elig = eligibility(inst)
    cert = farm_lower_bounds(inst, elig, upper=solve(inst, "longest_first").makespan)
    for name, value in cert.bounds.items():
        assert value <= opt * (1 + 1e-9) + 1e-9, (name, value, opt)


def test_bounds_on_identical_groups_never_above_optimum() -> None:
    """Bin-packing lifted bounds on identical groups (same speed and free_at) stay below
    the HiGHS optimum (scipy.optimize.milp reference)."""
    rng = np.random.default_rng(7)
    for _ in range(15):
        m = int(rng.integers(2, 4))
        gpu = int(rng.integers(1, m))
        nodes = [
            Node(f"n{k}", speed=1.5, provides=frozenset({"gpu"}) if k < gpu else frozenset())
            for k in range(m)
        ]
        n = int(rng.integers(m + 2, 9))
        d = rng.integers(5, 60, n)
        req = [["gpu"] if rng.random() < 0.5 else [] for _ in range(n)]
        inst = Instance.build(d, nodes, requires=req)
        opt = reference_optimum(inst)
        cert = farm_lower_bounds(inst, eligibility(inst), upper=float(d.sum()))
        for name, value in cert.bounds.items():
            assert value <= opt * (1 + 1e-9) + 1e-9, (name, value, opt)


def test_k_longest_matches_classical_uniform_bound() -> None:
    """Without busy nodes the k_longest bound is max_k (p_1+..+p_k)/(s_1+..+s_k), the
    classical uniform-machine bound (common practice), computed here directly."""
    rng = np.random.default_rng(3)
    for _ in range(20):
        inst = random_farm(
            rng, n=int(rng.integers(2, 12)), m=int(rng.integers(2, 6)), tags=False, busy=False
        )
        p = np.sort(inst.durations)[::-1]
        s = np.sort([nd.speed for nd in inst.nodes])[::-1]
        k = min(p.size, s.size)
        direct = max(p[:i].sum() / s[:i].sum() for i in range(1, k + 1))
        cert = farm_lower_bounds(inst, eligibility(inst), upper=float(p.sum() / s.min()))
        assert cert.bounds["k_longest"] == pytest.approx(direct, rel=1e-9)


@pytest.mark.parametrize(
    ("method", "ratio"),
    [("list", lambda m: 2 - 1 / m), ("longest_first", lambda m: 4 / 3 - 1 / (3 * m))],
)
def test_identical_nodes_reduce_exactly(method: str, ratio: object) -> None:
    """Plain nodes with tags every node provides are identical nodes: the farm request and
    the ``node_count`` request both get exactly Graham's plan, written here from its
    definition (list scheduling, Graham 1966; LPT, Graham 1969), his guarantee (2 - 1/m,
    4/3 - 1/(3m)), and a bound between the mean load (McNaughton 1959) and the optimum
    (branch and bound in Fractions, tests/reference.py)."""
    rng = np.random.default_rng(11)
    for _ in range(10):
        m = int(rng.integers(2, 5))
        d = [int(x) for x in rng.integers(1, 500, int(rng.integers(5, 10)))]
        nodes = [Node(f"rack-{k}", provides=frozenset({"gpu"})) for k in range(m)]
        req = [["gpu"] if rng.random() < 0.5 else [] for _ in d]
        order = longest_first(d) if method == "longest_first" else list(range(len(d)))
        want_node, want_start = reference_greedy(d, nodes, order, req)
        opt = exact_optimum(d, m)
        for res in (
            solve(Instance.build(d, nodes, requires=req), method),
            solve(Instance.build(d, m), method),
        ):
            assert res.schedule.node_of.tolist() == want_node
            assert res.schedule.start.tolist() == want_start
            assert res.worst_case_ratio == pytest.approx(ratio(m))  # type: ignore[operator]
            assert Fraction(sum(d), m) <= Fraction(res.lower_bound) <= opt


def test_identical_nodes_reduce_exactly_exact_method() -> None:
    """``exact`` on plain nodes with all-provided tags is the identical-node search: the farm
    request says it was reduced, and it and the node_count request both reach and prove the
    optimum of the branch and bound in Fractions (tests/reference.py)."""
    rng = np.random.default_rng(5)
    d = [int(x) for x in rng.integers(1, 100, 9)]
    opt = exact_optimum(d, 3)
    nodes = [Node(f"rack-{k}", provides=frozenset({"gpu"})) for k in range(3)]
    farm = solve(Instance.build(d, nodes, requires=[["gpu"]] * 9), "exact", time_budget=10)
    plain = solve(Instance.build(d, 3), "exact", time_budget=10)
    assert farm.extras["farm"]["reduced_to"].startswith("identical nodes")
    for res in (farm, plain):
        assert res.method == "exact" and res.stop_reason == "proved_optimal"
        assert res.makespan == res.lower_bound == opt


def speed_farm(seed: int, one_speed: bool) -> Instance:
    """Three to eight jobs on two or three free, untagged nodes: all of one speed, or of at
    least two speeds (node 0 at 0.5, node 1 at 2.0)."""
    rng = np.random.default_rng(seed)
    m = int(rng.integers(2, 4))
    speeds = [float(rng.choice([0.5, 1.0, 1.5, 2.0]))] * m
    if not one_speed:
        speeds = [0.5, 2.0] + [float(rng.choice([0.5, 1.0, 1.5, 2.0])) for _ in range(m - 2)]
    nodes = [Node(f"blade-{k:02d}", speed=s) for k, s in enumerate(speeds)]
    return Instance.build(rng.integers(1, 100, int(rng.integers(3, 9))).astype(float), nodes)


@pytest.mark.parametrize("seed", range(12))
def test_lpt_one_speed_within_graham_bound(seed: int) -> None:
    """Every node of one speed: identical nodes with time scaled, so LPT is within Graham's
    (1969) 4/3 - 1/(3m) of the HiGHS optimum, and says so."""
    inst = speed_farm(seed, one_speed=True)
    res = solve(inst, "longest_first")
    assert res.worst_case_ratio == pytest.approx(4 / 3 - 1 / (3 * inst.m))
    assert res.makespan <= (4 / 3 - 1 / (3 * inst.m)) * reference_optimum(inst) * (1 + 1e-9)


@pytest.mark.parametrize("seed", range(12))
def test_lpt_uniform_speeds_within_kovacs_bound(seed: int) -> None:
    """LPT for uniform machines (earliest finish) is within 1 + sqrt(3)/3 of the optimum
    (Kovacs, Algorithmica 2010, upper bound) on farms of at least two speeds, and says so;
    HiGHS optimum."""
    inst = speed_farm(seed, one_speed=False)
    res = solve(inst, "longest_first")
    assert res.worst_case_ratio == pytest.approx(1 + math.sqrt(3) / 3)
    assert res.makespan <= (1 + math.sqrt(3) / 3) * reference_optimum(inst) * (1 + 1e-9)


def test_lpt_busy_nodes_within_lee_bound() -> None:
    """One speed, nodes free at different times: LPT within 3/2 - 1/(2m) (Lee 1991, from
    memory) and list scheduling within 2 - 1/m (Graham 1966's argument); HiGHS optimum."""
    rng = np.random.default_rng(22)
    for _ in range(25):
        m = int(rng.integers(2, 4))
        nodes = [Node(f"blade-{k:02d}", free_at=float(rng.integers(0, 60))) for k in range(m)]
        nodes[0] = Node("blade-00", free_at=0.0)
        nodes[1] = Node("blade-01", free_at=float(rng.integers(1, 60)))  # not identical
        inst = Instance.build(rng.integers(1, 100, int(rng.integers(3, 9))).astype(float), nodes)
        opt = reference_optimum(inst)
        lpt = solve(inst, "longest_first")
        assert lpt.worst_case_ratio == pytest.approx(1.5 - 1 / (2 * m))
        assert lpt.makespan <= lpt.worst_case_ratio * opt * (1 + 1e-9)
        lst = solve(inst, "list")
        assert lst.worst_case_ratio == pytest.approx(2 - 1 / m)
        assert lst.makespan <= lst.worst_case_ratio * opt * (1 + 1e-9)


def test_tags_give_no_ratio_but_a_gap() -> None:
    """With requires/provides tags no a-priori guarantee is claimed (none is known to us for
    LPT with eligibility constraints and speeds, from memory): the ratio is null and the gap
    comes from a proven bound; bound <= optimum <= plan against the branch and bound in
    Fractions (tests/reference.py), and gap = (plan - bound) / bound."""
    inst = CASES[3]
    assert inst.requires is not None
    d = inst.durations.tolist()
    nodes = [(nd.speed, nd.free_at, nd.provides) for nd in inst.nodes]
    res = solve(inst, "longest_first")
    out = res.to_dict()
    check_plan_exact(out, d, nodes, inst.requires, job_ids=inst.job_ids)
    ms = exact_plan_makespan(out, d, nodes, job_ids=inst.job_ids)
    assert Fraction(res.lower_bound) <= exact_optimum(d, nodes, inst.requires) <= ms
    assert res.worst_case_ratio is None
    assert res.gap == pytest.approx(
        float((ms - Fraction(res.lower_bound)) / Fraction(res.lower_bound))
    )


def test_every_job_on_an_eligible_node() -> None:
    """Every method puts every job on a node that provides all it requires, after free_at."""
    for inst in CASES[:15]:
        for method in ("list", "longest_first", "exact", "auto"):
            res = solve(inst, method, time_budget=2)
            res.schedule.check()
            for j, k in enumerate(res.schedule.node_of.tolist()):
                assert inst.requires is None or inst.requires[j] <= inst.nodes[k].provides


def test_infeasible_named_job_by_job() -> None:
    """A job whose requires no node provides is refused by name, pointer /jobs/i/requires."""
    nodes = [Node("a", provides=frozenset({"gpu"})), Node("b", speed=2.0)]
    inst = Instance.build(
        [10, 20, 30, 40],
        nodes,
        requires=[[], ["gpu", "bigmem"], ["gpu"], ["licence"]],
        job_ids=["ep1_a", "ep1_b", "ep1_c", "ep1_d"],
    )
    with pytest.raises(Infeasible) as err:
        solve(inst, "longest_first")
    assert err.value.jobs == ["ep1_b", "ep1_d"]
    assert [json_pointer(i.path) for i in err.value.issues] == [
        "/jobs/1/requires",
        "/jobs/3/requires",
    ]


def test_large_instance_local_search_never_worse_than_lpt() -> None:
    """Beyond MILP size, ``exact`` returns LPT improved by moves/swaps: never worse than
    LPT by earliest finish (Gonzalez, Ibarra and Sahni 1977), written here in Fractions
    (reference_greedy); the plan checked exactly, a certificate below it. Speeds are powers
    of two and durations whole, so the float plan and the exact one tie alike."""
    rng = np.random.default_rng(2)
    nodes = [
        Node(
            f"blade-{k:02d}",
            speed=float(rng.choice([0.5, 1.0, 2.0])),
            provides=frozenset({"gpu"}) if k == 0 or rng.random() < 0.3 else frozenset(),
            free_at=float(rng.integers(0, 60)) if rng.random() < 0.5 else 0.0,
        )
        for k in range(12)
    ]
    d = [float(x) for x in rng.integers(1, 100, 600)]
    req = [["gpu"] if rng.random() < 0.3 else [] for _ in d]
    inst = Instance.build(d, nodes, requires=req, job_ids=[f"sh{j:03d}" for j in range(600)])
    node_of, start = reference_greedy(d, nodes, longest_first(d), req)
    lpt = max(start[j] + Fraction(d[j]) / Fraction(nodes[k].speed) for j, k in enumerate(node_of))
    res = solve(inst, "auto", time_budget=0.5)
    out = res.to_dict()
    exact_nodes = [(nd.speed, nd.free_at, nd.provides) for nd in nodes]
    check_plan_exact(out, d, exact_nodes, req, job_ids=inst.job_ids)
    assert exact_plan_makespan(out, d, exact_nodes, job_ids=inst.job_ids) <= lpt
    assert res.extras["auto"]["chose"] == "longest_first+local_search"
    assert res.stop_reason in ("time_budget", "heuristic", "proved_optimal")
    assert res.lower_bound <= res.makespan


def test_improve_pure_python_path_matches_compiled() -> None:
    """Plumbing: the local-search kernel gives the same plan compiled and as plain Python,
    and that plan keeps every job on an eligible node and never ends later than the start
    plan (both makespans computed here in Fractions)."""
    rng = np.random.default_rng(4)
    inst = random_farm(rng, n=60, m=5)
    elig = eligibility(inst)
    s = np.array([nd.speed for nd in inst.nodes])
    f = np.array([nd.free_at for nd in inst.nodes])
    start = np.array([int(np.flatnonzero(elig.eligible[t])[0]) for t in elig.job_type], np.int32)
    a, b = start.copy(), start.copy()
    order = inst.order_longest_first
    farm = Farm(s, f, elig.job_type, elig.eligible)
    args = (inst.durations, farm, order, node_classes(inst, elig))
    ra = improve(a, *args, 1000)
    rb = pure(improve)(b, *args, 1000)
    assert ra == rb and np.array_equal(a, b)
    assert ra[0] > 0

    def finish(node_of: np.ndarray) -> Fraction:
        work = [Fraction(0)] * inst.m
        for j, k in enumerate(node_of.tolist()):
            work[k] += Fraction(inst.durations[j])
        return max(
            Fraction(nd.free_at) + w / Fraction(nd.speed)
            for nd, w in zip(inst.nodes, work, strict=True)
        )

    reqs = inst.requires or ()
    assert all(reqs[j] <= inst.nodes[k].provides for j, k in enumerate(a.tolist()))
    assert finish(a) <= finish(start)


def test_sift_down_pure_python_path_matches_compiled() -> None:
    """The class heaps' sift-down builds the same heap compiled and as plain Python, and
    that heap has the heap property on (load, node index), checked here on every parent
    and child (J. W. J. Williams, "Algorithm 232: Heapsort", CACM 7, 1964); the rest of
    the array is left alone."""
    rng = np.random.default_rng(11)
    for _ in range(30):
        size, lo = int(rng.integers(1, 40)), int(rng.integers(0, 5))
        total = lo + size + 3
        load = rng.integers(0, 6, total).astype(np.float64)  # equal loads: ties by index
        base = rng.permutation(total).astype(np.int64)
        heaps = []
        for sift in (_sift_down, pure(_sift_down)):
            heap = base.copy()
            for i in range(size // 2 - 1, -1, -1):
                sift(heap, lo, size, i, load)
            heaps.append(heap)
        assert np.array_equal(heaps[0], heaps[1])
        heap = heaps[1]
        part = heap[lo : lo + size]
        for c in range(1, size):
            p = (c - 1) // 2
            assert (load[part[p]], part[p]) < (load[part[c]], part[c])
        assert sorted(part.tolist()) == sorted(base[lo : lo + size].tolist())
        assert np.array_equal(heap[:lo], base[:lo])
        assert np.array_equal(heap[lo + size :], base[lo + size :])


def test_class_heap_lpt_equals_plain_earliest_finish() -> None:
    """The per-class heap version of earliest finish gives exactly the plan of the rule
    written here from its definition in Fractions (reference_greedy) when the arithmetic is
    exact (whole durations, speeds that are powers of two), compiled and as plain Python;
    the plain O(n m) scan (kernels.earliest_finish) too."""
    rng = np.random.default_rng(9)
    for _ in range(10):
        m = int(rng.integers(3, 40))
        nodes = [
            Node(
                f"blade-{k}",
                speed=float(rng.choice([0.5, 1.0, 2.0, 4.0])),
                provides=frozenset({"gpu"}) if rng.random() < 0.3 else frozenset(),
                free_at=float(rng.integers(0, 500)) if rng.random() < 0.25 else 0.0,
            )
            for k in range(m)
        ]
        nodes[0] = Node("blade-0", speed=2.0, provides=frozenset({"gpu"}))
        n = int(rng.integers(50, 2000))
        d = rng.integers(1, 3000, n)
        req = [["gpu"] if x else [] for x in rng.random(n) < 0.2]
        inst = Instance.build(d, nodes, requires=req)
        elig = eligibility(inst)
        s = np.array([nd.speed for nd in inst.nodes])
        f = np.array([nd.free_at for nd in inst.nodes])
        farm = Farm(s, f, elig.job_type, elig.eligible)
        classes = node_classes(inst, elig)
        for order in (inst.order_longest_first, np.arange(n, dtype=np.intp)):
            want_node, want_start = reference_greedy(d.tolist(), nodes, order.tolist(), req)
            plain = pure(earliest_finish)(order, inst.durations, farm)
            args = (order, inst.durations, farm, classes)
            for got in (
                plain,
                earliest_finish_classes(*args),
                pure(earliest_finish_classes)(*args),
            ):
                assert got[0].tolist() == want_node and got[1].tolist() == want_start
