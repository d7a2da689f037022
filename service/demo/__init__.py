"""Demo batches of an invented animation studio, "Quillfern Vale", as API request bodies.

Each ``*.json`` file here is a ``POST /v1/plans`` body, and together they tell the story
of one night on the farm:

- ``trailer_comp``: planned by ``auto``, proven optimal, and the deadline is met;
- ``dailies_transcode``: 8 nodes miss the 45 min deadline (the total work alone proves
  it); its ``.sizing.json`` (a ``POST /v1/sizings`` body) says 12 nodes do it, 4 more;
- ``ep03_lighting``: provably unreachable whatever the node count, because the hero shot
  alone runs longer than the night (the ``longest_job`` bound);
- ``ep05_fx_caches``: met on 6 nodes; its ``.replan.json`` holds the events after one
  hour, when ``node-04`` is lost (``POST /v1/plans/{id}/replan``); the re-plan of what is
  left on the other five still meets the deadline;
- ``ep04_stage_graph``: layers, comp and encode waiting for each other under a licence
  limit.

``spanwright serve --demo`` submits the plans and the sizing through the API itself (the
one-way data path), with the file name as ``Idempotency-Key`` so a restart against real
Redis does not plan them twice. The re-plan is not pre-seeded: its events name the id of
a finished plan, which exists only once the server runs (the README shows the command).
"""

from __future__ import annotations

from pathlib import Path
from typing import Any

DEMO_DIR = Path(__file__).resolve().parent

#: suffixes of the bodies that are not plan requests
SIZING, REPLAN = ".sizing.json", ".replan.json"


def demo_files() -> list[Path]:
    """The demo plan request bodies, in a stable order."""
    return sorted(p for p in DEMO_DIR.glob("*.json") if not p.name.endswith((SIZING, REPLAN)))


def sizing_files() -> list[Path]:
    """The demo sizing request bodies (``POST /v1/sizings``), in a stable order."""
    return sorted(DEMO_DIR.glob("*" + SIZING))


def replan_files() -> list[Path]:
    """The demo re-plan events (``POST /v1/plans/{id}/replan`` of the plan of the same
    stem), in a stable order."""
    return sorted(DEMO_DIR.glob("*" + REPLAN))


def submit_all(client: Any, wait: float = 10.0) -> list[tuple[str, int, str]]:
    """POST every demo plan, then every demo sizing, with a Flask test ``client``; returns
    (file, status, Location)."""
    out: list[tuple[str, int, str]] = []
    for route, paths in (("/v1/plans", demo_files()), ("/v1/sizings", sizing_files())):
        for path in paths:
            key = path.name.removesuffix(".json").replace(".", "-")
            resp = client.post(
                route,
                data=path.read_bytes(),
                content_type="application/json",
                headers={
                    "Idempotency-Key": f'"demo-{key}"',
                    "Prefer": f"wait={wait:g}",
                },
            )
            out.append((path.name, resp.status_code, resp.headers.get("Location", "")))
    return out
