"""What a stage-graph plan's page adds (issue 17 point 6): limit usage over time.

A stage-graph plan (a result with ``stages``) is drawn by :func:`.svg.timeline` with its
slots as lanes and its critical path marked; this module reads what the result does not
carry from the stored request (:class:`StageRequest`: what each job waits for and which
limits it uses) and draws, under the timeline and on the same time axis, one step chart
per limit: how many of its jobs run at each moment, with its capacity as a dashed line.

The chart states its axis as the timeline does (``data-span``, ``data-left``,
``data-plot-width`` on the ``<svg>``), each limit's panel its own (``data-top``,
``data-plot-height``, ``data-y1``: the count at the panel's top) and capacity, and each
step its time range and count (``data-start``, ``data-end``, ``data-count``).
"""

from __future__ import annotations

from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from html import escape
from itertools import pairwise
from typing import Any

from ..csvio import plural
from .svg import PALETTE, fit_text, fmt_duration, timeline_span
from .ticks import nice_step, time_ticks

#: one step of a limit's usage: from, to (seconds from the start) and how many jobs run
Step = tuple[float, float, int]


@dataclass(frozen=True)
class StageRequest:
    """What a stage plan's page reads from its stored request: per job id, the ids it
    waits for (``after``) and the limits it uses (``uses``); every job is a key."""

    after: Mapping[str, Sequence[str]]
    uses: Mapping[str, Sequence[str]]

    @classmethod
    def from_body(cls, body: Mapping[str, Any]) -> StageRequest:
        jobs = body.get("jobs") or []
        return cls(
            after={j["id"]: tuple(j.get("after") or ()) for j in jobs},
            uses={j["id"]: tuple(j.get("uses") or ()) for j in jobs},
        )


def usage_steps(
    assignment: Sequence[Mapping[str, Any]], users: set[str], until: float
) -> list[Step]:
    """How many of the jobs ``users`` run at each moment from 0 to ``until`` (or their last
    end, if later), as maximal steps of one count. A job runs from its start up to, not
    including, its end, so one that ends as another starts never counts with it."""
    delta: dict[float, int] = {0.0: 0, float(until): 0}
    for row in assignment:
        for j in row["jobs"]:
            if j["id"] in users and j["end"] > j["start"]:
                delta[j["start"]] = delta.get(j["start"], 0) + 1
                delta[j["end"]] = delta.get(j["end"], 0) - 1
    times = sorted(delta)
    steps: list[Step] = []
    running = 0
    for t0, t1 in pairwise(times):
        running += delta[t0]
        if steps and steps[-1][2] == running:
            steps[-1] = (steps[-1][0], t1, running)
        else:
            steps.append((t0, t1, running))
    return steps


def limit_chart(
    result: Mapping[str, Any], uses: Mapping[str, Sequence[str]], width: int = 960
) -> str:
    """One step chart per limit of ``stages.limits``: its jobs (those whose ``uses`` name
    it) running at each moment of the plan, counted from the assignment's start and end
    times, with the limit's capacity as a dashed line; on the timeline's time axis (the
    same width, left margin and span), so a step sits under the bars that make it."""
    limits: Mapping[str, int] = (result.get("stages") or {}).get("limits") or {}
    if not limits:
        return ""
    assignment = result.get("assignment") or []
    until = float(result.get("makespan") or 0.0)
    span = timeline_span(dict(result))
    left, top, right, ph, gap = 150, 16, 40, 56, 34
    plot_w = width - left - right
    height = top + len(limits) * (ph + gap) + 10
    ticks, tick_texts = time_ticks(span)

    def x(t: float) -> float:
        return left + plot_w * t / span

    parts = [
        f'<svg xmlns="http://www.w3.org/2000/svg" class="chart limits" role="img" '
        f'width="{width}" height="{height}" viewBox="0 0 {width} {height}" '
        f'data-span="{span:.6g}" data-left="{left}" data-plot-width="{plot_w}">'
        f"<title>Limit usage over time: {plural(len(limits), 'limit')}</title>",
    ]
    for i, (name, cap) in enumerate(limits.items()):
        users = {jid for jid, names in uses.items() if name in names}
        steps = usage_steps(assignment, users, until)
        peak = max((c for _, _, c in steps), default=0)
        y1 = max(int(cap), peak, 1)
        ptop = top + i * (ph + gap)
        base = ptop + ph

        def y(v: float, ptop: float = ptop, y1: int = y1) -> float:
            return ptop + ph * (1 - v / y1)

        colour = PALETTE[i % len(PALETTE)]
        parts.append(
            f'<g class="limit" data-limit="{escape(name)}" data-capacity="{int(cap)}" '
            f'data-top="{ptop}" data-plot-height="{ph}" data-y1="{y1}">'
            f"<title>{escape(name)}: at most {int(cap)} of its "
            f"{plural(len(users), 'job')} at once; at most {peak} ran at once in this plan</title>"
            f'<text class="limit-name" x="{left - 34}" y="{ptop + ph / 2 - 2:.1f}" '
            f'text-anchor="end">{escape(fit_text(name, left - 40))}</text>'
            f'<text class="tick-label" x="{left - 34}" y="{ptop + ph / 2 + 12:.1f}" '
            f'text-anchor="end">jobs at once</text>'
            f'<rect class="frame" x="{left}" y="{ptop}" width="{plot_w}" height="{ph}" />'
        )
        for t in ticks:
            parts.append(
                f'<line class="tick" x1="{x(t):.1f}" x2="{x(t):.1f}" y1="{ptop}" y2="{base}" />'
            )
        step = nice_step(y1 / 3, "integer")
        for v in range(0, y1 + 1, int(step)):
            parts.append(
                f'<text class="tick-label" x="{left - 6}" y="{y(v) + 4:.1f}" '
                f'text-anchor="end">{v}</text>'
            )
        for t0, t1, count in steps:
            parts.append(
                f'<rect class="usage" data-start="{t0!r}" data-end="{t1!r}" '
                f'data-count="{count}" x="{x(t0):.2f}" y="{y(count):.2f}" '
                f'width="{x(t1) - x(t0):.2f}" height="{base - y(count):.2f}" fill="{colour}" '
                f'fill-opacity=".3"><title>{escape(name)}: {count} of {int(cap)} in use from '
                f"{fmt_duration(t0)} to {fmt_duration(t1)}</title></rect>"
            )
        line = [(x(t), y(c)) for t0, t1, c in steps for t in (t0, t1)]
        if line:
            points = " ".join(f"{a:.2f},{b:.2f}" for a, b in line)
            parts.append(
                f'<polyline class="usage-line" points="{points}" fill="none" '
                f'stroke="{colour}" stroke-width="2" />'
            )
        parts.append(
            f'<line class="capacity" data-capacity="{int(cap)}" x1="{left}" '
            f'x2="{left + plot_w}" y1="{y(cap):.2f}" y2="{y(cap):.2f}" />'
            f'<text class="mark-label halo" x="{left + plot_w - 4}" y="{y(cap) - 4:.1f}" '
            f'text-anchor="end">capacity {int(cap)}</text></g>'
        )
    last = top + (len(limits) - 1) * (ph + gap) + ph
    for t, tick in zip(ticks, tick_texts, strict=True):
        parts.append(
            f'<text class="tick-label" x="{x(t):.1f}" y="{last + 14}" text-anchor="middle">'
            f"{tick}</text>"
        )
    parts.append("</svg>")
    return "".join(parts)
