"""Service latency and throughput against a real redis-server and real workers.

Starts (all on 127.0.0.1, all stopped at the end): a redis-server with deploy/redis.conf in
a temporary directory, the API and ``spanwright worker`` processes. The API is, by default,
the production server: gunicorn with ``deploy/gunicorn.conf.py`` (its defaults: 2
processes of 8 threads; ``--web-workers``/``--web-threads`` change them), or with
``--server werkzeug`` the threaded dev server of ``spanwright serve`` with ``REDIS_URL``.
Then measures:

0. CPU per 100-job longest_first plan (``Prefer: wait``, one worker) with one client sending
   them one after another and with 8 concurrent clients (issue 20: <= 4 ms and <= 6 ms of
   CPU per plan across the API, the worker and Redis);
1. latency: a 1,000-job longest_first plan with ``Prefer: wait`` from 8 concurrent
   clients, one worker: median and p99 end to end (targets 30 ms / 100 ms). Each client
   sends its next request when the last one is answered (a closed loop, no pause), so
   this is latency at saturation; the same run with 1, 2 and 4 clients shows how it grows
   with concurrency, and the floor that the measured CPU per plan sets is printed, and the
   CPU per plan against the in-process pipeline of the same run (issue 20: <= 2x): the
   median of three such closed-loop runs, each on new connections (how the clients split
   between the API's processes moves the figure; each run's split is printed). Then
   (no target) an open loop: the same plans arriving at a set rate (``--rates``, Poisson),
   latency counted from each request's scheduled arrival;
2. throughput: 100-job plans submitted without waiting by 8 clients, two workers:
   plans finished per second from the first submit to the last finish (target >= 100/s);
3. a 100,000-job plan end to end against the solver's own time (target within 3x). The
   solver's own time is taken as the in-process pipeline a caller without the service
   runs (``spanwright solve --json``: parse the JSON body, ``Instance.from_request``,
   ``solve``, result to JSON text), measured here in this process; the core's own
   ``solve_seconds`` (``solve()`` alone) is printed too, with its ratio.

Workers: ``spanwright worker`` (its default class, ``service.worker.LeanWorker``: RQ's
``SimpleWorker`` with batched writes), or ``--worker-class fork`` for RQ's forking worker.

CPU per plan is read from /proc (user + system time of redis-server, of the API processes
with their children, and of the workers), which other load on the machine disturbs far
less than wall-clock figures.

Usage: python bench/service_latency.py [--server gunicorn|werkzeug]
       [--worker-class simple|fork] [--requests 200] [--plans 600] [--small-requests 400]
       [--skip-big] [--solve-here-max-jobs N]
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
sys.path.insert(0, str(ROOT / "tests"))

from live import free_port  # noqa: E402

from service.reading import read_instance  # noqa: E402


def cpu_seconds(pid: int) -> float:
    """User + system CPU time of a process so far (Linux /proc), immune to others' load."""
    try:
        fields = Path(f"/proc/{pid}/stat").read_text().rsplit(")", 1)[1].split()
    except OSError:
        return 0.0
    return (int(fields[11]) + int(fields[12])) / os.sysconf("SC_CLK_TCK")


def tree_cpu_seconds(pid: int) -> float:
    """CPU seconds of a process and its living descendants (gunicorn's master and workers)."""
    total, todo = 0.0, [pid]
    while todo:
        p = todo.pop()
        total += cpu_seconds(p)
        for task in Path(f"/proc/{p}/task").glob("*"):
            try:
                todo += [int(c) for c in (task / "children").read_text().split()]
            except OSError:
                continue
    return total


def batch(n: int, m: int, seed: int) -> dict[str, Any]:
    rnd = random.Random(seed)
    jobs = [{"id": f"lh_sh{i:06d}", "duration": rnd.randint(60, 7200)} for i in range(n)]
    return {"jobs": jobs, "node_count": m, "method": "longest_first"}


