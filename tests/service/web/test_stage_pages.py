"""A stage-graph plan's page (issue 17 point 6): slots as lanes of a node, the critical path
marked by more than colour, what a job waits for on hover, and limit usage over time under
the timeline (a step chart per limit with its capacity line); plain plans unchanged.

The hand-checked plan (:data:`HAND`) is the issue's example batch (three layers using a
licence of capacity 2, a comp waiting for the layers, an encode waiting for the comp) with
a feasible plan worked out by hand; the pages' numbers are checked against it, and the
limit chart of plans the service makes is checked against a recount written here.
"""

from __future__ import annotations

import copy
import json
import random
import re
import time
import xml.etree.ElementTree as ET
from itertools import pairwise
from pathlib import Path
from typing import Any

import pytest
from stage_bodies import issue_graph

from service.demo import demo_files
from service.web.pages import plan_context
from service.web.stage_svg import StageRequest, limit_chart
from service.web.svg import timeline

NS = {"s": "http://www.w3.org/2000/svg"}

#: the issue's example batch
BODY: dict[str, Any] = issue_graph(
    {"bg": 600, "fg": 900, "fx": 450, "comp": 300, "encode": 120},
    licence="lumen_licence",
    prefix="sh12_",
)

#: a plan of BODY worked out by hand: bg and fg on node-01's two slots from 0, fx on
#: node-02 once bg has freed a licence (600 to 1050), then comp and encode on node-03 at
#: speed 2 (300 / 2 = 150 s from 1050, 120 / 2 = 60 s from 1200): makespan 1260 s. The
#: critical path by the durations is fg (the longest layer) -> comp -> encode.
HAND: dict[str, Any] = {
    "makespan": 1260.0,
    "lower_bound": 1110.0,
    "bound_source": "critical_path",
    "bounds": {"critical_path": 1110.0},
    "gap": 150 / 1110,
    "proven_optimal": False,
    "method": "list",
    "worst_case_ratio": None,
    "stop_reason": "heuristic",
    "solve_seconds": 0.01,
    "deadline": None,
    "nodes": 3,
    "jobs": 5,
    "certificate": {"jobs": ["sh12_fg", "sh12_comp", "sh12_encode"]},
    "stages": {
        "arcs": 4,
        "limits": {"lumen_licence": 2},
        "slots": 4,
        "critical_path": ["sh12_fg", "sh12_comp", "sh12_encode"],
    },
    "assignment": [
        {"node": "node-01", "slots": 2, "load": 900.0, "jobs": [
            {"id": "sh12_bg", "slot": 0, "start": 0.0, "end": 600.0},
            {"id": "sh12_fg", "slot": 1, "start": 0.0, "end": 900.0},
        ]},
        {"node": "node-02", "slots": 1, "load": 1050.0, "jobs": [
            {"id": "sh12_fx", "slot": 0, "start": 600.0, "end": 1050.0},
        ]},
        {"node": "node-03", "slots": 1, "load": 1260.0, "jobs": [
            {"id": "sh12_comp", "slot": 0, "start": 1050.0, "end": 1200.0},
            {"id": "sh12_encode", "slot": 0, "start": 1200.0, "end": 1260.0},
        ]},
    ],
}  # fmt: skip

#: licences in use in HAND, by hand: bg and fg from 0, fg and fx from 600 (still 2, one
#: step), fx alone from 900, none from 1050 to the end at 1260
HAND_STEPS = [(0.0, 900.0, 2), (900.0, 1050.0, 1), (1050.0, 1260.0, 0)]


def hand() -> dict[str, Any]:
    return copy.deepcopy(HAND)


def graph() -> StageRequest:
    return StageRequest.from_body(BODY)


def hand_timeline() -> ET.Element:
    return ET.fromstring(timeline(hand(), waits=graph().after))


def bars(root: ET.Element) -> dict[str, ET.Element]:
    return {b.get("data-job"): b for b in root.findall(".//s:rect[@class='job']", NS)}


def box(el: ET.Element) -> tuple[float, float, float, float]:
    """(x, y, width, height) of a rect."""
    return tuple(float(el.get(k)) for k in ("x", "y", "width", "height"))  # type: ignore[return-value]


