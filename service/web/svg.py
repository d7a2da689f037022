"""Inline SVG charts: the plan timeline, the solve progress and the node-count curve.

Pure functions from the API's JSON (the same dicts ``GET /v1/plans/{id}`` returns) to SVG
text, so the pages, the tests and anyone else can render a plan without a browser. Every
mark that carries meaning by colour also carries it in text (labels, legend, titles).
"""

from __future__ import annotations

import math
from collections.abc import Iterable, Sequence
from html import escape
from typing import Any

#: our own palette: eight hues distinguishable in print and for most colour vision
PALETTE = (
    "#3b6fb6", "#e0892f", "#3f9a6b", "#c44f6a", "#7a5fb0", "#9c7a3c", "#2f9fae", "#8a8f99",
)  # fmt: skip
UNGROUPED = "(no group)"
MAX_ROWS = 400


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


def fmt_tick(seconds: float) -> str:
    """Compact axis labels: 0, 45s, 30m, 2h, 2h30."""
    s = round(seconds)
    h, rem = divmod(s, 3600)
    m, sec = divmod(rem, 60)
    if h:
        return f"{h}h{m:02d}" if m else f"{h}h"
    if m:
        return f"{m}m{sec:02d}" if sec else f"{m}m"
    return f"{sec}s" if sec else "0"


