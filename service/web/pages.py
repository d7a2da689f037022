"""What the pages say: plain functions from the API's JSON to template values.

The certificate sentence is the heart of it: the plan's length, the proven floor under
any plan for the same estimates, and what that means for the deadline.
"""

from __future__ import annotations

import math
import re
from collections.abc import Mapping
from html import escape
from typing import Any

from ..reading.clock import parse_time
from .stage_svg import StageRequest, limit_chart
from .svg import FarmNode, fmt_duration, line_chart, timeline

#: seconds between self-refreshes of a page whose plan is still being worked on (without
#: JavaScript; with it, a record's page follows its event stream instead)
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
        when = deadline_text(result, float(dl["deadline"]))
        if dl.get("met"):
            text += f" It meets the deadline of {when}"
            text += f" with {fmt_duration(dl['slack'])} to spare."
        elif dl.get("provably_unreachable"):
            text += f" No plan can meet the deadline of {when}."
        else:
            text += (
                f" It misses the deadline of {when} by "
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


def record_row(item: Mapping[str, Any], page: str) -> dict[str, str]:
    """The cells every list page's row starts with: the record (its id, linked to its page
    under ``/{page}/``, its name and method), its status and when it was submitted."""
    return {
        "id": item["id"],
        "href": f"/{page}/{item['id']}",
        "name": item.get("name") or "",
        "method": item.get("method") or "",
        "status": item.get("status", "?"),
        "submitted_at": item.get("submitted_at", ""),
        "submitted": when(item.get("submitted_at") or ""),
    }


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
                **record_row(it, "plans"),
                "size": f"{r.get('jobs', '-')} / {r.get('nodes', '-')}",
                "makespan": fmt_duration(r["makespan"]) if "makespan" in r else "-",
                "lower_bound": fmt_duration(r["lower_bound"]) if "lower_bound" in r else "-",
                "gap": fmt_percent(r["gap"]) if "gap" in r else "-",
                "met": met,
                "met_class": {"met": "met-yes", "missed": "met-no"}.get(met, ""),
                "deadline_at": clock_deadline(r),
            }
        )
    return rows


def record_context(kind: str, record: dict[str, Any]) -> tuple[dict[str, Any], bool]:
    """The template values every record's page starts from (title, the record under the name
    of its ``kind``), and whether it is still worked on. While it is, the page follows
    the record's event stream by script (``live``: the stream's path and the kind, read
    by static/live.js) and, without JavaScript, refreshes itself every ``refresh``
    seconds."""
    working = record.get("status") in ("queued", "solving")
    ctx: dict[str, Any] = {
        "title": f"{kind} {record['id']}",
        kind: record,
        "refresh": REFRESH_SECONDS if working else None,
        "live": {"events": f"/v1/{kind}s/{record['id']}/events", "kind": kind} if working else None,
    }
    return ctx, working


def plan_context(
    plan: dict[str, Any],
    groups: dict[str, str],
    graph: StageRequest | None = None,
    farm: Mapping[str, FarmNode] | None = None,
) -> dict[str, Any]:
    """Template values for one plan's page (``plan`` is the API's status body).

    A stage-graph plan (a result with ``stages``) also gets, from its stored request
    (``graph``: what each job waits for and uses), the waits in the timeline's hover text
    and the limit-usage chart under it, and its graph in the facts (issue 17 point 6).
    """
    result = plan.get("result")
    ctx, working = record_context("plan", plan)
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
        ctx["timeline"] = timeline(result, groups, waits=graph.after if graph else None, farm=farm)
        ctx["timeline"] = with_clock_label(ctx["timeline"], result)
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


def when(iso: str) -> str:
    """'2026-12-02T03:07:37.421Z' -> '2026-12-02 03:07 UTC' (the ISO text if it is not one)."""
    m = re.fullmatch(r"(\d{4}-\d\d-\d\d)T(\d\d:\d\d)(:\d\d(\.\d+)?)?Z", iso)
    return f"{m.group(1)} {m.group(2)} UTC" if m else iso


def _ratio(x: Any) -> str:
    return "none known" if x is None else f"within {float(x):.4f} x optimal"


# -- clock times (a result's ``clock``: the request's start_at and deadline_at) ----------

_DEADLINE_LABEL = re.compile(r'(<text class="mark-label"[^>]*>deadline [^<]*)</text>')


def fmt_clock(text: str) -> str:
    """'2026-12-04T06:00:00+01:00' -> '2026-12-04 06:00 +01:00': in the timestamp's own
    offset ('UTC' for ``Z`` or +00:00), seconds shown when not zero; the text itself if
    it is not RFC 3339."""
    try:
        t = parse_time(text)
    except ValueError:
        return str(text)
    w = t.when
    shown = w.strftime("%Y-%m-%d %H:%M")
    if w.second or t.fraction:
        shown += f":{w.second:02d}"
    z = w.strftime("%z")
    return f"{shown} {'UTC' if z in ('+0000', '-0000') else z[:3] + ':' + z[3:5]}"


def deadline_text(result: Mapping[str, Any], seconds: float) -> str:
    """A deadline for people: with a ``clock``, its time (and the seconds from the start);
    otherwise the seconds as a duration."""
    clock = result.get("clock") or {}
    at = clock.get("deadline_at")
    if not at:
        return fmt_duration(seconds)
    return (
        f"{fmt_clock(at)} ({fmt_duration(seconds)} after the start at "
        f"{fmt_clock(clock['start_at'])})"
    )


def clock_deadline(summary: Mapping[str, Any]) -> str:
    """A list row's deadline time (its result's or summary's ``clock``), or ''."""
    at = (summary.get("clock") or {}).get("deadline_at")
    return fmt_clock(at) if at else ""


def with_clock_label(svg: str, result: Mapping[str, Any]) -> str:
    """The timeline with its deadline line's label also giving the clock time."""
    at = (result.get("clock") or {}).get("deadline_at")
    if not at:
        return svg
    return _DEADLINE_LABEL.sub(lambda m: f"{m.group(1)} · {escape(fmt_clock(at))}</text>", svg, 1)
