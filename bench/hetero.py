"""Mixed farms: plan time and gap of LPT and of ``auto`` at a 1 s budget.

A farm of our own invention: three speed classes of blades (0.75, 1.0 and 1.6), a GPU
subset (one node in five, all of the fastest class), a quarter of the nodes still busy
(free_at uniform in 0..3600 s). Shots last 2 to 120 minutes (log-uniform), 15 % of them
need a GPU. Prints a Markdown table.

    python bench/hetero.py [--budget 1.0] [--seeds 3] [--small]

``--small`` runs farms of 12 to 250 jobs instead, where ``auto`` chooses the MILP.
"""

from __future__ import annotations

import argparse
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from workers.planning import Instance, Node, solve

#: (jobs, nodes): about 50-100 jobs per node, then a few jobs per node (harder to certify)
SIZES = [
    (1_000, 20),
    (3_000, 60),
    (10_000, 200),
    (30_000, 400),
    (100_000, 1_000),
    (1_000, 250),
    (10_000, 2_500),
]
#: small farms (``--small``): the MILP sizes
SMALL_SIZES = [(12, 3), (40, 6), (100, 10), (250, 8)]


def farm(n: int, m: int, seed: int) -> Instance:
    """The mixed farm of the module doc."""
    rng = np.random.default_rng(seed)
    nodes = []
    for k in range(m):
        gpu = k % 5 == 0
        speed = 1.6 if gpu else float(rng.choice([0.75, 1.0, 1.6]))
        busy = rng.random() < 0.25
        nodes.append(
            Node(
                f"blade-{k:04d}",
                speed=speed,
                provides=frozenset({"gpu"}) if gpu else frozenset(),
                free_at=float(rng.uniform(0, 3600)) if busy else 0.0,
            )
        )
    d = np.round(np.exp(rng.uniform(np.log(120), np.log(7200), n)))
    req = [["gpu"] if x else [] for x in rng.random(n) < 0.15]
    return Instance.build(d, nodes, requires=req)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--budget", type=float, default=1.0)
    ap.add_argument("--seeds", type=int, default=3)
    ap.add_argument("--small", action="store_true", help="the MILP sizes instead")
    args = ap.parse_args()
    solve(farm(1_000, 20, 99), "auto", time_budget=5.0)  # compile the kernels first
    print(
        "| jobs | nodes | LPT time (s) | LPT gap | auto time (s) | auto gap | proven | "
        "auto chose | bound source |"
    )
    print("|---:|---:|---:|---:|---:|---:|---:|---|---|")
    for n, m in SMALL_SIZES if args.small else SIZES:
        rows = []
        for seed in range(args.seeds):
            inst = farm(n, m, seed)
            t = time.perf_counter()
            lpt = solve(inst, "longest_first")
            t_lpt = time.perf_counter() - t
            t = time.perf_counter()
            auto = solve(inst, "auto", time_budget=args.budget)
            t_auto = time.perf_counter() - t
            rows.append(
                (
                    t_lpt,
                    lpt.gap,
                    t_auto,
                    auto.gap,
                    auto.proven_optimal,
                    auto.extras["auto"]["chose"],
                    auto.certificate.source,
                )
            )
        a = np.array([r[:4] for r in rows])
        print(
            f"| {n:,} | {m:,} | {a[:, 0].mean():.3f} | {100 * a[:, 1].mean():.3f} % "
            f"(max {100 * a[:, 1].max():.3f} %) | {a[:, 2].mean():.3f} | "
            f"{100 * a[:, 3].mean():.3f} % (max {100 * a[:, 3].max():.3f} %) | "
            f"{sum(r[4] for r in rows)}/{len(rows)} | "
            f"{rows[0][5]} | {', '.join(sorted({r[6] for r in rows}))} |",
            flush=True,
        )


if __name__ == "__main__":
    main()
