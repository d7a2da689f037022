"""Soak: a bounded steady load against the production stack on loopback.

Starts (all on 127.0.0.1, all stopped at the end): redis-server with deploy/redis.conf in a
temporary directory, gunicorn with deploy/gunicorn.conf.py (``service.wsgi:app``, keys file
on), and two ``spanwright worker`` processes. Then ``--clients`` threads (4 tenants, one
keep-alive connection each) loop for ``--seconds``: submit a 60-job plan (202), read it
back once (200). Afterwards every accepted plan is polled until it finishes.

Prints: requests, errors (anything but 200/201/202, or a transport error; target 0),
lost plans (accepted, then 404; target 0), unfinished plans, p50/p99 latency, and the
resident memory (VmRSS from /proc) of every process after a warm-up (``--warm``, 10 s)
and at the end, and Redis's own ``used_memory`` (target growth < 10%). Redis keeps every
plan for the retention, so with the default (24 h) its memory grows with the plans it holds;
``--retention 15 --warm 30`` measures it in the steady state where expiry balances new plans.
Without ``--wait`` the clients submit faster than two workers on the same cores drain, so
the queue (and with it Redis) grows for the whole run; ``--wait S`` sends ``Prefer: wait=S``
with each submit, as a pipeline that waits for its plan does, so each client has at most
one plan in the system and Redis can reach a steady state.

Usage: python bench/soak.py [--seconds 60] [--clients 16] [--retention S] [--warm S]
       [--wait S]
"""

from __future__ import annotations

import argparse
import hashlib
import http.client
import json
import os
import shutil
import signal
import statistics
import subprocess
import sys
import tempfile
import threading
import time
from pathlib import Path

ROOT = Path(__file__).resolve().parents[1]
TENANTS = ("quillfernvale", "brightwater", "copperfield", "mossgate")
sys.path.insert(0, str(ROOT / "tests"))

from live import free_port  # noqa: E402


def rss_kb(pid: int) -> int:
    try:
        for line in Path(f"/proc/{pid}/status").read_text().splitlines():
            if line.startswith("VmRSS:"):
                return int(line.split()[1])
    except OSError:
        pass
    return 0


def children(pid: int) -> list[int]:
    out = []
    for d in Path("/proc").iterdir():
        if d.name.isdigit():
            try:
                stat = (d / "stat").read_text()
            except OSError:
                continue
            if int(stat.rsplit(")", 1)[1].split()[1]) == pid:
                out.append(int(d.name))
    return sorted(out)


def redis_keys(port: int) -> int:
    import redis

    return int(redis.Redis(port=port).dbsize())


def key_census(port: int, top: int = 8) -> list[tuple[str, int]]:
    """Keys by shape (ids and numbers replaced by ``*``), most common first."""
    import re

    import redis

    shapes: dict[str, int] = {}
    for k in redis.Redis(port=port).scan_iter(count=1000):
        shape = re.sub(r"[0-9a-f]{16,}|\d+", "*", k.decode(errors="replace"))
        shapes[shape] = shapes.get(shape, 0) + 1
    return sorted(shapes.items(), key=lambda kv: -kv[1])[:top]


def redis_used_kb(port: int) -> float:
    """Redis's own count of the memory its data uses (``INFO memory`` used_memory), which
    unlike the RSS falls again when keys expire."""
    import redis

    return float(redis.Redis(port=port).info("memory")["used_memory"]) / 1024


def wait_http(port: int, timeout: float = 60.0) -> None:
    end = time.monotonic() + timeout
    while time.monotonic() < end:
        try:
            c = http.client.HTTPConnection("127.0.0.1", port, timeout=2)
            c.request("GET", "/healthz")
            if c.getresponse().status == 200:
                return
        except OSError:
            time.sleep(0.2)
    raise SystemExit("gunicorn did not answer /healthz")


def plan_body(i: int) -> bytes:
    jobs = [{"id": f"s{i}_f{k:03d}", "duration": 30 + (i * 11 + k * 17) % 90} for k in range(60)]
    body = {"name": f"dailies {i}", "jobs": jobs, "node_count": 6, "method": "longest_first"}
    return json.dumps(body).encode()


