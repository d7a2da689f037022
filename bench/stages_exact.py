"""`exact` at 1 s on generated render and transcode stage graphs (issue 17), with CP-SAT
as a second opinion.

    .venv/bin/python bench/stages_exact.py [--quick] [--per-family 10] [--budget 1.0]
                                           [--cpsat] [--cpsat-seconds 10]
                                           [--seed 17] [--search-seed 0]

Families (seeded; every name is our own coined one, nodes are ``node-NN``):

``shots``          per shot of an invented show: frame chunks, per chunk 2-5 render layers,
                   a comp per chunk waiting for its layers, an encode per shot waiting for
                   every comp; identical single-slot nodes;
``shots_licence``  the same with a floating renderer licence (capacity below the node
                   count) used by the render layers of the effects-heavy layers;
``titles``         per title: 2-6 renditions cut in chunks, a concat per rendition waiting
                   for its chunks, a package per title waiting for every concat; transcode
                   nodes with 1, 2 or 4 slots and a storage-read limit on the chunk encodes;
``layered``        random layered graphs (each job waits for 1-3 jobs of the layers just
                   before it), lognormal durations, identical nodes.

20 to 2,000 jobs and 2 to 60 nodes per family; durations in whole seconds at resolution
1 s, so the plan, the bound and CP-SAT's plan are all in the same integer ticks.

Printed per instance: jobs, arcs, nodes, slots, our makespan and bound (ticks), certified
gap, proven or not, wall time over the budget, the search's moves (list schedules of its
local walk), and with ``--cpsat`` CP-SAT's makespan and
bound and whether ours is no worse. Then per family and overall: share proven, median and
worst certified gap, the largest wall time over the budget, and the comparison.

The CP-SAT model is the straightforward one the issue names: one interval per job (on
farms, optional intervals per eligible node), precedence ``end_i <= start_j``, one
cumulative per limit, a cumulative of the total slots where the nodes are identical (else
one per node of its slots), minimise the makespan; ``--cpsat-seconds`` of search on 2
workers, no hint from our plans or bounds.
"""

from __future__ import annotations

import time
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np

# exact_rows: bench/, beside this script
from exact_rows import CpSat, Row, cpsat_note, minimise, options, run_groups

from workers.planning import Instance, Node
from workers.planning.budget import Budget
from workers.planning.stages.listing import warm_up
from workers.planning.stages.problem import StageProblem
from workers.planning.stages.search import solve_stages

FAMILIES = ("shots", "shots_licence", "titles", "layered")
SHOW_WORDS = ("tinderbox", "marrowgate", "pellucid", "quillon", "brackenfold", "vesper-rue")


@dataclass
class Case:
    """One generated instance as plain values."""

    name: str
    family: str
    durations: list[float]
    after: list[list[str]]
    uses: list[list[str]]
    limits: dict[str, int]
    slots: list[int]
    ids: list[str]

    def problem(self) -> StageProblem:
        inst = Instance.build(
            self.durations,
            [Node(f"node-{k:02d}") for k in range(len(self.slots))],
            job_ids=self.ids,
        )
        return StageProblem.build(
            inst, after=self.after, uses=self.uses, limits=self.limits, slots=self.slots
        )


def _sizes(rng: np.random.Generator) -> tuple[int, int]:
    """A target job count (log-uniform in 20..2,000) and a node count in 2..60."""
    n = round(float(np.exp(rng.uniform(np.log(20), np.log(2000)))))
    m = int(rng.integers(2, 61))
    return n, m


class Batch:
    """Jobs being generated, in batch order: ids, durations, waits and limits used."""

    def __init__(self) -> None:
        self.ids: list[str] = []
        self.dur: list[float] = []
        self.after: list[list[str]] = []
        self.uses: list[list[str]] = []

    def add(self, jid: str, seconds: float, after: list[str], uses: list[str]) -> str:
        self.ids.append(jid)
        self.dur.append(float(seconds))
        self.after.append(after)
        self.uses.append(uses)
        return jid

    def fan_in(
        self, parts: Sequence[tuple[str, float, list[str]]], join: str, seconds: float
    ) -> str:
        """The jobs ``parts`` (id, seconds, limits used), then ``join`` waiting for all."""
        for jid, sec, use in parts:
            self.add(jid, sec, [], use)
        return self.add(join, seconds, [jid for jid, _, _ in parts], [])


