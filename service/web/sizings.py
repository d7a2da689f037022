"""What the sizing pages say: a sizing's page (the fewest nodes for a deadline, or what to
rent) and the list of sizings, from the API's JSON to template values.

Sizings are records in their own right (issue 19 point 3): listed at ``GET /sizings``
like plans at ``GET /``, their sentence is "for these estimates", it warns when the plan
leaves less than 1 % of the deadline to spare, and every count agrees with its noun.
A sizing requested on a clock (``start_at`` / ``deadline_at``, echoed as the result's
``clock``) gives its times on that clock, in the timestamp's offset (issue 19 point 2): the
deadline and when the plan finishes in the sentence, the deadline's line on the charts,
each frontier deadline, and the timeline's deadline.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping, Sequence
from html import escape
from typing import Any

from ..csvio import plural
from ..reading.clock import parse_time
from .pages import (
    deadline_text,
    fmt_clock,
    fmt_percent,
    record_context,
    record_row,
    with_clock_label,
)
from .svg import CHAR_W, FarmNode, fmt_duration, line_chart, timeline
from .ticks import fmt_tick

#: what proved a sizing's node lower bound, to read after "proven by"
SIZING_BOUND_WORDS = {
    "total_work": "the total work divided by the deadline",
    "L2": "a bin-packing argument (Martello-Toth L2)",
    "cardinality": "counting how many jobs can share a node before the deadline",
    "search": "an exhaustive search that ruled out every smaller farm",
    "matching": "pairing the jobs over a third of the deadline, at most two to a node",
    "lp_farley": "the linear-programming bound over node fillings, checked in whole numbers",
    "filler_waste": (
        "the total work plus the time the short jobs cannot fill beside each long job"
        " that shares its node with no other long job"
    ),
}

#: what proved a rental's cost lower bound, to read after "proven by"
RENTAL_BOUND_WORDS = {
    "work": "pricing the work the farm cannot do at the cheapest rate per unit of work",
    "cover": "a search over every mix of rented nodes that could cover the work",
    "lp_patterns": "the linear-programming bound over node fillings, checked in whole numbers",
    "search": "an exhaustive search over every plan of this small batch",
}

#: the sizing page warns when the plan's slack is below this share of the deadline
THIN_SLACK = 0.01

#: the least right margin of a curve chart, for its deadline line's label
MARK_ROOM = 108


def _shifted(result: Mapping[str, Any] | None, seconds: float) -> str | None:
    """RFC 3339 text of the time ``seconds`` after the start of a result's ``clock``, in
    the start's offset; None without a clock."""
    start = ((result or {}).get("clock") or {}).get("start_at")
    if not start:
        return None
    try:
        return parse_time(start).shifted(float(seconds))
    except ValueError:
        return None


def clock_at(result: Mapping[str, Any] | None, seconds: float) -> str | None:
    """The time ``seconds`` after the start of a result's ``clock``, as people read it
    ('2026-12-04 03:00 +01:00', in the start's offset); None without a clock."""
    later = _shifted(result, seconds)
    return fmt_clock(later) if later else None


def chart_clock(result: Mapping[str, Any] | None, text: str | None) -> str | None:
    """A clock time (RFC 3339 ``text``) for a chart's label, short: '03:00 +01:00' on the
    start's day, 'Sat 00:30 -05:00' on a later one (the sentence gives the dates), each
    in its own offset; None without a clock."""
    start = ((result or {}).get("clock") or {}).get("start_at")
    if not text or not start:
        return None
    try:
        t, t0 = parse_time(text).when, parse_time(start).when
    except ValueError:
        return None
    shown = fmt_clock(text)[11:]  # the time and offset, seconds when not zero
    return shown if t.date() == t0.date() else f"{t:%a} {shown}"


def finish_words(result: Mapping[str, Any], seconds: float) -> str:
    """'in 1h 00m 00s', and on a clock ', at 2026-12-04 03:00 +01:00'."""
    at = clock_at(result, seconds)
    return f"in {fmt_duration(seconds)}" + (f", at {at}" if at else "")


def nodes_meet(n: int) -> str:
    """'1 node meets', '2 nodes meet': the count, its noun and the verb agreeing."""
    return f"{plural(n, 'node')} {'meets' if n == 1 else 'meet'}"