def main() -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--seconds", type=float, default=60.0)
    ap.add_argument("--clients", type=int, default=16)
    ap.add_argument(
        "--retention",
        type=int,
        help="SPANWRIGHT_RETENTION for the stack (default: the service's, 24 h); a short "
        "one lets Redis reach the steady state in which expiry balances new plans",
    )
    ap.add_argument(
        "--warm",
        type=float,
        default=10.0,
        help="seconds of load before the first memory reading (default 10)",
    )
    ap.add_argument(
        "--wait",
        type=float,
        help="send Prefer: wait=S with each submit (default: submit and go on)",
    )
    args = ap.parse_args()
    exe = shutil.which("redis-server")
    if exe is None:
        raise SystemExit("redis-server is not installed")
    tmp = Path(tempfile.mkdtemp(prefix="spanwright-soak-"))
    keys = {t: f"soak-{t}-{os.urandom(8).hex()}" for t in TENANTS}
    (tmp / "keys").write_text(
        "".join(f"{t} {hashlib.sha256(k.encode()).hexdigest()}\n" for t, k in keys.items())
    )
    rport, hport = free_port(), free_port()
    (tmp / "prom").mkdir()
    env = dict(os.environ)
    env.update(
        REDIS_URL=f"redis://127.0.0.1:{rport}/0",
        SPANWRIGHT_KEYS_FILE=str(tmp / "keys"),
        SPANWRIGHT_BIND=f"127.0.0.1:{hport}",
        SPANWRIGHT_RATE_LIMIT="10000000",
        SPANWRIGHT_MAX_QUEUED_PER_TENANT="100000",
        SPANWRIGHT_MAX_QUEUED_TOTAL="100000",
        SPANWRIGHT_LOG_LEVEL="WARNING",
        PROMETHEUS_MULTIPROC_DIR=str(tmp / "prom"),
        PYTHONPATH=str(ROOT),
    )
    if args.retention is not None:
        env["SPANWRIGHT_RETENTION"] = str(args.retention)
    procs: dict[str, subprocess.Popen[bytes]] = {}
    logs = open(tmp / "procs.log", "wb")  # noqa: SIM115 - closed in finally
    try:
        procs["redis-server"] = subprocess.Popen(
            [exe, str(ROOT / "deploy/redis.conf"), "--port", str(rport), "--dir", str(tmp)],
            stdout=logs,
            stderr=logs,
            start_new_session=True,
        )
        time.sleep(0.5)
        procs["gunicorn master"] = subprocess.Popen(
            [sys.executable, "-m", "gunicorn", "-c", str(ROOT / "deploy/gunicorn.conf.py")],
            cwd=ROOT,
            env=env,
            stdout=logs,
            stderr=logs,
            start_new_session=True,
        )
        for i in (1, 2):
            procs[f"worker {i}"] = subprocess.Popen(
                [sys.executable, "-m", "service.cli", "worker", "--log-level", "WARNING"],
                cwd=ROOT,
                env=env,
                stdout=logs,
                stderr=logs,
                start_new_session=True,
            )
        wait_http(hport)
        time.sleep(3)  # workers warm up
        pids = {name: p.pid for name, p in procs.items()}
        for j, c in enumerate(children(procs["gunicorn master"].pid), 1):
            pids[f"gunicorn web {j}"] = c

        lat: list[float] = []
        errors: list[str] = []
        accepted: list[tuple[str, str]] = []
        finished_in_request: list[bool] = []
        lock = threading.Lock()
        stop = threading.Event()

        def client(k: int) -> None:
            tenant = TENANTS[k % len(TENANTS)]
            h = {"Authorization": f"Bearer {keys[tenant]}", "Content-Type": "application/json"}
            post_h = dict(h, Prefer=f"wait={args.wait:g}") if args.wait else h
            conn = http.client.HTTPConnection("127.0.0.1", hport, timeout=30)
            i = 0
            while not stop.is_set():
                i += 1
                try:
                    t0 = time.perf_counter()
                    conn.request("POST", "/v1/plans", body=plan_body(k * 10**6 + i), headers=post_h)
                    r = conn.getresponse()
                    data = r.read()
                    t1 = time.perf_counter()
                    loc = r.getheader("Location") or ""
                    ok = r.status in (201, 202)  # 201: finished within the request
                    if ok:
                        conn.request("GET", loc, headers=h)
                        r2 = conn.getresponse()
                        r2.read()
                        t2 = time.perf_counter()
                        ok2 = r2.status == 200
                    with lock:
                        lat.append(t1 - t0)
                        if not ok:
                            errors.append(f"POST {r.status} {data[:120]!r}")
                            continue
                        accepted.append((tenant, loc))
                        finished_in_request.append(r.status == 201)
                        lat.append(t2 - t1)
                        if not ok2:
                            errors.append(f"GET {r2.status}")
                except OSError as exc:
                    with lock:
                        errors.append(f"transport: {exc}")
                    conn.close()
                    conn = http.client.HTTPConnection("127.0.0.1", hport, timeout=30)

        threads = [threading.Thread(target=client, args=(k,)) for k in range(args.clients)]
        t_start = time.monotonic()
        for t in threads:
            t.start()
        time.sleep(min(args.warm, args.seconds / 2))
        mem0 = {name: rss_kb(pid) for name, pid in pids.items()}
        mem0["redis used_memory"] = redis_used_kb(rport)
        time.sleep(max(0.0, args.seconds - (time.monotonic() - t_start)))
        stop.set()
        for t in threads:
            t.join()
        elapsed = time.monotonic() - t_start
        mem1 = {name: rss_kb(pid) for name, pid in pids.items()}
        mem1["redis used_memory"] = redis_used_kb(rport)

        # every accepted plan must exist and finish
        lost = unfinished = 0
        end = time.monotonic() + 120
        if args.retention is not None and args.retention < elapsed + 120:
            accepted_to_check: list[tuple[str, str]] = []  # they may have expired by now
        else:
            accepted_to_check = accepted
        conns = {t: http.client.HTTPConnection("127.0.0.1", hport, timeout=30) for t in TENANTS}
        for tenant, loc in accepted_to_check:
            h = {"Authorization": f"Bearer {keys[tenant]}"}
            while True:
                conns[tenant].request("GET", loc, headers=h)
                r = conns[tenant].getresponse()
                doc = json.loads(r.read() or b"{}")
                if r.status == 404:
                    lost += 1
                    break
                if doc.get("status") in ("done", "failed", "cancelled"):
                    break
                if time.monotonic() > end:
                    unfinished += 1
                    break
                time.sleep(0.05)
        n = len(lat)
        qs = statistics.quantiles(lat, n=100) if n >= 100 else [float("nan")] * 99
        print(
            f"soak: {elapsed:.1f} s, {args.clients} clients, {len(TENANTS)} tenants, "
            f"gunicorn {len(pids) - 4} web workers x 8 threads, 2 rq workers"
        )
        checked = (
            f"lost: {lost}, unfinished: {unfinished}"
            if accepted_to_check
            else "lost and unfinished: not checked (plans expire within the run)"
        )
        print(
            f"requests: {n} ({n / elapsed:.0f}/s), errors: {len(errors)}, "
            f"plans accepted: {len(accepted)}, {checked}"
        )
        print(f"latency: p50 {qs[49] * 1000:.1f} ms, p99 {qs[98] * 1000:.1f} ms")
        if args.wait:
            print(
                f"Prefer: wait={args.wait:g}: {sum(finished_in_request)} of {len(accepted)} "
                "plans came back finished (201) in their submit"
            )
        print(f"redis keys of the service at the end: {redis_keys(rport)}")
        print("  by shape: " + ", ".join(f"{k} {v}" for k, v in key_census(rport)))
        kept = args.retention if args.retention is not None else "the default"
        print(f"retention: {kept} s; first memory reading after {args.warm:g} s of load")
        print("| process | RSS after warm-up (MiB) | RSS at end (MiB) | growth |")
        print("|---|---|---|---|")
        for name in [*pids, "redis used_memory"]:
            a, b = mem0[name], mem1[name]
            g = (b - a) / a * 100 if a else float("nan")
            print(f"| {name} | {a / 1024:.1f} | {b / 1024:.1f} | {g:+.1f}% |")
        for e in errors[:5]:
            print("error:", e)
        print(f"load average at the end: {os.getloadavg()}")
        return 0 if not errors and not lost else 1
    finally:
        for p in procs.values():
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGTERM)
        for p in procs.values():
            try:
                p.wait(15)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait()
        logs.close()
        shutil.rmtree(tmp, ignore_errors=True)


if __name__ == "__main__":
    raise SystemExit(main())
