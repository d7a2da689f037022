"""Service latency and throughput against a real redis-server and real workers.

Starts (all on 127.0.0.1, all stopped at the end): a redis-server with deploy/redis.conf in
a temporary directory, the API as ``spanwright serve`` (werkzeug, threaded) with
``REDIS_URL``, and ``spanwright worker`` processes. Then measures:

1. latency: a 1,000-job longest_first plan with ``Prefer: wait`` from 8 concurrent
   clients, one worker: median and p99 end to end (targets 30 ms / 100 ms);
2. throughput: 100-job plans submitted without waiting by 8 clients, two workers:
   plans finished per second from the first submit to the last finish (target >= 100/s);
3. a 100,000-job plan end to end against the solver's own time (target within 3x).

Usage: python bench/service_latency.py [--worker-class simple|fork]
       [--requests 200] [--plans 600]
"""

from __future__ import annotations

import argparse
import http.client
import json
import os
import random
import shutil
import socket
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path
from typing import Any

ROOT = Path(__file__).resolve().parents[1]
sys.path.insert(0, str(ROOT))


def free_port() -> int:
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        return int(s.getsockname()[1])


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process so far (Linux /proc), immune to others' load."""
    fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def batch(n: int, m: int, seed: int) -> dict[str, Any]:
    rnd = random.Random(seed)
    jobs = [{"id": f"lh_sh{i:06d}", "duration": rnd.randint(60, 7200)} for i in range(n)]
    return {"jobs": jobs, "node_count": m, "method": "longest_first"}


class Stack:
    """redis-server + API + workers, as subprocesses; ``close()`` stops them all."""

    def __init__(self, worker_class: str) -> None:
        self.tmp = tempfile.mkdtemp(prefix="spanwright-bench-")
        self.redis_port, self.api_port = free_port(), free_port()
        self.url = f"redis://127.0.0.1:{self.redis_port}/0"
        self.worker_class = worker_class
        self.procs: list[subprocess.Popen[bytes]] = []
        self.workers: list[subprocess.Popen[bytes]] = []
        exe = shutil.which("redis-server") or "/usr/bin/redis-server"
        self._spawn(
            [
                exe,
                str(ROOT / "deploy/redis.conf"),
                "--port",
                str(self.redis_port),
                "--dir",
                self.tmp,
            ]
        )
        self.env = dict(os.environ, REDIS_URL=self.url, PYTHONPATH=str(ROOT))
        self._wait_port(self.redis_port)
        self._spawn(
            [sys.executable, "-m", "service.cli", "serve", "--port", str(self.api_port)],
            env=self.env,
        )
        self._wait_port(self.api_port)

    def _spawn(self, cmd: list[str], env: dict[str, str] | None = None) -> subprocess.Popen[bytes]:
        p = subprocess.Popen(
            cmd, env=env, cwd=ROOT, stdout=subprocess.DEVNULL, stderr=subprocess.DEVNULL
        )
        self.procs.append(p)
        return p

    def _wait_port(self, port: int, timeout: float = 30.0) -> None:
        end = time.monotonic() + timeout
        while time.monotonic() < end:
            try:
                socket.create_connection(("127.0.0.1", port), 0.2).close()
                return
            except OSError:
                time.sleep(0.05)
        raise RuntimeError(f"port {port} did not open")

    def cpu(self) -> dict[str, float]:
        """CPU seconds used so far by redis-server, the API and the workers (together)."""
        return {
            "redis": cpu_seconds(self.procs[0].pid),
            "api": cpu_seconds(self.procs[1].pid),
            "workers": sum(cpu_seconds(w.pid) for w in self.workers),
        }

    def set_workers(self, n: int) -> None:
        while len(self.workers) > n:
            w = self.workers.pop()
            w.terminate()
            w.wait(10)
        while len(self.workers) < n:
            cmd = [sys.executable, "-m", "service.cli", "worker", "--log-level", "WARNING"]
            self.workers.append(self._spawn([*cmd, "--worker-class", self.worker_class], self.env))
        end = time.monotonic() + 30
        while self.get("/readyz")[1].get("checks", {}).get("workers") != n:
            if time.monotonic() > end:
                raise RuntimeError("workers did not register")
            time.sleep(0.1)

    def conn(self) -> http.client.HTTPConnection:
        return http.client.HTTPConnection("127.0.0.1", self.api_port, timeout=300)

    def get(self, path: str) -> tuple[int, Any]:
        c = self.conn()
        c.request("GET", path)
        r = c.getresponse()
        return r.status, json.loads(r.read() or b"null")

    def close(self) -> None:
        for p in reversed(self.procs):
            if p.poll() is None:
                p.terminate()
        for p in self.procs:
            try:
                p.wait(10)
            except subprocess.TimeoutExpired:
                p.kill()
                p.wait()
        shutil.rmtree(self.tmp, ignore_errors=True)


