"""Renting to a deadline (issue 18) on generated batches: first priced answer, share proven
optimal, certified cost gap, wall time against the budget.

Each batch (seeded) is our own invented scenario: 10,000 jobs (lognormal, median 10 min,
sigma 0.8, cut to 30 s .. 3 h; a tenth require ``gpu``), a farm of 100 nodes busy until a
time spread over the first four hours (speeds 1, 1.5 and 2; ten of them provide ``gpu``),
a deadline of 8 h, and four kinds to rent (``cpu-small``, ``cpu-large``, ``gpu-small``,
``gpu-large``: invented speeds, boots and hour prices). Every batch is answered within a
2 s budget, for each billing unit. Run::

    python bench/rental.py                    # 20 batches per billing unit
    python bench/rental.py --batches 5 --billing hour
"""

from __future__ import annotations

import argparse
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from workers.planning.budget import Budget
from workers.planning.model import Node
from workers.planning.rental import Kind, RentalArgs, rent, rental_instance, warm_up_rental

KINDS = (
    Kind("cpu-small", 1.0, frozenset(), 0.12, 90.0, 400),
    Kind("cpu-large", 4.0, frozenset(), 0.44, 150.0, 200),
    Kind("gpu-small", 2.0, frozenset({"gpu"}), 0.90, 240.0, 100),
    Kind("gpu-large", 8.0, frozenset({"gpu"}), 3.10, 300.0, 50),
)


def batch(seed: int, n: int = 10_000, farm_nodes: int = 100) -> RentalArgs:
    rng = np.random.default_rng(seed)
    d = np.clip(np.round(rng.lognormal(np.log(600.0), 0.8, n)), 30, 3 * 3600).astype(float)
    gpu = rng.random(n) < 0.1
    req = [frozenset({"gpu"}) if g else frozenset() for g in gpu]
    speeds = rng.choice([1.0, 1.5, 2.0], farm_nodes)
    farm = [
        Node(
            f"farm-{i + 1:03d}",
            float(speeds[i]),
            frozenset({"gpu"}) if i < farm_nodes // 10 else frozenset(),
            float(rng.integers(0, 4 * 3600)),
        )
        for i in range(farm_nodes)
    ]
    inst = rental_instance(d, farm, 8 * 3600.0, requires=req)
    return RentalArgs(inst, KINDS)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--batches", type=int, default=20)
    ap.add_argument("--budget", type=float, default=2.0)
    ap.add_argument("--billing", nargs="*", default=["hour", "minute", "second"])
    args = ap.parse_args()
    import dataclasses

    warm_up_rental()
    for billing in args.billing:
        rows = []
        for seed in range(args.batches):
            req = dataclasses.replace(batch(seed), billing=billing)
            t0 = time.perf_counter()
            res = rent(req, Budget(args.budget))
            wall = time.perf_counter() - t0
            rows.append((res, wall))
            print(
                f"{billing:6s} seed {seed:2d}  cost {res.cost:10.4f}"
                f"  bound {res.cost_lower_bound:10.4f} ({res.bound_source:11s})"
                f"  gap {100 * res.gap:7.4f} %  proven {res.proven_optimal!s:5s}"
                f"  first {1000 * res.first_answer_seconds:6.1f} ms  wall {wall:5.3f} s"
                f"  rent {res.rent}",
                flush=True,
            )
        firsts = [r.first_answer_seconds for r, _ in rows]
        gaps = [r.gap for r, _ in rows]
        proven = sum(r.proven_optimal for r, _ in rows)
        limit = args.budget * 1.05 + 0.05
        print(
            f"{billing}: proven optimal {proven}/{len(rows)} ({100 * proven / len(rows):.0f} %); "
            f"gap max {100 * max(gaps):.4f} % median {100 * statistics.median(gaps):.4f} %; "
            f"first answer max {1000 * max(firsts):.1f} ms "
            f"median {1000 * statistics.median(firsts):.1f} ms; "
            f"wall max {max(w for _, w in rows):.3f} s (limit {limit:.3f} s, "
            f"{sum(w > limit for _, w in rows)} over)",
            flush=True,
        )


if __name__ == "__main__":
    main()
