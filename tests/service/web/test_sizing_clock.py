"""Clock times on the sizing page (issue 19 point 2: "pages and the CLI show clock times
(in the timestamp's offset) on axes and in sentences"). A sizing asked with ``start_at``
and ``deadline_at`` says its deadline and when its plan finishes as times on that clock,
labels the deadline's line on its chart with the time, and says when the charts' time 0
is; a rental's frontier gives each deadline's time. Every expected time is worked by hand
from the request's timestamps (RFC 3339 section 5.6: a time with its offset), and
2026-12-05 is a Saturday (2026-01-01 is a Thursday, and 338 days later is 48 weeks and
2 days)."""

from __future__ import annotations

import copy
import re
import xml.etree.ElementTree as ET
from html import unescape
from typing import Any

from service.web.sizings import sizing_context
from tests.service.test_rentals import RENTAL

NS = {"s": "http://www.w3.org/2000/svg"}


def _mark_labels(svg: str) -> list[str]:
    """The texts of a chart's marked lines' labels."""
    root = ET.fromstring(svg)
    return [t.text or "" for t in root.iter(f"{{{NS['s']}}}text") if t.get("class") == "mark-label"]


def test_sizing_page_on_a_clock_gives_the_times(client: Any, priced_sizing: dict[str, Any]) -> None:
    """The hand-checked priced sizing (conftest.py: 2 nodes, the plan ends at 3600 s),
    its deadline given as 03:00 on a clock starting at 02:00, both at +01:00: the page's
    sentence names the deadline as 2026-12-04 03:00 +01:00, one hour after the start at
    02:00, and the plan's end as 03:00 too (02:00 plus 3600 s); the chart's deadline line
    reads "deadline 1h · 03:00 +01:00" (the start's day, so no date); the chart's note
    says time 0 is 02:00 +01:00."""
    body = {k: v for k, v in priced_sizing.items() if k != "deadline"}
    body |= {"start_at": "2026-12-04T02:00:00+01:00", "deadline_at": "2026-12-04T03:00:00+01:00"}
    doc = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=5"}).get_json()
    assert doc["status"] == "done", doc
    html = unescape(client.get(f"/sizings/{doc['id']}").get_data(as_text=True))
    assert (
        "2 nodes meet the deadline of 2026-12-04 03:00 +01:00 (1h 00m 00s after the start "
        "at 2026-12-04 02:00 +01:00) for these estimates: their plan finishes in 1h 00m 00s, "
        "at 2026-12-04 03:00 +01:00, at an estimated cost of 3.60."
    ) in html
    curve = re.search(r'<svg [^>]*class="chart curve".*?</svg>', html, re.S)
    assert curve is not None
    assert "deadline 1h · 03:00 +01:00" in _mark_labels(curve.group(0))
    assert "Times count from the start at 2026-12-04 02:00 +01:00." in html


def test_clock_times_keep_the_offset_and_name_a_later_day() -> None:
    """A result written by hand on a clock at -05:00 starting 23:30 on Friday 2026-12-04,
    the deadline one hour later at 00:30 on Saturday 2026-12-05 and the plan ending after
    30 min, at midnight: every time is in -05:00 (never turned into UTC), the sentence has
    the dates, and the chart's label, short, names the later day ("Sat 00:30 -05:00")."""
    result = {
        "nodes_needed": 1, "nodes_lower_bound": 1, "bound_source": "total_work",
        "proven_optimal": True, "deadline": 3600.0, "makespan": 1800.0, "slack": 1800.0,
        "curve": [{"nodes": 1, "makespan": 1800.0, "lower_bound": 1800.0,
                   "meets_deadline": True}],
        "clock": {"start_at": "2026-12-04T23:30:00-05:00",
                  "deadline_at": "2026-12-05T00:30:00-05:00"},
    }  # fmt: skip
    ctx = sizing_context({"id": "y", "status": "done", "result": result})
    assert ctx["sentence"].startswith(
        "1 node meets the deadline of 2026-12-05 00:30 -05:00 (1h 00m 00s after the start at "
        "2026-12-04 23:30 -05:00) for these estimates: its plan finishes in 30m 00s, at "
        "2026-12-05 00:00 -05:00."
    )
    assert "deadline 1h · Sat 00:30 -05:00" in _mark_labels(ctx["curve_chart"])
    assert ctx["clock_note"] == "Times count from the start at 2026-12-04 23:30 -05:00."


