"""Benchmark ``method: exact`` on the public P||Cmax instances with known optima.

Reads ``../shared/data/pcmax-public.jsonl`` (relative to the repository; ``--data PATH``)
at run time and solves every instance (or a stratified sample, ``--sample N`` per set) with
a time budget per instance (``--budget``, 1 s by default). Per set it prints: the share at
the known optimum *and* proven optimal, the share at the optimum, mean gap to the known
optimum, median and max wall time, the median wall time of the instances closed by the
bounds alone, and how often the result was worse than LPT (must be never) or the bound
exceeded the optimum (must be never). ``--cpsat`` also runs OR-Tools CP-SAT (optional
bench extra) on the same instances with 1 s and 10 s limits (``--cpsat-limits``).

Each instance is timed alone in its worker process; ``--jobs`` worker processes (default
1) share the machine, so with 2 jobs on 2 cores the timings include some contention.
``--failures`` lists the instances not proven at the optimum (set, name, makespan, lower
bound, optimum: a lower bound below the optimum means the bound fell short, a makespan
above it the plan) and any over the time limit; ``--out FILE`` writes every result as a
JSON line. On a machine busy with other work, ``--cpu-clock`` makes the budget and the
timings count each worker's own CPU time instead (what its wall time would be on a quiet
machine), to compare versions of the solver; published figures use the wall clock.

    python bench/exact_public.py --sample 30
    python bench/exact_public.py --sample 60 --failures --cpu-clock
    python bench/exact_public.py --sets lawrinenko,frangioni,berndt --jobs 2
"""

from __future__ import annotations

import argparse
import json
import multiprocessing
import random
import statistics
import sys
import time
from collections import defaultdict
from concurrent.futures import ProcessPoolExecutor
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parent.parent
DEFAULT_DATA = ROOT.parent / "shared" / "data" / "pcmax-public.jsonl"
DEFAULT_SETS = "frangioni,berndt,lawrinenko"


def load(path: Path, sets: list[str], sample: int | None, seed: int) -> list[dict[str, Any]]:
    """The instances of ``sets``; with ``sample``, that many per set, drawn with ``seed``."""
    by_set: dict[str, list[dict[str, Any]]] = defaultdict(list)
    with path.open() as fh:
        for line in fh:
            row = json.loads(line)
            if row["set"] in sets:
                by_set[row["set"]].append(row)
    out: list[dict[str, Any]] = []
    rng = random.Random(seed)
    for s in sets:
        rows = by_set[s]
        if sample is not None and sample < len(rows):
            rows = rng.sample(rows, sample)
        out.extend(rows)
    return out


def run_exact(row: dict[str, Any], budget: float) -> dict[str, Any]:
    """Solve one instance with ``method: exact``; wall time measured around the call."""
    sys.path.insert(0, str(ROOT))
    from workers.planning import Instance, solve
    from workers.planning.greedy import longest_first_schedule

    inst = Instance.build(row["p"], row["m"])
    t0 = time.perf_counter()
    res = solve(inst, "exact", time_budget=budget)
    wall = time.perf_counter() - t0
    lpt = longest_first_schedule(inst).makespan
    return {
        "set": row["set"],
        "name": row["name"],
        "opt": row["optimum"],
        "makespan": res.makespan,
        "lower_bound": res.lower_bound,
        "proven": res.proven_optimal,
        # closed by LPT and the bounds alone: no construction or search was run
        "bounds_only": res.proven_optimal and "search" not in res.extras,
        "wall": wall,
        "worse_than_lpt": res.makespan > lpt + 1e-9,
        "bound_above_opt": res.lower_bound > row["optimum"] + 1e-9,
    }


