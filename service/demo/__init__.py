"""Demo batches of an invented animation studio, "Lantern Hill", as ``POST /v1/plans`` bodies.

``spanwright serve --demo`` submits each file through the API itself (the one-way data
path), with the file name as ``Idempotency-Key`` so a restart against real Redis does not
plan them twice.
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

DEMO_DIR = Path(__file__).resolve().parent


def demo_files() -> list[Path]:
    """The demo request bodies, in a stable order."""
    return sorted(DEMO_DIR.glob("*.json"))


def submit_all(client: Any, wait: float = 10.0) -> list[tuple[str, int, str]]:
    """POST every demo batch with a Flask test ``client``; returns (file, status, Location)."""
    out: list[tuple[str, int, str]] = []
    for path in demo_files():
        resp = client.post(
            "/v1/plans",
            data=path.read_bytes(),
            content_type="application/json",
            headers={"Idempotency-Key": f'"demo-{path.stem}"', "Prefer": f"wait={wait:g}"},
        )
        out.append((path.name, resp.status_code, resp.headers.get("Location", "")))
    return out
