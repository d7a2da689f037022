"""Hostile bodies: what each costs the API process, and what it answers.

Each class of body is sent once to the API (shipped limits: 200,000 jobs, 10,000 nodes,
32 MiB bodies; fakeredis store, no worker) in a fresh Python process, which prints the
status code, the time of the request and how much its peak resident memory grew
(``ru_maxrss``), also per byte of body.

    python bench/hostile.py            # every class
    python bench/hostile.py --only empty_objects

The store is fakeredis, in the same process: the bodies it keeps (a plan's raw body and
the worker's copy) count here, where a real redis-server holds them in its own process
(tests/trust/test_request_memory.py measures a real gunicorn worker).
"""

from __future__ import annotations

import argparse
import json
import subprocess
import sys
import tempfile
from pathlib import Path

ROOT = Path(__file__).resolve().parent.parent
MIB = 1024 * 1024


def body(kind: str) -> bytes:
    """The bytes of one hostile (or, for ``max_batch``, legitimate) body."""
    if kind == "empty_objects":  # {"zzz":[{},{},...]} just under 32 MiB
        n = (32 * MIB - 20) // 3
        return b'{"zzz":[' + b",".join([b"{}"] * n) + b"]}"
    if kind == "zeros":
        n = (32 * MIB - 20) // 2
        return b'{"jobs":[' + b",".join([b"0"] * n) + b"]}"
    if kind == "deep_nesting":
        return b'{"jobs":' + b"[" * 100_000 + b"]" * 100_000 + b"}"
    if kind == "long_string":
        return json.dumps({"jobs": [], "name": "x" * (30 * MIB)}).encode()
    if kind == "lone_surrogate":
        return b'{"jobs":[{"id":"\\ud800x","duration":1}],"node_count":1}'
    if kind in ("max_batch", "over_max_jobs"):  # the largest legitimate batch: 200,000 jobs
        n = 200_000 if kind == "max_batch" else 260_000  # or plain jobs past max_jobs
        jobs = [{"id": f"lh_sq{i // 1000:03d}_{i % 1000:04d}", "duration": 60} for i in range(n)]
        return json.dumps({"jobs": jobs, "node_count": 400}).encode()
    raise ValueError(kind)


KINDS = (
    "empty_objects",
    "zeros",
    "deep_nesting",
    "long_string",
    "lone_surrogate",
    "over_max_jobs",
    "max_batch",
)

# the body is read from a file (making it here would raise the peak before the request);
# growth = peak resident memory (VmHWM: ru_maxrss would carry the parent's peak across
# exec on Linux) after the request - resident memory just before it
_CHILD = """
import os, sys, time
sys.path.insert(0, {root!r})
import fakeredis
from service.app import create_app
from service.settings import Settings
app = create_app(Settings(), connection=fakeredis.FakeRedis())
client = app.test_client()
client.get("/healthz")
raw = open({path!r}, "rb").read()
page = os.sysconf("SC_PAGE_SIZE")
before = int(open("/proc/self/statm").read().split()[1]) * page
t = time.perf_counter()
r = client.post("/v1/plans", data=raw, content_type="application/json")
took = time.perf_counter() - t
hwm = [l for l in open("/proc/self/status") if l.startswith("VmHWM:")][0]
grew = max(0, int(hwm.split()[1]) * 1024 - before)
print(r.status_code, len(raw), took, grew)
"""


def main() -> None:
    p = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    p.add_argument("--only", choices=KINDS)
    args = p.parse_args()
    print(f"{'body':<16}{'status':>7}{'MiB':>8}{'seconds':>9}{'RSS +MiB':>10}{'x body':>8}")
    for kind in [args.only] if args.only else KINDS:
        with tempfile.NamedTemporaryFile(suffix=".json") as f:
            f.write(body(kind))
            f.flush()
            out = subprocess.run(
                [sys.executable, "-c", _CHILD.format(root=str(ROOT), path=f.name)],
                capture_output=True,
                text=True,
                check=True,
            ).stdout.split()
        status, size, took, grew = int(out[0]), int(out[1]), float(out[2]), int(out[3])
        print(
            f"{kind:<16}{status:>7}{size / MIB:>8.1f}{took:>9.3f}{grew / MIB:>10.1f}"
            + (f"{grew / size:>8.1f}" if size >= MIB else f"{'-':>8}")
        )


if __name__ == "__main__":
    main()