def shots(rng: np.random.Generator, index: int, licence: bool) -> Case:
    """Layers -> comp -> encode per shot (see the module docstring)."""
    target, m = _sizes(rng)
    show = SHOW_WORDS[index % len(SHOW_WORDS)]
    b = Batch()
    shot = 0
    while len(b.ids) < target:
        chunks = int(rng.integers(1, 7))
        nlayers = int(rng.integers(2, 6))
        base = rng.uniform(120, 2400, nlayers)
        fx = rng.random(nlayers) < 0.4
        tag = f"{show}-sh{shot:03d}"
        comps: list[str] = []
        for c in range(chunks):
            layers = [
                (
                    f"{tag}-c{c}-layer{layer}",
                    max(1, round(base[layer] * rng.uniform(0.7, 1.3))),
                    ["renderer-lic"] if licence and fx[layer] else [],
                )
                for layer in range(nlayers)
            ]
            comps.append(b.fan_in(layers, f"{tag}-c{c}-comp", float(rng.integers(60, 600))))
        b.add(f"{tag}-encode", float(rng.integers(120, 900)), comps, [])
        shot += 1
    limits = {"renderer-lic": max(1, int(m * rng.uniform(0.15, 0.6)))} if licence else {}
    family = "shots_licence" if licence else "shots"
    return Case(f"{family}-{index}", family, b.dur, b.after, b.uses, limits, [1] * m, b.ids)


def titles(rng: np.random.Generator, index: int) -> Case:
    """Chunk -> concat -> package per title (see the module docstring)."""
    target, m = _sizes(rng)
    b = Batch()
    title = 0
    while len(b.ids) < target:
        word = SHOW_WORDS[(index + title) % len(SHOW_WORDS)]
        tag = f"{word}-t{title:03d}"
        chunks = int(rng.integers(2, 21))
        concats: list[str] = []
        for rend in range(int(rng.integers(2, 7))):
            cost = rng.uniform(20, 400)
            parts = [
                (
                    f"{tag}-r{rend}-chunk{c}",
                    max(1, round(cost * rng.uniform(0.8, 1.2))),
                    ["storage-read"],
                )
                for c in range(chunks)
            ]
            concats.append(b.fan_in(parts, f"{tag}-r{rend}-concat", float(rng.integers(5, 60))))
        b.add(f"{tag}-package", float(rng.integers(10, 120)), concats, [])
        title += 1
    slots = [int(rng.choice([1, 2, 4])) for _ in range(m)]
    limits = {"storage-read": max(1, int(sum(slots) * rng.uniform(0.3, 1.2)))}
    return Case(f"titles-{index}", "titles", b.dur, b.after, b.uses, limits, slots, b.ids)


def layered(rng: np.random.Generator, index: int) -> Case:
    """A random layered graph (see the module docstring)."""
    n, m = _sizes(rng)
    depth = int(rng.integers(3, 12))
    layer = np.sort(rng.integers(0, depth, n))
    first = np.searchsorted(layer, np.arange(depth + 1))
    ids = [f"stage-{index}-{j:04d}" for j in range(n)]
    after: list[list[str]] = []
    for j in range(n):
        lay = int(layer[j])
        if lay == 0 or first[lay] == 0:
            after.append([])
            continue
        lo = int(first[max(0, lay - 2)])
        hi = int(first[lay])
        k = min(int(rng.integers(1, 4)), hi - lo)
        after.append([ids[i] for i in sorted(set(rng.integers(lo, hi, k).tolist()))])
    dur = [float(max(1, round(x))) for x in rng.lognormal(np.log(300), 0.8, n)]
    return Case(f"layered-{index}", "layered", dur, after, [[] for _ in range(n)], {}, [1] * m, ids)


def generate(family: str, index: int, seed: int) -> Case:
    rng = np.random.default_rng([seed, FAMILIES.index(family), index])
    if family == "shots":
        return shots(rng, index, licence=False)
    if family == "shots_licence":
        return shots(rng, index, licence=True)
    if family == "titles":
        return titles(rng, index)
    return layered(rng, index)


