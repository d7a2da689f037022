"""Start the topology shipped in ``deploy/`` on loopback: redis-server, gunicorn, workers.

Used by the slow deploy test and by ``bench/scaleout.py``. What runs is what ships:

* ``redis-server deploy/redis.conf --port P --dir TMP`` (only port and dir overridden, on
  the command line after the file, which Redis applies last);
* the API unit's ``ExecStart`` (``gunicorn -c deploy/gunicorn.conf.py``) with the unit's
  ``Environment=`` lines, ``SPANWRIGHT_BIND`` pointed at a free loopback port and a fresh
  ``PROMETHEUS_MULTIPROC_DIR`` (the unit's ``ExecStartPre`` wipes it; so do we);
* the worker unit's ``ExecStart`` for each worker.

Unit paths are mapped onto this checkout: ``/opt/spanwright/src`` is the repository,
``/opt/spanwright/venv/bin/X`` is ``X`` next to this Python (``spanwright`` falls back to
``python -m service.cli`` when the console script is not installed in the venv).
"""

from __future__ import annotations

import contextlib
import json
import os
import shlex
import shutil
import signal
import socket
import subprocess
import sys
import time
import urllib.error
import urllib.request
from dataclasses import dataclass, field
from pathlib import Path
from typing import Any

from live import free_port

REPO = Path(__file__).resolve().parents[2]
DEPLOY = REPO / "deploy"
UNIT_SRC = "/opt/spanwright/src"
UNIT_VENV_BIN = "/opt/spanwright/venv/bin/"


def parse_unit(path: Path) -> dict[str, list[tuple[str, str]]]:
    """A systemd unit as {section: [(key, value), ...]} (continuation lines joined)."""
    sections: dict[str, list[tuple[str, str]]] = {}
    current: list[tuple[str, str]] | None = None
    pending = ""
    for raw in path.read_text(encoding="utf-8").splitlines():
        line = pending + raw.strip()
        pending = ""
        if line.endswith("\\"):
            pending = line[:-1] + " "
            continue
        if not line or line[0] in "#;":
            continue
        if line.startswith("[") and line.endswith("]"):
            current = sections.setdefault(line[1:-1], [])
            continue
        if current is None or "=" not in line:
            raise ValueError(f"{path.name}: cannot read line {raw!r}")
        key, value = line.split("=", 1)
        current.append((key.strip(), value.strip()))
    return sections


def unit_value(unit: dict[str, list[tuple[str, str]]], key: str, section: str = "Service") -> str:
    values = [v for k, v in unit.get(section, []) if k == key]
    if len(values) != 1:
        raise ValueError(f"expected exactly one {key}= in [{section}], found {len(values)}")
    return values[0]


def unit_environment(unit: dict[str, list[tuple[str, str]]]) -> dict[str, str]:
    """The unit's ``Environment=`` assignments (``EnvironmentFile=`` is the operator's)."""
    env: dict[str, str] = {}
    for k, v in unit.get("Service", []):
        if k == "Environment":
            for assignment in shlex.split(v):
                name, _, value = assignment.partition("=")
                env[name] = value
    return env


def local_argv(exec_start: str, instance: str = "1") -> list[str]:
    """``ExecStart=`` as an argv for this checkout (see the module docstring)."""
    line = exec_start.lstrip("-@:+!")
    line = line.replace("%i", instance).replace("%I", instance).replace("%%", "%")
    if "%" in line:
        raise ValueError(f"unsupported systemd specifier in {exec_start!r}")
    argv = shlex.split(line)
    exe = argv[0]
    if not exe.startswith(UNIT_VENV_BIN):
        raise ValueError(f"ExecStart should run a program from {UNIT_VENV_BIN}: {exe}")
    name = exe[len(UNIT_VENV_BIN) :]
    here = Path(sys.executable).parent / name
    if here.exists():
        head = [str(here)]
    elif name == "spanwright":
        head = [sys.executable, "-m", "service.cli"]
    elif shutil.which(name):
        head = [str(shutil.which(name))]
    else:
        raise FileNotFoundError(f"{name} (from ExecStart) is not installed here")
    rest = [a.replace(UNIT_SRC, str(REPO)) for a in argv[1:]]
    return head + rest


def worker_argv() -> list[str]:
    unit = parse_unit(DEPLOY / "spanwright-worker@.service")
    return local_argv(unit_value(unit, "ExecStart"))


def api_argv() -> tuple[list[str], dict[str, str]]:
    unit = parse_unit(DEPLOY / "spanwright-api.service")
    return local_argv(unit_value(unit, "ExecStart")), unit_environment(unit)


def http(
    method: str,
    url: str,
    body: Any = None,
    headers: dict[str, str] | None = None,
    timeout: float = 30.0,
) -> tuple[int, dict[str, str], bytes]:
    """One HTTP request on loopback: (status, headers, body); HTTP errors are returned."""
    data = None if body is None else json.dumps(body).encode()
    req = urllib.request.Request(url, data=data, method=method)
    if data is not None:
        req.add_header("Content-Type", "application/json")
    for k, v in (headers or {}).items():
        req.add_header(k, v)
    try:
        with urllib.request.urlopen(req, timeout=timeout) as resp:
            return resp.status, dict(resp.headers.items()), resp.read()
    except urllib.error.HTTPError as exc:
        return exc.code, dict(exc.headers.items()), exc.read()


def samples(text: str) -> dict[tuple[str, tuple[tuple[str, str], ...]], float]:
    """{(sample name, sorted labels): value} of a whole ``/metrics`` exposition, read with
    prometheus_client's own parser."""
    from prometheus_client.parser import text_string_to_metric_families

    out: dict[tuple[str, tuple[tuple[str, str], ...]], float] = {}
    for fam in text_string_to_metric_families(text):
        for s in fam.samples:
            out[(s.name, tuple(sorted(s.labels.items())))] = s.value
    return out