def slack_warning(deadline: float, slack: float | None) -> str | None:
    """A warning when the plan leaves less than :data:`THIN_SLACK` of the deadline to
    spare: any job running longer than its estimate may then make it miss."""
    if slack is None or not deadline > 0 or slack >= THIN_SLACK * deadline:
        return None
    if slack <= 0:
        room = "finishes exactly at the deadline, with no time to spare"
    else:
        room = (
            f"finishes only {fmt_duration(slack)} before the deadline "
            f"({100 * slack / deadline:.3g}% of it, under {100 * THIN_SLACK:g}%)"
        )
    return (
        f"the plan {room}, so a job that runs longer than its estimate can make it miss; "
        "one node more, or a sizing with the estimates' spread, leaves a margin."
    )


def _plan_end(plan: Sequence[Mapping[str, Any]]) -> float | None:
    """When the last job of a result's ``plan`` ends (None without jobs)."""
    ends = [float(j["end"]) for row in plan for j in row.get("jobs") or ()]
    return max(ends) if ends else None


def rent_words(rent: Mapping[str, int]) -> str:
    """{'cpu-small': 3, 'cpu-large': 1} -> '3 cpu-small nodes, 1 cpu-large node'."""
    return ", ".join(plural(int(n), f"{kind} node") for kind, n in rent.items() if n)


def rental_sentence(result: dict[str, Any]) -> str:
    """One paragraph: what to rent, at what cost, how close to the cheapest, the caution."""
    rent = rent_words(result["rent"])
    what = f"Rent {rent}" if rent else "Rent nothing: the farm you have is enough"
    dl = result.get("deadline")
    if dl:
        what += f" to meet the deadline of {deadline_text(result, float(dl))}"
    source = str(result.get("bound_source") or "")
    why = RENTAL_BOUND_WORDS.get(source, source.replace("_", " ") or "a bound")
    text = (
        f"{what} for these estimates, at an estimated cost of {float(result['cost']):,.2f}; "
        f"no plan meeting the deadline costs less than "
        f"{float(result['cost_lower_bound']):,.2f} (proven by {why})"
    )
    if result.get("proven_optimal"):
        text += ": it is the cheapest"
    text += f". {result.get('caution', '')}"
    return text.rstrip()


def sizing_sentence(result: dict[str, Any]) -> str:
    """The fewest nodes for the deadline, for these estimates, and what proves the floor."""
    need, low = int(result["nodes_needed"]), result.get("nodes_lower_bound")
    deadline = float(result.get("deadline", 0) or 0)
    when = deadline_text(result, deadline)
    text = f"{nodes_meet(need)} the deadline of {when} for these estimates"
    if result.get("makespan") is not None:
        whose = "its" if need == 1 else "their"
        text += f": {whose} plan finishes {finish_words(result, float(result['makespan']))}"
    if result.get("estimated_cost") is not None:
        text += f", at an estimated cost of {float(result['estimated_cost']):,.2f}"
    source = str(result.get("bound_source") or "")
    why = SIZING_BOUND_WORDS.get(source, source.replace("_", " ") or "a bound")
    if result.get("proven_optimal") or low is None or int(low) >= need:
        return text + f". No plan with fewer nodes can meet it (proven by {why})."
    low = int(low)
    maybe = plural(low, "node") if low == need - 1 else f"{low} to {plural(need - 1, 'node')}"
    text += f". No plan with fewer than {plural(low, 'node')} can meet it (proven by {why}); "
    return text + f"{maybe} might."


