"""What the pages say: plain functions from the API's JSON to template values.

The certificate sentence is the heart of it: the plan's length, the proven floor under
any plan for the same estimates, and what that means for the deadline.
"""

from __future__ import annotations

import math
import re
from typing import Any

from .stage_svg import StageRequest, limit_chart
from .svg import fmt_duration, fmt_tick, line_chart, timeline

#: seconds between self-refreshes of a page whose plan is still being worked on
REFRESH_SECONDS = 2

#: what proved a plan's lower bound, to read after "proven by"
BOUND_WORDS = {
    "mean_load": "spreading the total work evenly over the nodes",
    "longest_job": "the longest job, which has to run somewhere",
    "pigeonhole": "two of the m+1 longest jobs having to share a node",
    "pigeonhole_k": "k+1 of the km+1 longest jobs having to share a node",
    "bin_packing": "a bin-packing argument (Martello-Toth)",
    "search": "a complete search that ruled out every shorter plan",
    "busy_nodes": "the nodes still busy with earlier work",
    "k_longest": "the longest jobs having to fit on the fastest nodes",
    "eligibility_group": "the jobs that only some of the nodes can run",
    "critical_path": "the longest chain of jobs that wait for one another",
    "limit_load": "the work of the jobs sharing a limit, spread over its capacity",
    "heads_tails": (
        "the work of a set of jobs, spread over the slots between the earliest they can "
        "start and the least time that must follow them"
    ),
    "lanes": (
        "the work of a set of jobs counted lane by lane, each lane from its first job's "
        "earliest start to its last job's least following time"
    ),
    "energetic": "the work that must fall inside a window of time (energetic reasoning)",
}

#: at most this many ids of the critical path are named in the page's facts
MAX_PATH_NAMED = 12

#: what proved a sizing's node lower bound, to read after "proven by"
SIZING_BOUND_WORDS = {
    "total_work": "the total work divided by the deadline",
    "L2": "a bin-packing argument (Martello-Toth L2)",
    "cardinality": "counting how many jobs can share a node before the deadline",
    "search": "an exhaustive search that ruled out every smaller farm",
}


def fmt_percent(fraction: float) -> str:
    """0.0307 -> '3.07%'; a small non-zero gap keeps two significant digits ('0.000087%')
    rather than reading as 0.00%."""
    pct = 100 * float(fraction)
    if not pct > 0 or pct >= 0.01:
        return f"{pct:.2f}%"
    return f"{pct:.{min(1 - math.floor(math.log10(pct)), 12)}f}%"


def fmt_difference(seconds: float) -> str:
    """A difference of times: as :func:`fmt_duration`, below 10 ms in milliseconds."""
    if 0 < seconds < 0.01:
        return f"{1000 * seconds:.2g} ms"
    return fmt_duration(seconds)


def bound_words(result: dict[str, Any]) -> str:
    """What proved the plan's lower bound, in words, with the batch's own numbers."""
    source = str(result.get("bound_source") or "")
    cert = result.get("certificate") or {}
    # a stage plan's certificate is the best bound's evidence itself, not keyed by name
    evidence = cert.get(source) or (cert if "stages" in result else {})
    m = result.get("nodes")
    if source == "pigeonhole" and isinstance(m, int) and "k" not in evidence:
        return f"two of the {m + 1} longest jobs having to share one of the {m} nodes"
    if source in ("pigeonhole", "pigeonhole_k") and "k" in evidence:
        k, considered = int(evidence["k"]), evidence.get("jobs_considered")
        if considered:
            return f"{k + 1} of the {considered} longest jobs having to share a node"
    if source == "critical_path" and len(evidence.get("jobs") or ()) > 1:
        path = evidence["jobs"]
        return (
            f"the chain of {len(path)} jobs from {path[0]} to {path[-1]}, each waiting for "
            "the one before"
        )
    if source == "limit_load" and {"jobs", "limit", "capacity"} <= evidence.keys():
        return (
            f"the work of the {evidence['jobs']} jobs using {evidence['limit']}, at most "
            f"{evidence['capacity']} at once"
        )
    if source == "search" and evidence.get("refuted_by"):
        return (
            "the linear-programming bound of bin packing, checked in whole numbers, which "
            "rules out every shorter plan"
        )
    return BOUND_WORDS.get(source, source.replace("_", " ") or "a bound")


