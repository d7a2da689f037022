"""Inline SVG charts: the plan timeline, the solve progress and the node-count curve.

Pure functions from the API's JSON (the same dicts ``GET /v1/plans/{id}`` returns) to SVG
text, so the pages, the tests and anyone else can render a plan without a browser. Every
mark that carries meaning by colour also carries it in text (labels, legend, titles) and,
for job groups and chart series, in a second visual cue (a texture, a dash, a hollow mark).

Each chart states its own axis on its ``<svg>`` element (``data-left``, ``data-top``,
``data-plot-width``, ``data-plot-height`` and the value range ``data-x0`` .. ``data-x1``,
``data-y0`` .. ``data-y1``; the timeline ``data-span``), so a reader can map values to
positions without repeating the layout.
"""

from __future__ import annotations

import math
from collections.abc import Callable, Iterable, Mapping, Sequence
from dataclasses import dataclass
from html import escape
from itertools import pairwise
from typing import Any

from ..csvio import plural
from .ticks import AxisKind, axis_range, axis_ticks, time_ticks

#: our own palette: eight hues distinguishable in print and for most colour vision, each
#: dark or light enough that white or dark text on it reads at WCAG AA contrast (4.5:1)
PALETTE = (
    "#3b6fb6", "#e0892f", "#489f72", "#ba4b65", "#7a5fb0", "#8c6e36", "#2f9fae", "#8a8f99",
)  # fmt: skip
INK = "#1d2430"
UNGROUPED = "(no group)"
MAX_ROWS = 400
#: a chart draws a mark at every point up to this many points per series
MAX_MARKED_POINTS = 60
#: textures laid over the group colours (8 x 8 tiles, white strokes): a second cue to colour
TEXTURES = (
    "",
    '<path d="M-2,2 l4,-4 M0,8 l8,-8 M6,10 l4,-4" />',  # rising diagonals
    '<circle cx="4" cy="4" r="1.3" />',  # dots
    '<path d="M0,4 h8" />',  # horizontal stripes
    '<path d="M-2,6 l4,4 M0,0 l8,8 M6,-2 l4,4" />',  # falling diagonals
    '<path d="M4,0 v8" />',  # vertical stripes
    '<path d="M0,4 h8 M4,0 v8" />',  # cross-hatch
    '<path d="M0,0 l8,8 M8,0 l-8,8" />',  # diagonal cross
)
#: rough width of one character of the 10-11 px chart font, for fitting labels
CHAR_W = 6.2


def fmt_duration(seconds: float) -> str:
    """3725 -> '1h 02m 05s'; short values keep decimals."""
    if not math.isfinite(seconds):
        return "-"
    if seconds < 60:
        return f"{seconds:.3g}s"
    s = round(seconds)
    h, rem = divmod(s, 3600)
    m, s = divmod(rem, 60)
    return f"{h}h {m:02d}m {s:02d}s" if h else f"{m}m {s:02d}s"


def group_colours(groups: Iterable[str]) -> dict[str, str]:
    """A colour per group, in order of first appearance (the palette repeats after 8)."""
    out: dict[str, str] = {}
    for g in groups:
        if g not in out:
            out[g] = PALETTE[len(out) % len(PALETTE)]
    return out


def _luminance(colour: str) -> float:
    """WCAG relative luminance of ``#rrggbb``."""
    chans = [int(colour[i : i + 2], 16) / 255 for i in (1, 3, 5)]
    lin = [c / 12.92 if c <= 0.04045 else ((c + 0.055) / 1.055) ** 2.4 for c in chans]
    return 0.2126 * lin[0] + 0.7152 * lin[1] + 0.0722 * lin[2]


def contrast(a: str, b: str) -> float:
    """WCAG contrast ratio of two ``#rrggbb`` colours (1 to 21)."""
    la, lb = sorted((_luminance(a), _luminance(b)), reverse=True)
    return (la + 0.05) / (lb + 0.05)


def label_ink(fill: str) -> str:
    """White or dark text on ``fill``: whichever reads with more contrast."""
    return "#ffffff" if contrast("#ffffff", fill) >= contrast(INK, fill) else INK


def _group_pattern(pid: str, colour: str, texture: str) -> str:
    return (
        f'<pattern id="{pid}" width="8" height="8" patternUnits="userSpaceOnUse">'
        f'<rect width="8" height="8" fill="{colour}" />'
        f'<g fill="#ffffff" fill-opacity=".45" stroke="#ffffff" stroke-opacity=".45" '
        f'stroke-width="1.2">{texture}</g></pattern>'
    )


