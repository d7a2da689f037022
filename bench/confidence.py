"""Deadline confidence by simulation: time and sanity of 10,000 samples of a 10,000-job plan.

The batch is our own invention: the 10,000 shots of the series "Lantern Harbour", estimates
lognormal around 25 minutes (log-sd 0.7); one shot in four has a p90 from its test frames
(1.2 to 1.8 times the estimate), the others take the batch spread (CV 0.25). The plan is
LPT on 200 identical nodes; the deadline is 15 % above the planned makespan.

Prints, per policy (static, dynamic) and thread count: wall and CPU seconds (best and
median of ``--repeat`` runs), P(meet) with its interval, p50/p90/p99 and the nodes most
often last. Then two checks: (1) the cost of the same number of normals from numpy's
``Generator.standard_normal`` (what the compiled ziggurat replaces), and (2) the same
statistics from a plain-numpy reference simulation (numpy normals, ``exp``, ``bincount``),
which must agree within Monte-Carlo error. Then a sizing to 90 % confidence. The machine's
load average is printed, because the timings depend on it.

    python bench/confidence.py [--samples 10000] [--repeat 3]
"""

from __future__ import annotations

import math
import os
import statistics
import sys
import time
from pathlib import Path

import numpy as np

# scale_options: bench/, beside this script
from scale_options import scale_options

sys.path.insert(0, str(Path(__file__).resolve().parents[1]))

from workers.planning import Instance
from workers.planning import confidence as cf
from workers.planning.solve import solve_greedy


def lantern_harbour(n: int, m: int, seed: int) -> Instance:
    """The invented batch of the module doc."""
    rng = np.random.default_rng(seed)
    d = rng.lognormal(math.log(1500), 0.7, n).round(1)
    ids = [f"lh_ep{1 + j // 500:02d}_sh{j % 500:03d}" for j in range(n)]
    p90: list[float | None] = [
        float(d[j] * rng.uniform(1.2, 1.8)) if j % 4 == 0 else None for j in range(n)
    ]
    inst = Instance.build(d, m, job_ids=ids)
    return Instance(
        job_ids=inst.job_ids, durations=inst.durations, nodes=inst.nodes, duration_p90=tuple(p90)
    )


def timed(fn, repeat: int):  # type: ignore[no-untyped-def]
    walls, cpus, out = [], [], None
    for _ in range(repeat):
        w, c = time.perf_counter(), time.process_time()
        out = fn()
        walls.append(time.perf_counter() - w)
        cpus.append(time.process_time() - c)
    return out, walls, cpus


