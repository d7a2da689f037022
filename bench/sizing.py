"""Deadline sizing on generated batches: time to the first answer, share proven optimal.

Batches of 1,000 to 100,000 jobs from five duration mixes of our own studio scenario
(seeded), each with deadlines chosen for several jobs-per-node ratios:

``frames``     uniform short frames, 30 s to 10 min;
``bimodal``    a fifth long simulation frames (1 to 3 h), the rest short comp frames
               (1 to 10 min);
``lognormal``  median 10 min, sigma 1 (a long right tail), cut at the deadline;
``farm``       a render farm's night: a quarter shot renders (20 to 90 min each, to the
               second) and three quarters transcode chunks of a few nominal lengths (30,
               45, 60, 90 or 120 s, most of them exact, some a second or two off);
``triplets``   triplet-like hard batches after Falkenauer's construction (1996): every
               node of the hidden optimum runs exactly three jobs that fill the deadline
               to the second, so OPT = n / 3 and first fit decreasing needs more.

For every batch: the time to the first answer (first fit decreasing + the lower bounds;
``first_answer_seconds``), the whole sizing within a 1 s budget (curve included),
whether it was proven optimal, and how many nodes first fit decreasing alone would have
asked for beyond the answer. Run::

    python bench/sizing.py            # the full grid (a few minutes)
    python bench/sizing.py --quick    # 1,000 and 10,000 jobs only
    python bench/sizing.py --mix triplets --sizes 100000   # one mix, one size
    python bench/sizing.py --ratios 1.5 2 2.5              # only these jobs-per-node aims
    python bench/sizing.py --quick --mix frames --ratios 1.5 2 --diagnose

``--diagnose`` says, for every batch left open, which side is off: offline (30 s each,
after the timed run) the LP bound of sizing_lp on the *full* set of distinct lengths
(LPBound's MAX_LENGTHS and MAX_DP_CELLS raised in this process only, the sizing's plan
as its first columns; every refutation still checked by Farley's certificate in
integers) and a packing at that bound on the exact lengths (the LP's fractional packing
rounded, else its dive); a packing there is the optimum, so the bound was off by (that
bound - lower) and the plan by (upper - that bound).

Ratios 1.5, 2, 2.5, 3, 5, 10 and 30 by default; the summary gives the share proven per
ratio (mixes other than triplets, which always aim at 3) with each mix's count, and the
slowest sizing against the budget + 5 % + 50 ms.

With ``--mix`` or ``--sizes`` the summary lines count only the rows that ran.
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from collections import defaultdict
from pathlib import Path
from typing import Any

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from workers.planning.sizing import size
from workers.planning.warmup import warm_up_sizing as warm_up

MIXES = ("frames", "bimodal", "lognormal", "farm", "triplets")
RATIOS = (1.5, 2, 2.5, 3, 5, 10, 30)  # jobs per node the deadline aims at


def durations(mix: str, n: int, rng: np.random.Generator) -> np.ndarray:
    """Seconds per job for one mix."""
    if mix == "frames":
        return rng.integers(30, 601, n).astype(np.float64)
    if mix == "bimodal":
        long = rng.random(n) < 0.2
        return np.where(long, rng.integers(3600, 10801, n), rng.integers(60, 601, n)).astype(
            np.float64
        )
    if mix == "lognormal":
        return np.maximum(1.0, np.round(rng.lognormal(np.log(600.0), 1.0, n)))
    if mix == "farm":
        shot = rng.random(n) < 0.25
        render = 60 * rng.integers(20, 91, n) + rng.integers(0, 60, n)
        chunk = rng.choice(np.array([30, 45, 60, 90, 120]), n, p=[0.15, 0.2, 0.35, 0.2, 0.1])
        # most chunks run their nominal length, some a second or two over or short
        chunk = chunk + rng.choice(np.array([-2, -1, 0, 0, 0, 0, 1, 2]), n)
        return np.where(shot, render, chunk).astype(np.float64)
    raise ValueError(mix)


def triplets(n: int, cap: int, rng: np.random.Generator) -> np.ndarray:
    """n // 3 triplets that each sum to ``cap`` exactly (Falkenauer-style, scaled)."""
    k = n // 3
    a = rng.integers(int(0.38 * cap), int(0.49 * cap) + 1, k)
    b = rng.integers(int(0.25 * cap), 1 + np.minimum((cap - a) // 2, int(0.49 * cap)), k)
    c = cap - a - b
    out = np.concatenate([a, b, c]).astype(np.float64)
    rng.shuffle(out)
    return out


def batch(mix: str, n: int, ratio: float, seed: int) -> tuple[np.ndarray, float]:
    """One seeded batch and its deadline."""
    rng = np.random.default_rng(seed)
    if mix == "triplets":
        cap = 6 * 3600 + int(rng.integers(0, 3600))
        return triplets(n, cap, rng), float(cap)
    d = durations(mix, n, rng)
    # a deadline near ratio jobs' worth of mean work, never below the longest job
    deadline = float(np.ceil(max(d.max(), ratio * d.mean() * rng.uniform(0.9, 1.1))))
    return d, deadline


def main() -> None:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="1,000 and 10,000 jobs only")
    ap.add_argument("--seeds", type=int, default=5, help="batches per cell")
    ap.add_argument("--budget", type=float, default=1.0, help="time budget per sizing (s)")
    ap.add_argument("--out", help="write a markdown table here")
    ap.add_argument("--mix", action="append", choices=MIXES, help="only this mix (may be repeated)")
    ap.add_argument(
        "--sizes", type=int, nargs="+", help="only these batch sizes (jobs), e.g. 100000"
    )
    ap.add_argument(
        "--diagnose", action="store_true", help="after each open batch: which side is off"
    )
    ap.add_argument(
        "--ratios", type=float, nargs="+", help=f"jobs per node to aim at (default {RATIOS})"
    )
    ap.add_argument(
        "--resolution",
        type=float,
        default=1.0,
        help="the batches' resolution (s); a fine one means many ticks a node",
    )
    args = ap.parse_args()
    sizes = (1_000, 10_000) if args.quick else (1_000, 10_000, 100_000)
    if args.sizes:
        sizes = tuple(args.sizes)
    mixes = tuple(args.mix) if args.mix else MIXES
    warm_up()  # compile the kernels (or load them from the cache) before timing
    rows = []
    first: dict[int, list[float]] = defaultdict(list)
    for n in sizes:
        for mix in mixes:
            ratios = (3,) if mix == "triplets" else tuple(args.ratios or RATIOS)
            for ratio in ratios:
                res = []
                for s in range(args.seeds):
                    # the seed of ratio 2 is 1000 n + 20 + s, as before ratios 1.5 and 2.5
                    d, deadline = batch(mix, n, ratio, round(1000 * n + 10 * ratio) + s)
                    t0 = time.perf_counter()
                    r = size(
                        d,
                        deadline,
                        time_budget=args.budget,
                        resolution=args.resolution,
                        max_nodes=10**6,
                    )
                    wall = time.perf_counter() - t0
                    res.append((r, wall))
                    first[n].append(r.first_answer_seconds)
                    if args.diagnose and not r.proven_optimal:
                        plan = np.asarray(r.schedule.node_of)
                        diagnose(d, deadline, r.nodes_lower_bound, r.nodes_needed, plan)
                jobs_per_node = statistics.mean(n / r.nodes_lower_bound for r, _ in res)
                row = {
                    "n": n,
                    "mix": mix,
                    "ratio": ratio,
                    "jobs_per_node": jobs_per_node,
                    "first_ms": 1000 * statistics.median(r.first_answer_seconds for r, _ in res),
                    "wall_ms": 1000 * statistics.median(w for _, w in res),
                    "wall_max_ms": 1000 * max(w for _, w in res),
                    "proven": sum(r.proven_optimal for r, _ in res),
                    "count": len(res),
                    "ffd_excess": sum(r.ffd_excess for r, _ in res),
                    "ffd_worse": sum(r.ffd_excess > 0 for r, _ in res),
                    "gap": sum(r.nodes_needed - r.nodes_lower_bound for r, _ in res),
                    "sources": ",".join(sorted({r.bound_source for r, _ in res})),
                    "methods": ",".join(sorted({r.method for r, _ in res})),
                }
                rows.append(row)
                print(
                    f"{n:>7} {mix:<10} r={ratio:<4g} jobs/node {jobs_per_node:6.2f}  "
                    f"first {row['first_ms']:7.1f} ms  total {row['wall_ms']:7.1f} ms "
                    f"(max {row['wall_max_ms']:.0f})  "
                    f"proven {row['proven']}/{row['count']}  open gap {row['gap']}  "
                    f"FFD +{row['ffd_excess']} ({row['ffd_worse']} batches)  "
                    f"[{row['sources']}; {row['methods']}]",
                    flush=True,
                )
    lines = summary(rows, first, args.budget)
    print("\n".join(lines))
    if args.out:
        Path(args.out).write_text(table(rows, lines, args), encoding="utf-8")


def diagnose(d: np.ndarray, deadline: float, lower: int, upper: int, plan: np.ndarray) -> None:
    """Print which side of an open sizing is off (see the module docstring)."""
    from workers.planning import sizing_lp
    from workers.planning.exact import lpbound
    from workers.planning.sizing_round import round_packing

    if not (np.all(d == np.round(d)) and float(deadline).is_integer()):
        print("      (diagnose: whole seconds only)")
        return
    q, cap = d.astype(np.int64), int(deadline)
    saved, saved_cells = lpbound.MAX_LENGTHS, lpbound.MAX_DP_CELLS
    lpbound.MAX_LENGTHS = max(saved, int(np.unique(q).size))
    lpbound.MAX_DP_CELLS = max(saved_cells, 64_000_000)  # whole ticks, no grouping
    try:
        t0 = time.perf_counter()
        out = sizing_lp.lp_lower(q, cap, lower, upper, 30.0, packing=plan.astype(np.int32))
        t1 = time.perf_counter()
        packing = None
        if out.lower < upper and out.fractional is not None:
            packing = round_packing(out.fractional, q, cap, 30.0)
        if out.lower < upper and packing is None:
            packing = sizing_lp.lp_dive(q, cap, out.lower, 30.0)
        t2 = time.perf_counter()
    finally:
        lpbound.MAX_LENGTHS, lpbound.MAX_DP_CELLS = saved, saved_cells
    loads = np.bincount(packing, weights=q) if packing is not None else np.zeros(0)
    packed = packing is not None and int(packing.max()) < out.lower and loads.max() <= cap
    verdict = (
        f"optimum {out.lower}: bound off by {out.lower - lower}, plan off by {upper - out.lower}"
        if packed or out.lower >= upper
        else f"optimum in [{out.lower}, {upper}] (no packing found at {out.lower})"
    )
    found = "found" if packed else ("failed" if out.lower < upper else "not needed")
    print(
        f"      open: lower {lower}, upper {upper}; full-length LP bound {out.lower} "
        f"({t1 - t0:.1f} s), packing at it {found} ({t2 - t1:.1f} s): {verdict}",
        flush=True,
    )


def summary(rows: list[dict[str, Any]], first: dict[int, list[float]], budget: float) -> list[str]:
    out = []
    by_ratio: dict[float, list[int]] = defaultdict(lambda: [0, 0])
    for r in rows:
        if r["mix"] != "triplets":
            by_ratio[r["ratio"]][0] += r["proven"]
            by_ratio[r["ratio"]][1] += r["count"]
    by_mix: dict[float, dict[str, list[int]]] = defaultdict(dict)
    for r in rows:
        if r["mix"] != "triplets":
            cell = by_mix[r["ratio"]].setdefault(r["mix"], [0, 0])
            cell[0] += r["proven"]
            cell[1] += r["count"]
    for ratio, (p, c) in sorted(by_ratio.items()):
        mixes = ", ".join(f"{m} {a}/{b}" for m, (a, b) in by_mix[ratio].items())
        out.append(
            f"proven optimal at ratio {ratio:g} (mixes other than triplets): "
            f"{p}/{c} = {100 * p / max(1, c):.1f} % ({mixes})"
        )
    limit = 1000 * (1.05 * budget + 0.05)
    worst = max((r["wall_max_ms"] for r in rows), default=0.0)
    late = sum(r["wall_max_ms"] > limit for r in rows)
    out.append(
        f"slowest sizing {worst:.0f} ms (budget + 5 % + 50 ms = {limit:.0f} ms; "
        f"cells with a sizing past it: {late})"
    )
    for n, vals in sorted(first.items()):
        out.append(
            f"median time to first answer, {n:,} jobs: {1000 * statistics.median(vals):.1f} ms"
        )
    dense = [r for r in rows if r["jobs_per_node"] >= 3 - 1e-9]
    proven = sum(r["proven"] for r in dense)
    count = sum(r["count"] for r in dense)
    out.append(
        f"proven optimal within the budget, batches with >= 3 jobs per node: "
        f"{proven}/{count} = {100 * proven / max(1, count):.1f} %"
    )
    easy = [r for r in dense if r["mix"] != "triplets"]
    ep, ec = sum(r["proven"] for r in easy), sum(r["count"] for r in easy)
    out.append(
        f"  of which the mixes other than triplets: {ep}/{ec} = {100 * ep / max(1, ec):.1f} %"
    )
    allp = sum(r["proven"] for r in rows)
    allc = sum(r["count"] for r in rows)
    out.append(f"proven optimal, all batches: {allp}/{allc} = {100 * allp / max(1, allc):.1f} %")
    worse = sum(r["ffd_worse"] for r in rows)
    excess = sum(r["ffd_excess"] for r in rows)
    out.append(
        f"first fit decreasing alone was above the answer on {worse}/{allc} batches "
        f"({excess} nodes in all)"
    )
    return out


def table(rows: list[dict[str, Any]], lines: list[str], args: argparse.Namespace) -> str:
    cmd = "python bench/sizing.py" + (" --quick" if args.quick else "")
    for mix in args.mix or ():
        cmd += f" --mix {mix}"
    if args.sizes:
        cmd += " --sizes " + " ".join(str(n) for n in args.sizes)
    if args.diagnose:
        cmd += " --diagnose"
    if args.ratios:
        cmd += " --ratios " + " ".join(f"{x:g}" for x in args.ratios)
    if args.seeds != 5:
        cmd += f" --seeds {args.seeds}"
    if args.budget != 1.0:
        cmd += f" --budget {args.budget}"
    head = [
        "| jobs | mix | ratio | jobs per node (at the lower bound) | first answer (median ms) "
        "| total (median ms) | total (max ms) | proven | open gap (nodes) "
        "| FFD above answer (batches, nodes) | bound | plan |",
        "|---:|---|---:|---:|---:|---:|---:|---:|---:|---:|---|---|",
    ]
    body = [
        f"| {r['n']:,} | {r['mix']} | {r['ratio']:g} | {r['jobs_per_node']:.2f} | "
        f"{r['first_ms']:.1f} | {r['wall_ms']:.1f} | {r['wall_max_ms']:.0f} | "
        f"{r['proven']}/{r['count']} | {r['gap']} | "
        f"{r['ffd_worse']}, +{r['ffd_excess']} | {r['sources']} | {r['methods']} |"
        for r in rows
    ]
    return "\n".join([f"Command: `{cmd}`", "", *head, *body, "", *[f"- {x}" for x in lines], ""])


if __name__ == "__main__":
    main()