#: the critical path's mark over a bar's own fill: an outline in this colour (3:1 against
#: white and the palette's light ends, WCAG 2.1 1.4.11) and a texture of dark stripes
CRITICAL = "#a3195b"
CRITICAL_PATTERN = (
    '<pattern id="sw-critical" width="6" height="6" patternUnits="userSpaceOnUse" '
    'patternTransform="rotate(45)"><rect width="2.4" height="6" fill="#1d2430" '
    'fill-opacity=".6" /></pattern>'
)
#: the backgrounds of a node's slot lanes, alternating so that neighbouring lanes differ
LANE_FILLS = ("#f8f9fb", "#eef0f4")
#: at most this many ids of what a job waits for are named in its bar's <title>
MAX_WAITS_NAMED = 20


def timeline_span(result: dict[str, Any]) -> float:
    """The time axis of a plan's charts: 0 to a little past the makespan or deadline."""
    makespan = float(result.get("makespan") or 0.0)
    dl = (result.get("deadline") or {}).get("deadline")
    return max(makespan, float(dl or 0.0), 1e-9) * 1.04


def lane_height(slots: int, row_height: int) -> float:
    """The height of one slot's lane: a one-slot node keeps the whole row, a node with
    more slots shares thin lanes (at most 15 px each, at least 3 px)."""
    return float(row_height) if slots <= 1 else min(15.0, max(3.0, 96.0 / slots))


def _px(v: float) -> str:
    """A coordinate: whole numbers as they are (a plain plan's rows), others to 0.01 px."""
    return str(v) if isinstance(v, int) else f"{v:.2f}"


def _waits_text(ids: Sequence[str]) -> str:
    if not ids:
        return "; waits for no other job"
    named = ", ".join(ids[:MAX_WAITS_NAMED])
    more = len(ids) - MAX_WAITS_NAMED
    return f"; waits for {named}" + (f" and {more} more" if more > 0 else "")


def fit_text(text: str, room: float) -> str:
    """``text`` cut to what fits in ``room`` pixels of the chart font, with an ellipsis
    when cut (the caller gives the whole text in a ``<title>``)."""
    most = max(int(room / CHAR_W), 2)
    return text if len(text) <= most else text[: most - 1] + "…"


@dataclass(frozen=True)
class FarmNode:
    """What a farm plan's page shows of one node from its stored request: its speed, the
    tags it provides and when it is free of earlier work (seconds from the start)."""

    speed: float = 1.0
    provides: tuple[str, ...] = ()
    free_at: float = 0.0

    @property
    def plain(self) -> bool:
        return self.speed == 1.0 and not self.provides and self.free_at <= 0

    def details(self) -> str:
        """'speed 2 · gpu, exr': the node's speed and tags, in words."""
        text = f"speed {self.speed:g}"
        return text + (f" · {', '.join(self.provides)}" if self.provides else "")

    @classmethod
    def from_request(cls, body: Mapping[str, Any]) -> dict[str, FarmNode]:
        """The ``nodes`` of a plan request (none for a ``node_count`` one), by id."""
        out: dict[str, FarmNode] = {}
        for n in body.get("nodes") or ():
            if not isinstance(n, Mapping) or not isinstance(n.get("id"), str):
                continue
            free_at = n.get("free_at")
            out[n["id"]] = cls(
                speed=float(n.get("speed") or 1.0),
                provides=tuple(str(t) for t in n.get("provides") or ()),
                free_at=float(free_at) if isinstance(free_at, int | float) else 0.0,
            )
        return out


#: a busy node's block: dark hatching on a light ground, so "busy" is told by texture and
#: by its label, not by colour alone (WCAG 2.1 1.4.1 "Use of Color")
BUSY_PATTERN = (
    '<pattern id="sw-busy" width="6" height="6" patternUnits="userSpaceOnUse" '
    'patternTransform="rotate(-45)"><rect width="6" height="6" fill="#e6e8ec" />'
    '<rect width="1.6" height="6" fill="#5d6675" /></pattern>'
)
#: the height of a farm plan's row: the node id over its speed and tags
FARM_ROW_HEIGHT = 32
#: a legend swatch and the gap after its text, in pixels
SWATCH_W, LEGEND_GAP = 28, 18


