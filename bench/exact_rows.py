"""What the exact-search benchmarks share (bench/stages_exact.py, bench/farm_exact.py): one
row per instance in whole ticks, the comparison with CP-SAT, and the summary line."""

from __future__ import annotations

import statistics
from dataclasses import dataclass


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
