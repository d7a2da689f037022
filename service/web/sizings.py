"""What the sizing pages say: a sizing's page (the fewest nodes for a deadline, or what to
rent) and the list of sizings, from the API's JSON to template values.

Sizings are records in their own right (issue 19 point 3): listed at ``GET /sizings``
like plans at ``GET /``, their sentence is "for these estimates", it warns when the plan
leaves less than 1 % of the deadline to spare, and every count agrees with its noun.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

from ..csvio import plural
from .pages import fmt_percent, record_context, when
from .svg import FarmNode, fmt_duration, line_chart, timeline
from .ticks import fmt_tick

#: what proved a sizing's node lower bound, to read after "proven by"
SIZING_BOUND_WORDS = {
    "total_work": "the total work divided by the deadline",
    "L2": "a bin-packing argument (Martello-Toth L2)",
    "cardinality": "counting how many jobs can share a node before the deadline",
    "search": "an exhaustive search that ruled out every smaller farm",
}

#: what proved a rental's cost lower bound, to read after "proven by"
RENTAL_BOUND_WORDS = {
    "work": "pricing the work the farm cannot do at the cheapest rate per unit of work",
    "cover": "a search over every mix of rented nodes that could cover the work",
    "lp_patterns": "the linear-programming bound over node fillings, checked in whole numbers",
}

#: the sizing page warns when the plan's slack is below this share of the deadline
THIN_SLACK = 0.01


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
        what += f" to meet the deadline of {fmt_duration(float(dl))}"
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
    text = f"{nodes_meet(need)} the deadline of {fmt_duration(deadline)} for these estimates"
    if result.get("makespan") is not None:
        whose = "its" if need == 1 else "their"
        text += f": {whose} plan finishes in {fmt_duration(float(result['makespan']))}"
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
        ctx["timeline"] = timeline(shape, farm=farm)
    return ctx


def sizing_context(sizing: dict[str, Any]) -> dict[str, Any]:
    """Template values for one sizing's page (``sizing`` is the API's status body).

    Two charts over the node counts of the curve: makespan (plan found and lower bound,
    with the deadline) and, when the request gave a node-hour price, the estimated cost.
    Both mark the answer (``nodes_needed``) with a labelled line; the table marks its row.
    A rental (a result with ``rent``) says what to rent, its cost and proven floor.
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
    if "rent" in result:  # renting to a deadline: what to rent and its proven floor
        return _rental_context(ctx, result)
    curve = result.get("curve") or []
    deadline = float(result.get("deadline", 0) or 0)
    need = result.get("nodes_needed")
    answer = {f"answer: {plural(need, 'node')}": float(need)} if need is not None else None
    ctx["curve_chart"] = line_chart(
        {
            "plan makespan": [(c["nodes"], c["makespan"]) for c in curve if c.get("makespan")],
            "lower bound": [(c["nodes"], c["lower_bound"]) for c in curve],
        },
        x_label="nodes",
        y_label="makespan",
        marks={f"deadline {fmt_tick(deadline)}": deadline} if deadline else None,
        x_marks=answer,
        x_kind="integer",
        y_kind="time",
        width=480,
        right=108,
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
            right=108,
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
                "id": it["id"],
                "href": f"/sizings/{it['id']}",
                "name": it.get("name") or "",
                "method": it.get("method") or "",
                "status": it.get("status", "?"),
                "answer": answer,
                "cost": f"{float(cost):,.2f}" if cost is not None else "-",
                "lower_bound": floor,
                "proven": "-" if proven is None or answer == "-" else "yes" if proven else "no",
                "deadline": fmt_duration(float(dl)) if isinstance(dl, int | float) else "-",
                "submitted_at": it.get("submitted_at", ""),
                "submitted": when(it.get("submitted_at") or ""),
            }
        )
    return rows