def test_sizing_page_without_a_clock_names_no_time() -> None:
    """The same result without a ``clock`` (a deadline in seconds only): durations alone,
    the deadline's label as before, no note on time 0."""
    result = {
        "nodes_needed": 1, "nodes_lower_bound": 1, "bound_source": "total_work",
        "proven_optimal": True, "deadline": 3600.0, "makespan": 1800.0, "slack": 1800.0,
        "curve": [{"nodes": 1, "makespan": 1800.0, "lower_bound": 1800.0,
                   "meets_deadline": True}],
    }  # fmt: skip
    ctx = sizing_context({"id": "y", "status": "done", "result": result})
    assert "+" not in ctx["sentence"] and "-05:00" not in ctx["sentence"]
    assert "deadline 1h" in _mark_labels(ctx["curve_chart"])
    assert "clock_note" not in ctx


def test_rental_frontier_on_a_clock_gives_each_deadlines_time() -> None:
    """A rental result written by hand with a frontier at 30 min and 1 h (the answer) on a
    clock starting 2026-12-04 22:00 +09:00: the table's deadlines read "30m 00s
    (2026-12-04 22:30 +09:00)" and "1h 00m 00s (2026-12-04 23:00 +09:00)", the chart's
    answer line "answer: 1h · 23:00 +09:00", and the sentence names the deadline's time."""
    pts = [
        {"deadline": 1800.0, "answer": False, "feasible": True, "rent": {"cpu": 2},
         "cost": 1.6, "cost_lower_bound": 1.6, "proven_optimal": True, "gap": 0.0},
        {"deadline": 3600.0, "answer": True, "feasible": True, "rent": {"cpu": 1},
         "cost": 0.8, "cost_lower_bound": 0.8, "proven_optimal": True, "gap": 0.0},
    ]  # fmt: skip
    result = {
        "rent": {"cpu": 1}, "cost": 0.8, "cost_lower_bound": 0.8, "bound_source": "work",
        "proven_optimal": True, "gap": 0.0, "deadline": 3600.0, "billing": "second",
        "stop_reason": "proved_optimal", "frontier": pts, "caution": "Estimates only.",
        "clock": {"start_at": "2026-12-04T22:00:00+09:00",
                  "deadline_at": "2026-12-04T23:00:00+09:00"},
    }  # fmt: skip
    ctx = sizing_context({"id": "r", "status": "done", "result": result})
    assert [r["deadline"] for r in ctx["frontier_rows"]] == [
        "30m 00s (2026-12-04 22:30 +09:00)",
        "1h 00m 00s (2026-12-04 23:00 +09:00)",
    ]
    assert "answer: 1h · 23:00 +09:00" in _mark_labels(ctx["frontier_chart"])
    assert ctx["sentence"].startswith(
        "Rent 1 cpu node to meet the deadline of 2026-12-04 23:00 +09:00 (1h 00m 00s after "
        "the start at 2026-12-04 22:00 +09:00) for these estimates"
    )


def test_rental_page_on_a_clock_labels_the_timeline_deadline(client: Any) -> None:
    """The rental of tests/service/test_rentals.py (deadline 3600 s) with ``start_at``
    06:00 +02:00: the API echoes the deadline as 07:00 +02:00 (06:00 plus 3600 s), and
    the page's sentence and the timeline's deadline label both give that time."""
    body = copy.deepcopy(RENTAL) | {"start_at": "2026-12-04T06:00:00+02:00"}
    doc = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=10"}).get_json()
    assert doc["status"] == "done", doc
    html = unescape(client.get(f"/sizings/{doc['id']}").get_data(as_text=True))
    assert "to meet the deadline of 2026-12-04 07:00 +02:00 (1h 00m 00s after the start" in html
    svg = re.search(r'<svg [^>]*class="timeline".*?</svg>', html, re.S)
    assert svg is not None
    labels = _mark_labels(svg.group(0))
    assert any(label.endswith("· 2026-12-04 07:00 +02:00") for label in labels), labels