def use_cpu_clock() -> None:
    """Make every clock of this process count its own CPU time (``--cpu-clock``).

    On a machine shared with other work, wall-clock budgets measure the neighbours as much
    as the solver; the solver is single-threaded, so its CPU time is what its wall time
    would be on a quiet machine. Must run before ``workers.planning`` is imported (the
    budget's start time is read through ``time.perf_counter``). The published figures use
    the wall clock; this is for comparing versions of the solver on a busy machine.
    """
    time.perf_counter = time.process_time


def warm(cpu_clock: bool = False) -> None:
    """Load numba and the compiled kernels in this process, so no timed instance pays for it
    (Graham's tight LPT family for m = 3: the search runs)."""
    if cpu_clock:
        use_cpu_clock()
    sys.path.insert(0, str(ROOT))
    from workers.planning.exact import warm_up

    run_exact({"set": "-", "name": "-", "optimum": 9, "p": [5, 5, 4, 4, 3, 3, 3], "m": 3}, 0.5)
    warm_up()


def run_cpsat(row: dict[str, Any], limit: float) -> dict[str, Any]:
    """The assignment model in OR-Tools CP-SAT (one worker, loads ordered for symmetry)."""
    from ortools.sat.python import cp_model

    p, m = row["p"], row["m"]
    n = len(p)
    model = cp_model.CpModel()
    x = [[model.NewBoolVar(f"x{j}_{k}") for k in range(m)] for j in range(n)]
    hi = sum(p)
    cmax = model.NewIntVar(max(max(p), -(-sum(p) // m)), hi, "cmax")
    for j in range(n):
        model.AddExactlyOne(x[j])
    loads = []
    for k in range(m):
        ld = model.NewIntVar(0, hi, f"load{k}")
        model.Add(ld == sum(p[j] * x[j][k] for j in range(n)))
        model.Add(ld <= cmax)
        loads.append(ld)
    for k in range(m - 1):  # symmetry: loads non-increasing
        model.Add(loads[k] >= loads[k + 1])
    model.Minimize(cmax)
    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = limit
    solver.parameters.num_workers = 1
    t0 = time.perf_counter()
    status = solver.Solve(model)
    wall = time.perf_counter() - t0
    found = status in (cp_model.OPTIMAL, cp_model.FEASIBLE)
    ms = solver.ObjectiveValue() if found else float("inf")
    return {
        "set": row["set"],
        "name": row["name"],
        "opt": row["optimum"],
        "makespan": ms,
        "proven": status == cp_model.OPTIMAL,
        "wall": wall,
    }


def summarise(results: list[dict[str, Any]], label: str, limit: float) -> list[str]:
    """One table row per set; ``limit`` is the allowed wall time (budget + 5 % + 50 ms)."""
    lines = []
    by_set: dict[str, list[dict[str, Any]]] = defaultdict(list)
    for r in results:
        by_set[r["set"]].append(r)
    for s, rs in by_set.items():
        n = len(rs)
        at_opt = sum(1 for r in rs if abs(r["makespan"] - r["opt"]) < 1e-6)
        proven = sum(1 for r in rs if r["proven"] and abs(r["makespan"] - r["opt"]) < 1e-6)
        gaps = [(r["makespan"] - r["opt"]) / r["opt"] for r in rs if r["makespan"] < float("inf")]
        walls = sorted(r["wall"] for r in rs)
        bo = sorted(r["wall"] for r in rs if r.get("bounds_only"))
        worse = sum(1 for r in rs if r.get("worse_than_lpt"))
        above = sum(1 for r in rs if r.get("bound_above_opt"))
        over = sum(1 for r in rs if r["wall"] > limit)
        lines.append(
            f"| {label} | {s} | {n} | {100 * proven / n:.1f} % | {100 * at_opt / n:.1f} % | "
            f"{100 * statistics.fmean(gaps) if gaps else float('nan'):.3f} % | "
            f"{statistics.median(walls):.3f} | {walls[-1]:.3f} | {over} | "
            + (f"{1000 * statistics.median(bo):.1f} ms ({len(bo)})" if bo else "-")
            + f" | {worse if 'worse_than_lpt' in rs[0] else '-'}"
            f" | {above if 'bound_above_opt' in rs[0] else '-'} |"
        )
    return lines


HEADER = [
    "| solver | set | instances | at optimum and proven | at optimum | mean gap to optimum "
    "| median wall s | max wall s | over budget+5%+50ms | median wall, closed by bounds "
    "| worse than LPT "
    "| bound above optimum |",
    "|---|---|---|---|---|---|---|---|---|---|---|---|",
]


def main(argv: list[str] | None = None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--data", type=Path, default=DEFAULT_DATA)
    ap.add_argument("--sets", default=DEFAULT_SETS)
    ap.add_argument("--sample", type=int, default=None, help="instances per set (seeded)")
    ap.add_argument("--seed", type=int, default=1)
    ap.add_argument("--budget", type=float, default=1.0)
    ap.add_argument("--jobs", type=int, default=1, help="worker processes")
    ap.add_argument("--cpsat", action="store_true", help="also run OR-Tools CP-SAT")
    ap.add_argument("--cpsat-limits", default="1,10")
    ap.add_argument("--cpsat-sample", type=int, default=None, help="instances per set for CP-SAT")
    ap.add_argument("--failures", action="store_true", help="list instances not proven")
    ap.add_argument("--out", type=Path, default=None, help="write every result (JSON lines)")
    ap.add_argument("--no-exact", action="store_true", help="only the CP-SAT runs")
    ap.add_argument(
        "--cpu-clock",
        action="store_true",
        help="budgets and timings count the worker's CPU time (for a busy machine)",
    )
    args = ap.parse_args(argv)
    sets = [s for s in args.sets.split(",") if s]
    rows = load(args.data, sets, args.sample, args.seed)
    print(f"{len(rows)} instances from {args.data.name}, budget {args.budget:g} s", flush=True)
    warm()  # compile (or load from numba's cache) once before any worker starts
    t0 = time.perf_counter()
    results: list[dict[str, Any]] = []
    lines = list(HEADER)
    if not args.no_exact:
        # fresh interpreters for the CPU clock: it must be in place before the import
        ctx = multiprocessing.get_context("spawn") if args.cpu_clock else None
        with ProcessPoolExecutor(
            args.jobs, mp_context=ctx, initializer=warm, initargs=(args.cpu_clock,)
        ) as ex:
            results = list(ex.map(run_exact, rows, [args.budget] * len(rows), chunksize=4))
        lim = args.budget * 1.05 + 0.05
        lines += summarise(results, f"spanwright exact {args.budget:g} s", lim)
    if args.cpsat:
        crow = rows
        if args.cpsat_sample is not None:
            crow = load(args.data, sets, args.cpsat_sample, args.seed)
        for lim in [float(x) for x in args.cpsat_limits.split(",")]:
            with ProcessPoolExecutor(args.jobs) as ex:
                cres = list(ex.map(run_cpsat, crow, [lim] * len(crow), chunksize=2))
            lines += summarise(cres, f"CP-SAT {lim:g} s", lim * 1.05 + 0.05)
    total = time.perf_counter() - t0
    print("\n".join(lines))
    print(f"total wall {total:.1f} s with {args.jobs} process(es)")
    if args.out is not None:
        with args.out.open("w") as fh:
            for r in results:
                fh.write(json.dumps(r) + "\n")
    if args.failures:
        # set, name, makespan, lower bound, optimum (and the wall time when over the limit)
        lim = args.budget * 1.05 + 0.05
        for r in results:
            if not (r["proven"] and abs(r["makespan"] - r["opt"]) < 1e-6):
                print("not proven:", r["set"], r["name"], r["makespan"], r["lower_bound"], r["opt"])
            if r["wall"] > lim:
                print("over budget:", r["set"], r["name"], f"{r['wall']:.3f} s")
    return 0


if __name__ == "__main__":
    raise SystemExit(main())