def _rental_context(ctx: dict[str, Any], result: dict[str, Any]) -> dict[str, Any]:
    """A rental's page: what to rent and its proven floor, the caution, its facts, and the
    plan on the farm and the rented nodes as a timeline (busy farm nodes hatched)."""
    ctx["sentence"] = rental_sentence(result)
    deadline = float(result.get("deadline") or 0)
    plan = result.get("plan") or []
    end = _plan_end(plan)
    if end is not None:
        ctx["warning"] = slack_warning(deadline, deadline - end)
    points = result.get("frontier") or []
    if points:
        ctx["frontier_chart"] = frontier_chart(points, result)
        ctx["frontier_rows"] = [_frontier_row(pt, result) for pt in points]
        ctx["frontier_caution"] = str(result.get("caution") or "")
    ctx["facts"] = [
        ("rent", rent_words(result["rent"]) or "nothing"),
        ("estimated cost", f"{float(result['cost']):,.2f}"),
        (
            "cost lower bound",
            f"{float(result['cost_lower_bound']):,.2f} ({result.get('bound_source', '')})",
        ),
        ("gap", fmt_percent(result["gap"]) if result.get("gap") is not None else "-"),
        ("proven cheapest", "yes" if result.get("proven_optimal") else "no"),
        ("billing", f"per {result.get('billing', 'second')}"),
        ("stopped because", str(result.get("stop_reason", ""))),
    ]
    if plan and end is not None:
        farm = {
            str(n["id"]): FarmNode(
                speed=float(n.get("speed") or 1.0),
                provides=tuple(n.get("provides") or ()),
                free_at=float(n.get("free_at") or 0.0),
            )
            for n in result.get("farm") or ()
            if isinstance(n, Mapping) and "id" in n
        }
        shape = {
            "assignment": plan,
            "makespan": end,
            "deadline": {"deadline": deadline} if deadline else None,
        }
        ctx["timeline"] = with_clock_label(timeline(shape, farm=farm), result)
    return ctx


#: the band of a frontier chart: where the cheapest cost lies, between bound and cost
BAND_FILL = "#3b6fb6"
#: the frame of a chart made by ``line_chart``: the band goes just under it
_FRAME = '<rect class="frame"'


def frontier_chart(
    points: Sequence[Mapping[str, Any]], result: Mapping[str, Any] | None = None
) -> str:
    """Cost against deadline for a rental frontier (a result's ``frontier``): the cost
    found at each deadline (solid line, filled dots), the proven lower bound (dashed line,
    hollow dots) and, between them, a shaded band where the cheapest cost lies (it closes
    where a point is proven); a dotted line marks the answer's deadline, its label with
    the clock time when the ``result`` has a clock. Deadlines no plan meets have no dot
    (the table says why). "" without a feasible point."""
    feasible = sorted(
        (float(p["deadline"]), float(p["cost_lower_bound"]), float(p["cost"]))
        for p in points
        if p.get("feasible")
    )
    if not feasible:
        return ""
    answer = [float(p["deadline"]) for p in points if p.get("answer")]
    label = f"answer: {fmt_tick(answer[0])}" if answer else ""
    at = chart_clock(result, _shifted(result, answer[0])) if answer else None
    if at:
        label += f" · {at}"
    svg = line_chart(
        {
            "cost found": [(d, c) for d, _, c in feasible],
            "proven lower bound": [(d, b) for d, b, _ in feasible],
        },
        x_label="deadline",
        y_label="cost",
        x_marks={label: answer[0]} if answer else None,
        x_range=(0.0, feasible[-1][0]),
        x_kind="time",
        y_kind="number",
        width=540,
        y_from_zero=True,
        css_class="chart frontier",
    )
    return svg.replace(_FRAME, _band(svg, feasible) + _FRAME, 1)


def _band(svg: str, feasible: Sequence[tuple[float, float, float]]) -> str:
    """The shaded band from the lower bound up to the cost of each point (deadline,
    bound, cost), placed on the chart by the axis ``line_chart`` states on its ``<svg>``
    (``data-x0`` .. ``data-plot-height``); a lone point gets a bar 8 px wide."""
    head = svg[: svg.index(">")]
    ax = {k: float(v) for k, v in re.findall(r'data-([a-z0-9-]+)="([-0-9.e+]+)"', head)}
    x0, x1, y0, y1 = ax["x0"], ax["x1"], ax["y0"], ax["y1"]
    left, top, pw, ph = ax["left"], ax["top"], ax["plot-width"], ax["plot-height"]

    def at(d: float, v: float) -> tuple[float, float]:
        return left + pw * (d - x0) / (x1 - x0), top + ph * (1 - (v - y0) / (y1 - y0))

    if len(feasible) == 1:
        d, b, c = feasible[0]
        (x, y_cost), (_, y_bound) = at(d, c), at(d, b)
        tag = "rect"
        shape = f'x="{x - 4:.2f}" y="{y_cost:.2f}" width="8" height="{y_bound - y_cost:.2f}"'
    else:
        edge = [at(d, c) for d, _, c in feasible] + [at(d, b) for d, b, _ in feasible[::-1]]
        tag = "polygon"
        shape = 'points="' + " ".join(f"{x:.2f},{y:.2f}" for x, y in edge) + '"'
    words = (
        "the cheapest cost at each deadline lies in this band, between the proven lower "
        "bound and the cost found"
    )
    return (
        f'<{tag} class="band" {shape} fill="{BAND_FILL}" fill-opacity="0.18" stroke="none">'
        f"<title>{escape(words)}</title></{tag}>"
    )