class Stack:
    """redis-server + API + workers, as subprocesses; ``close()`` stops them all."""

    def __init__(
        self,
        worker_class: str,
        server: str,
        web_workers: int,
        web_threads: int,
        solve_here_max_jobs: int | None = None,
    ) -> None:
        self.tmp = tempfile.mkdtemp(prefix="spanwright-bench-")
        self.redis_port, self.api_port = free_port(), free_port()
        self.url = f"redis://127.0.0.1:{self.redis_port}/0"
        self.worker_class = worker_class
        self.server = server
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
        base = {k: v for k, v in os.environ.items() if not k.startswith("SPANWRIGHT_")}
        base.pop("PROMETHEUS_MULTIPROC_DIR", None)
        # no request-rate limit: the benchmark measures the service, not its 429s
        self.env = dict(
            base, REDIS_URL=self.url, PYTHONPATH=str(ROOT), SPANWRIGHT_RATE_LIMIT="10000000"
        )
        if solve_here_max_jobs is not None:
            self.env["SPANWRIGHT_SOLVE_HERE_MAX_JOBS"] = str(solve_here_max_jobs)
        self._wait_port(self.redis_port)
        if server == "gunicorn":
            metrics_dir = Path(self.tmp) / "metrics"
            metrics_dir.mkdir()
            api_env = dict(
                self.env,
                SPANWRIGHT_BIND=f"127.0.0.1:{self.api_port}",
                SPANWRIGHT_WEB_WORKERS=str(web_workers),
                SPANWRIGHT_WEB_THREADS=str(web_threads),
                SPANWRIGHT_LOG_LEVEL="warning",
                PROMETHEUS_MULTIPROC_DIR=str(metrics_dir),
            )
            gunicorn = Path(sys.executable).parent / "gunicorn"
            self._spawn([str(gunicorn), "-c", str(ROOT / "deploy/gunicorn.conf.py")], env=api_env)
        else:
            self._spawn(
                [sys.executable, "-m", "service.cli", "serve", "--port", str(self.api_port)],
                env=self.env,
            )
        self._wait_port(self.api_port, timeout=60)

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
        """CPU seconds used so far by redis-server, the API and the workers (together),
        and by each of the API's worker processes apart (``api_proc0``, ...: gunicorn's
        children by pid; a keep-alive client stays with the process that took it)."""
        api = self.procs[1].pid
        kids: list[int] = []
        for task in Path(f"/proc/{api}/task").glob("*"):
            try:
                kids += [int(c) for c in (task / "children").read_text().split()]
            except OSError:
                continue
        return {
            "redis": cpu_seconds(self.procs[0].pid),
            "api": tree_cpu_seconds(api),
            "workers": sum(cpu_seconds(w.pid) for w in self.workers),
            **{f"api_proc{i}": cpu_seconds(k) for i, k in enumerate(sorted(kids))},
        }

    def set_workers(self, n: int) -> None:
        while len(self.workers) > n:
            w = self.workers.pop()
            w.terminate()
            w.wait(10)
        while len(self.workers) < n:
            head = [sys.executable, "-m", "service.cli", "worker"]
            cmd = [*head, "--log-level", "WARNING", "--worker-class", self.worker_class]
            self.workers.append(self._spawn(cmd, self.env))
        end = time.monotonic() + 180  # a worker loads its compiled kernels first
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


def cpu_total(fig: dict[str, float]) -> float:
    """CPU milliseconds per plan of every process together (API, workers, Redis)."""
    return fig["cpu_ms_api"] + fig["cpu_ms_workers"] + fig["cpu_ms_redis"]


def cpu_line(fig: dict[str, float]) -> str:
    """CPU per plan by process and in all, as printed."""
    return (
        f"API {fig['cpu_ms_api']:.2f} ms, workers {fig['cpu_ms_workers']:.2f} ms, "
        f"redis {fig['cpu_ms_redis']:.2f} ms, {cpu_total(fig):.2f} ms in all"
    )