def numpy_reference(sched, model, samples: int, seed: int, deadline: float):  # type: ignore[no-untyped-def]
    """Static policy with numpy's own normals, chunked: the plain reference."""
    inst = sched.instance
    g = np.random.Generator(np.random.PCG64(seed))
    ms = np.empty(samples)
    base = sched.loads
    w = inst.durations
    rows = max(1, (1 << 20) // inst.n)
    for lo in range(0, samples, rows):
        hi = min(samples, lo + rows)
        z = g.standard_normal((hi - lo, inst.n))
        slip = w * np.expm1(model.sigma * z - model.shift)
        acc = np.zeros((hi - lo, inst.m))
        for r in range(hi - lo):
            acc[r] = np.bincount(sched.node_of, weights=slip[r], minlength=inst.m)
        ms[lo:hi] = (base + acc).max(axis=1)
    return ms


def main() -> None:
    ap = scale_options(__doc__, jobs=10_000, nodes=200)
    ap.add_argument("--samples", type=int, default=10_000)
    ap.add_argument("--seed", type=int, default=2026)
    args = ap.parse_args()

    print(f"load average before: {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPU(s)")
    inst = lantern_harbour(args.jobs, args.nodes, args.seed)
    plan = solve_greedy(inst, "longest_first")
    sched = plan.schedule
    deadline = 1.15 * sched.makespan
    print(
        f"batch: {inst.n} jobs, {inst.m} nodes, planned makespan {sched.makespan:.1f} s, "
        f"deadline {deadline:.1f} s, {args.samples} samples "
        f"({args.samples * inst.n / 1e6:.0f} M draws)"
    )
    cf.simulate(sched, samples=8, deadline=deadline, policy="static")  # compile / load cache
    cf.simulate(sched, samples=8, deadline=deadline, policy="dynamic")
    print()
    print("| policy | threads | wall best (s) | wall median (s) | CPU median (s) | P(meet) "
          "[95% interval] | p50 | p90 | p99 | last to finish |")  # fmt: skip
    print("|---|---|---|---|---|---|---|---|---|---|")
    results = {}
    for policy in ("static", "dynamic"):
        for threads in (1, os.cpu_count() or 1):
            res, walls, cpus = timed(
                lambda p=policy, t=threads: cf.simulate(
                    sched, spread=0.25, samples=args.samples, seed=1, deadline=deadline,
                    policy=p, threads=t,
                ),
                args.repeat,
            )  # fmt: skip
            results[policy] = res
            lo, hi = res.interval
            crit = ", ".join(f"{c['node']} {100 * c['share']:.1f}%" for c in res.critical_nodes(3))
            print(
                f"| {policy} | {threads} | {min(walls):.3f} | {statistics.median(walls):.3f} | "
                f"{statistics.median(cpus):.3f} | {res.deadline_probability:.4f} "
                f"[{lo:.4f}, {hi:.4f}] | {res.quantile(0.5):.0f} | {res.quantile(0.9):.0f} | "
                f"{res.quantile(0.99):.0f} | {crit} |"
            )
    print()
    # (1) what numpy's own normals would cost for the same draws
    g = np.random.Generator(np.random.PCG64(0))
    buf = np.empty((max(1, (1 << 20) // inst.n), inst.n))
    chunks = math.ceil(args.samples / buf.shape[0])
    w0 = time.perf_counter()
    for _ in range(chunks):
        g.standard_normal(out=buf)
    print(
        f"numpy Generator.standard_normal alone for the same {chunks * buf.size / 1e6:.0f} M "
        f"normals: {time.perf_counter() - w0:.3f} s"
    )
    # (2) the plain-numpy reference on fewer samples: same quantities within MC error
    ref_n = 4000
    model = cf.SpreadModel.from_instance(inst, 0.25)
    w0 = time.perf_counter()
    ref = numpy_reference(sched, model, ref_n, 99, deadline)
    ref_s = time.perf_counter() - w0
    ours = results["static"]
    p_ref = float(np.mean(ref <= deadline))
    p_ours = float(ours.deadline_probability or 0.0)
    se = math.sqrt(p_ref * (1 - p_ref) / ref_n + p_ours * (1 - p_ours) / ours.samples)
    gap = abs(p_ref - p_ours) / se if se > 0 else 0.0
    print(
        f"numpy reference ({ref_n} samples, {ref_s:.2f} s): P(meet) {p_ref:.4f} vs ours "
        f"{p_ours:.4f} ({gap:.2f} standard errors apart); p50 {np.quantile(ref, 0.5):.0f} vs "
        f"{ours.quantile(0.5):.0f}, p90 {np.quantile(ref, 0.9):.0f} vs {ours.quantile(0.9):.0f}"
    )
    # (3) accuracy of the float32 exp on the kernel's own normals
    x, k, f = cf.ziggurat_tables()
    state = np.array(np.random.SFC64(5).state["state"]["state"], dtype=np.uint64)
    z = np.empty(1_000_000)
    cf.fill_normals(state, z, x, k, f)
    sig = np.resize(model.sigma, z.size)
    a = sig * z - np.resize(model.shift, z.size)
    rel = np.abs(np.exp(a.astype(np.float32)).astype(np.float64) / np.exp(a) - 1)
    print(
        f"float32 exp of the lognormal factor, 1 M draws: max relative error {rel.max():.2e}, "
        f"mean {rel.mean():.2e} (max |sigma z| {np.abs(sig * z).max():.2f})"
    )
    # sizing to a confidence
    w0 = time.perf_counter()
    ans = cf.nodes_for_confidence(
        inst.durations, deadline, 0.9, duration_p90=inst.duration_p90, spread=0.25,
        samples=1000, seed=1,
    )  # fmt: skip
    print(
        f"sizing to P >= 0.9 (Wilson lower limit, 1000 samples): {ans.nodes} nodes "
        f"(deterministic lower bound {ans.nodes_lower_bound}; chosen P "
        f"{ans.chosen['deadline_probability']:.3f}, lower limit {ans.chosen['interval'][0]:.3f}; "
        f"{ans.nodes - 1} nodes: lower limit {ans.previous['interval'][0]:.3f}); "  # type: ignore[index]
        f"{len(ans.curve)} counts simulated in {time.perf_counter() - w0:.2f} s"
    )
    print(f"load average after: {os.getloadavg()[0]:.2f}")


if __name__ == "__main__":
    main()
