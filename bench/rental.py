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
    python bench/rental.py --no-collect       # no gc.collect() before each batch
    python bench/rental.py --frontier 5 6 7 8 9   # batch 0's cost against the deadline
    python bench/rental.py --wide             # six kinds, classes gpu, mem, both, none

The first priced answer is timed from the request's budget (its checks included) to the
first verified plan with its exact cost and the ``work`` bound. Before each batch the
garbage of the previous ones is collected (``gc.collect()``, as bench/stages_scale.py
does), so that a full collection of the objects the imports leave (about 150,000 here, 80
to 190 ms on this loaded machine) does not land inside one batch's first answer;
``--no-collect`` shows the figures with it.
"""

from __future__ import annotations

import argparse
import datetime
import gc
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from workers.planning.budget import Budget
from workers.planning.model import Node
from workers.planning.rental import Kind, RentalArgs, rent, rental_instance, warm_up_rental
from workers.planning.rental_frontier import frontier

KINDS = (
    Kind("cpu-small", 1.0, frozenset(), 0.12, 90.0, 400),
    Kind("cpu-large", 4.0, frozenset(), 0.44, 150.0, 200),
    Kind("gpu-small", 2.0, frozenset({"gpu"}), 0.90, 240.0, 100),
    Kind("gpu-large", 8.0, frozenset({"gpu"}), 3.10, 300.0, 50),
)

#: ``--wide``: two more kinds and two more classes (``mem``, ``gpu`` and ``mem``)
WIDE_KINDS = (
    *KINDS,
    Kind("mem-large", 4.0, frozenset({"mem"}), 0.60, 120.0, 100),
    Kind("gpu-mem", 6.0, frozenset({"gpu", "mem"}), 3.50, 200.0, 40),
)


def batch(seed: int, n: int = 10_000, farm_nodes: int = 100, *, wide: bool = False) -> RentalArgs:
    rng = np.random.default_rng(seed)
    d = np.clip(np.round(rng.lognormal(np.log(600.0), 0.8, n)), 30, 3 * 3600).astype(float)
    if wide:  # a tenth gpu, a tenth mem, 3 % both
        r = rng.random(n)
        tags = [{"gpu"}, {"mem"}, {"gpu", "mem"}, set()]
        req = [frozenset(tags[int(np.searchsorted([0.1, 0.2, 0.23], x, "right"))]) for x in r]
    else:
        gpu = rng.random(n) < 0.1
        req = [frozenset({"gpu"}) if g else frozenset() for g in gpu]
    speeds = rng.choice([1.0, 1.5, 2.0], farm_nodes)
    tenth = farm_nodes // 10
    farm = [
        Node(
            f"farm-{i + 1:03d}",
            float(speeds[i]),
            frozenset({"gpu"})
            if i < tenth
            else frozenset({"mem"})
            if wide and i < 2 * tenth
            else frozenset(),
            float(rng.integers(0, 4 * 3600)),
        )
        for i in range(farm_nodes)
    ]
    inst = rental_instance(d, farm, 8 * 3600.0, requires=req)
    return RentalArgs(inst, WIDE_KINDS if wide else KINDS)


def main() -> None:
    ap = argparse.ArgumentParser()
    ap.add_argument("--batches", type=int, default=20)
    ap.add_argument("--first-seed", type=int, default=0)
    ap.add_argument("--budget", type=float, default=2.0)
    ap.add_argument("--billing", nargs="*", default=["hour", "minute", "second"])
    ap.add_argument("--no-collect", action="store_true", help="no gc.collect() per batch")
    ap.add_argument("--wide", action="store_true", help="six kinds and four classes")
    ap.add_argument(
        "--frontier",
        type=float,
        nargs="*",
        help="instead: the frontier of batch 0 at these deadlines (hours), 2 s per point",
    )
    args = ap.parse_args()
    import dataclasses

    print(_stamp("start"), flush=True)
    warm_up_rental()
    if args.frontier:
        for billing in args.billing:
            req = dataclasses.replace(batch(0), billing=billing)
            t0 = time.perf_counter()
            hours = args.frontier
            points = frontier(req, [h * 3600 for h in hours], Budget(args.budget * len(hours)))
            wall = time.perf_counter() - t0
            for h, pt in zip(hours, points, strict=True):
                if not pt["feasible"]:
                    print(f"{billing:6s} {h:5.2f} h  infeasible: {pt['reason']}")
                    continue
                print(
                    f"{billing:6s} {h:5.2f} h  cost {pt['cost_frontier']:10.4f}"
                    f"  bound {pt['bound_frontier']:10.4f}  proven {pt['proven_frontier']!s:5s}"
                    f"  rent {pt['rent']}",
                    flush=True,
                )
            print(f"{billing}: {len(hours)} deadlines in {wall:.2f} s", flush=True)
        print(_stamp("end"), flush=True)
        return
    for billing in args.billing:
        rows = []
        for seed in range(args.first_seed, args.first_seed + args.batches):
            req = dataclasses.replace(batch(seed, wide=args.wide), billing=billing)
            if not args.no_collect:
                gc.collect()
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
    print(_stamp("end"), flush=True)


def _stamp(what: str) -> str:
    """The UTC time and the load average (timings on a shared machine are noisy)."""
    now = datetime.datetime.now(datetime.UTC).strftime("%Y-%m-%d %H:%M:%S UTC")
    load = ", ".join(f"{x:.2f}" for x in os.getloadavg())
    return f"{what}: {now}, load average {load}"


if __name__ == "__main__":
    main()