@dataclass
class Topology:
    """Redis + API + workers on loopback ports under ``tmp``; call :meth:`stop` always."""

    tmp: Path
    workers: int = 2
    web_workers: int = 2
    extra_env: dict[str, str] = field(default_factory=dict)
    redis_port: int = 0
    api_port: int = 0
    procs: dict[str, subprocess.Popen[bytes]] = field(default_factory=dict)

    @property
    def redis_url(self) -> str:
        return f"redis://127.0.0.1:{self.redis_port}/0"

    @property
    def base(self) -> str:
        return f"http://127.0.0.1:{self.api_port}"

    def _env(self) -> dict[str, str]:
        env = {k: v for k, v in os.environ.items() if not k.startswith("SPANWRIGHT_")}
        env.pop("PROMETHEUS_MULTIPROC_DIR", None)
        env["REDIS_URL"] = self.redis_url
        env["PYTHONPATH"] = str(REPO)
        env.update(self.extra_env)
        return env

    def _spawn(self, name: str, argv: list[str], env: dict[str, str]) -> None:
        log = open(self.tmp / f"{name}.log", "wb")  # noqa: SIM115 - closed by the process end
        self.procs[name] = subprocess.Popen(
            argv, cwd=REPO, env=env, stdout=log, stderr=subprocess.STDOUT, start_new_session=True
        )
        log.close()

    def log(self, name: str) -> str:
        p = self.tmp / f"{name}.log"
        return p.read_text(errors="replace") if p.exists() else ""

    def start_redis(self) -> None:
        self.redis_port = free_port()
        rdir = self.tmp / "redis"
        rdir.mkdir(exist_ok=True)
        argv = [
            shutil.which("redis-server") or "redis-server",
            str(DEPLOY / "redis.conf"),
            "--port",
            str(self.redis_port),
            "--dir",
            str(rdir),
        ]
        self._spawn("redis", argv, self._env())
        self._wait(lambda: self._redis_ping(), 15, "redis")

    def _redis_ping(self) -> bool:
        try:
            with socket.create_connection(("127.0.0.1", self.redis_port), timeout=1) as s:
                s.sendall(b"PING\r\n")
                return s.recv(16).startswith(b"+PONG")
        except OSError:
            return False

    def start_api(self) -> None:
        argv, unit_env = api_argv()
        self.api_port = free_port()
        env = self._env()
        env.update(unit_env)
        mdir = self.tmp / "metrics"
        shutil.rmtree(mdir, ignore_errors=True)  # what the unit's ExecStartPre does
        mdir.mkdir()
        env["PROMETHEUS_MULTIPROC_DIR"] = str(mdir)
        env["NUMBA_CACHE_DIR"] = os.environ.get("NUMBA_CACHE_DIR", str(self.tmp / "numba"))
        env["SPANWRIGHT_BIND"] = f"127.0.0.1:{self.api_port}"
        env["SPANWRIGHT_WEB_WORKERS"] = str(self.web_workers)
        self._spawn("api", argv, env)
        self._wait(lambda: self._get_ok("/healthz"), 60, "api")

    def start_workers(self, n: int | None = None) -> None:
        argv = worker_argv()
        env = self._env()
        env.pop("NUMBA_CACHE_DIR", None)
        for _ in range(self.workers if n is None else n):
            index = sum(1 for k in self.procs if k.startswith("worker"))
            self._spawn(f"worker{index}", argv, env)

    def wait_ready(self, workers: int, timeout: float = 60) -> None:
        """Until ``/readyz`` answers 200 and counts ``workers`` workers."""

        def ok() -> bool:
            try:
                status, _, body = http("GET", self.base + "/readyz", timeout=5)
            except OSError:
                return False
            return status == 200 and json.loads(body)["checks"]["workers"] >= workers

        self._wait(ok, timeout, "readyz")

    def _get_ok(self, path: str) -> bool:
        try:
            return http("GET", self.base + path, timeout=2)[0] == 200
        except OSError:
            return False

    def _wait(self, cond: Any, timeout: float, what: str) -> None:
        deadline = time.monotonic() + timeout
        while time.monotonic() < deadline:
            if cond():
                return
            dead = [n for n, p in self.procs.items() if p.poll() is not None]
            if dead:
                raise RuntimeError(f"{dead} exited while waiting for {what}:\n{self.log(dead[0])}")
            time.sleep(0.1)
        raise TimeoutError(f"{what} not up after {timeout} s")

    def stop(self, timeout: float = 15) -> None:
        """SIGTERM the API and workers, wait, then Redis; SIGKILL what outlives ``timeout``."""
        rest = [n for n in self.procs if n != "redis"]
        for names in (rest, [n for n in self.procs if n == "redis"]):
            for name in names:
                if self.procs[name].poll() is None:
                    _signal_group(self.procs[name], signal.SIGTERM)
            deadline = time.monotonic() + timeout
            for name in names:
                p = self.procs[name]
                try:
                    p.wait(max(0.1, deadline - time.monotonic()))
                except subprocess.TimeoutExpired:
                    _signal_group(p, signal.SIGKILL)
                    p.wait(5)

    def start(self) -> Topology:
        try:
            self.start_redis()
            self.start_api()
            self.start_workers()
            self.wait_ready(self.workers)
        except BaseException:
            self.stop()
            raise
        return self


def _signal_group(p: subprocess.Popen[bytes], sig: int) -> None:
    """Signal the process group of ``p`` (we started it with its own session)."""
    with contextlib.suppress(ProcessLookupError):
        os.killpg(p.pid, sig)