def certificate_sentence(result: dict[str, Any]) -> str:
    """One sentence: how long the plan is and how far it may be from the best possible."""
    ms, lb = float(result["makespan"]), float(result["lower_bound"])
    why = bound_words(result)
    if result.get("proven_optimal"):
        text = (
            f"This plan finishes in {fmt_duration(ms)}, and no plan for these estimates can "
            f"finish sooner (proven by {why}): it is optimal."
        )
    else:
        text = (
            f"This plan finishes in {fmt_duration(ms)}; no plan for these estimates can finish "
            f"before {fmt_duration(lb)} (proven by {why}), so it is at most "
            f"{fmt_difference(ms - lb)} ({fmt_percent(result['gap'])}) longer than the best "
            "possible."
        )
    dl = result.get("deadline")
    if dl:
        if dl.get("met"):
            text += f" It meets the deadline of {fmt_duration(dl['deadline'])}"
            text += f" with {fmt_duration(dl['slack'])} to spare."
        elif dl.get("provably_unreachable"):
            text += f" No plan can meet the deadline of {fmt_duration(dl['deadline'])}."
        else:
            text += (
                f" It misses the deadline of {fmt_duration(dl['deadline'])} by "
                f"{fmt_duration(-dl['slack'])}; a better plan might still meet it."
            )
    return text


def progress_sentence(progress: dict[str, Any]) -> str:
    """Where a running search stands: time used of the budget, best plan, proven floor."""
    elapsed = float(progress.get("elapsed") or 0.0)
    budget = progress.get("time_budget")
    ms, lb = progress.get("best_makespan"), progress.get("best_lower_bound")
    text = f"After {elapsed:.1f} s"
    text += f" of a {float(budget):g} s budget" if budget else " of search"
    if ms is None:
        return text + ", no plan has been found yet."
    text += f", the best plan found finishes in {fmt_duration(float(ms))}"
    if lb is None:
        return text + "."
    ms, lb = float(ms), float(lb)
    text += f"; no plan can finish before {fmt_duration(lb)}, so it is at most "
    text += fmt_difference(ms - lb)
    if lb > 0:
        text += f" ({fmt_percent((ms - lb) / lb)})"
    return text + " longer than the best possible."


def list_rows(items: list[dict[str, Any]]) -> list[dict[str, str]]:
    """Rows of the plan list page."""
    rows = []
    for it in items:
        r = it.get("result") or it.get("summary") or {}
        dl = r.get("deadline") or {}
        flag = dl.get("met") if dl else r.get("deadline_met")
        met = "-" if flag is None else ("met" if flag else "missed")
        rows.append(
            {
                "id": it["id"],
                "href": f"/plans/{it['id']}",
                "name": it.get("name") or "",
                "method": it.get("method") or "",
                "status": it.get("status", "?"),
                "size": f"{r.get('jobs', '-')} / {r.get('nodes', '-')}",
                "makespan": fmt_duration(r["makespan"]) if "makespan" in r else "-",
                "lower_bound": fmt_duration(r["lower_bound"]) if "lower_bound" in r else "-",
                "gap": fmt_percent(r["gap"]) if "gap" in r else "-",
                "met": met,
                "met_class": {"met": "met-yes", "missed": "met-no"}.get(met, ""),
                "submitted_at": it.get("submitted_at", ""),
                "submitted": _when(it.get("submitted_at") or ""),
            }
        )
    return rows


def _record_context(kind: str, record: dict[str, Any]) -> tuple[dict[str, Any], bool]:
    """The template values every record's page starts from (title, the record under the name
    of its ``kind``, the self-refresh while it is worked on), and whether it is."""
    working = record.get("status") in ("queued", "solving")
    ctx: dict[str, Any] = {
        "title": f"{kind} {record['id']}",
        kind: record,
        "refresh": REFRESH_SECONDS if working else None,
    }
    return ctx, working