def _frontier_row(pt: Mapping[str, Any], result: Mapping[str, Any] | None = None) -> dict[str, Any]:
    """One row of a frontier's table: a deadline (and its clock time when the ``result``
    has a clock), its cost and proven floor, what to rent; a deadline no plan meets says
    why."""
    deadline = fmt_duration(float(pt["deadline"]))
    at = clock_at(result, float(pt["deadline"]))
    row = {"deadline": f"{deadline} ({at})" if at else deadline, "answer": bool(pt.get("answer"))}
    if not pt.get("feasible"):
        return row | {
            "cost": "-",
            "lower_bound": "-",
            "proven": "-",
            "rent": f"no plan meets it: {pt.get('reason', '')}",
        }
    return row | {
        "cost": f"{float(pt['cost']):,.2f}",
        "lower_bound": f"{float(pt['cost_lower_bound']):,.2f}",
        "proven": "yes" if pt.get("proven_optimal") else "no",
        "rent": rent_words(pt.get("rent") or {}) or "nothing",
    }


def sizing_context(sizing: dict[str, Any]) -> dict[str, Any]:
    """Template values for one sizing's page (``sizing`` is the API's status body).

    Two charts over the node counts of the curve: makespan (plan found and lower bound,
    with the deadline) and, when the request gave a node-hour price, the estimated cost.
    Both mark the answer (``nodes_needed``) with a labelled line; the table marks its row.
    A rental (a result with ``rent``) says what to rent, its cost and proven floor. On a
    clock (the result's ``clock``), ``clock_note`` says when the charts' time 0 is.
    """
    result = sizing.get("result")
    ctx, working = record_context("sizing", sizing)
    progress = sizing.get("progress") or {}
    if working and progress.get("nodes_needed") is not None:
        text = (
            f"After {float(progress.get('elapsed') or 0):.1f} s, "
            f"{nodes_meet(int(progress['nodes_needed']))} the deadline so far"
        )
        low = progress.get("nodes_lower_bound")
        if low is not None:
            text += f", and no plan with fewer than {plural(int(low), 'node')} can"
        ctx["progress_sentence"] = text + "."
    if not result:
        return ctx
    start = (result.get("clock") or {}).get("start_at")
    if start:  # the charts' times are seconds from it; their deadline labels give clocks
        ctx["clock_note"] = f"Times count from the start at {fmt_clock(start)}."
    if "rent" in result:  # renting to a deadline: what to rent and its proven floor
        return _rental_context(ctx, result)
    curve = result.get("curve") or []
    deadline = float(result.get("deadline", 0) or 0)
    need = result.get("nodes_needed")
    answer = {f"answer: {plural(need, 'node')}": float(need)} if need is not None else None
    mark = f"deadline {fmt_tick(deadline)}"
    at = chart_clock(result, (result.get("clock") or {}).get("deadline_at"))
    if at:
        mark += f" · {at}"
    room = max(MARK_ROOM, math.ceil(10 + CHAR_W * len(mark)))
    ctx["curve_chart"] = line_chart(
        {
            "plan makespan": [(c["nodes"], c["makespan"]) for c in curve if c.get("makespan")],
            "lower bound": [(c["nodes"], c["lower_bound"]) for c in curve],
        },
        x_label="nodes",
        y_label="makespan",
        marks={mark: deadline} if deadline else None,
        x_marks=answer,
        x_kind="integer",
        y_kind="time",
        width=480,
        right=room,
        css_class="chart curve",
    )
    costs = [(c["nodes"], c["cost"]) for c in curve if c.get("cost") is not None]
    if costs:
        ctx["cost_chart"] = line_chart(
            {"estimated cost": costs},
            x_label="nodes",
            y_label="cost",
            x_marks=answer,
            x_kind="integer",
            y_kind="number",
            width=480,
            right=room,
            y_from_zero=True,
            css_class="chart cost",
        )
        ctx["cost_note"] = (
            f"Estimated cost at {float(result.get('node_hour_cost') or 0):,.2f} per node-hour, "
            f"billed per {result.get('billing', 'second')}: {result.get('cost_model', '')}."
        )
    ctx["rows"] = [_curve_row(c, need, deadline) for c in curve]
    if need is not None:
        ctx["sentence"] = sizing_sentence(result)
        slack = result.get("slack")
        if slack is None and result.get("makespan") is not None:
            slack = deadline - float(result["makespan"])
        ctx["warning"] = slack_warning(deadline, None if slack is None else float(slack))
    conf_text = sizing_confidence_sentence(result)
    if conf_text:
        ctx["confidence_sentence"] = conf_text
    return ctx


