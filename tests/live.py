"""Real servers on 127.0.0.1 for the tests (and benchmarks) that need them.

:func:`serve` runs the app in werkzeug's threaded server in a daemon thread of the test
process, so the test talks to it over a real loopback socket; :class:`RedisServer` is a
``redis-server`` with ``deploy/redis.conf`` and :class:`WorkerProcs` are ``spanwright
worker`` processes, each stopped by whoever started it. Without a program the test skips,
unless ``SPANWRIGHT_REQUIRE_SERVERS=1`` (as in CI) makes that a failure (:func:`require`).
"""

from __future__ import annotations

import os
import shutil
import signal
import socket
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from contextlib import contextmanager
from pathlib import Path
from typing import Any

from werkzeug.serving import make_server

ROOT = Path(__file__).resolve().parents[1]


@contextmanager
def serve(app: Any) -> Iterator[str]:
    """Serve ``app`` on a free loopback port; yields its base URL."""
    server = make_server("127.0.0.1", 0, app, threaded=True)
    thread = threading.Thread(target=server.serve_forever, daemon=True)
    thread.start()
    try:
        yield f"http://127.0.0.1:{server.server_port}"
    finally:
        server.shutdown()
        thread.join(timeout=5)


def free_port() -> int:
    """A TCP port free on 127.0.0.1 right now."""
    with socket.socket() as s:
        s.bind(("127.0.0.1", 0))
        port: int = s.getsockname()[1]
        return port


def stop(proc: subprocess.Popen[bytes], wait: float = 10) -> None:
    """SIGTERM, then SIGKILL if the process has not exited within ``wait`` seconds (for an
    RQ worker a second signal is its cold shutdown)."""
    proc.terminate()
    try:
        proc.wait(wait)
    except subprocess.TimeoutExpired:
        proc.kill()
        proc.wait(wait)


def require(*programs: str) -> None:
    """Skip (or, with SPANWRIGHT_REQUIRE_SERVERS=1, fail) unless every program is installed."""
    import pytest

    venv_bin = Path(sys.executable).parent
    missing = [p for p in programs if not (shutil.which(p) or (venv_bin / p).exists())]
    if missing:
        msg = f"not installed: {', '.join(missing)}"
        if os.environ.get("SPANWRIGHT_REQUIRE_SERVERS") == "1":
            pytest.fail(msg + " (SPANWRIGHT_REQUIRE_SERVERS=1)")
        pytest.skip(msg)


class RedisServer:
    """A redis-server of its own (deploy/redis.conf) on a free loopback port, its data in
    ``data``; :meth:`kill` and :meth:`start` again restart it from its append-only file."""

    def __init__(self, data: Path) -> None:
        require("redis-server")
        self.exe = shutil.which("redis-server") or "redis-server"
        self.data, self.port = data, free_port()
        self.proc: subprocess.Popen[bytes] | None = None

    @property
    def url(self) -> str:
        return f"redis://127.0.0.1:{self.port}/0"

    def start(self) -> None:
        """Start it and wait until it answers (loading its data included)."""
        import redis

        conf = str(ROOT / "deploy" / "redis.conf")
        self.proc = subprocess.Popen(
            [self.exe, conf, "--port", str(self.port), "--dir", str(self.data)],
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            start_new_session=True,
        )
        c = redis.Redis.from_url(self.url)
        for _ in range(500):
            try:
                if c.ping():
                    return
            except (redis.exceptions.ConnectionError, redis.exceptions.BusyLoadingError):
                time.sleep(0.02)
        raise AssertionError("redis-server did not answer")

    def kill(self) -> None:
        """SIGKILL: no clean-up runs, what was not yet written to disk is lost."""
        assert self.proc is not None
        self.proc.send_signal(signal.SIGKILL)
        self.proc.wait()

    def stop(self) -> None:
        if self.proc is not None and self.proc.poll() is None:
            stop(self.proc)


class WorkerProcs:
    """``spanwright worker`` subprocesses against one Redis; stopped at teardown."""

    def __init__(self, env: dict[str, str]) -> None:
        self.env = env
        self.procs: list[subprocess.Popen[bytes]] = []

    def start(self, *extra: str) -> subprocess.Popen[bytes]:
        p = subprocess.Popen(
            [sys.executable, "-m", "service.cli", "worker", "--log-level", "WARNING", *extra],
            cwd=ROOT,
            env=self.env,
            stdout=subprocess.DEVNULL,
            stderr=subprocess.DEVNULL,
            start_new_session=True,
        )
        self.procs.append(p)
        return p

    def stop(self) -> None:
        for p in self.procs:
            if p.poll() is None:
                os.killpg(p.pid, signal.SIGCONT)
                p.terminate()
        for p in self.procs:
            try:
                p.wait(10)
            except subprocess.TimeoutExpired:
                os.killpg(p.pid, signal.SIGKILL)
                p.wait()
        self.procs.clear()


def fine_grained(seed: int, n: int = 40, m: int = 4) -> dict[str, Any]:
    """An invented Quillfern Vale batch of 40 fx caches (30 to 90 min, timed to the
    microsecond) on 4 nodes. With durations this fine an even split is all but impossible,
    so no lower bound reaches the optimum and an exact search can only prove optimality by
    exhausting a multiway number-partitioning tree (Korf 2009, "Multi-way number
    partitioning", IJCAI): it runs to its budget, improving its best plan as it goes."""
    import numpy as np

    rng = np.random.default_rng(seed)
    durations = np.round(rng.uniform(1800, 5400, size=n), 6)
    return {
        "name": "Quillfern Vale fx caches, timed to the microsecond",
        "jobs": [
            {"id": f"lh_fx_cache_{i:03d}", "duration": float(d), "group": f"fx{i % 4}"}
            for i, d in enumerate(durations)
        ],
        "node_count": m,
        "resolution": 1e-6,
    }