def plan_context(
    plan: dict[str, Any], groups: dict[str, str], graph: StageRequest | None = None
) -> dict[str, Any]:
    """Template values for one plan's page (``plan`` is the API's status body).

    A stage-graph plan (a result with ``stages``) also gets, from its stored request
    (``graph``: what each job waits for and uses), the waits in the timeline's hover text
    and the limit-usage chart under it, and its graph in the facts (issue 17 point 6).
    """
    result = plan.get("result")
    ctx, working = _record_context("plan", plan)
    progress = plan.get("progress") or {}
    history = plan.get("progress_history") or []
    if history:
        budget = progress.get("time_budget") or max(h.get("time_budget") or 0 for h in history)
        last = max(float(h["elapsed"]) for h in history)
        ctx["progress_chart"] = line_chart(
            {
                "best makespan": [
                    (h["elapsed"], h["best_makespan"])
                    for h in history
                    if h.get("best_makespan") is not None
                ],
                "lower bound": [
                    (h["elapsed"], h["best_lower_bound"])
                    for h in history
                    if h.get("best_lower_bound") is not None
                ],
            },
            x_label="time spent searching",
            y_label="makespan",
            x_range=(0.0, max(float(budget or 0), last)),
            x_kind="time",
            y_kind="time",
            steps=True,
            width=720,
            css_class="chart progress",
        )
    if working:
        latest = progress if progress.get("best_makespan") is not None else None
        if latest is None and history:
            latest = history[-1]
        if latest is not None or plan.get("status") == "solving":
            ctx["progress_sentence"] = progress_sentence(latest or progress)
    if result:
        ctx["sentence"] = certificate_sentence(result)
        stages = result.get("stages")
        ctx["timeline"] = timeline(result, groups, waits=graph.after if graph else None)
        facts = [
            ("method", result.get("method", "")),
            ("stopped because", result.get("stop_reason", "")),
            ("makespan", fmt_duration(result["makespan"])),
            ("lower bound", f"{fmt_duration(result['lower_bound'])} ({result['bound_source']})"),
            ("gap", fmt_percent(result["gap"])),
            ("a-priori guarantee", _ratio(result.get("worst_case_ratio"))),
            ("solve time", f"{result.get('solve_seconds', 0):.3f} s"),
        ]
        conf = result.get("confidence")
        if conf:
            prob = conf.get("deadline_probability")
            if prob is not None:
                facts.append(("deadline met in", f"{100 * prob:.1f}% of {conf['samples']} runs"))
            facts.append(
                (
                    "makespan p50 / p90 / p99",
                    " / ".join(
                        fmt_duration(conf[k])
                        for k in ("makespan_p50", "makespan_p90", "makespan_p99")
                    ),
                )
            )
        if stages is not None:
            ctx["stages"] = True
            facts += stage_facts(result)
            if graph is not None:
                ctx["limit_chart"] = limit_chart(result, graph.uses)
        ctx["facts"] = facts
    return ctx


def stage_facts(result: dict[str, Any]) -> list[tuple[str, str]]:
    """A stage plan's graph in words: its waits, slots, limits and critical path."""
    stages = result["stages"]
    out = [
        ("waits", f"{stages.get('arcs', 0)} (a job starts once those it waits for have ended)"),
        ("slots", f"{stages.get('slots', '-')} on {result.get('nodes', '-')} nodes"),
    ]
    limits = stages.get("limits") or {}
    if limits:
        out.append(("limits", ", ".join(f"{k}: at most {v} at once" for k, v in limits.items())))
    path = stages.get("critical_path") or []
    if path:
        named = " → ".join(path[:MAX_PATH_NAMED])
        if len(path) > MAX_PATH_NAMED:
            named += f" → … ({len(path)} jobs)"
        out.append(("critical path", named))
    return out