# -- CP-SAT: the straightforward interval and cumulative model --------------------------
def cpsat(problem: StageProblem, seconds: float, workers: int = 2) -> tuple[int | None, int]:
    """CP-SAT's best makespan (ticks; ``None`` if it found no plan) and its bound."""
    from ortools.sat.python import cp_model

    t = problem.timing
    n, m = problem.n, problem.m
    horizon = int(t.free.max()) + int(t.dmax.sum())
    model = cp_model.CpModel()
    identical = len(t.speeds) == 1 and t.all_eligible and bool((t.free == t.free[0]).all())
    starts, ends, ivs = [], [], []
    per_node: list[list[Any]] = [[] for _ in range(m)]
    for j in range(n):
        lo = int(t.free.min())
        s = model.new_int_var(lo, horizon, f"s{j}")
        e = model.new_int_var(lo, horizon, f"e{j}")
        if identical:
            ivs.append(model.new_interval_var(s, int(t.dmin[j]), e, f"i{j}"))
        else:
            pres = []
            for k in range(m):
                if not t.eligible[t.job_type[j], k]:
                    continue
                x = model.new_bool_var(f"x{j}_{k}")
                d = t.ticks_on(j, k)
                iv = model.new_optional_fixed_size_interval_var(s, d, x, f"i{j}_{k}")
                model.add(s >= int(t.free[k])).only_enforce_if(x)
                model.add(e == s + d).only_enforce_if(x)
                per_node[k].append(iv)
                pres.append(x)
            model.add_exactly_one(pres)
            ivs.append(model.new_interval_var(s, e - s, e, f"i{j}"))
        starts.append(s)
        ends.append(e)
    for j in range(n):
        for i in problem.predecessors_of(j).tolist():
            model.add(ends[i] <= starts[j])
    for lim, cap in enumerate(problem.capacities.tolist()):
        users = [j for j in range(n) if lim in problem.limits_of(j).tolist()]
        if users:
            model.add_cumulative([ivs[j] for j in users], [1] * len(users), cap)
    if identical:
        model.add_cumulative(ivs, [1] * n, int(problem.slots.sum()))
    else:
        for k in range(m):
            if per_node[k]:
                model.add_cumulative(per_node[k], [1] * len(per_node[k]), int(problem.slots[k]))
    span = model.new_int_var(int(t.free.max()), horizon, "makespan")
    model.add_max_equality(span, ends)
    model.minimize(span)
    return minimise(model, seconds, workers)


# -- the run ----------------------------------------------------------------------------
def run_case(case: Case, budget: float, cpsat_runs: CpSat, key: str, search_seed: int = 0) -> Row:
    problem = case.problem()
    t0 = time.perf_counter()
    result = solve_stages(problem, "exact", Budget(budget), seed=search_seed)
    wall = time.perf_counter() - t0
    result.plan.check()
    cp, cpb = cpsat_runs.answer(key, lambda seconds: cpsat(problem, seconds))
    row = Row(
        case.family,
        result.plan.makespan_ticks,
        result.bounds.ticks,
        result.gap,
        result.proven_optimal,
        wall - budget,
        cp,
        cpb,
    )
    cmp = cpsat_note(row, cpsat_runs.on)
    print(
        f"{case.name:16s} n={problem.n:5d} arcs={problem.arcs:5d} m={problem.m:2d} "
        f"slots={int(problem.slots.sum()):3d} ours={row.ours:7d} lb={row.bound:7d} "
        f"({result.bounds.best.name:13s}) gap={100 * row.gap:6.3f}% "
        f"{'proven' if row.proven else '      '} wall-budget={row.over:+.3f}s "
        f"rule={result.rule} moves={result.rounds}{cmp}",
        flush=True,
    )
    return row


def main() -> None:
    ap = options(__doc__, "family", FAMILIES, per=10, quick="one instance per family", seed=17)
    ap.add_argument("--search-seed", type=int, default=0, help="our search's seed")
    args = ap.parse_args()
    # load the compiled kernels and make a throwaway solve first, so that imports and
    # caches are not charged to instance 0
    warm_up()
    solve_stages(generate("layered", 0, 0).problem(), "exact", Budget(0.05))
    run_groups(
        args,
        args.family or list(FAMILIES),
        1 if args.quick else args.per_family,
        lambda fam, i, cp, key: run_case(
            generate(fam, i, args.seed), args.budget, cp, key, args.search_seed
        ),
        14,
    )


if __name__ == "__main__":
    main()
