"""What the exact-search benchmarks share (bench/stages_exact.py, bench/farm_exact.py): the
options, the run over every group of instances with CP-SAT's answers kept between runs,
CP-SAT's solve of a model, one row per instance in whole ticks, the comparison with
CP-SAT, and the summary line."""

from __future__ import annotations

import argparse
import json
import statistics
from collections.abc import Callable, Sequence
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any


@dataclass(frozen=True)
class Row:
    """One instance: our plan and bound (whole ticks), gap, proof, time over the budget,
    and CP-SAT's plan and bound when it ran."""

    group: str
    ours: int
    bound: int
    gap: float
    proven: bool
    over: float
    cp: int | None
    cp_bound: int | None


@dataclass
class CpSat:
    """CP-SAT's answers by instance key: ``seconds`` of search (``None``: CP-SAT is off),
    kept in the JSON file ``path`` when given (they do not depend on ours)."""

    seconds: float | None
    path: Path | None = None
    answers: dict[str, Any] = field(default_factory=dict)

    @property
    def on(self) -> bool:
        return self.seconds is not None

    def answer(
        self, key: str, solve: Callable[[float], tuple[int | None, int]]
    ) -> tuple[int | None, int | None]:
        """CP-SAT's plan and bound for the instance ``key`` (``solve`` runs it for so many
        seconds when no answer is kept); ``(None, None)`` when CP-SAT is off."""
        if self.seconds is None:
            return None, None
        if key not in self.answers:
            self.answers[key] = solve(self.seconds)
            if self.path:
                self.path.write_text(json.dumps(self.answers))
        cp, cp_bound = self.answers[key]
        return cp, cp_bound


def minimise(model: Any, seconds: float, workers: int) -> tuple[int | None, int]:
    """CP-SAT on ``model`` (a ``cp_model.CpModel`` with its objective set) for ``seconds``
    on ``workers`` workers: the best objective (``None`` if it found no plan) and its
    bound, in whole ticks."""
    from ortools.sat.python import cp_model

    solver = cp_model.CpSolver()
    solver.parameters.max_time_in_seconds = seconds
    solver.parameters.num_workers = workers
    status = solver.solve(model)
    if status in (cp_model.OPTIMAL, cp_model.FEASIBLE):
        return int(solver.objective_value), int(solver.best_objective_bound)
    return None, int(solver.best_objective_bound)


def options(
    doc: str, group: str, groups: Sequence[str], per: int, quick: str, seed: int
) -> argparse.ArgumentParser:
    """The options both benchmarks take; ``group`` names a kind of instance (``mix``,
    ``family``): ``--per-<group>`` instances of each (``per``; ``--quick``: what ``quick``
    says), ``--<group>`` to run only some of ``groups``."""
    ap = argparse.ArgumentParser(description=doc.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help=quick)
    ap.add_argument(f"--per-{group}", type=int, default=per)
    ap.add_argument("--budget", type=float, default=1.0)
    ap.add_argument("--seed", type=int, default=seed)
    ap.add_argument("--cpsat", action="store_true")
    ap.add_argument("--cpsat-seconds", type=float, default=10.0)
    ap.add_argument(f"--{group}", choices=groups, action="append")
    ap.add_argument(
        "--cpsat-cache",
        type=Path,
        help="a JSON file keeping CP-SAT's answers between runs (they do not depend on ours)",
    )
    return ap


def run_groups(
    args: argparse.Namespace,
    groups: Sequence[str],
    per: int,
    run_one: Callable[[str, int, CpSat, str], Row],
    width: int,
) -> list[Row]:
    """``run_one(group, index, cpsat, key)`` on ``per`` instances of each group, then the
    summary per group and overall (labels ``width`` wide)."""
    cpsat = CpSat(args.cpsat_seconds if args.cpsat else None, args.cpsat_cache)
    if args.cpsat_cache and args.cpsat_cache.exists():
        cpsat.answers = json.loads(args.cpsat_cache.read_text())
    rows = [
        run_one(group, i, cpsat, f"{group}/{i}/seed{args.seed}/{args.cpsat_seconds}s")
        for group in groups
        for i in range(per)
    ]
    print()
    for group in groups:
        summary(group, [r for r in rows if r.group == group], args.budget, args.cpsat, width)
    summary("overall", rows, args.budget, args.cpsat, width)
    return rows


def cpsat_note(row: Row, cpsat_on: bool) -> str:
    """The end of an instance's line: CP-SAT's plan and bound, and which is shorter."""
    if not cpsat_on:
        return ""
    ok = row.cp is None or row.ours <= row.cp
    return f"  cpsat {row.cp} (bound {row.cp_bound}) {'ours<=cpsat' if ok else 'OURS WORSE'}"


def summary(label: str, rows: list[Row], budget: float, cpsat_on: bool, width: int) -> None:
    """Share proven, median and worst gap, time over budget (the allowance is the issues'
    budget + 5 % + 50 ms) and, with CP-SAT, how often ours is no worse."""
    gaps = [r.gap for r in rows]
    proven = sum(r.proven for r in rows)
    over = max(r.over for r in rows)
    allowed = 0.05 * budget + 0.05
    line = (
        f"{label:{width}s} {len(rows):3d} inst  proven {proven}/{len(rows)} "
        f"({100 * proven / len(rows):5.1f} %)  gap median {100 * statistics.median(gaps):.3f} % "
        f"worst {100 * max(gaps):.3f} %  wall over budget max {over:+.3f} s "
        f"({'ok' if over <= allowed else 'OVER'} <= {allowed:.3f})"
    )
    if cpsat_on:
        no_worse = sum(1 for r in rows if r.cp is None or r.ours <= r.cp)
        better = sum(1 for r in rows if r.cp is None or r.ours < r.cp)
        cp_proven = sum(1 for r in rows if r.cp is not None and r.cp == r.cp_bound)
        line += (
            f"  ours<=cpsat {no_worse}/{len(rows)} ({100 * no_worse / len(rows):.1f} %, "
            f"strictly better {better}); cpsat proven {cp_proven}/{len(rows)}"
        )
    print(line)