def post(c: http.client.HTTPConnection, body: bytes, wait: float | None) -> tuple[int, bytes]:
    headers = {"Content-Type": "application/json"}
    if wait is not None:
        headers["Prefer"] = f"wait={wait:g}"
    c.request("POST", "/v1/plans", body=body, headers=headers)
    r = c.getresponse()
    return r.status, r.read()


def latency(stack: Stack, requests: int, clients: int = 8) -> dict[str, float]:
    body = json.dumps(batch(1000, 50, 1)).encode()
    times: list[float] = []
    lock = threading.Lock()
    per = requests // clients

    def client(k: int) -> None:
        c = stack.conn()
        for _ in range(3):  # warm-up, not counted
            post(c, body, 10)
        for _ in range(per):
            t0 = time.perf_counter()
            status, data = post(c, body, 10)
            dt = time.perf_counter() - t0
            assert status == 201, (status, data[:200])
            with lock:
                times.append(dt)

    threads = [threading.Thread(target=client, args=(k,)) for k in range(clients)]
    before = stack.cpu()
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    after = stack.cpu()
    times.sort()
    total = len(times) + 3 * clients
    return {
        **{f"cpu_ms_{k}": 1000 * (after[k] - before[k]) / total for k in after},
        "requests": len(times),
        "median_ms": 1000 * statistics.median(times),
        "p99_ms": 1000 * times[min(len(times) - 1, int(0.99 * len(times)))],
    }


def throughput(stack: Stack, plans: int, clients: int = 8) -> dict[str, float]:
    import redis

    body = json.dumps(batch(100, 10, 2)).encode()
    ids: list[str] = []
    lock = threading.Lock()
    per = plans // clients

    def client() -> None:
        c = stack.conn()
        for _ in range(per):
            status, data = post(c, body, None)
            assert status == 202, status
            with lock:
                ids.append(json.loads(data)["id"])

    r = redis.Redis.from_url(stack.url)
    before = stack.cpu()
    t0 = time.perf_counter()
    threads = [threading.Thread(target=client) for _ in range(clients)]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    t_submitted = time.perf_counter()
    pending = set(ids)
    while pending:
        pipe = r.pipeline(transaction=False)
        order = list(pending)
        for rid in order:
            pipe.hget(f"spanwright:plan:{rid}", "status")
        for rid, st in zip(order, pipe.execute(), strict=True):
            if st in (b"done", b"failed", b"cancelled"):
                assert st == b"done", st
                pending.discard(rid)
        time.sleep(0.01)
    t_end = time.perf_counter()
    after = stack.cpu()
    return {
        **{f"cpu_ms_{k}": 1000 * (after[k] - before[k]) / len(ids) for k in after},
        "plans": len(ids),
        "submit_s": t_submitted - t0,
        "total_s": t_end - t0,
        "plans_per_s": len(ids) / (t_end - t0),
    }


def big(stack: Stack) -> dict[str, float]:
    from workers.planning import Instance, solve

    body_doc = batch(100_000, 200, 3)
    body = json.dumps(body_doc).encode()
    # the solver's own time, in-process: parse the instance, solve, make the result object
    t0 = time.perf_counter()
    inst = Instance.from_request(json.loads(body))
    res = solve(inst, "longest_first")
    res.to_dict()
    core_s = time.perf_counter() - t0
    c = stack.conn()
    post(c, json.dumps(batch(1000, 10, 4)).encode(), 10)  # warm the connection
    t0 = time.perf_counter()
    status, data = post(c, body, 120)
    doc = json.loads(data)
    e2e = time.perf_counter() - t0
    assert status == 201, (status, data[:300])
    assert doc["result"]["makespan"] == res.makespan
    return {
        "end_to_end_s": e2e,
        "solve_seconds": doc["result"]["solve_seconds"],
        "core_pipeline_s": core_s,
        "ratio_vs_solve_seconds": e2e / doc["result"]["solve_seconds"],
        "ratio_vs_core_pipeline": e2e / core_s,
        "request_mb": len(body) / 1e6,
        "response_mb": len(data) / 1e6,
    }