def sizing_context(sizing: dict[str, Any]) -> dict[str, Any]:
    """Template values for one sizing's page (``sizing`` is the API's status body).

    Two charts over the node counts of the curve: makespan (plan found and lower bound,
    with the deadline) and, when the request gave a node-hour price, the estimated cost.
    Both mark the answer (``nodes_needed``) with a labelled line; the table marks its row.
    """
    result = sizing.get("result")
    ctx, working = _record_context("sizing", sizing)
    progress = sizing.get("progress") or {}
    if working and progress.get("nodes_needed") is not None:
        text = (
            f"After {float(progress.get('elapsed') or 0):.1f} s, {progress['nodes_needed']} "
            "nodes meet the deadline so far"
        )
        low = progress.get("nodes_lower_bound")
        if low is not None:
            text += f", and no plan with fewer than {low} nodes can"
        ctx["progress_sentence"] = text + "."
    if not result:
        return ctx
    if "rent" in result:  # renting to a deadline: what to rent and its proven floor
        ctx["sentence"] = rental_sentence(result)
        return ctx
    curve = result.get("curve") or []
    deadline = float(result.get("deadline", 0) or 0)
    need, low = result.get("nodes_needed"), result.get("nodes_lower_bound")
    answer = {f"answer: {need} nodes": float(need)} if need is not None else None
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
    rows = []
    for c in curve:
        meets = bool(c.get("meets_deadline", c.get("makespan", math.inf) <= deadline))
        if meets:
            met, met_class = "yes", "met-yes"
        elif c.get("provably_misses"):
            met, met_class = "no (none can)", "met-no"
        else:
            met, met_class = "no", "met-no"
        rows.append(
            {
                "nodes": c["nodes"],
                "answer": c["nodes"] == need,
                "makespan": fmt_duration(c["makespan"]) if c.get("makespan") else "-",
                "lower_bound": fmt_duration(c["lower_bound"]),
                "met": met,
                "met_class": met_class,
                "cost": f"{c['cost']:,.2f}" if c.get("cost") is not None else "-",
            }
        )
    ctx["rows"] = rows
    if need is not None:
        text = f"{need} nodes meet the deadline of {fmt_duration(deadline)}"
        if result.get("makespan") is not None:
            text += f": their plan finishes in {fmt_duration(float(result['makespan']))}"
        if result.get("estimated_cost") is not None:
            text += f", at an estimated cost of {float(result['estimated_cost']):,.2f}"
        source = str(result.get("bound_source") or "")
        why = SIZING_BOUND_WORDS.get(source, source.replace("_", " ") or "a bound")
        if result.get("proven_optimal"):
            text += f". No plan with fewer nodes can meet it (proven by {why})."
        else:
            maybe = f"{low} nodes" if low == need - 1 else f"{low} to {need - 1} nodes"
            text += f". No plan with fewer than {low} nodes can meet it (proven by {why}); "
            text += f"{maybe} might."
        ctx["sentence"] = text
    conf_text = sizing_confidence_sentence(result)
    if conf_text:
        ctx["confidence_sentence"] = conf_text
    return ctx


def rental_sentence(result: dict[str, Any]) -> str:
    """One paragraph: what to rent, at what cost, how close to the cheapest, the caution."""
    rent = [f"{n} {kind}" for kind, n in result["rent"].items() if n]
    what = "Rent " + (", ".join(rent) if rent else "nothing: the farm you have is enough")
    text = (
        f"{what}, for an estimated {float(result['cost']):,.2f}; no plan meeting the "
        f"deadline costs less than {float(result['cost_lower_bound']):,.2f}"
    )
    if result.get("proven_optimal"):
        text += " (proven cheapest)"
    text += f". {result.get('caution', '')}"
    return text


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
            f"With the estimates' spread, {plan} meets the deadline in {fmt_percent(p)} of {runs} "
            f"simulated runs (95% interval {fmt_percent(lo)} to {fmt_percent(hi)})"
        )
    target = result.get("confidence_sizing")
    if target:
        text += (
            f"; to meet it with probability at least {100 * float(target['confidence']):g}% "
            "(judged by the lower end of each node count's 95% interval) takes "
            f"{target['nodes_needed']} nodes"
        )
        fewer = target.get("fewer")
        if fewer:
            text += f"; with one node fewer it is only {fmt_percent(fewer['interval'][0])}"
    return text + "."


def _when(iso: str) -> str:
    """'2026-12-02T03:07:37.421Z' -> '2026-12-02 03:07 UTC' (the ISO text if it is not one)."""
    m = re.fullmatch(r"(\d{4}-\d\d-\d\d)T(\d\d:\d\d)(:\d\d(\.\d+)?)?Z", iso)
    return f"{m.group(1)} {m.group(2)} UTC" if m else iso


def _ratio(x: Any) -> str:
    return "none known" if x is None else f"within {float(x):.4f} x optimal"