def legend_layout(names: Sequence[str], room: float) -> tuple[list[tuple[float, int]], int]:
    """Where each legend entry goes ((x offset, row) per name) and how many rows it takes.

    Four columns a row while every name fits its column (the layout of a short legend);
    else the entries flow left to right and wrap to a new row before one would pass
    ``room``, so that no two overlap (issue 19 point 7). A name longer than a whole row is
    cut by the caller (:func:`fit_text`)."""
    column = room / 4
    if all(SWATCH_W + CHAR_W * len(n) + 6 <= column for n in names):
        return [((i % 4) * column, i // 4) for i in range(len(names))], math.ceil(len(names) / 4)
    out: list[tuple[float, int]] = []
    x, row = 0.0, 0
    for n in names:
        w = SWATCH_W + CHAR_W * min(len(n), int((room - SWATCH_W) / CHAR_W)) + LEGEND_GAP
        if x > 0 and x + w - LEGEND_GAP > room:
            x, row = 0.0, row + 1
        out.append((x, row))
        x += w
    return out, (row + 1 if names else 0)


def timeline(
    result: dict[str, Any],
    groups: dict[str, str] | None = None,
    width: int = 960,
    row_height: int = 20,
    waits: Mapping[str, Sequence[str]] | None = None,
    farm: Mapping[str, FarmNode] | None = None,
) -> str:
    """The plan as a timeline: one row per node, one bar per job (its id on hover).

    ``groups`` maps job id -> group name. Each group has a colour and a texture, both shown
    in the legend; a bar wide enough carries its job id, else its group name, as text. A
    solid line marks the deadline, a dashed line the proven lower bound, each labelled on
    its own line under the chart. A node id longer than the margin is cut with an
    ellipsis, the whole id in its ``<title>``; legend entries wrap rather than overlap.

    A stage-graph plan (a result with ``stages``; issue 17 point 6) draws each node's
    slots as lanes under its one label (``rect.lane``, a job in the lane of its ``slot``),
    marks the jobs of ``stages.critical_path`` with an outline and a stripe texture over
    their group's fill, named in the legend, so the mark is not colour alone (WCAG 2.1
    1.4.1 "Use of Color"), and, given ``waits`` (job id -> the ids of the request's
    ``after``), names in each bar's ``<title>`` what the job waits for.

    Given ``farm`` (node id -> :class:`FarmNode`, from the request) with a node that is
    not plain, each row carries the node's speed and tags under its id, and a node busy
    with earlier work a hatched, labelled ``rect.busy`` block from 0 to its ``free_at``,
    named in the legend (issue 19 point 7).
    """
    groups = groups or {}
    farm = farm or {}
    stages = result.get("stages")
    critical = set((stages or {}).get("critical_path") or ())
    assignment: Sequence[dict[str, Any]] = result.get("assignment") or []
    shown = assignment[:MAX_ROWS]
    detailed = any(not f.plain for f in farm.values())
    two_lines = detailed and stages is None
    if two_lines:
        row_height = max(row_height, FARM_ROW_HEIGHT)
    busy = {a["node"]: farm[a["node"]].free_at for a in shown if a["node"] in farm}
    busy = {k: v for k, v in busy.items() if v > 0}
    makespan = float(result.get("makespan") or 0.0)
    lower = result.get("lower_bound")
    dl = (result.get("deadline") or {}).get("deadline")
    span = timeline_span(result)
    left, top, right = 150, 34, 40
    plot_w = width - left - right
    names = sorted({groups.get(j["id"], UNGROUPED) for a in shown for j in a["jobs"]})
    colours = group_colours(names)
    index = {g: i for i, g in enumerate(names)}
    slots = [int(a.get("slots") or 1) if stages is not None else 1 for a in shown]
    lanes = [lane_height(k, row_height) for k in slots]
    heights: list[float] = [row_height] * len(shown)
    if stages is not None:
        heights = [k * h for k, h in zip(slots, lanes, strict=True)]
    bottom = top + sum(heights)
    marks = [
        (name, float(at))
        for name, at in (("lower bound", lower), ("deadline", dl))
        if at is not None
    ]
    legend_top = bottom + 16 * len(marks) + 34
    places, group_rows = legend_layout(list(colours), plot_w)
    legend_rows = group_rows + (1 if critical else 0) + (1 if busy else 0)
    height = legend_top + 22 * legend_rows + 6

    def x(t: float) -> float:
        return left + plot_w * t / span

    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="timeline" role="img" '
        f'width="{width}" height="{_px(height)}" viewBox="0 0 {width} {_px(height)}" '
        f'data-span="{span:.6g}" data-left="{left}" data-plot-width="{plot_w}">',
        f"<title>Plan timeline: {plural(len(assignment), 'node')}, makespan "
        f"{fmt_duration(makespan)}</title>",
        "<defs>",
        *(
            _group_pattern(
                f"sw-group-{i}", colours[g], TEXTURES[(i + i // len(PALETTE)) % len(TEXTURES)]
            )
            for g, i in index.items()
        ),
        CRITICAL_PATTERN if critical else "",
        BUSY_PATTERN if busy else "",
        "</defs>",
        f'<text class="tick-label" x="{left - 8}" y="{top - 8}" text-anchor="end">'
        "time from start</text>",
    ]
    for t, tick in zip(*time_ticks(span), strict=True):
        parts.append(
            f'<line class="tick" x1="{x(t):.1f}" x2="{x(t):.1f}" y1="{top - 4}" '
            f'y2="{_px(bottom)}" />'
            f'<text class="tick-label" x="{x(t):.1f}" y="{top - 8}" text-anchor="middle">'
            f"{tick}</text>"
        )
    y: float = top  # an int while every row is (a plain plan), so its text stays as before
    for node, k, lane, h in zip(shown, slots, lanes, heights, strict=True):
        nid = node["node"]
        info = farm.get(nid)
        shown_id = fit_text(nid, left - 12)
        hover = nid if info is None or info.plain else f"{nid}: {info.details()}"
        if info is not None and info.free_at > 0:
            hover += f", busy until {fmt_duration(info.free_at)}"
        hover_title = f"<title>{escape(hover)}</title>" if hover != shown_id else ""
        if stages is None:
            label_y = y + 13 if two_lines else y + row_height * 0.7
            parts.append(
                f'<g class="node-row" data-node="{escape(nid)}">'
                f'<text class="node-label" x="{left - 8}" y="{label_y:.1f}">'
                f"{escape(shown_id)}{hover_title}</text>"
            )
            if two_lines and info is not None:
                parts.append(
                    f'<text class="node-detail" x="{left - 8}" y="{y + 26:.1f}">'
                    f"{escape(fit_text(info.details(), left - 12))}</text>"
                )
        else:
            parts.append(
                f'<g class="node-row" data-node="{escape(nid)}" data-slots="{k}">'
                f'<line class="node-sep" x1="{left}" x2="{left + plot_w}" y1="{y:.2f}" '
                f'y2="{y:.2f}" />'
                f'<text class="node-label" x="{left - 8}" y="{y + h / 2 + 4:.1f}">'
                f"{escape(shown_id)}{hover_title}</text>"
            )
            parts.extend(
                f'<rect class="lane" data-slot="{s}" x="{left}" y="{y + s * lane:.2f}" '
                f'width="{plot_w}" height="{lane:.2f}" fill="{LANE_FILLS[s % 2]}" />'
                for s in range(k)
            )
        if nid in busy:
            parts.append(_busy_block(nid, busy[nid], left, x(busy[nid]), y, h))
        for j in node["jobs"]:
            g = groups.get(j["id"], UNGROUPED)
            x0, x1 = x(j["start"]), x(j["end"])
            w = max(x1 - x0, 0.5)
            label = escape(j["id"])
            title = f"{label} ({escape(g)}): {fmt_duration(j['start'])} to {fmt_duration(j['end'])}"
            bar_y: float = y + 2
            bar_h: float = row_height - 4
            extra = ""
            if stages is not None:
                slot = int(j.get("slot") or 0)
                inset = min(2.0, lane * 0.1)
                bar_y, bar_h = y + slot * lane + inset, lane - 2 * inset
                extra = f' data-slot="{slot}"'
                if k > 1:
                    title += f", slot {slot + 1} of {k}"
                if waits is not None:
                    title += escape(_waits_text(waits.get(j["id"], ())))
                if j["id"] in critical:
                    title += "; on the critical path"
                    extra += ' data-critical="true"'
            parts.append(
                f'<rect class="job" data-job="{label}" data-group="{escape(g)}"{extra} '
                f'x="{x0:.2f}" y="{_px(bar_y)}" width="{w:.2f}" height="{_px(bar_h)}" '
                f'fill="url(#sw-group-{index[g]})"><title>{title}</title></rect>'
            )
            if j["id"] in critical:
                parts.append(
                    f'<rect class="critical" data-job="{label}" x="{x0:.2f}" '
                    f'y="{_px(bar_y)}" width="{w:.2f}" height="{_px(bar_h)}" '
                    f'fill="url(#sw-critical)" stroke="{CRITICAL}" stroke-width="2" '
                    'pointer-events="none" />'
                )
            text = next((t for t in (j["id"], g) if w > CHAR_W * len(t) + 6), None)
            if text is not None and text != UNGROUPED and (stages is None or bar_h >= 10):
                parts.append(
                    f'<text class="job-label" x="{x0 + 3:.1f}" '
                    f'y="{bar_y - 2 + (bar_h + 4) * 0.7:.1f}" '
                    f'style="fill:{label_ink(colours[g])};stroke:{colours[g]}">{escape(text)}</text>'
                )
        parts.append("</g>")
        y += h
    for k, (name, at) in enumerate(marks):
        cls = "lower-bound" if name == "lower bound" else "deadline"
        label_y = bottom + 16 + 16 * k
        # each label on its own line, on the side of its line where it has room
        right_half = x(at) > left + 0.6 * plot_w
        lx = x(at) - 5 if right_half else x(at) + 5
        anchor = "end" if right_half else "start"
        parts.append(
            f'<line class="{cls}" data-at="{at:.6g}" x1="{x(at):.2f}" '
            f'x2="{x(at):.2f}" y1="{top - 4}" y2="{_px(label_y + 4)}" />'
            f'<text class="mark-label" x="{lx:.1f}" y="{_px(label_y)}" '
            f'text-anchor="{anchor}">{name} {fmt_duration(at)}</text>'
        )
    if colours:
        parts.append(
            f'<text class="legend-title" x="{left - 8}" y="{_px(legend_top)}" text-anchor="end">'
            "job group</text>"
        )
    for i, (g, (dx, row)) in enumerate(zip(colours, places, strict=True)):
        lx = left + dx
        ly = legend_top + 22 * row
        cut = fit_text(g, plot_w - SWATCH_W)
        parts.append(
            f'<g class="legend-item" data-group="{escape(g)}"><rect x="{lx:.1f}" '
            f'y="{_px(ly - 12)}" width="22" height="15" fill="url(#sw-group-{i})" />'
            f'<text x="{lx + 28:.1f}" y="{_px(ly)}">{escape(cut)}</text>'
            + (f"<title>{escape(g)}</title>" if cut != g else "")
            + "</g>"
        )
    mark_row = group_rows
    if critical:
        ly = legend_top + 22 * mark_row
        mark_row += 1
        parts.append(
            f'<g class="legend-mark" data-mark="critical path">'
            f'<text class="legend-title" x="{left - 8}" y="{_px(ly)}" text-anchor="end">'
            "mark</text>"
            f'<rect x="{left:.1f}" y="{_px(ly - 12)}" width="22" height="15" '
            f'fill="{PALETTE[-1]}" /><rect x="{left:.1f}" y="{_px(ly - 12)}" width="22" '
            f'height="15" fill="url(#sw-critical)" stroke="{CRITICAL}" stroke-width="2" />'
            f'<text x="{left + 28:.1f}" y="{_px(ly)}">critical path: the longest chain of jobs '
            "waiting for one another</text></g>"
        )
    if busy:
        ly = legend_top + 22 * mark_row
        parts.append(
            f'<g class="legend-mark" data-mark="busy">'
            f'<text class="legend-title" x="{left - 8}" y="{_px(ly)}" text-anchor="end">'
            "node</text>"
            f'<rect x="{left:.1f}" y="{_px(ly - 12)}" width="22" height="15" '
            'fill="url(#sw-busy)" stroke="#5d6675" />'
            f'<text x="{left + 28:.1f}" y="{_px(ly)}">busy: still running earlier work, '
            "until the time the request gave (free_at)</text></g>"
        )
    parts.append("</svg>")
    return "".join(parts)


def _busy_block(node: str, free_at: float, x0: float, x1: float, y: float, h: float) -> str:
    """A node's busy time, 0 to ``free_at``: a hatched block with its word on it when it
    fits and its meaning in its ``<title>``."""
    w = max(x1 - x0, 0.5)
    out = (
        f'<rect class="busy" data-node="{escape(node)}" data-free-at="{free_at:.6g}" '
        f'x="{x0:.2f}" y="{_px(y + 2)}" width="{w:.2f}" height="{_px(h - 4)}" '
        f'fill="url(#sw-busy)" stroke="#5d6675" stroke-width=".8">'
        f"<title>{escape(node)} is busy with earlier work until {fmt_duration(free_at)}"
        "</title></rect>"
    )
    if w > CHAR_W * 4 + 8:
        out += f'<text class="busy-label" x="{x0 + 4:.1f}" y="{y + h / 2 + 4:.1f}">busy</text>'
    return out


def _value_text(kind: AxisKind) -> Callable[[float], str]:
    if kind == "time":
        return fmt_duration
    if kind == "integer":
        return lambda v: f"{round(v)}"
    return lambda v: f"{v:,.2f}"


def line_chart(
    series: dict[str, list[tuple[float, float]]],
    *,
    x_label: str,
    y_label: str,
    width: int = 540,
    height: int = 260,
    marks: dict[str, float] | None = None,
    x_marks: dict[str, float] | None = None,
    x_range: tuple[float, float] | None = None,
    x_kind: AxisKind = "number",
    y_kind: AxisKind = "time",
    steps: bool = False,
    css_class: str = "chart",
    right: int | None = None,
    y_from_zero: bool = False,
) -> str:
    """A small multi-series line chart with a legend (used for progress and curves).

    Series are told apart by colour, by dash (every second series is dashed) and by mark
    (filled or hollow circles), and named in a legend above the plot. ``marks`` draws
    labelled horizontal lines (e.g. the deadline), ``x_marks`` labelled vertical lines
    (e.g. the answer of a sizing) with their labels above the plot, clear of the data.
    ``x_range`` fixes the x axis (e.g. 0 to the time budget); ``y_from_zero`` puts 0 on
    the y axis. ``right`` is the margin for the marks' labels (charts shown side by side
    pass the same one so their x axes line up). ``steps`` draws each series as a step
    line: a value holds until the next point (a best-so-far over time). Every point is a
    ``circle.point`` with its values in its ``<title>`` (up to :data:`MAX_MARKED_POINTS`
    points per series).
    """
    pts = [p for s in series.values() for p in s]
    if not pts:
        return ""
    marks = marks or {}
    x_marks = x_marks or {}
    xs = [p[0] for p in pts] + list(x_marks.values())
    ys = [p[1] for p in pts] + list(marks.values()) + ([0.0] if y_from_zero else [])
    if x_range is not None:
        xs += list(x_range)
    x0, x1, x_step = axis_range(min(xs), max(xs), x_kind, 6, pad=False)
    y0, y1, y_step = axis_range(min(ys), max(ys), y_kind, 5, pad=True)
    if y_from_zero and min(ys) >= 0:
        y0 = 0.0  # the padding stops at zero
    if x_range is not None and x_kind != "integer":
        x0, x1 = min(x_range[0], min(xs)), max(x_range[1], max(xs))
    val_x, val_y = _value_text(x_kind), _value_text(y_kind)
    _, x_ticks, x_texts = axis_ticks(x0, x1, x_step, x_kind)
    _, y_ticks, y_texts = axis_ticks(y0, y1, y_step, y_kind)
    # room on the left for the longest value label and the rotated axis label
    left = max(64, math.ceil(30 + CHAR_W * max(map(len, y_texts), default=0)))
    bottom = 44
    top = 48 if x_marks else 36  # the x marks' labels sit between the legend and the plot
    if right is None:
        right = 108 if marks else 24
    # the legend: entries left to right from the plot's left edge, wrapping to a new line
    # (18 px lower, the plot moved down as much) before one would pass the chart's edge
    legend: list[tuple[float, float, str]] = []
    lx, row = 0.0, 0
    for name in series:
        cut = fit_text(name, width - left - 34)
        w = 30 + CHAR_W * len(cut)
        if lx > 0 and left + lx + w > width - 4:
            lx, row = 0.0, row + 1
        legend.append((left + lx, 14.0 + 18 * row, cut))
        lx += w + 22
    top += 18 * row
    height += 18 * row
    pw, ph = width - left - right, height - top - bottom

    def sx(v: float) -> float:
        return left + pw * (v - x0) / (x1 - x0)

    def sy(v: float) -> float:
        return top + ph * (1 - (v - y0) / (y1 - y0))

    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="{css_class}" role="img" '
        f'width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
        f'data-x0="{x0:.6g}" data-x1="{x1:.6g}" data-y0="{y0:.12g}" data-y1="{y1:.12g}" '
        f'data-left="{left}" data-top="{top}" data-plot-width="{pw}" data-plot-height="{ph}">'
        f"<title>{escape(y_label)} by {escape(x_label)}</title>",
    ]
    for v, text in zip(x_ticks, x_texts, strict=True):
        out.append(
            f'<line class="tick" x1="{sx(v):.1f}" x2="{sx(v):.1f}" y1="{top}" y2="{top + ph}" />'
            f'<text class="tick-label" x="{sx(v):.1f}" y="{top + ph + 14}" '
            f'text-anchor="middle">{text}</text>'
        )
    for v, text in zip(y_ticks, y_texts, strict=True):
        out.append(
            f'<line class="tick" x1="{left}" x2="{left + pw}" y1="{sy(v):.1f}" y2="{sy(v):.1f}" />'
            f'<text class="tick-label" x="{left - 6}" y="{sy(v) + 4:.1f}" text-anchor="end">'
            f"{text}</text>"
        )
    out += [
        f'<rect class="frame" x="{left}" y="{top}" width="{pw}" height="{ph}" />',
        f'<text class="axis-label" x="{left + pw / 2:.1f}" y="{height - 6}" '
        f'text-anchor="middle">{escape(x_label)}</text>',
        f'<text class="axis-label" transform="translate(14 {top + ph / 2:.1f}) rotate(-90)" '
        f'text-anchor="middle">{escape(y_label)}</text>',
    ]
    for name, at in marks.items():
        out.append(
            f'<line class="mark" data-at="{at:.6g}" x1="{left}" x2="{left + pw}" '
            f'y1="{sy(at):.1f}" y2="{sy(at):.1f}" /><text class="mark-label" '
            f'x="{left + pw + 5}" y="{sy(at) + 4:.1f}">{escape(name)}</text>'
        )
    for name, at in x_marks.items():
        right_half = sx(at) > left + 0.6 * pw
        out.append(
            f'<line class="x-mark" data-at="{at:.6g}" x1="{sx(at):.1f}" x2="{sx(at):.1f}" '
            f'y1="{top - 10}" y2="{top + ph}" /><text class="mark-label" '
            f'x="{sx(at) + (-5 if right_half else 5):.1f}" y="{top - 4}" '
            f'text-anchor="{"end" if right_half else "start"}">{escape(name)}</text>'
        )
    for i, ((name, s), (lx, ly, cut)) in enumerate(zip(series.items(), legend, strict=True)):
        colour = PALETTE[i % len(PALETTE)]
        dash = ' stroke-dasharray="6 3"' if i % 2 else ""
        fill = "#ffffff" if i % 2 else colour
        # legend: a sample of the line and its mark, then the name
        out.append(
            f'<g class="legend-item" data-series="{escape(name)}">'
            f'<line x1="{lx:.1f}" x2="{lx + 24:.1f}" y1="{ly:g}" y2="{ly:g}" stroke="{colour}" '
            f'stroke-width="2"{dash} /><circle cx="{lx + 12:.1f}" cy="{ly:g}" r="3" '
            f'fill="{fill}" stroke="{colour}" stroke-width="1.5" />'
            f'<text x="{lx + 30:.1f}" y="{ly + 4:g}">{escape(cut)}</text>'
            + (f"<title>{escape(name)}</title>" if cut != name else "")
            + "</g>"
        )
        if not s:
            continue
        line = list(s)
        if steps:
            line = [p for a, b in pairwise(s) for p in (a, (b[0], a[1]))]
            line.append(s[-1])
        d = " ".join(f"{sx(a):.2f},{sy(b):.2f}" for a, b in line)
        out.append(
            f'<polyline class="series" data-series="{escape(name)}" points="{d}" fill="none" '
            f'stroke="{colour}" stroke-width="2"{dash} />'
        )
        if len(s) <= MAX_MARKED_POINTS:
            out.extend(
                f'<circle class="point" data-series="{escape(name)}" cx="{sx(a):.2f}" '
                f'cy="{sy(b):.2f}" r="3" fill="{fill}" stroke="{colour}" stroke-width="1.5">'
                f"<title>{escape(x_label)} {val_x(a)}: {escape(name)} {val_y(b)}</title>"
                "</circle>"
                for a, b in s
            )
    out.append("</svg>")
    return "".join(out)
