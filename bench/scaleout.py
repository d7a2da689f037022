"""Scale-out bench: worker throughput with 1 and 2 worker processes, and Redis cost per plan.

Runs the shipped topology (``tests/deploy/spanwright_topology.py``: redis-server with
``deploy/redis.conf``, gunicorn with ``deploy/gunicorn.conf.py``, workers with the unit
file's command line plus ``--burst``) on loopback, bounded in count and time:

1. fill: ``--plans`` plans are POSTed (``Prefer: respond-async``) by 4 client threads
   while no worker runs (the API's submit rate);
2. drain: N workers start and run until the queue is empty. Throughput is taken between
   the 10th and 90th percentile of the records' ``finished_at`` (this leaves out worker
   start-up, which includes loading compiled kernels, and the tail);
3. read: every plan is read once (``GET /v1/plans/{id}``), as a client would.

Redis cost is counted two ways: server-side commands per phase (``INFO commandstats``
before/after; commands run inside our Lua scripts are counted too) and client round trips
(each ``send_packed_command`` of redis-py is one round trip: a pipeline counts once). The
workers count theirs through a ``sitecustomize`` put on their ``PYTHONPATH`` by this bench
only; the API's are counted in this process on a sample of requests through the Flask
test client against the same redis-server. ``redis-benchmark`` (bounded ``-n``) and
Redis's own CPU time per command give the capacity used for the projection.

    python bench/scaleout.py                   # both sizes, 1 and 2 workers
    python bench/scaleout.py --plans 200 --sizes small

Prints a Markdown report. Figures on a shared 2-core machine are noisy.
"""

from __future__ import annotations

import argparse
import json
import os
import random
import subprocess
import sys
import tempfile
import textwrap
import threading
import time
from concurrent.futures import ThreadPoolExecutor
from datetime import datetime
from pathlib import Path
from typing import Any

REPO = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(REPO))
sys.path.insert(0, str(REPO / "tests"))  # live.py, which spanwright_topology uses
sys.path.insert(0, str(REPO / "tests" / "deploy"))

import redis  # noqa: E402
from spanwright_topology import Topology, http, worker_argv  # noqa: E402

SIZES = {"small": (40, 4), "medium": (2000, 50)}  # (jobs, nodes)
PHASE_LIMIT = 180.0  # seconds, per phase

SITECUSTOMIZE = textwrap.dedent(
    '''
    """Bench-only: count redis-py round trips of this process, write them at exit."""
    import atexit, json, os
    import redis.connection as _c

    _n = [0]
    _orig = _c.AbstractConnection.send_packed_command

    def _counted(self, command, check_health=True):
        _n[0] += 1
        return _orig(self, command, check_health)

    _c.AbstractConnection.send_packed_command = _counted

    @atexit.register
    def _dump():
        out = os.environ.get("SW_ROUNDTRIP_DIR")
        if out:
            with open(os.path.join(out, f"{os.getpid()}.json"), "w") as f:
                json.dump({"round_trips": _n[0]}, f)
    '''
)


def make_body(rng: random.Random, n: int, m: int, i: int) -> dict[str, Any]:
    """A batch of an invented studio's renders: ``n`` shots on ``m`` nodes."""
    return {
        "jobs": [{"id": f"harbor_sh{k:04d}", "duration": rng.randint(60, 5400)} for k in range(n)],
        "node_count": m,
        "method": "longest_first",
        "name": f"harbor-{i:04d}",
    }


def commandstats(conn: redis.Redis) -> dict[str, int]:
    info = conn.info("commandstats")
    return {k.removeprefix("cmdstat_"): int(v["calls"]) for k, v in info.items()}


def delta(after: dict[str, int], before: dict[str, int]) -> dict[str, int]:
    keys = set(after) | set(before)
    d = {k: after.get(k, 0) - before.get(k, 0) for k in keys}
    return {k: v for k, v in d.items() if v > 0 and k != "info"}


def redis_cpu(conn: redis.Redis) -> float:
    cpu = conn.info("cpu")
    return float(cpu["used_cpu_user"]) + float(cpu["used_cpu_sys"])


