"""Stage graphs at scale: ``longest_first`` on 100,000 jobs, 200,000 arcs, 500 nodes.

Prints the end-to-end library time (building the instance and the stage problem from ids:
validation and the cycle check; the plan; the bounds) and, from the same run and the same
graph, the time of the standard library's ``graphlib.TopologicalSorter(...).static_order()``.

    .venv/bin/python bench/stages_scale.py [--jobs 100000 --arcs 200000 --nodes 500]

The graph is a random layered stage graph of our own: jobs in 200 layers in batch order,
each arc from a random job of an earlier layer (at most 20 layers back), durations
uniform in [30, 3600] s; nodes of two speeds (1 and 1.5), every fifth node with 2
slots, a tenth of the nodes still busy; one limit of capacity 40 used by 5 % of the jobs;
a tenth of the jobs require a tag that half the nodes provide.
"""

from __future__ import annotations

import gc
import graphlib
import time
from typing import Any

import numpy as np

# scale_options: bench/, beside this script
from scale_options import scale_options

from workers.planning import Instance, Node
from workers.planning.stages.list_kernel import kernel_loaded
from workers.planning.stages.listing import Lister, priority, warm_up
from workers.planning.stages.paths import longest_paths
from workers.planning.stages.problem import StageProblem
from workers.planning.stages.search import solve_stages


def generate(jobs: int, arcs: int, nodes: int, seed: int = 1) -> dict[str, Any]:
    """Plain Python values of a random layered stage graph (see the module docstring)."""
    rng = np.random.default_rng(seed)
    layers = 200
    layer = np.sort(rng.integers(0, layers, jobs))
    first = np.searchsorted(layer, np.arange(layers + 1))
    heads = np.flatnonzero(layer > 0)
    dst = np.sort(rng.choice(heads, arcs))
    back = rng.integers(1, 21, arcs)
    src_layer = np.maximum(layer[dst] - back, 0)
    lo, hi = first[src_layer], first[src_layer + 1]
    src = lo + (rng.random(arcs) * np.maximum(hi - lo, 1)).astype(np.int64)
    src = np.minimum(src, first[layer[dst]] - 1)
    ids = [f"j{i}" for i in range(jobs)]
    after: list[list[str]] = [[] for _ in range(jobs)]
    for s, d in zip(src.tolist(), dst.tolist(), strict=True):
        after[d].append(ids[s])
    durations = rng.uniform(30, 3600, jobs).round(3).tolist()
    node_list = [
        Node(
            f"n{k}",
            speed=1.5 if k % 2 else 1.0,
            provides=frozenset({"gpu"}) if k % 2 == 0 else frozenset(),
            free_at=float(rng.uniform(0, 600)) if k % 10 == 0 else 0.0,
        )
        for k in range(nodes)
    ]
    requires = [["gpu"] if i % 10 == 0 else [] for i in range(jobs)]
    uses = [["licence"] if i % 20 == 0 else [] for i in range(jobs)]
    slots = [2 if k % 5 == 0 else 1 for k in range(nodes)]
    return {
        "ids": ids,
        "durations": durations,
        "nodes": node_list,
        "requires": requires,
        "after": after,
        "uses": uses,
        "limits": {"licence": 40},
        "slots": slots,
    }


def main() -> None:
    ap = scale_options(__doc__, jobs=100_000, nodes=500)
    ap.add_argument("--arcs", type=int, default=200_000)
    ap.add_argument(
        "--warm-up",
        action="store_true",
        help="load the compiled list scheduler first (as a warmed worker has), timed apart",
    )
    ap.add_argument(
        "--compare-pure",
        action="store_true",
        help="after the runs, time one longest_first list schedule in plain Python and "
        "one compiled (loading the kernel first if need be) on the same graph",
    )
    args = ap.parse_args()
    v = generate(args.jobs, args.arcs, args.nodes)
    arcs = sum(map(len, v["after"]))
    print(f"stage graph: {args.jobs} jobs, {arcs} arcs, {args.nodes} nodes")
    if args.warm_up:
        t0 = time.perf_counter()
        warm_up()
        print(f"warm-up (load the compiled kernels) {time.perf_counter() - t0:.3f} s")
    for _ in range(args.repeat):
        gc.collect()
        t0 = time.perf_counter()
        inst = Instance.build(
            v["durations"],
            v["nodes"],
            job_ids=v["ids"],
            requires=v["requires"],
        )
        t1 = time.perf_counter()
        problem = StageProblem.build(
            inst,
            after=v["after"],
            uses=v["uses"],
            limits=v["limits"],
            slots=v["slots"],
        )
        t2 = time.perf_counter()
        result = solve_stages(problem, "longest_first")
        t3 = time.perf_counter()
        assert not result.plan.violations()
        kind = "compiled" if kernel_loaded() else "plain Python"
        graph = dict(zip(v["ids"], v["after"], strict=True))
        t4 = time.perf_counter()
        order = list(graphlib.TopologicalSorter(graph).static_order())
        t5 = time.perf_counter()
        assert len(order) == args.jobs
        print(
            f"longest_first end to end {t3 - t0:.3f} s "
            f"(instance {t1 - t0:.3f}, stage graph + cycle check {t2 - t1:.3f}, "
            f"plan + bounds {t3 - t2:.3f}, list scheduler {kind}); "
            f"makespan {result.plan.makespan:.1f} s, "
            f"bound {result.bounds.seconds:.1f} s ({result.bounds.best.name}); "
            f"graphlib static_order {t5 - t4:.3f} s"
        )
    if args.compare_pure:
        compare_pure(problem)


def compare_pure(problem: StageProblem) -> None:
    """One longest_first pass by the plain-Python twin and one by the compiled kernel."""
    warm_up()
    lister = Lister(problem)
    rank = priority(longest_paths(problem), "longest_first")
    t0 = time.perf_counter()
    slow = lister.schedule_pure(rank)
    t1 = time.perf_counter()
    fast = Lister(problem, compiled=True).schedule(rank)
    t2 = time.perf_counter()
    assert np.array_equal(slow.start, fast.start) and np.array_equal(slow.node, fast.node)
    n = problem.n
    print(
        f"one list schedule: plain Python {t1 - t0:.3f} s ({1e6 * (t1 - t0) / n:.2f} us a job), "
        f"compiled {t2 - t1:.3f} s ({1e6 * (t2 - t1) / n:.2f} us a job), same plan"
    )


if __name__ == "__main__":
    main()
