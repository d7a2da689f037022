"""A rental frontier on the sizing page (issue 18 point 3): cost against deadline as an
inline SVG chart, the answer's deadline marked, the proven lower bound with the band
between it and the cost found, a table of the points and the caution. Positions are read
back through the axis each chart states on its ``<svg>`` (``data-x0`` .. ``data-y1``,
``data-left``, ``data-top``, ``data-plot-width``, ``data-plot-height``); the values are
written by hand here or are the JSON API's own (plumbing: the costs themselves are
checked against HiGHS in tests/service/test_rentals.py)."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from html import unescape
from typing import Any

import pytest

from service.web.sizings import frontier_chart
from tests.service.test_rentals import DEADLINES, RENTAL

NS = {"s": "http://www.w3.org/2000/svg"}


def point(deadline: float, *, cost: float | None = None, low: float | None = None,
          answer: bool = False) -> dict[str, Any]:  # fmt: skip
    """A frontier point written by hand; without a cost, a deadline no plan meets."""
    if cost is None:
        return {"deadline": deadline, "answer": answer, "feasible": False, "reason": "too short"}
    return {
        "deadline": deadline, "answer": answer, "feasible": True, "rent": {"cpu": 1},
        "cost": cost, "cost_lower_bound": low, "proven_optimal": cost == low, "gap": None,
    }  # fmt: skip


class Axis:
    """Value -> position on a chart, from the axis the ``<svg>`` states."""

    def __init__(self, root: ET.Element) -> None:
        self.x0, self.x1 = float(root.get("data-x0", "")), float(root.get("data-x1", ""))
        self.y0, self.y1 = float(root.get("data-y0", "")), float(root.get("data-y1", ""))
        self.left, self.top = float(root.get("data-left", "")), float(root.get("data-top", ""))
        self.w = float(root.get("data-plot-width", ""))
        self.h = float(root.get("data-plot-height", ""))

    def x(self, v: float) -> float:
        return self.left + self.w * (v - self.x0) / (self.x1 - self.x0)

    def y(self, v: float) -> float:
        return self.top + self.h * (1 - (v - self.y0) / (self.y1 - self.y0))


def _pairs(text: str) -> list[tuple[float, float]]:
    return [(float(a), float(b)) for a, b in (p.split(",") for p in text.split())]


def test_band_runs_from_the_bound_up_to_the_cost() -> None:
    """Three points by hand (30 min: 2.10, at least 1.60; 45 min: 1.30, at least 1.10;
    1 h, the answer: 0.80, proven) and a 15 min deadline no plan meets: the band's upper
    edge passes through each cost, left to right, its lower edge back through each bound;
    the dots of each series sit on the values; the answer's deadline is a marked line
    labelled "answer: 1h"; the band says in words what it is."""
    pts = [
        point(900),
        point(1800, cost=2.1, low=1.6),
        point(2700, cost=1.3, low=1.1),
        point(3600, cost=0.8, low=0.8, answer=True),
    ]
    root = ET.fromstring(frontier_chart(pts))
    ax = Axis(root)
    (band,) = root.findall("s:polygon[@class='band']", NS)
    want = [(1800, 2.1), (2700, 1.3), (3600, 0.8), (3600, 0.8), (2700, 1.1), (1800, 1.6)]
    got = _pairs(band.get("points", ""))
    assert got == [pytest.approx((ax.x(d), ax.y(v)), abs=0.01) for d, v in want]
    title = band.find("s:title", NS)
    assert title is not None and "between the proven lower bound and the cost found" in (
        title.text or ""
    )
    for series, values in (("cost found", [2.1, 1.3, 0.8]), ("proven lower bound",
                                                          [1.6, 1.1, 0.8])):  # fmt: skip
        dots = root.findall(f"s:circle[@data-series='{series}']", NS)
        assert [(float(c.get("cx", "")), float(c.get("cy", ""))) for c in dots] == [
            pytest.approx((ax.x(d), ax.y(v)), abs=0.01)
            for d, v in zip((1800, 2700, 3600), values, strict=True)
        ]
    (mark,) = root.findall("s:line[@class='x-mark']", NS)
    assert float(mark.get("data-at", "")) == 3600
    assert "answer: 1h" in [t.text for t in root.iter(f"{{{NS['s']}}}text")]
    assert ax.y0 == 0  # costs from zero


def test_a_lone_point_gets_a_bar_and_none_no_chart() -> None:
    """One deadline with a plan (cost 3, at least 2) and one without: the band is a bar
    8 px wide from the bound up to the cost; no deadline with a plan, no chart."""
    root = ET.fromstring(frontier_chart([point(600), point(1200, cost=3.0, low=2.0)]))
    ax = Axis(root)
    (bar,) = root.findall("s:rect[@class='band']", NS)
    assert float(bar.get("width", "")) == 8
    assert float(bar.get("x", "")) == pytest.approx(ax.x(1200) - 4, abs=0.01)
    assert float(bar.get("y", "")) == pytest.approx(ax.y(3.0), abs=0.01)
    assert float(bar.get("height", "")) == pytest.approx(ax.y(2.0) - ax.y(3.0), abs=0.02)
    assert frontier_chart([point(600), point(900)]) == ""


def test_rental_page_shows_the_frontier(client: Any) -> None:
    """Through the app: the page of a rental with ``deadlines`` has the cost-by-deadline
    chart with a dot per deadline that has a plan, at the JSON's cost and bound, the
    answer's 1 h marked, the band; a table row per deadline, the answer's tagged, the
    15 min deadline saying no plan meets it and why; and the caution in the same card."""
    doc = client.post(
        "/v1/sizings", json={**RENTAL, "deadlines": DEADLINES}, headers={"Prefer": "wait=10"}
    ).get_json()
    assert doc["status"] == "done", doc
    points = doc["result"]["frontier"]
    feasible = [p for p in points if p["feasible"]]
    html = unescape(client.get(f"/sizings/{doc['id']}").get_data(as_text=True))
    card = re.search(r'<div class="card frontier">.*?</div>', html, re.S)
    assert card is not None
    svg = re.search(r'<svg [^>]*class="chart frontier".*?</svg>', card.group(0), re.S)
    assert svg is not None
    root = ET.fromstring(svg.group(0))
    ax = Axis(root)
    for series, key in (("cost found", "cost"), ("proven lower bound", "cost_lower_bound")):
        dots = root.findall(f"s:circle[@data-series='{series}']", NS)
        assert [(float(c.get("cx", "")), float(c.get("cy", ""))) for c in dots] == [
            pytest.approx((ax.x(p["deadline"]), ax.y(p[key])), abs=0.01) for p in feasible
        ]
    (mark,) = root.findall("s:line[@class='x-mark']", NS)
    assert float(mark.get("data-at", "")) == 3600
    assert len(root.findall("s:polygon[@class='band']", NS)) == 1
    body = re.search(r'<table class="frontier">.*?<tbody>(.*?)</tbody>', card.group(0), re.S)
    assert body is not None
    rows = re.findall(r"<tr( class=\"answer\")?>(.*?)</tr>", body.group(1), re.S)
    assert [bool(tagged) for tagged, _ in rows] == [p["answer"] for p in points]
    cells = [re.findall(r"<td[^>]*>(.*?)</td>", row, re.S) for _, row in rows]
    assert cells[0][0] == "15m 00s" and cells[0][4].startswith("no plan meets it: 5 job(s)")
    assert [c[1] for c in cells[1:]] == [f"{p['cost']:,.2f}" for p in feasible]
    assert [c[2] for c in cells[1:]] == [f"{p['cost_lower_bound']:,.2f}" for p in feasible]
    assert '1h 00m 00s<span class="tag">answer</span>' in cells[3][0]
    assert "not a purchasing decision" in card.group(0)