def group_cpu(pgid: int) -> float:
    """CPU seconds (user + system) of every live process in process group ``pgid``."""
    tick = os.sysconf("SC_CLK_TCK")
    total = 0.0
    for stat in Path("/proc").glob("[0-9]*/stat"):
        try:
            fields = stat.read_text().rsplit(")", 1)[1].split()
        except OSError:
            continue
        if int(fields[2]) == pgid:  # fields after the name: state ppid pgrp ...
            total += (int(fields[11]) + int(fields[12])) / tick
    return total


def reap(pids: list[int], limit: float) -> float:
    """Wait for the children ``pids`` (bounded); their total CPU seconds from wait4."""
    cpu = 0.0
    deadline = time.monotonic() + limit
    left = set(pids)
    while left:
        for pid in list(left):
            got, _, ru = os.wait4(pid, os.WNOHANG)
            if got == pid:
                cpu += ru.ru_utime + ru.ru_stime
                left.discard(pid)
        if time.monotonic() > deadline:
            raise TimeoutError(f"workers {sorted(left)} still running after {limit} s")
        time.sleep(0.02)
    return cpu


def ts(s: str) -> float:
    return datetime.fromisoformat(s.replace("Z", "+00:00")).timestamp()


def run_once(size: str, workers: int, plans: int, tmp: Path) -> dict[str, Any]:
    n, m = SIZES[size]
    rng = random.Random(11)
    bodies = [make_body(rng, n, m, i) for i in range(plans)]
    rt_dir = tmp / "roundtrips"
    rt_dir.mkdir()
    site = tmp / "site"
    site.mkdir()
    (site / "sitecustomize.py").write_text(SITECUSTOMIZE)
    # every plan through the queue, even a small longest-first one while a worker is
    # registered (the API would solve it itself): this bench measures the workers
    topo = Topology(tmp, workers=workers, extra_env={"SPANWRIGHT_SOLVE_HERE_MAX_JOBS": "0"})
    out: dict[str, Any] = {"size": size, "jobs": n, "nodes": m, "workers": workers, "plans": plans}
    try:
        topo.start_redis()
        topo.start_api()
        conn = redis.Redis(port=topo.redis_port)
        # fill
        conn.config_resetstat()
        cpu_fill0 = redis_cpu(conn)
        ids: list[str] = []
        lock = threading.Lock()

        def post(body: dict[str, Any]) -> None:
            status, _, raw = http(
                "POST", topo.base + "/v1/plans", body, {"Prefer": "respond-async"}
            )
            if status != 202:
                raise RuntimeError(f"POST {status}: {raw[:200]!r}")
            with lock:
                ids.append(json.loads(raw)["id"])

        api_cpu0 = group_cpu(topo.procs["api"].pid)
        t0 = time.perf_counter()
        with ThreadPoolExecutor(4) as pool:
            list(pool.map(post, bodies))
        out["fill_seconds"] = time.perf_counter() - t0
        out["api_cpu_fill"] = group_cpu(topo.procs["api"].pid) - api_cpu0
        out["fill_cmds"] = delta(commandstats(conn), {})
        out["redis_cpu_fill"] = redis_cpu(conn) - cpu_fill0
        # drain
        before = commandstats(conn)
        cpu0 = redis_cpu(conn)
        argv = [*worker_argv(), "--burst"]
        env = topo._env()
        env["PYTHONPATH"] = f"{site}{os.pathsep}{REPO}"
        env["SW_ROUNDTRIP_DIR"] = str(rt_dir)
        # start-up CPU of one worker (imports, kernel loading) on an empty queue of its own
        idle_env = dict(env, SPANWRIGHT_QUEUE_NAME="scaleout-empty", SW_ROUNDTRIP_DIR=str(tmp))
        topo._spawn("worker-idle", argv, idle_env)
        out["worker_startup_cpu"] = reap([topo.procs["worker-idle"].pid], PHASE_LIMIT)
        t0 = time.perf_counter()
        for i in range(workers):
            topo._spawn(f"worker{i}", argv, env)
        cpu = reap([topo.procs[f"worker{i}"].pid for i in range(workers)], PHASE_LIMIT)
        out["drain_wall_seconds"] = time.perf_counter() - t0
        out["worker_cpu_per_plan"] = (cpu - workers * out["worker_startup_cpu"]) / plans
        out["drain_cmds"] = delta(commandstats(conn), before)
        out["redis_cpu_drain"] = redis_cpu(conn) - cpu0
        rts = [json.loads(p.read_text())["round_trips"] for p in rt_dir.glob("*.json")]
        if len(rts) != workers:
            raise RuntimeError(f"{len(rts)} round-trip files for {workers} workers")
        out["worker_round_trips"] = sum(rts)
        pipe = conn.pipeline(transaction=False)
        for rid in ids:
            pipe.hmget(f"spanwright:plan:{rid}", ["status", "started_at", "finished_at"])
        rows = [[v.decode() if v else None for v in row] for row in pipe.execute()]
        bad = [r for r in rows if r[0] != "done"]
        if bad:
            raise RuntimeError(f"{len(bad)} plans not done, e.g. {bad[0]}")
        fin = sorted(ts(r[2]) for r in rows)
        lo, hi = fin[int(0.1 * (plans - 1))], fin[int(0.9 * (plans - 1))]
        out["throughput"] = (int(0.9 * (plans - 1)) - int(0.1 * (plans - 1))) / max(hi - lo, 1e-3)
        out["drain_span_seconds"] = fin[-1] - min(ts(r[1]) for r in rows)
        # read
        before = commandstats(conn)
        cpu_read0 = redis_cpu(conn)
        t0 = time.perf_counter()
        with ThreadPoolExecutor(4) as pool:
            list(pool.map(lambda rid: http("GET", f"{topo.base}/v1/plans/{rid}"), ids))
        out["read_seconds"] = time.perf_counter() - t0
        out["redis_cpu_fill_read"] = redis_cpu(conn) - cpu_read0 + out["redis_cpu_fill"]
        out["read_cmds"] = delta(commandstats(conn), before)
        out["api_round_trips"] = api_round_trips(topo.redis_port, bodies[:50])
    finally:
        topo.stop()
    return out