# -- slots as lanes ------------------------------------------------------------------------
def test_a_node_with_two_slots_gets_two_thin_lanes_under_one_label() -> None:
    """Issue 17 point 6, "slots as lanes of a node": node-01 (2 slots) has one label and two
    lanes, each thinner than a one-slot node's row; node-02 and node-03 one lane each; each
    job's bar lies inside the lane of its slot (bg in slot 0, fg in slot 1, by HAND)."""
    root = hand_timeline()
    rows = {g.get("data-node"): g for g in root.findall(".//s:g[@class='node-row']", NS)}
    assert list(rows) == ["node-01", "node-02", "node-03"]
    lanes = {n: g.findall("s:rect[@class='lane']", NS) for n, g in rows.items()}
    assert {n: len(v) for n, v in lanes.items()} == {"node-01": 2, "node-02": 1, "node-03": 1}
    assert [len(g.findall("s:text[@class='node-label']", NS)) for g in rows.values()] == [1] * 3
    assert max(box(r)[3] for r in lanes["node-01"]) < box(lanes["node-02"][0])[3]
    top0, top1 = (box(r)[1] for r in lanes["node-01"])
    assert top1 > top0
    slot_of = {"sh12_bg": 0, "sh12_fg": 1, "sh12_fx": 0, "sh12_comp": 0, "sh12_encode": 0}
    node_of = {"sh12_bg": "node-01", "sh12_fg": "node-01", "sh12_fx": "node-02",
               "sh12_comp": "node-03", "sh12_encode": "node-03"}  # fmt: skip
    for jid, bar in bars(root).items():
        lane = lanes[node_of[jid]][slot_of[jid]]
        assert bar.get("data-slot") == str(slot_of[jid])
        _, ly, _, lh = box(lane)
        _, by, _, bh = box(bar)
        assert ly <= by and by + bh <= ly + lh, jid


# -- the critical path ---------------------------------------------------------------------
def test_critical_path_is_marked_by_outline_and_texture_not_colour_alone() -> None:
    """Issue 17 point 6, "marks the critical path", and WCAG 2.1 success criterion 1.4.1
    "Use of Color": each job of stages.critical_path (fg, comp, encode) has a mark over
    exactly its bar with a stroke (an outline) and a pattern fill whose tile draws a
    texture; the other jobs have none; the legend names the mark in text with the same
    swatch, and each marked bar's hover text says it is on the critical path."""
    root = hand_timeline()
    marks = {m.get("data-job"): m for m in root.findall(".//s:rect[@class='critical']", NS)}
    assert sorted(marks) == ["sh12_comp", "sh12_encode", "sh12_fg"]
    by_job = bars(root)
    for jid, mark in marks.items():
        assert box(mark) == box(by_job[jid])
        assert mark.get("stroke") and float(mark.get("stroke-width")) >= 2
        assert mark.get("fill") == "url(#sw-critical)"
        assert "on the critical path" in by_job[jid].find("s:title", NS).text
    pattern = root.find(".//s:pattern[@id='sw-critical']", NS)
    assert len(list(pattern)) >= 1  # the texture's tile has something drawn in it
    for jid in ("sh12_bg", "sh12_fx"):
        assert "critical" not in by_job[jid].find("s:title", NS).text
    (legend,) = root.findall(".//s:g[@class='legend-mark']", NS)
    assert "critical path" in "".join(legend.itertext())
    swatch = [r for r in legend.findall("s:rect", NS) if r.get("fill") == "url(#sw-critical)"]
    assert len(swatch) == 1 and swatch[0].get("stroke") == next(iter(marks.values())).get("stroke")


# -- what a job waits for ------------------------------------------------------------------
def test_hover_text_names_what_each_job_waits_for() -> None:
    """Issue 17 point 6, "shows what a job waits for on hover": each bar's <title> lists
    the ids of its request's ``after`` (comp waits for the three layers, encode for comp),
    and says a layer waits for no other job."""
    titles = {j: b.find("s:title", NS).text for j, b in bars(hand_timeline()).items()}
    assert "waits for sh12_bg, sh12_fg, sh12_fx" in titles["sh12_comp"]
    assert "waits for sh12_comp" in titles["sh12_encode"]
    for layer in ("sh12_bg", "sh12_fg", "sh12_fx"):
        assert "waits for no other job" in titles[layer]
    assert "slot 2 of 2" in titles["sh12_fg"]


# -- limit usage over time -----------------------------------------------------------------
def steps_of(panel: ET.Element) -> list[tuple[float, float, int]]:
    return [
        (float(r.get("data-start")), float(r.get("data-end")), int(r.get("data-count")))
        for r in panel.findall("s:rect[@class='usage']", NS)
    ]


def recount(assignment: list[dict[str, Any]], users: set[str], t: float) -> int:
    """The jobs of ``users`` running at time ``t`` (start <= t < end), counted here."""
    return sum(
        1 for a in assignment for j in a["jobs"] if j["id"] in users and j["start"] <= t < j["end"]
    )


