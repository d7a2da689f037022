"""`exact` at 1 s on generated farms (issue 21), with CP-SAT as a second opinion.

    .venv/bin/python bench/farm_exact.py [--quick] [--per-mix 20] [--budget 1.0] [--seed 21]
                                         [--cpsat] [--cpsat-seconds 10] [--cpsat-cache F]

Farms (seeded; every name is our own coined one): 5 to 40 nodes named after an invented
valley, ``rill-NN``, speed 1, 2 or 4; a GPU subset of about a quarter of the nodes (tag
``gpu``); a quarter of the nodes still busy, ``free_at`` a whole number of seconds up to
20 minutes. 2 to 10 jobs per node; about one job in five requires ``gpu``. Durations are
multiples of 4 s, so every finish ``free_at + p / s`` is a whole number of seconds and our
plan, our bound and CP-SAT's plan are compared in the same integers. Three duration mixes:

``uniform``    uniform in 60..1,800 s;
``shots``      lognormal render shots, median 10 minutes (sigma 0.9), 1 minute to 4 hours;
``bimodal``    70 % comps of 1-5 minutes, 30 % simulations of 30-120 minutes.

Printed per instance: jobs, nodes, our makespan and bound (ceiling of the certified bound:
times are whole seconds), certified gap, proven or not, the bound's rule, wall time over
the budget, and with ``--cpsat`` CP-SAT's makespan and bound and whether ours is no worse.
Then per mix and overall: share proven, median and worst certified gap, largest wall time
over the budget, and the comparison; with ``--cpsat`` also a cross-check of the two
certificates: our bound above CP-SAT's plan, or CP-SAT's bound above our plan, would mean
one of them is false (both counts should be 0).

The CP-SAT model is the plain assignment model the issue names: one boolean per job and
eligible node, every job on exactly one node, ``free_at_k + sum p_j / s_k x_jk <= C`` per
node, minimise ``C``; ``--cpsat-seconds`` of search on 2 workers, no hint from our plans
or bounds. Its answers do not depend on ours, so ``--cpsat-cache`` keeps them in a JSON
file between runs.
"""

from __future__ import annotations

import math
import sys
import time
from dataclasses import dataclass
from pathlib import Path
from typing import Any

import numpy as np

# exact_rows: bench/, beside this script
from exact_rows import CpSat, Row, cpsat_note, minimise, options, run_groups

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from workers.planning import Instance, Node, farm_exact_lp, solve

MIXES = ("uniform", "shots", "bimodal")
SPEEDS = (1.0, 2.0, 4.0)


@dataclass
class Case:
    """One generated farm as plain values."""

    name: str
    mix: str
    durations: list[float]
    requires: list[list[str]]
    speeds: list[float]
    gpu: list[bool]
    free_at: list[float]

    def instance(self) -> Instance:
        nodes = [
            Node(
                f"rill-{k:02d}",
                speed=s,
                provides=frozenset({"gpu"}) if g else frozenset(),
                free_at=f,
            )
            for k, (s, g, f) in enumerate(zip(self.speeds, self.gpu, self.free_at, strict=True))
        ]
        return Instance.build(self.durations, nodes, requires=self.requires)


def _fours(x: np.ndarray) -> list[float]:
    """Durations rounded to a multiple of 4 s (at least 4 s)."""
    return [float(4 * max(1, round(v / 4))) for v in x.tolist()]


def generate(mix: str, index: int, seed: int) -> Case:
    """The farm of the module doc for ``mix``, instance ``index``."""
    rng = np.random.default_rng([seed, MIXES.index(mix), index])
    m = int(rng.integers(5, 41))
    n = int(m * rng.uniform(2, 10))
    speeds = [float(x) for x in rng.choice(SPEEDS, m)]
    gpu = [False] * m
    for k in rng.choice(m, max(1, round(m / 4)), replace=False).tolist():
        gpu[k] = True
    free = [0.0] * m
    for k in rng.choice(m, max(1, round(m / 4)), replace=False).tolist():
        free[k] = float(rng.integers(1, 1201))
    if mix == "uniform":
        d = rng.uniform(60, 1800, n)
    elif mix == "shots":
        d = np.clip(rng.lognormal(np.log(600), 0.9, n), 60, 14400)
    else:
        sim = rng.random(n) < 0.3
        d = np.where(sim, rng.uniform(1800, 7200, n), rng.uniform(60, 300, n))
    req = [["gpu"] if x else [] for x in (rng.random(n) < 0.2).tolist()]
    return Case(f"{mix}-{index}", mix, _fours(d), req, speeds, gpu, free)