def api_round_trips(port: int, bodies: list[dict[str, Any]]) -> dict[str, float]:
    """Round trips per POST (async) and per GET, in-process through the Flask test client."""
    import redis.connection as rc

    from service.app import create_app
    from service.settings import Settings

    settings = Settings(redis_url=f"redis://127.0.0.1:{port}/0", key_prefix="rtcount")
    app = create_app(settings)
    client = app.test_client()
    client.get("/healthz")
    n = [0]
    orig = rc.AbstractConnection.send_packed_command

    def counted(self: Any, command: Any, check_health: bool = True) -> Any:
        n[0] += 1
        return orig(self, command, check_health)

    rc.AbstractConnection.send_packed_command = counted  # type: ignore[method-assign]
    try:
        ids = []
        for b in bodies:
            resp = client.post("/v1/plans", json=b, headers={"Prefer": "respond-async"})
            ids.append(resp.get_json()["id"])
        posts = n[0]
        n[0] = 0
        for rid in ids:
            client.get(f"/v1/plans/{rid}")
        gets = n[0]
    finally:
        rc.AbstractConnection.send_packed_command = orig  # type: ignore[method-assign]
    return {"post": posts / len(bodies), "get": gets / len(bodies)}


def redis_benchmark(tmp: Path) -> dict[str, float]:
    """requests/s of a few simple commands on this machine (bounded: 20,000 each)."""
    topo = Topology(tmp)
    try:
        topo.start_redis()
        proc = subprocess.run(
            [
                "redis-benchmark",
                "-p",
                str(topo.redis_port),
                "-q",
                "-n",
                "20000",
                "-c",
                "8",
                "-t",
                "set,get,incr,lpush,hset,lpop",
                "--csv",
            ],
            capture_output=True,
            text=True,
            timeout=120,
            check=True,
        )
    finally:
        topo.stop()
    rates: dict[str, float] = {}
    for line in proc.stdout.splitlines()[1:]:
        parts = [p.strip('"') for p in line.split(",")]
        if len(parts) >= 2:
            rates[parts[0]] = float(parts[1])
    return rates