def core_costs() -> None:
    """Where a plan's time goes inside the core (in this process, no Redis, no HTTP)."""
    from workers.planning import Instance, bounds, solve

    for n, m in ((100, 10), (1000, 50)):
        body = batch(n, m, 5)
        raw = json.dumps(body)
        solve(Instance.from_request(body), "longest_first")  # compiled kernels loaded
        reps = 20
        t0 = time.perf_counter()
        for _ in range(reps):
            inst = Instance.from_request(json.loads(raw))
        t1 = time.perf_counter()
        for _ in range(reps):
            res = solve(inst, "longest_first")
        t2 = time.perf_counter()
        for _ in range(reps):
            bounds.lower_bounds(inst, upper=res.makespan)
        t3 = time.perf_counter()
        for _ in range(reps):
            json.dumps(res.to_dict())
        t4 = time.perf_counter()
        ms = 1000 / reps
        print(
            f"   core, {n}-job plan: parse JSON + Instance.from_request {(t1 - t0) * ms:.1f} ms; "
            f"solve {(t2 - t1) * ms:.1f} ms (of which bounds.lower_bounds "
            f"{(t3 - t2) * ms:.1f} ms); result to JSON {(t4 - t3) * ms:.1f} ms"
        )


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--worker-class", choices=("simple", "fork"), default="simple")
    ap.add_argument("--requests", type=int, default=200)
    ap.add_argument("--plans", type=int, default=600)
    ap.add_argument("--skip-big", action="store_true")
    args = ap.parse_args()
    print(f"load average before start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs")
    core_costs()
    stack = Stack(args.worker_class)
    try:
        print(
            f"server: werkzeug threaded dev server (spanwright serve); workers: {args.worker_class}"
        )
        stack.set_workers(1)
        lat = latency(stack, args.requests)
        print(
            f"1. 1,000-job longest_first, Prefer: wait, 8 clients, 1 worker: "
            f"median {lat['median_ms']:.1f} ms (target <= 30), p99 {lat['p99_ms']:.1f} ms "
            f"(target <= 100), {lat['requests']:.0f} requests"
        )
        print(
            f"   CPU per plan: API {lat['cpu_ms_api']:.1f} ms, "
            f"worker {lat['cpu_ms_workers']:.1f} ms, "
            f"redis {lat['cpu_ms_redis']:.1f} ms (8 clients queue on one worker: median is about "
            f"8 x the worker's time per plan)"
        )
        stack.set_workers(2)
        thr = throughput(stack, args.plans)
        print(
            f"2. 100-job plans, 8 clients submitting, 2 workers: {thr['plans_per_s']:.0f} plans/s "
            f"(target >= 100); {thr['plans']:.0f} plans in {thr['total_s']:.2f} s "
            f"(all submitted after {thr['submit_s']:.2f} s)"
        )
        print(
            f"   CPU per plan: API {thr['cpu_ms_api']:.1f} ms, "
            f"workers {thr['cpu_ms_workers']:.1f} ms, "
            f"redis {thr['cpu_ms_redis']:.1f} ms"
        )
        if not args.skip_big:
            stack.set_workers(1)
            b = big(stack)
            print(
                f"3. 100,000-job plan, 1 worker: end to end {b['end_to_end_s']:.2f} s; "
                f"solve_seconds {b['solve_seconds']:.3f} s "
                f"(ratio {b['ratio_vs_solve_seconds']:.1f}x); "
                f"in-process core (parse instance + solve + result) {b['core_pipeline_s']:.2f} s "
                f"(ratio {b['ratio_vs_core_pipeline']:.2f}x; target within 3x); "
                f"request {b['request_mb']:.1f} MB, response {b['response_mb']:.1f} MB"
            )
    finally:
        stack.close()
    print(f"load average at the end: {os.getloadavg()[0]:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