def _curve_row(c: Mapping[str, Any], need: int | None, deadline: float) -> dict[str, Any]:
    meets = bool(c.get("meets_deadline", c.get("makespan", math.inf) <= deadline))
    if meets:
        met, met_class = "yes", "met-yes"
    elif c.get("provably_misses"):
        met, met_class = "no (none can)", "met-no"
    else:
        met, met_class = "no", "met-no"
    return {
        "nodes": c["nodes"],
        "answer": c["nodes"] == need,
        "makespan": fmt_duration(c["makespan"]) if c.get("makespan") else "-",
        "lower_bound": fmt_duration(c["lower_bound"]),
        "met": met,
        "met_class": met_class,
        "cost": f"{c['cost']:,.2f}" if c.get("cost") is not None else "-",
    }


def sizing_confidence_sentence(result: dict[str, Any]) -> str | None:
    """One sentence: how likely the sizing's answer makes the deadline, and to a confidence.

    From the result's ``confidence`` block (the answer's plan simulated) and, when the
    request asked for a confidence q, its ``confidence_sizing``. None without a block.
    """
    conf = result.get("confidence")
    if not conf or conf.get("deadline_probability") is None:
        return None
    p = float(conf["deadline_probability"])
    runs = int(conf["samples"])
    need = result.get("nodes_needed")
    plan = f"the {need}-node plan" if need is not None else "the plan"
    if conf.get("interval_method") == "exact":  # no spread: every run is the plan itself
        verdict = "meets" if p == 1.0 else "misses"
        text = f"With no spread in the estimates, {plan} {verdict} the deadline in every run"
    else:
        lo, hi = conf["interval"]
        text = (
            f"With the estimates' spread, {plan} meets the deadline in {fmt_percent(p)} of "
            f"{plural(runs, 'simulated run')} (95% interval {fmt_percent(lo)} to "
            f"{fmt_percent(hi)})"
        )
    target = result.get("confidence_sizing")
    if target:
        text += (
            f"; to meet it with probability at least {100 * float(target['confidence']):g}% "
            "(judged by the lower end of each node count's 95% interval) takes "
            f"{plural(int(target['nodes_needed']), 'node')}"
        )
        fewer = target.get("fewer")
        if fewer:
            text += f"; with one node fewer it is only {fmt_percent(fewer['interval'][0])}"
    return text + "."


def sizing_list_rows(items: list[dict[str, Any]]) -> list[dict[str, str]]:
    """Rows of the sizings list page, from each listed record's stored summary and, where
    the summary lacks them (a rental's rent and cost, the deadline), its ``result``."""
    rows = []
    for it in items:
        r = {**(it.get("summary") or {}), **(it.get("result") or {})}
        need, low = r.get("nodes_needed"), r.get("nodes_lower_bound")
        if r.get("rent") is not None:
            answer = "rent " + (rent_words(r["rent"]) or "nothing")
            cost = r.get("cost")
            floor = f"{float(r['cost_lower_bound']):,.2f}" if "cost_lower_bound" in r else "-"
        else:
            answer = plural(int(need), "node") if need is not None else "-"
            cost = r.get("estimated_cost")
            floor = plural(int(low), "node") if low is not None else "-"
        proven = r.get("proven_optimal")
        dl = r.get("deadline")
        rows.append(
            {
                **record_row(it, "sizings"),
                "answer": answer,
                "cost": f"{float(cost):,.2f}" if cost is not None else "-",
                "lower_bound": floor,
                "proven": "-" if proven is None or answer == "-" else "yes" if proven else "no",
                "deadline": fmt_duration(float(dl)) if isinstance(dl, int | float) else "-",
            }
        )
    return rows