def report(results: list[dict[str, Any]], bench: dict[str, float]) -> str:
    head = (
        "| size | workers | plans | throughput plans/s (p10-p90) | drain wall s | "
        "worker CPU ms/plan | Redis CPU ms/plan (drain) | API CPU ms/POST | "
        "Redis cmds/plan fill + drain + read | worker round trips/plan |"
    )
    lines = [head, "|---|---|---|---|---|---|---|---|---|---|"]
    for r in results:
        p = r["plans"]
        fill, drain, read = (
            sum(r[k].values()) / p for k in ("fill_cmds", "drain_cmds", "read_cmds")
        )
        lines.append(
            f"| {r['size']} ({r['jobs']} jobs, {r['nodes']} nodes) | {r['workers']} | {p} | "
            f"{r['throughput']:.1f} | {r['drain_wall_seconds']:.1f} | "
            f"{1e3 * r['worker_cpu_per_plan']:.1f} | {1e3 * r['redis_cpu_drain'] / p:.2f} | "
            f"{1e3 * r['api_cpu_fill'] / p:.1f} | {fill:.1f} + {drain:.1f} + {read:.1f} | "
            f"{r['worker_round_trips'] / p:.1f} |"
        )
    lines.append("")
    lines.append(
        "API round trips (in-process sample of 50): "
        + "; ".join(
            f"{r['size']}: POST {r['api_round_trips']['post']:.1f}, "
            f"GET {r['api_round_trips']['get']:.1f}"
            for r in results
            if r["workers"] == 1
        )
    )
    lines.append("")
    lines.append(
        "Commands per plan in the drain phase (server side, incl. inside Lua), "
        "first run of each size:"
    )
    seen = set()
    for r in results:
        if r["size"] in seen:
            continue
        seen.add(r["size"])
        top = sorted(r["drain_cmds"].items(), key=lambda kv: -kv[1])[:12]
        lines.append(f"- {r['size']}: " + ", ".join(f"{k} {v / r['plans']:.2f}" for k, v in top))
    lines.append("")
    lines.append(
        "redis-benchmark (-n 20000 -c 8, requests/s): "
        + ", ".join(f"{k} {v:.0f}" for k, v in bench.items())
    )
    lines.append("")
    lines.append("Projection (CPU-bound model: one core per worker process, one Redis core):")
    for r in results:
        if r["workers"] != 1:
            continue
        p = r["plans"]
        per_core = 1 / max(r["worker_cpu_per_plan"], 1e-6)
        redis_cap = p / max(r["redis_cpu_drain"] + r["redis_cpu_fill_read"], 1e-6)
        api_core = p / max(r["api_cpu_fill"], 1e-6)
        lines.append(
            f"- {r['size']}: a worker core does ~{per_core:.0f} plans/s, so N machines x c "
            f"cores ~ {per_core:.0f}*N*c plans/s until Redis saturates at ~{redis_cap:.0f} "
            f"plans/s (~{redis_cap / per_core:.0f} worker cores); one API core takes "
            f"~{api_core:.0f} POST/s"
        )
    return "\n".join(lines)


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.split("\n")[0])
    ap.add_argument("--plans", type=int, default=400, help="plans per run (max 2000)")
    ap.add_argument("--sizes", default="small,medium")
    ap.add_argument("--workers", default="1,2")
    ap.add_argument("--json", action="store_true", help="also print the raw figures as JSON")
    args = ap.parse_args()
    plans = min(max(args.plans, 20), 2000)
    results = []
    with tempfile.TemporaryDirectory(prefix="sw-scaleout-") as d:
        for size in args.sizes.split(","):
            count = plans if size == "small" else max(20, plans // 4)
            for w in (int(x) for x in args.workers.split(",")):
                tmp = Path(d) / f"{size}-{w}"
                tmp.mkdir()
                results.append(run_once(size, w, count, tmp))
                print(f"# {size} x{w}: {results[-1]['throughput']:.1f} plans/s", file=sys.stderr)
        bench_dir = Path(d) / "bench"
        bench_dir.mkdir()
        bench = redis_benchmark(bench_dir)
    print(report(results, bench))
    if args.json:
        print(json.dumps(results, indent=1, default=str))
    return 0


if __name__ == "__main__":
    sys.exit(main())
