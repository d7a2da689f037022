"""Page polish (issue 19 point 7): axis labels that never repeat, long node ids cut to
the margin with the whole id on hover, legends that wrap instead of overlapping, and a
busy farm's plan page with each node's speed and tags and its busy time as a hatched
block (texture and words, not colour alone: WCAG 2.1 1.4.1 "Use of Color")."""

from __future__ import annotations

import re
import xml.etree.ElementTree as ET
from itertools import pairwise
from typing import Any

import pytest

from service.web.svg import CHAR_W, line_chart, timeline
from service.web.ticks import axis_range, axis_ticks, time_ticks

NS = {"s": "http://www.w3.org/2000/svg"}
SVG = "{http://www.w3.org/2000/svg}"


def tick_labels(root: ET.Element, anchor: str) -> list[str]:
    """A line chart's tick labels of one axis: ``end``-anchored on the y axis,
    ``middle``-anchored on the x axis."""
    return [
        t.text or ""
        for t in root.iter(f"{SVG}text")
        if t.get("class") == "tick-label" and t.get("text-anchor") == anchor
    ]


def test_progress_makespan_axis_near_ten_and_a_half_hours_never_repeats() -> None:
    """The issue's case: best makespans 37795 s and 37830 s (10h29m55s, 10h30m30s) over a
    20 s budget. Padded by 4 % of the 35 s range (1.4 s) the axis spans 37793.6 to
    37831.4 s; a fifth of that, 7.56 s, rounds up to a 10 s step, so the ticks are 37790
    to 37840 s by 10 s, worked by hand: 10h29m50s, 10h30m00s, ... 10h30m40s. Labels that
    drop the seconds would read 10h29, 10h30, 10h30, 10h30, 10h30, 10h30."""
    svg = line_chart(
        {"best makespan": [(2.0, 37830.0), (9.0, 37795.0)]},
        x_label="time spent searching", y_label="makespan",
        x_range=(0.0, 20.0), x_kind="time", y_kind="time", steps=True,
    )  # fmt: skip
    root = ET.fromstring(svg)
    assert tick_labels(root, "end") == [
        "10h29m50s", "10h30m00s", "10h30m10s", "10h30m20s", "10h30m30s", "10h30m40s",
    ]  # fmt: skip
    assert tick_labels(root, "middle") == ["0", "5s", "10s", "15s", "20s"]


SPANS = [0.003, 0.7, 2.5, 9.0, 59.0, 61.0, 599.0, 3599.0, 3601.0, 7260.0, 86_400.0, 9e5]


@pytest.mark.parametrize("span", SPANS)
def test_timeline_ticks_never_repeat(span: float) -> None:
    """Issue 19 point 7: every tick label of a timeline's time axis differs from every
    other, from milliseconds to days, and the ticks run from 0 up to the span."""
    values, labels = time_ticks(span)
    assert len(set(labels)) == len(labels) >= 2
    assert values[0] == 0.0 and values[-1] <= span * (1 + 1e-9)


@pytest.mark.parametrize("kind", ["time", "number", "integer"])
@pytest.mark.parametrize(
    ("lo", "hi"),
    [(37795.0, 37830.0), (3599.5, 3600.5), (0.0, 0.004), (1e6, 1e6 + 3.0), (86_000.0, 87_000.0),
     (12.0, 12.0), (0.0, 4.0), (7200.0, 7201.0), (123456.7, 123999.9)],
)  # fmt: skip
def test_line_chart_axes_never_repeat_a_label(kind: Any, lo: float, hi: float) -> None:
    """Issue 19 point 7 ("choose tick steps from the range"): on a value axis of every
    kind over ranges down to a second at 10 h and beyond, no two tick labels read the
    same at the printed precision."""
    a, b, step = axis_range(lo, hi, kind, 5, pad=True)
    _, values, labels = axis_ticks(a, b, step, kind)
    assert values and len(set(labels)) == len(labels)