def check_limit_chart(svg: str, result: dict[str, Any], body: dict[str, Any]) -> int:
    """Every panel of a limit chart against the plan it draws; returns the steps checked.

    Per limit of the request: a panel stating the request's capacity; steps that follow
    one another from 0 to the makespan, each step's count equal to a recount of the
    request's jobs using the limit that run at the step's middle and at its start, never
    above the capacity, drawn no higher than the capacity line; and, on the timeline's own
    time axis, each step from where its start time falls to where its end time falls."""
    root = ET.fromstring(svg)
    span, left = float(root.get("data-span")), float(root.get("data-left"))
    width = float(root.get("data-plot-width"))
    panels = {g.get("data-limit"): g for g in root.findall("s:g[@class='limit']", NS)}
    assert panels.keys() == body["limits"].keys()
    checked = 0
    for name, cap in body["limits"].items():
        panel = panels[name]
        assert int(panel.get("data-capacity")) == cap
        users = {j["id"] for j in body["jobs"] if name in j.get("uses", [])}
        steps = steps_of(panel)
        assert steps[0][0] == 0.0 and steps[-1][1] == result["makespan"]
        assert all(a[1] == b[0] for a, b in pairwise(steps))
        cap_y = float(panel.find("s:line[@class='capacity']", NS).get("y1"))
        for (t0, t1, count), rect in zip(
            steps, panel.findall("s:rect[@class='usage']", NS), strict=True
        ):
            assert count == recount(result["assignment"], users, (t0 + t1) / 2)
            assert count == recount(result["assignment"], users, t0)
            assert count <= cap
            assert float(rect.get("y")) >= cap_y - 0.01  # y grows downwards
            x, _, w, _ = box(rect)
            assert x == pytest.approx(left + width * t0 / span, abs=0.01)
            assert x + w == pytest.approx(left + width * t1 / span, abs=0.02)
            checked += 1
    return checked


def test_limit_chart_steps_of_the_hand_plan() -> None:
    """Issue 17 point 6, "limit usage over time ... a step chart per limit with its
    capacity line": the licence panel of HAND has exactly the steps counted by hand
    (2 licences from 0 to 900 s, 1 to 1050 s, none to 1260 s), capacity 2, each step where
    the timeline's axis puts its times; its hover text states the count of the capacity."""
    svg = limit_chart(hand(), graph().uses)
    root = ET.fromstring(svg)
    (panel,) = root.findall("s:g[@class='limit']", NS)
    assert steps_of(panel) == HAND_STEPS
    assert check_limit_chart(svg, hand(), BODY) == 3
    first = panel.find("s:rect[@class='usage']/s:title", NS).text
    assert first.startswith("lumen_licence: 2 of 2 in use from 0")
    tl = hand_timeline()
    assert (root.get("data-span"), root.get("data-left"), root.get("data-plot-width")) == (
        tl.get("data-span"), tl.get("data-left"), tl.get("data-plot-width"),
    )  # fmt: skip


def test_jobs_that_meet_at_an_instant_do_not_count_together() -> None:
    """A job runs from its start up to, not including, its end (the finish-to-start
    reading of issue 17 point 1): with the licence's two jobs back to back (0-600, 600-900)
    the chart shows 1 in use throughout, never 2."""
    res = hand()
    res["stages"]["limits"] = {"lumen_licence": 1}
    res["assignment"] = [{"node": "node-01", "slots": 1, "load": 900.0, "jobs": [
        {"id": "sh12_bg", "slot": 0, "start": 0.0, "end": 600.0},
        {"id": "sh12_fg", "slot": 0, "start": 600.0, "end": 900.0},
    ]}]  # fmt: skip
    res["makespan"] = 900.0
    root = ET.fromstring(limit_chart(res, graph().uses))
    assert steps_of(root.find("s:g[@class='limit']", NS)) == [(0.0, 900.0, 1)]


def layered_body(seed: int) -> dict[str, Any]:
    """A random layered graph (each job waits for up to two of the layer before), some
    jobs using one or two of two limits, on nodes of 1 to 3 slots: seeded, invented ids."""
    rnd = random.Random(seed)
    jobs: list[dict[str, Any]] = []
    prev: list[str] = []
    for layer in range(3):
        now = [f"s{seed}_l{layer}_j{k}" for k in range(rnd.randint(3, 7))]
        for jid in now:
            job: dict[str, Any] = {"id": jid, "duration": rnd.randrange(30, 600, 15)}
            if prev:
                job["after"] = rnd.sample(prev, rnd.randint(0, min(2, len(prev))))
            job["uses"] = rnd.sample(["licence_a", "readers_b"], rnd.randint(0, 2))
            jobs.append(job)
        prev = now
    nodes = [{"id": f"node-{k + 1:02d}", "slots": rnd.randint(1, 3)} for k in range(4)]
    return {"jobs": jobs, "nodes": nodes, "limits": {"licence_a": 2, "readers_b": 3}}


