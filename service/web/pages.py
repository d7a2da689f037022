"""What the pages say: plain functions from the API's JSON to template values.

The certificate sentence is the heart of it: the plan's length, the proven floor under
any plan for the same estimates, and what that means for the deadline.
"""

from __future__ import annotations

from typing import Any

from .svg import fmt_duration, line_chart, timeline

#: seconds between self-refreshes of a page whose plan is still being worked on
REFRESH_SECONDS = 2

BOUND_WORDS = {
    "mean_load": "total work spread evenly over the nodes",
    "longest_job": "the longest job",
    "pigeonhole": "two of the m+1 longest jobs sharing a node",
    "pigeonhole_k": "k+1 of the km+1 longest jobs sharing a node",
    "bin_packing": "a bin-packing argument (Martello-Toth)",
    "search": "an exhaustive search that ruled out every shorter plan",
}


def certificate_sentence(result: dict[str, Any]) -> str:
    """One sentence: how long the plan is and how far it may be from the best possible."""
    ms, lb = float(result["makespan"]), float(result["lower_bound"])
    why = BOUND_WORDS.get(result.get("bound_source", ""), result.get("bound_source", "a bound"))
    if result.get("proven_optimal"):
        text = (
            f"This plan finishes in {fmt_duration(ms)}, and no plan for these estimates can "
            f"finish sooner (proven by {why}): it is optimal."
        )
    else:
        text = (
            f"This plan finishes in {fmt_duration(ms)}; no plan for these estimates can finish "
            f"before {fmt_duration(lb)} (proven by {why}), so it is at most "
            f"{100 * float(result['gap']):.2f}% longer than the best possible."
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
                "status": it.get("status", "?"),
                "size": f"{r.get('jobs', '-')} / {r.get('nodes', '-')}",
                "makespan": fmt_duration(r["makespan"]) if "makespan" in r else "-",
                "lower_bound": fmt_duration(r["lower_bound"]) if "lower_bound" in r else "-",
                "gap": f"{100 * r['gap']:.2f}%" if "gap" in r else "-",
                "met": met,
                "met_class": {"met": "met-yes", "missed": "met-no"}.get(met, ""),
                "submitted_at": it.get("submitted_at", ""),
            }
        )
    return rows


def plan_context(plan: dict[str, Any], groups: dict[str, str]) -> dict[str, Any]:
    """Template values for one plan's page (``plan`` is the API's status body)."""
    result = plan.get("result")
    working = plan.get("status") in ("queued", "solving")
    ctx: dict[str, Any] = {
        "title": f"plan {plan['id']}",
        "plan": plan,
        "refresh": REFRESH_SECONDS if working else None,
    }
    history = plan.get("progress_history") or []
    if history:
        ctx["progress_chart"] = line_chart(
            {
                "best makespan": [(h["elapsed"], h["best_makespan"]) for h in history],
                "lower bound": [(h["elapsed"], h["best_lower_bound"]) for h in history],
            },
            x_label="seconds of search",
            y_label="makespan",
            x_is_time=False,
        )
    if result:
        ctx["sentence"] = certificate_sentence(result)
        ctx["timeline"] = timeline(result, groups)
        facts = [
            ("method", result.get("method", "")),
            ("stopped because", result.get("stop_reason", "")),
            ("makespan", fmt_duration(result["makespan"])),
            ("lower bound", f"{fmt_duration(result['lower_bound'])} ({result['bound_source']})"),
            ("gap", f"{100 * result['gap']:.3f}%"),
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
        ctx["facts"] = facts
    return ctx


def sizing_context(sizing: dict[str, Any]) -> dict[str, Any]:
    """Template values for one sizing's page (``sizing`` is the API's status body)."""
    result = sizing.get("result")
    working = sizing.get("status") in ("queued", "solving")
    ctx: dict[str, Any] = {
        "title": f"sizing {sizing['id']}",
        "sizing": sizing,
        "refresh": REFRESH_SECONDS if working else None,
    }
    if result:
        curve = result.get("curve") or []
        deadline = float(result.get("deadline", 0) or 0)
        ctx["curve_chart"] = line_chart(
            {
                "best makespan": [(c["nodes"], c["makespan"]) for c in curve if c.get("makespan")],
                "lower bound": [(c["nodes"], c["lower_bound"]) for c in curve],
            },
            x_label="nodes",
            y_label="makespan",
            marks={"deadline": deadline} if deadline else None,
            x_is_time=False,
        )
        ctx["rows"] = [
            {
                "nodes": c["nodes"],
                "makespan": fmt_duration(c["makespan"]) if c.get("makespan") else "-",
                "lower_bound": fmt_duration(c["lower_bound"]),
                "met": "yes" if c.get("makespan") and c["makespan"] <= deadline else "no",
                "met_class": "met-yes"
                if c.get("makespan") and c["makespan"] <= deadline
                else "met-no",
                "cost": f"{c['cost']:.2f}" if c.get("cost") is not None else "-",
            }
            for c in curve
        ]
        need, low = result.get("nodes_needed"), result.get("nodes_lower_bound")
        if need is not None:
            source = result.get("bound_source", "a bound")
            proof = (
                f"no plan with fewer can meet it (proven by {source})"
                if result.get("proven_optimal")
                else f"no plan with fewer than {low} nodes can meet it"
            )
            ctx["sentence"] = (
                f"{need} nodes meet the deadline of {fmt_duration(deadline)}; {proof}."
            )
    return ctx


def _ratio(x: Any) -> str:
    return "none known" if x is None else f"within {float(x):.4f} x optimal"