def plan(nodes: list[str], groups: int = 2, name: str = "sh") -> dict[str, Any]:
    """A hand-made plan: one 600 s job per group on each node, back to back."""
    rows = [
        {"node": n, "jobs": [{"id": f"{n}-j{g}", "start": 600.0 * g, "end": 600.0 * (g + 1)}
                             for g in range(groups)]}
        for n in nodes
    ]  # fmt: skip
    end = 600.0 * groups
    return {"makespan": end, "lower_bound": end, "assignment": rows}


def test_a_long_node_id_is_cut_to_the_margin_with_the_whole_id_on_hover() -> None:
    """Issue 19 point 7: a 56-character node id is cut to what fits the 150 px margin
    (at most 138 px of text, an ellipsis last) and its <title> gives the whole id; a
    short id is drawn whole, with no title."""
    long_id = "a-very-long-node-identifier-from-the-cloud-provider-0001"
    root = ET.fromstring(timeline(plan([long_id, "node-03"])))
    rows = {g.get("data-node"): g for g in root.findall(".//s:g[@class='node-row']", NS)}
    label = rows[long_id].find("s:text[@class='node-label']", NS)
    assert label is not None and label.text is not None
    assert label.text.endswith("…") and long_id.startswith(label.text[:-1])
    assert len(label.text) * CHAR_W <= 150 - 12
    title = label.find("s:title", NS)
    assert title is not None and title.text == long_id
    short = rows["node-03"].find("s:text[@class='node-label']", NS)
    assert short is not None and short.text == "node-03" and short.find("s:title", NS) is None


def legend_boxes(root: ET.Element, cls: str) -> list[tuple[float, float, float]]:
    """(left, right, baseline) of each legend entry's swatch and text, text width
    estimated at the charts' CHAR_W per character."""
    out = []
    for g in root.findall(f".//s:g[@class='{cls}']", NS):
        text = g.find("s:text", NS)
        assert text is not None and text.text is not None
        x = float(text.get("x") or 0)
        out.append((x - 30, x + CHAR_W * len(text.text), float(text.get("y") or 0)))
    return out


def no_overlap(boxes: list[tuple[float, float, float]], width: float) -> bool:
    """True when no two entries on one baseline overlap and none passes ``width``."""
    by_line: dict[float, list[tuple[float, float]]] = {}
    for left, right, y in boxes:
        by_line.setdefault(y, []).append((left, right))
    for spans in by_line.values():
        spans.sort()
        if any(a[1] > b[0] for a, b in pairwise(spans)):
            return False
    return all(right <= width for _, right, _ in boxes)


def test_timeline_legend_of_long_group_names_wraps_without_overlap() -> None:
    """Issue 19 point 7: six 40-character group names (too long for four columns of the
    770 px plot) flow onto several lines, no two entries overlapping; short names keep
    the four columns of 770 / 4 = 192.5 px from the 150 px margin (worked by hand)."""
    res = plan(["node-01"], groups=6)
    long_groups = {f"node-01-j{g}": f"lighting_pass_{g}_" + "x" * 23 for g in range(6)}
    root = ET.fromstring(timeline(res, long_groups))
    boxes = legend_boxes(root, "legend-item")
    assert len(boxes) == 6 and len({y for _, _, y in boxes}) >= 2
    assert no_overlap(boxes, float(root.get("width") or 0))
    short = {f"node-01-j{g}": f"sh0{g}0" for g in range(6)}
    xs = [
        float(r.get("x") or 0)
        for r in ET.fromstring(timeline(res, short)).findall(
            ".//s:g[@class='legend-item']/s:rect", NS
        )
    ]
    assert xs == [150.0, 342.5, 535.0, 727.5, 150.0, 342.5]


def test_line_chart_legend_wraps_and_the_plot_moves_down() -> None:
    """Issue 19 point 7: three long series names on a 480 px chart cannot share one line;
    the legend wraps so that no entries overlap or pass the edge, and the plot starts 18
    px lower per extra line, its height kept: 260 - 36 - 44 = 180 px, the 260 px chart
    less its 36 px top and 44 px bottom margins (worked by hand)."""
    names = ["best makespan found so far", "proven lower bound so far", "deadline target"]
    svg = line_chart(
        {n: [(1.0, 100.0 + i), (2.0, 120.0 + i)] for i, n in enumerate(names)},
        x_label="x", y_label="y", width=480,
    )  # fmt: skip
    root = ET.fromstring(svg)
    boxes = legend_boxes(root, "legend-item")
    lines = sorted({y for _, _, y in boxes})
    assert len(lines) >= 2 and no_overlap(boxes, 480.0)
    assert float(root.get("data-top") or 0) == 36 + 18 * (len(lines) - 1)
    assert float(root.get("data-plot-height") or 0) == 180.0


