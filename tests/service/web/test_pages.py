"""The pages through the Flask test client: list links to plans, plan pages draw them."""

from __future__ import annotations

import time
import xml.etree.ElementTree as ET
from typing import Any

NS = {"s": "http://www.w3.org/2000/svg"}


def finished(client: Any, body: dict[str, Any]) -> dict[str, Any]:
    loc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).headers["Location"]
    for _ in range(500):
        doc = client.get(loc).get_json()
        if doc["status"] == "done":
            return doc
        time.sleep(0.02)
    raise AssertionError("not done")


def body(n: int = 200, m: int = 16) -> dict[str, Any]:
    return {
        "jobs": [
            {"id": f"lh_sq{i // 40:02d}_f{i:04d}", "duration": 200 + (53 * i) % 700,
             "group": f"lh_sq{i // 40:02d}"}
            for i in range(n)
        ],
        "node_count": m,
        "deadline": 7200,
    }  # fmt: skip


def test_list_page_links_to_plan(client: Any) -> None:
    """GET / lists the caller's plans with a link to each plan page."""
    doc = finished(client, body(20, 3))
    html = client.get("/").get_data(as_text=True)
    assert f'href="/plans/{doc["id"]}"' in html


def test_plan_page_has_every_job_and_node(client: Any) -> None:
    """The plan page's timeline has one bar per job (all 200 ids) and one row per node."""
    doc = finished(client, body())
    resp = client.get(f"/plans/{doc['id']}")
    assert resp.status_code == 200 and resp.mimetype == "text/html"
    html = resp.get_data(as_text=True)
    svg = html[html.index("<svg") : html.index("</svg>") + 6]
    root = ET.fromstring(svg)
    assert len(root.findall(".//s:rect[@class='job']", NS)) == 200
    assert len(root.findall(".//s:g[@class='node-row']", NS)) == 16
    assert "lower bound" in html and "deadline" in html
    assert "lh_sq00" in html  # legend text, not colour alone


def test_unknown_plan_page_is_404(client: Any) -> None:
    """An unknown id is a 404 problem, as in the API."""
    assert client.get("/plans/0123456789abcdef01234").status_code == 404