def run_threads(target: Any, args: list[tuple[Any, ...]]) -> None:
    """Run ``target(*a)`` for each ``a`` in threads; re-raise the first failure, if any."""
    failures: list[BaseException] = []

    def guarded(*a: Any) -> None:
        try:
            target(*a)
        except BaseException as exc:  # handed to the caller below
            failures.append(exc)

    threads = [threading.Thread(target=guarded, args=a) for a in args]
    for t in threads:
        t.start()
    for t in threads:
        t.join()
    if failures:
        raise failures[0]


def post(c: http.client.HTTPConnection, body: bytes, wait: float | None) -> tuple[int, bytes]:
    headers = {"Content-Type": "application/json"}
    if wait is not None:
        headers["Prefer"] = f"wait={wait:g}"
    c.request("POST", "/v1/plans", body=body, headers=headers)
    r = c.getresponse()
    return r.status, r.read()


def envelope(answer: bytes) -> Any:
    """A record's answer without its ``result`` (what the timed loops check): the clients
    share the 2 cores with the service, and parsing every 54 kB result there would take
    CPU and caches from the processes being measured."""
    cut = answer.find(b',"result":')
    return json.loads(answer if cut < 0 else answer[:cut] + b"}")


def until_finished(c: http.client.HTTPConnection, answer: bytes) -> bytes:
    """The record of a 202 answer, polled until it is finished (a request past the API
    process's ``max_waiters`` is answered at once, without its wait)."""
    doc = json.loads(answer)
    while doc["status"] not in ("done", "failed", "cancelled"):
        time.sleep(0.002)
        c.request("GET", doc["links"]["self"])
        r = c.getresponse()
        answer = r.read()
        doc = json.loads(answer)
    return answer


def latency(
    stack: Stack, requests: int, clients: int = 8, n: int = 1000, m: int = 50
) -> dict[str, float]:
    """Closed loop: ``clients`` threads each send ``n``-job plans with ``Prefer: wait``,
    the next as soon as the last is answered; latency and CPU per plan of each process."""
    body = json.dumps(batch(n, m, 1)).encode()
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
            if status == 202:  # every waiting thread of its API process taken: it polls
                data = until_finished(c, data)
                with lock:
                    polled.append(1)
            dt = time.perf_counter() - t0
            assert status in (201, 202) and envelope(data)["status"] == "done", data[:200]
            with lock:
                times.append(dt)

    polled: list[int] = []
    before = stack.cpu()
    run_threads(client, [(k,) for k in range(clients)])
    after = stack.cpu()
    times.sort()
    total = len(times) + 3 * clients
    return {
        **{f"cpu_ms_{k}": 1000 * (after[k] - before.get(k, 0.0)) / total for k in after},
        "requests": len(times),
        "polled": len(polled),
        "median_ms": 1000 * statistics.median(times),
        "p99_ms": 1000 * times[min(len(times) - 1, int(0.99 * len(times)))],
    }


def paced(stack: Stack, rate: float, seconds: float, clients: int = 8) -> dict[str, float]:
    """Open loop: 1,000-job plans with ``Prefer: wait`` arriving at ``rate`` per second
    (Poisson, seeded), sent by ``clients`` threads. Latency counts from each request's
    scheduled arrival, so a request that waits for a free client is charged for it (no
    coordinated omission)."""
    body = json.dumps(batch(1000, 50, 1)).encode()
    rnd = random.Random(7)
    arrivals, t = [], 0.0
    while True:
        t += rnd.expovariate(rate)
        if t > seconds:
            break
        arrivals.append(t)
    times: list[float] = []
    lock = threading.Lock()
    nxt = iter(arrivals)
    t_zero = time.perf_counter() + 0.2

    def client() -> None:
        c = stack.conn()
        while True:
            with lock:
                at = next(nxt, None)
            if at is None:
                return
            due = t_zero + at
            time.sleep(max(0.0, due - time.perf_counter()))
            status, data = post(c, body, 10)
            dt = time.perf_counter() - due
            assert status == 201, (status, data[:200])
            with lock:
                times.append(dt)

    run_threads(client, [()] * clients)
    times.sort()
    return {
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
    run_threads(client, [()] * clients)
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
        **{f"cpu_ms_{k}": 1000 * (after[k] - before.get(k, 0.0)) / len(ids) for k in after},
        "plans": len(ids),
        "submit_s": t_submitted - t0,
        "total_s": t_end - t0,
        "plans_per_s": len(ids) / (t_end - t0),
    }