BUSY_FARM = {
    "jobs": [{"id": f"j{i}", "duration": 100 + 37 * i} for i in range(8)],
    "nodes": [
        {"id": "node-01", "speed": 2, "provides": ["gpu", "exr"], "free_at": 300},
        {"id": "a-very-long-node-identifier-from-the-cloud-provider-0001", "free_at": 120},
        {"id": "node-03"},
    ],
    "deadline": 1800,
}


def page_svg(html: str, cls: str) -> ET.Element:
    m = re.search(rf'<svg [^>]*class="{cls}".*?</svg>', html, re.S)
    assert m is not None
    return ET.fromstring(m.group(0))


def test_busy_farm_plan_page_shows_speed_tags_and_hatched_busy_blocks(client: Any) -> None:
    """Issue 19 point 7 on a plan page: each node row says its speed and tags under its id
    (from the request: "speed 2 · gpu, exr", "speed 1", "speed 1"), and the two nodes the
    request made busy (until 300 s and 120 s) each have a block from 0 to that time on
    the chart's own axis, filled with the hatch pattern, its meaning in its <title> and
    named in the legend (texture and words, WCAG 2.1 1.4.1)."""
    doc = client.post("/v1/plans", json=BUSY_FARM, headers={"Prefer": "wait=10"}).get_json()
    assert doc["status"] == "done"
    root = page_svg(client.get(f"/plans/{doc['id']}").get_data(as_text=True), "timeline")
    details = [t.text for t in root.findall(".//s:text[@class='node-detail']", NS)]
    assert details == ["speed 2 · gpu, exr", "speed 1", "speed 1"]
    span, left = float(root.get("data-span") or 0), float(root.get("data-left") or 0)
    plot_w = float(root.get("data-plot-width") or 0)
    blocks = {b.get("data-node"): b for b in root.findall(".//s:rect[@class='busy']", NS)}
    assert sorted(blocks) == ["a-very-long-node-identifier-from-the-cloud-provider-0001", "node-01"]
    for node, free_at in (("node-01", 300), (BUSY_FARM["nodes"][1]["id"], 120)):
        b = blocks[node]
        assert float(b.get("x") or -1) == pytest.approx(left, abs=0.01)
        assert float(b.get("width") or 0) == pytest.approx(plot_w * free_at / span, abs=0.01)
        assert b.get("fill") == "url(#sw-busy)"
        title = b.find("s:title", NS)
        assert title is not None and "busy with earlier work" in (title.text or "")
    pattern = root.find(".//s:pattern[@id='sw-busy']", NS)
    assert pattern is not None and len(pattern.findall("s:rect", NS)) == 2  # ground + hatch
    (mark,) = root.findall(".//s:g[@data-mark='busy']", NS)
    assert "busy" in "".join(mark.itertext())


def test_plain_plan_rows_are_as_before(client: Any) -> None:
    """A plan on plain nodes (node_count, or nodes with nothing but ids) keeps its 20 px
    rows with no speed line and no busy block: the farm details appear only when a node
    has them."""
    body = {"jobs": BUSY_FARM["jobs"], "nodes": [{"id": "node-01"}, {"id": "node-02"}]}
    doc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).get_json()
    root = page_svg(client.get(f"/plans/{doc['id']}").get_data(as_text=True), "timeline")
    assert root.findall(".//s:text[@class='node-detail']", NS) == []
    assert root.findall(".//s:rect[@class='busy']", NS) == []
    bars = root.findall(".//s:rect[@class='job']", NS)
    assert {b.get("height") for b in bars} == {"16"}  # 20 px rows, 2 px inset each side
