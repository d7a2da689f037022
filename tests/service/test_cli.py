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
        assert body["name"].startswith("Lantern Hill")
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
        proc.terminate()
        proc.wait(10)