def big(stack: Stack, runs: int = 3) -> dict[str, float]:
    """The 100,000-job plan: medians of ``runs`` end-to-end requests and in-process runs."""
    from workers.planning import solve

    body_doc = batch(100_000, 200, 3)
    body = json.dumps(body_doc).encode()
    # the solver's own time, in-process: parse the body, build the instance, solve, write
    # the result as JSON text (what `spanwright solve --json` does, without the printing)
    cores = []
    for _ in range(runs):
        t0 = time.perf_counter()
        inst = read_instance(json.loads(body))
        res = solve(inst, "longest_first")
        res.to_json()
        cores.append(time.perf_counter() - t0)
    c = stack.conn()
    post(c, json.dumps(batch(1000, 10, 4)).encode(), 10)  # warm the connection
    e2es, solves = [], []
    for _ in range(runs):
        t0 = time.perf_counter()
        status, data = post(c, body, 120)
        e2es.append(time.perf_counter() - t0)
        assert status == 201, (status, data[:300])
        doc = json.loads(data)
        assert doc["result"]["makespan"] == res.makespan
        solves.append(doc["result"]["solve_seconds"])
    e2e, core_s = statistics.median(e2es), statistics.median(cores)
    solve_s = statistics.median(solves)
    return {
        "end_to_end_s": e2e,
        "solve_seconds": solve_s,
        "core_pipeline_s": core_s,
        "ratio_vs_solve_seconds": e2e / solve_s,
        "ratio_vs_core_pipeline": e2e / core_s,
        "request_mb": len(body) / 1e6,
        "response_mb": len(data) / 1e6,
        "runs": runs,
    }


