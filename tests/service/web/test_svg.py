"""The timeline SVG: one row per node, one bar per job, marks where they belong."""

from __future__ import annotations

import xml.etree.ElementTree as ET

import pytest

from service.web.pages import certificate_sentence, plan_context
from service.web.svg import fmt_duration, timeline
from workers.planning import Instance, solve

NS = {"s": "http://www.w3.org/2000/svg"}


def plan_dict(n: int = 200, m: int = 12, deadline: float = 9000.0) -> dict:
    durations = [300 + (37 * i) % 900 for i in range(n)]
    inst = Instance.build(durations, m, deadline=deadline)
    return solve(inst, "longest_first").to_dict()


def test_one_bar_per_job_one_row_per_node() -> None:
    """A 200-job plan on 12 nodes draws 200 bars in 12 rows, each job id once."""
    res = plan_dict()
    root = ET.fromstring(timeline(res))
    rows = root.findall(".//s:g[@class='node-row']", NS)
    bars = root.findall(".//s:rect[@class='job']", NS)
    assert len(rows) == 12 and len(bars) == 200
    assert sorted(b.get("data-job") for b in bars) == sorted(
        j["id"] for a in res["assignment"] for j in a["jobs"]
    )


def test_deadline_and_bound_lines_are_placed_on_the_time_axis() -> None:
    """The deadline line sits at left + width * deadline / span, the bound mark likewise."""
    res = plan_dict(deadline=9000.0)
    root = ET.fromstring(timeline(res))
    span = float(root.get("data-span"))
    left = float(root.get("data-left"))
    width = float(root.get("data-plot-width"))
    dl = root.find(".//s:line[@class='deadline']", NS)
    lb = root.find(".//s:line[@class='lower-bound']", NS)
    assert float(dl.get("x1")) == pytest.approx(left + width * 9000.0 / span, abs=0.01)
    assert float(lb.get("x1")) == pytest.approx(left + width * res["lower_bound"] / span, abs=0.01)


def test_groups_have_legend_text() -> None:
    """Colour is never the only cue: every group appears as text in the legend."""
    res = plan_dict(n=20, m=3)
    groups = {j["id"]: ("sh010" if i % 2 else "sh020") for a in res["assignment"]
              for i, j in enumerate(a["jobs"])}  # fmt: skip
    svg = timeline(res, groups)
    root = ET.fromstring(svg)
    legend = [t.text for t in root.findall(".//s:g[@class='legend-item']/s:text", NS)]
    assert sorted(legend) == ["sh010", "sh020"]


def test_certificate_sentence() -> None:
    """The sentence states makespan, bound and gap, and the deadline verdict."""
    res = plan_dict()
    text = certificate_sentence(res)
    assert fmt_duration(res["makespan"]) in text
    if not res["proven_optimal"]:
        assert f"{100 * res['gap']:.2f}%" in text
    assert "deadline" in text


def test_plan_context_refreshes_while_working() -> None:
    """A queued or solving plan's page refreshes itself (no JavaScript needed)."""
    assert plan_context({"id": "x", "status": "solving"}, {})["refresh"]
    assert plan_context({"id": "x", "status": "done", "result": plan_dict()}, {})["refresh"] is None


@pytest.mark.parametrize(("s", "text"), [(3725, "1h 02m 05s"), (59.5, "59.5s"), (600, "10m 00s")])
def test_fmt_duration(s: float, text: str) -> None:
    """Durations read as hours, minutes and seconds (common practice)."""
    assert fmt_duration(s) == text


def test_list_rows_show_the_deadline_verdict() -> None:
    """List rows read the stored summary: met / missed / '-' when no deadline was given."""
    from service.web.pages import list_rows

    items = [
        {"id": "a", "status": "done", "summary": {"makespan": 10, "deadline_met": True}},
        {"id": "b", "status": "done", "summary": {"makespan": 10, "deadline_met": False}},
        {"id": "c", "status": "queued"},
    ]
    assert [r["met"] for r in list_rows(items)] == ["met", "missed", "-"]


def test_plan_page_states_the_deadline_confidence() -> None:
    """With a confidence block the facts give P(meet deadline) and the quantiles."""
    res = plan_dict()
    res["confidence"] = {
        "deadline_probability": 0.93, "samples": 1000,
        "makespan_p50": 7000.0, "makespan_p90": 7400.0, "makespan_p99": 7900.0,
    }  # fmt: skip
    facts = dict(plan_context({"id": "x", "status": "done", "result": res}, {})["facts"])
    assert facts["deadline met in"] == "93.0% of 1000 runs"
    assert facts["makespan p50 / p90 / p99"] == "1h 56m 40s / 2h 03m 20s / 2h 11m 40s"