def finished(client: Any, body: dict[str, Any]) -> dict[str, Any]:
    loc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).headers["Location"]
    for _ in range(500):
        doc = client.get(loc).get_json()
        if doc["status"] in ("done", "failed"):
            return dict(doc)
        time.sleep(0.02)
    raise AssertionError("not done")


def svgs(html: str) -> dict[str, str]:
    """Every inline chart of a page, by its class."""
    out = {}
    for m in re.finditer(r"<svg .*?</svg>", html, re.S):
        out[ET.fromstring(m.group(0)).get("class")] = m.group(0)
    return out


@pytest.mark.parametrize("seed", range(8))
def test_limit_usage_on_plan_pages_matches_a_recount(client: Any, seed: int) -> None:
    """Issue 17 point 6 on plans the service makes (random layered graphs with two limits
    and multi-slot nodes): the plan page's limit chart is never above any capacity and
    each of its steps equals a recount, written in this test, of the API's assignment and
    the request's ``uses``; the timeline has one lane per slot the request gave."""
    body = layered_body(seed)
    doc = finished(client, body)
    assert doc["status"] == "done"
    html = client.get(f"/plans/{doc['id']}").get_data(as_text=True)
    charts = svgs(html)
    assert check_limit_chart(charts["chart limits"], doc["result"], body) >= 2
    root = ET.fromstring(charts["timeline"])
    lanes = {
        g.get("data-node"): len(g.findall("s:rect[@class='lane']", NS))
        for g in root.findall(".//s:g[@class='node-row']", NS)
    }
    assert lanes == {n["id"]: n["slots"] for n in body["nodes"]}


def test_plan_page_of_the_example_batch(client: Any) -> None:
    """The issue's example batch through the API: its page names the waits on hover
    (comp waits for the three layers, read from the stored request), marks every job of
    the result's critical path, states the critical path and the limit in words, and draws
    one licence panel of capacity 2."""
    doc = finished(client, BODY)
    html = client.get(f"/plans/{doc['id']}").get_data(as_text=True)
    charts = svgs(html)
    root = ET.fromstring(charts["timeline"])
    comp = bars(root)["sh12_comp"].find("s:title", NS).text
    assert "waits for sh12_bg, sh12_fg, sh12_fx" in comp
    path = doc["result"]["stages"]["critical_path"]
    marked = sorted(m.get("data-job") for m in root.findall(".//s:rect[@class='critical']", NS))
    assert path and marked == sorted(path)
    assert " → ".join(path) in html
    assert "lumen_licence: at most 2 at once" in html
    check_limit_chart(charts["chart limits"], doc["result"], BODY)


# -- plain plans ---------------------------------------------------------------------------
def test_plain_plans_carry_no_stage_marks() -> None:
    """Plain plans (no ``stages`` key) render as before issue 17: no lanes, critical marks
    or limit chart, and a waits mapping changes nothing in their timeline."""
    plain = {k: v for k, v in hand().items() if k != "stages"}
    for row in plain["assignment"]:
        row.pop("slots")
        for j in row["jobs"]:
            j.pop("slot")
    svg = timeline(plain)
    assert svg == timeline(plain, waits=graph().after)
    for cls in ("lane", "critical", "legend-mark", "node-sep"):
        assert f'class="{cls}"' not in svg
    ctx = plan_context({"id": "x", "status": "done", "result": plain}, {}, graph())
    assert "limit_chart" not in ctx and "stages" not in ctx


# -- the demo ------------------------------------------------------------------------------
def test_demo_has_a_stage_graph_batch_of_the_invented_studio() -> None:
    """Issue 17 point 6, "the demo gains a stage-graph batch of our invented studio": one
    demo body uses all four fields (after, uses, limits, slots), with Quillfern Vale ids and
    node-NN node names only, and every id it waits for is one of its jobs."""
    staged = [
        json.loads(Path(p).read_text())
        for p in demo_files()
        if "limits" in json.loads(Path(p).read_text())
    ]
    assert len(staged) == 1
    (body,) = staged
    assert body["name"].startswith("Quillfern Vale")
    assert all(re.fullmatch(r"node-\d\d", n["id"]) for n in body["nodes"])
    assert any(n.get("slots", 1) > 1 for n in body["nodes"])
    ids = {j["id"] for j in body["jobs"]}
    assert all(i.startswith("qv_") for i in ids)
    waits = [a for j in body["jobs"] for a in j.get("after", [])]
    assert waits and set(waits) <= ids
    used = {u for j in body["jobs"] for u in j.get("uses", [])}
    assert used and used == set(body["limits"])