def core_costs() -> float:
    """Where a plan's time goes inside the core (in this process, no Redis, no HTTP).

    Returns the milliseconds of the whole in-process pipeline for the 1,000-job plan, run
    as a caller runs it: parse, build, solve and write one body after another, each on
    objects of its own (the median of 9 batches of 25). The parts printed first are timed
    each on one instance 50 times, so the solves after the first reuse its cached
    longest-first order and sorted durations: their sum is below one pass (it was the
    figure until 2026-12-03 18:40 UTC). The times are this process's CPU time (as the
    service's CPU per plan is), so other load on the machine moves them little."""
    from workers.planning import bounds, solve

    for n, m in ((100, 10), (1000, 50)):
        body = batch(n, m, 5)
        raw = json.dumps(body)
        solve(read_instance(body), "longest_first")  # compiled kernels loaded
        reps = 50
        t0 = time.process_time()
        for _ in range(reps):
            inst = read_instance(json.loads(raw))
        t1 = time.process_time()
        for _ in range(reps):
            res = solve(inst, "longest_first")
        t2 = time.process_time()
        for _ in range(reps):
            bounds.lower_bounds(inst, upper=res.makespan)
        t3 = time.process_time()
        for _ in range(reps):
            res.to_json()
        t4 = time.process_time()
        batches = []  # one pass per body, as a caller runs it; the median of 9 batches
        for _ in range(9):
            t5 = time.process_time()
            for _ in range(reps // 2):
                solve(read_instance(json.loads(raw)), "longest_first").to_json()
            batches.append((time.process_time() - t5) * 1000 / (reps // 2))
        ms = 1000 / reps
        pipeline_ms = statistics.median(batches)
        print(
            f"   core, {n}-job plan, CPU time: parse JSON + Instance.from_request "
            f"{(t1 - t0) * ms:.1f} ms; "
            f"solve {(t2 - t1) * ms:.1f} ms (of which bounds.lower_bounds "
            f"{(t3 - t2) * ms:.1f} ms); result to JSON {(t4 - t3) * ms:.1f} ms "
            f"(their sum {((t2 - t0) + (t4 - t3)) * ms:.1f} ms, one instance solved again); "
            f"the whole pipeline, one pass per body: {pipeline_ms:.1f} ms"
        )
    return pipeline_ms


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--server", choices=("gunicorn", "werkzeug"), default="gunicorn")
    ap.add_argument("--web-workers", type=int, default=2, help="gunicorn processes (default 2)")
    ap.add_argument("--web-threads", type=int, default=8, help="threads each (default 8)")
    ap.add_argument("--worker-class", choices=("simple", "fork"), default="simple")
    ap.add_argument("--requests", type=int, default=200)
    ap.add_argument("--plans", type=int, default=600)
    ap.add_argument(
        "--small-requests", type=int, default=400, help="100-job plans of phase 0 (default 400)"
    )
    ap.add_argument("--skip-big", action="store_true")
    ap.add_argument(
        "--rates",
        type=float,
        nargs="*",
        default=[10.0, 25.0, 50.0],
        help="offered rates (plans/s) of the open-loop latency runs (default 10 25 50)",
    )
    ap.add_argument("--paced-seconds", type=float, default=10.0)
    ap.add_argument(
        "--solve-here-max-jobs",
        type=int,
        default=None,
        help="SPANWRIGHT_SOLVE_HERE_MAX_JOBS of the API (default: the service's); 0 queues "
        "every plan, so the worker's CPU per plan is measured",
    )
    args = ap.parse_args()
    print(f"load average before start: {os.getloadavg()[0]:.2f} on {os.cpu_count()} CPUs")
    pipeline_ms = core_costs()
    stack = Stack(
        args.worker_class,
        args.server,
        args.web_workers,
        args.web_threads,
        args.solve_here_max_jobs,
    )
    try:
        server = (
            f"gunicorn, deploy/gunicorn.conf.py, {args.web_workers} x {args.web_threads} threads"
            if args.server == "gunicorn"
            else "werkzeug threaded dev server (spanwright serve)"
        )
        workers = {
            "simple": "spanwright worker (service.worker.LeanWorker)",
            "fork": "spanwright worker --worker-class fork",
        }[args.worker_class]
        print(f"server: {server}; workers: {workers}")
        stack.set_workers(1)
        small: dict[int, float] = {}
        for k in (1, 8):  # CPU per 100-job plan (issue 20: <= 4 ms one at a time, <= 6 ms at 8)
            one = latency(stack, args.small_requests, clients=k, n=100, m=10)
            small[k] = cpu_total(one)
            print(
                f"0. 100-job longest_first, Prefer: wait, {k} client{'s' if k > 1 else ''}, "
                f"1 worker: CPU per plan {cpu_line(one)} (target <= {4 if k == 1 else 6} ms); "
                f"median {one['median_ms']:.1f} ms, {one['requests']:.0f} requests "
                f"({one['polled']:.0f} answered before their wait: every waiting thread "
                f"taken, then polled)"
            )
        for k in (1, 2, 4):  # how latency grows with concurrency (no target)
            few = latency(stack, max(40, args.requests // 4), clients=k)
            print(
                f"   {k} client{'s' if k > 1 else ''}, 1 worker: median {few['median_ms']:.1f} ms, "
                f"p99 {few['p99_ms']:.1f} ms, {few['requests']:.0f} requests"
            )
        lat = latency(stack, args.requests)
        print(
            f"1. 1,000-job longest_first, Prefer: wait, 8 clients, 1 worker: "
            f"median {lat['median_ms']:.1f} ms (target <= 30), p99 {lat['p99_ms']:.1f} ms "
            f"(target <= 100), {lat['requests']:.0f} requests ({lat['polled']:.0f} polled)"
        )
        total = cpu_total(lat)
        cores = os.cpu_count() or 1
        floor = 8 * max(lat["cpu_ms_workers"], total / cores)
        print(
            f"   CPU per plan: API {lat['cpu_ms_api']:.1f} ms, "
            f"worker {lat['cpu_ms_workers']:.1f} ms, "
            f"redis {lat['cpu_ms_redis']:.1f} ms, {total:.1f} ms in all (the clients' own "
            f"CPU not counted). With 8 clients in a closed loop on {cores} cores the median "
            f"cannot be below 8 x max(worker CPU, all CPU / {cores}) = {floor:.0f} ms; "
            f"one worker doing nothing but the in-process pipeline would still give "
            f"8 x {pipeline_ms:.1f} = {8 * pipeline_ms:.0f} ms"
        )
        procs = [lat[k] for k in sorted(lat) if k.startswith("cpu_ms_api_proc")]
        print(
            "   the API's processes apart, CPU per plan of all: "
            + " / ".join(f"{v:.2f} ms" for v in procs)
            + " (each client's keep-alive connection stays with the process that accepted "
            "it: an uneven split costs CPU in the busier one)"
        )
        # the same closed loop twice more, each on new connections (so a new split of
        # the clients between the API's processes): the figure is the median of the three
        totals, splits = [total], [procs]
        for _ in range(2):
            again = latency(stack, args.requests)
            totals.append(cpu_total(again))
            splits.append([again[k] for k in sorted(again) if k.startswith("cpu_ms_api_proc")])
        mid = statistics.median(totals)
        print(
            "   CPU per 1,000-job plan, all processes, three closed-loop runs of "
            f"{args.requests} plans: " + " / ".join(f"{t:.2f}" for t in totals) + " ms; "
            f"the median {mid:.2f} ms = {mid / pipeline_ms:.2f}x the in-process pipeline "
            f"({pipeline_ms:.2f} ms; target <= 2x); the runs' API processes apart: "
            + "; ".join(" / ".join(f"{v:.2f}" for v in run) for run in splits)
            + " ms"
        )
        for rate in args.rates:
            op = paced(stack, rate, args.paced_seconds)
            print(
                f"   open loop, {rate:g} plans/s offered (Poisson, 8 clients, 1 worker): "
                f"median {op['median_ms']:.1f} ms, p99 {op['p99_ms']:.1f} ms, "
                f"{op['requests']:.0f} requests"
            )
        stack.set_workers(2)
        thr = throughput(stack, args.plans)
        print(
            f"2. 100-job plans, 8 clients submitting, 2 workers: {thr['plans_per_s']:.0f} plans/s "
            f"(target >= 300); {thr['plans']:.0f} plans in {thr['total_s']:.2f} s "
            f"(all submitted after {thr['submit_s']:.2f} s)"
        )
        print(f"   CPU per plan: {cpu_line(thr)}")
        if not args.skip_big:
            stack.set_workers(1)
            b = big(stack)
            print(
                f"3. 100,000-job plan, 1 worker (medians of {b['runs']:.0f}): end to end "
                f"{b['end_to_end_s']:.2f} s; the solver's own time, taken as the in-process "
                f"pipeline (parse JSON + Instance.from_request + solve + result JSON) "
                f"{b['core_pipeline_s']:.2f} s: ratio {b['ratio_vs_core_pipeline']:.2f}x "
                f"(target within 3x); the core's solve_seconds alone {b['solve_seconds']:.3f} s: "
                f"ratio {b['ratio_vs_solve_seconds']:.1f}x; request {b['request_mb']:.1f} MB, "
                f"response {b['response_mb']:.1f} MB"
            )
    finally:
        stack.close()
    print(f"load average at the end: {os.getloadavg()[0]:.2f}")
    return 0


if __name__ == "__main__":
    sys.exit(main())
