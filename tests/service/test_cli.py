"""``spanwright serve`` and ``spanwright worker`` as commands, and the demo batches."""

from __future__ import annotations

import json
import os
import subprocess
import sys
import time
import urllib.request
from pathlib import Path
from typing import Any

import pytest
from live import stop

from service.cli import main
from service.demo import demo_files
from service.reading import read_instance
from service.schemas import load_plan_request
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[2]


def test_serve_refuses_a_public_address(capsys: pytest.CaptureFixture[str]) -> None:
    """Keyless (no SPANWRIGHT_KEYS_FILE), only loopback addresses are served (the contract,
    "Tenants and keys")."""
    assert main(["serve", "--host", "0.0.0.0"]) == 2
    assert "loopback" in capsys.readouterr().err


def _serve(port: int) -> subprocess.Popen[str]:
    """``spanwright serve --port PORT`` as a process on loopback, embedded store."""
    env = {k: v for k, v in os.environ.items() if k != "REDIS_URL"}
    env["PYTHONPATH"] = str(ROOT)
    return subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--port", str(port)],
        cwd=ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.PIPE,
        text=True,
    )


def _stderr_until(proc: subprocess.Popen[str], word: str, seconds: float) -> list[str]:
    """Lines of ``proc``'s standard error up to the first holding ``word`` (or its end),
    waiting at most ``seconds`` in all (a reader thread, so a silent process cannot hang
    the test)."""
    import queue
    import threading

    assert proc.stderr is not None
    lines: queue.Queue[str] = queue.Queue()
    threading.Thread(target=lambda: [lines.put(ln) for ln in proc.stderr], daemon=True).start()
    out: list[str] = []
    end = time.monotonic() + seconds
    while not out or word not in out[-1]:
        try:
            out.append(lines.get(timeout=max(0.0, end - time.monotonic())).rstrip("\n"))
        except queue.Empty:
            break
    return out


def test_serve_on_a_taken_port_fails_in_one_line() -> None:
    """A second server on a port already listened on: exit 1 (a runtime failure; POSIX: a
    non-zero status is failure), one clear line, and never "listening" (the issue: a
    second ``serve`` "prints 'listening' before failing"). The port is held by a plain
    listening socket of this test (loopback only)."""
    import socket

    with socket.create_server(("127.0.0.1", 0)) as held:
        port = held.getsockname()[1]
        proc = _serve(port)
        try:
            _, err = proc.communicate(timeout=60)
        finally:
            proc.kill()
    assert proc.returncode == 1
    assert err.splitlines() == [
        f"spanwright: cannot listen on 127.0.0.1 port {port}: Address already in use "
        "(another program listens there; stop it or give another --port)"
    ]


def test_serve_says_listening_after_binding_and_gives_the_page_url() -> None:
    """``serve --port 0``: the "listening" line names the page URL (the web pages at /,
    not only the API), and the port it names already accepts connections when the line is
    read; the page answers HTML there."""
    import re
    import socket

    proc = _serve(0)
    try:
        lines = _stderr_until(proc, "listening", 60)
        assert lines, "serve printed nothing"
        m = re.fullmatch(
            r"spanwright: listening on (http://127\.0\.0\.1:(\d+)/) \(pages; the API is "
            r"under http://127\.0\.0\.1:\d+/v1/\)",
            lines[-1],
        )
        assert m, lines
        socket.create_connection(("127.0.0.1", int(m.group(2))), timeout=5).close()
        with urllib.request.urlopen(m.group(1), timeout=10) as r:
            assert r.status == 200
            assert r.headers.get_content_type() == "text/html"
    finally:
        stop(proc)


def test_worker_needs_redis(monkeypatch: pytest.MonkeyPatch, capsys: Any) -> None:
    """A separate worker without REDIS_URL has nothing to work on: usage error."""
    monkeypatch.delenv("REDIS_URL", raising=False)
    assert main(["worker"]) == 2
    assert "REDIS_URL" in capsys.readouterr().err


def test_demo_batches_are_valid_requests() -> None:
    """Each demo file passes the API's validation; one of them has about 200 jobs."""
    files = demo_files()
    assert len(files) >= 2
    sizes = []
    for path in files:
        body = json.loads(path.read_text())
        data = load_plan_request(body, Settings())
        sizes.append(read_instance(data).n)
        assert body["name"].startswith("Quillfern Vale")
    assert max(sizes) >= 190


@pytest.mark.slow
def test_serve_demo_shows_finished_plans(tmp_path: Path) -> None:
    """``spanwright serve --demo`` with no REDIS_URL: GET /v1/plans lists the demo, done."""
    import socket

    with socket.socket() as sock:
        sock.bind(("127.0.0.1", 0))
        port = sock.getsockname()[1]
    env = {k: v for k, v in os.environ.items() if k != "REDIS_URL"}
    env["PYTHONPATH"] = str(ROOT)
    proc = subprocess.Popen(
        [sys.executable, "-m", "service.cli", "serve", "--demo", "--port", str(port)],
        cwd=ROOT,
        env=env,
        stdout=subprocess.DEVNULL,
        stderr=subprocess.DEVNULL,
    )
    try:
        url = f"http://127.0.0.1:{port}/v1/plans"
        end = time.monotonic() + 60
        while True:
            try:
                with urllib.request.urlopen(url, timeout=5) as r:
                    doc = json.loads(r.read())
                break
            except OSError:
                if time.monotonic() > end or proc.poll() is not None:
                    raise
                time.sleep(0.2)
        assert len(doc["items"]) == len(demo_files())
        assert {i["status"] for i in doc["items"]} == {"done"}
    finally:
        stop(proc)