# -- CP-SAT: the plain assignment model -------------------------------------------------
def cpsat(case: Case, seconds: float, workers: int = 2) -> tuple[int | None, int]:
    """CP-SAT's best makespan (whole seconds; ``None`` if it found no plan) and its bound."""
    from ortools.sat.python import cp_model

    n, m = len(case.durations), len(case.speeds)
    dur = [int(d) for d in case.durations]
    free = [int(f) for f in case.free_at]
    spd = [int(s) for s in case.speeds]
    horizon = max(free) + sum(dur)
    model = cp_model.CpModel()
    span = model.new_int_var(max(free), horizon, "makespan")
    per_node: list[list[tuple[Any, int]]] = [[] for _ in range(m)]
    for j in range(n):
        xs = []
        for k in range(m):
            if "gpu" in case.requires[j] and not case.gpu[k]:
                continue
            x = model.new_bool_var(f"x{j}_{k}")
            per_node[k].append((x, dur[j] // spd[k]))
            xs.append(x)
        model.add_exactly_one(xs)
    for k in range(m):
        model.add(free[k] + sum(t * x for x, t in per_node[k]) <= span)
    model.minimize(span)
    return minimise(model, seconds, workers)


# -- the run ----------------------------------------------------------------------------
def run_case(case: Case, budget: float, cpsat_runs: CpSat, key: str) -> Row:
    inst = case.instance()
    t0 = time.perf_counter()
    result = solve(inst, "exact", time_budget=budget)
    wall = time.perf_counter() - t0
    ours = result.schedule.makespan_exact
    assert ours.denominator == 1, "times are whole seconds by construction"
    lb = math.ceil(result.certificate.exact_value)  # the optimum is a whole number
    cp, cpb = cpsat_runs.answer(key, lambda seconds: cpsat(case, seconds))
    row = Row(case.mix, int(ours), lb, result.gap, result.proven_optimal, wall - budget, cp, cpb)
    cmp = cpsat_note(row, cpsat_runs.on)
    print(
        f"{case.name:11s} n={inst.n:4d} m={inst.m:2d} ours={row.ours:6d} lb={row.bound:6d} "
        f"({result.certificate.source:17s}) gap={100 * row.gap:6.3f}% "
        f"{'proven' if row.proven else '      '} wall-budget={row.over:+.3f}s{cmp}",
        flush=True,
    )
    return row


def main() -> None:
    args = options(
        __doc__ or "", "mix", MIXES, per=20, quick="four instances per mix", seed=21
    ).parse_args()
    # a throwaway solve first, so that imports and compiled kernels are not charged (the
    # LP bound's knapsack and scipy's LP solver are loaded by their own warm-up)
    solve(generate("uniform", 99, 0).instance(), "exact", time_budget=0.5)
    farm_exact_lp.warm_up()
    rows = run_groups(
        args,
        args.mix or list(MIXES),
        4 if args.quick else args.per_mix,
        lambda mix, i, cp, key: run_case(generate(mix, i, args.seed), args.budget, cp, key),
        8,
    )
    if args.cpsat:
        ours_above = sum(1 for r in rows if r.cp is not None and r.bound > r.cp)
        theirs_above = sum(1 for r in rows if r.cp_bound is not None and r.cp_bound > r.ours)
        print(
            f"cross-check: our bound above CP-SAT's plan {ours_above}, "
            f"CP-SAT's bound above our plan {theirs_above}"
        )


if __name__ == "__main__":
    main()