def nice_ticks(hi: float, count: int = 8) -> list[float]:
    """Round tick positions from 0 to about ``hi`` (seconds, in 1-2-5 steps of time units)."""
    if hi <= 0:
        return [0.0]
    steps = [1, 2, 5, 10, 15, 30, 60, 120, 300, 600, 900, 1800, 3600, 7200, 10800, 21600]
    raw = hi / count
    step = next((s for s in steps if s >= raw), 3600 * math.ceil(raw / 3600))
    return [i * step for i in range(int(hi // step) + 1)]


def group_colours(groups: Iterable[str]) -> dict[str, str]:
    """A colour per group, in order of first appearance (the palette repeats after 8)."""
    out: dict[str, str] = {}
    for g in groups:
        if g not in out:
            out[g] = PALETTE[len(out) % len(PALETTE)]
    return out


def timeline(
    result: dict[str, Any],
    groups: dict[str, str] | None = None,
    width: int = 960,
    row_height: int = 20,
) -> str:
    """The plan as a timeline: one row per node, one bar per job (its id on hover).

    ``groups`` maps job id -> group name for colours and the legend. A solid line marks
    the deadline, a dashed line the proven lower bound.
    """
    groups = groups or {}
    assignment: Sequence[dict[str, Any]] = result.get("assignment") or []
    shown = assignment[:MAX_ROWS]
    makespan = float(result.get("makespan") or 0.0)
    lower = result.get("lower_bound")
    dl = (result.get("deadline") or {}).get("deadline")
    span = max(makespan, float(dl or 0.0), 1e-9) * 1.04
    left, top, right = 150, 34, 40
    plot_w = width - left - right
    colours = group_colours(groups.get(j["id"], UNGROUPED) for a in shown for j in a["jobs"])
    legend_h = 22 * math.ceil(len(colours) / 4) if colours else 0
    height = top + row_height * len(shown) + 56 + legend_h

    def x(t: float) -> float:
        return left + plot_w * t / span

    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="timeline" role="img" '
        f'width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
        f'data-span="{span:.6g}" data-left="{left}" data-plot-width="{plot_w}">',
        f"<title>Plan timeline: {len(assignment)} nodes, makespan {fmt_duration(makespan)}</title>",
    ]
    for t in nice_ticks(span):
        parts.append(
            f'<line class="tick" x1="{x(t):.1f}" x2="{x(t):.1f}" y1="{top - 4}" '
            f'y2="{top + row_height * len(shown)}" />'
            f'<text class="tick-label" x="{x(t):.1f}" y="{top - 8}" text-anchor="middle">'
            f"{fmt_tick(t)}</text>"
        )
    for r, node in enumerate(shown):
        y = top + r * row_height
        parts.append(
            f'<g class="node-row" data-node="{escape(node["node"])}">'
            f'<text class="node-label" x="{left - 8}" y="{y + row_height * 0.7:.1f}">'
            f"{escape(node['node'])}</text>"
        )
        for j in node["jobs"]:
            g = groups.get(j["id"], UNGROUPED)
            x0, x1 = x(j["start"]), x(j["end"])
            w = max(x1 - x0, 0.5)
            label = escape(j["id"])
            parts.append(
                f'<rect class="job" data-job="{label}" data-group="{escape(g)}" '
                f'x="{x0:.2f}" y="{y + 2}" width="{w:.2f}" height="{row_height - 4}" '
                f'fill="{colours[g]}"><title>{label} ({escape(g)}): '
                f"{fmt_duration(j['start'])} to {fmt_duration(j['end'])}</title></rect>"
            )
            if w > 7.5 * len(j["id"]) + 6:
                parts.append(
                    f'<text class="job-label" x="{x0 + 3:.1f}" y="{y + row_height * 0.7:.1f}">'
                    f"{label}</text>"
                )
        parts.append("</g>")
    bottom = top + row_height * len(shown)
    if lower is not None:
        parts.append(
            f'<line class="lower-bound" data-at="{float(lower):.6g}" x1="{x(lower):.2f}" '
            f'x2="{x(lower):.2f}" y1="{top - 4}" y2="{bottom + 4}" />'
            f'<text class="mark-label" x="{x(lower) - 4:.1f}" y="{bottom + 18}" '
            f'text-anchor="end">lower bound {fmt_duration(lower)}</text>'
        )
    if dl is not None:
        # near the right edge the label goes left of the line
        anchor = ' text-anchor="end"' if x(dl) > left + 0.75 * plot_w else ""
        if anchor and lower is not None and x(lower) > left + 0.5 * plot_w:
            anchor = ' text-anchor="end" dy="14"'
        parts.append(
            f'<line class="deadline" data-at="{float(dl):.6g}" x1="{x(dl):.2f}" '
            f'x2="{x(dl):.2f}" y1="{top - 4}" y2="{bottom + 4}" />'
            f'<text class="mark-label" x="{x(dl) + (-4 if anchor else 4):.1f}" y="{bottom + 18}"'
            f"{anchor}>deadline {fmt_duration(dl)}</text>"
        )
    for i, (g, c) in enumerate(colours.items()):
        lx = left + (i % 4) * (plot_w / 4)
        ly = bottom + 50 + 22 * (i // 4)
        parts.append(
            f'<g class="legend-item"><rect x="{lx:.1f}" y="{ly - 11}" width="14" height="14" '
            f'fill="{c}" /><text x="{lx + 20:.1f}" y="{ly}">{escape(g)}</text></g>'
        )
    parts.append("</svg>")
    return "".join(parts)


def line_chart(
    series: dict[str, list[tuple[float, float]]],
    *,
    x_label: str,
    y_label: str,
    width: int = 520,
    height: int = 230,
    marks: dict[str, float] | None = None,
    x_is_time: bool = True,
) -> str:
    """A small multi-series line chart with labelled lines (used for progress and curves).

    ``marks`` draws labelled horizontal lines (e.g. the deadline).
    """
    pts = [p for s in series.values() for p in s]
    if not pts:
        return ""
    marks = marks or {}
    xs = [p[0] for p in pts]
    ys = [p[1] for p in pts] + list(marks.values())
    x0, x1 = min(xs), max(xs)
    y0, y1 = min(ys), max(ys)
    if x1 == x0:
        x1 = x0 + 1
    pad = (y1 - y0) * 0.08 or max(abs(y1) * 0.05, 1.0)
    y0, y1 = y0 - pad, y1 + pad
    left, right, top, bottom = 86, 120, 14, 44
    pw, ph = width - left - right, height - top - bottom

    def sx(v: float) -> float:
        return left + pw * (v - x0) / (x1 - x0)

    def sy(v: float) -> float:
        return top + ph * (1 - (v - y0) / (y1 - y0))

    fmt_x = fmt_duration if x_is_time else (lambda v: f"{v:.3g}")
    out = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="chart" role="img" width="{width}" '
        f'height="{height}" viewBox="0 0 {width} {height}"><title>{escape(y_label)} by '
        f"{escape(x_label)}</title>",
        f'<rect class="frame" x="{left}" y="{top}" width="{pw}" height="{ph}" />',
        f'<text class="axis-label" x="{left + pw / 2:.1f}" y="{height - 4}" '
        f'text-anchor="middle">{escape(x_label)}</text>',
        f'<text class="tick-label" x="{left}" y="{top + ph + 14}">{fmt_x(x0)}</text>',
        f'<text class="tick-label" x="{left + pw}" y="{top + ph + 14}" text-anchor="end">'
        f"{fmt_x(x1)}</text>",
        f'<text class="tick-label" x="{left - 6}" y="{top + 10}" text-anchor="end">'
        f"{fmt_duration(y1)}</text>",
        f'<text class="tick-label" x="{left - 6}" y="{top + ph}" text-anchor="end">'
        f"{fmt_duration(y0)}</text>",
    ]
    for name, at in marks.items():
        out.append(
            f'<line class="mark" x1="{left}" x2="{left + pw}" y1="{sy(at):.1f}" '
            f'y2="{sy(at):.1f}" /><text class="mark-label" x="{left + pw + 4}" '
            f'y="{sy(at) + 4:.1f}">{escape(name)}</text>'
        )
    for i, (name, s) in enumerate(series.items()):
        if not s:
            continue
        colour = PALETTE[i % len(PALETTE)]
        dash = ' stroke-dasharray="5 3"' if i % 2 else ""
        d = " ".join(f"{sx(a):.1f},{sy(b):.1f}" for a, b in s)
        out.append(
            f'<polyline class="series" data-series="{escape(name)}" points="{d}" fill="none" '
            f'stroke="{colour}" stroke-width="2"{dash} />'
        )
        for a, b in s if len(s) <= 40 else []:
            out.append(f'<circle cx="{sx(a):.1f}" cy="{sy(b):.1f}" r="2.5" fill="{colour}" />')
        ly = s[-1][1]
        out.append(
            f'<text class="series-label" x="{left + pw + 4}" y="{sy(ly) + 4 + 12 * i:.1f}" '
            f'fill="{colour}">{escape(name)}</text>'
        )
    out.append("</svg>")
    return "".join(out)
