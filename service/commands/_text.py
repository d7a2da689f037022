"""What the command line says to people: one duration format for every command.

Every duration the commands print (makespans, bounds, deadlines, slack, percentiles,
search and solve times) goes through :func:`duration`, the same format as the pages
(``1h 02m 05s``, ``4m 05s``, below a minute ``59.9s``), so ``solve``, ``size``,
``confidence``, ``replan``, ``submit``, ``status`` and the progress line read alike.
The numbers come from the result objects, already on their grid (``rounding``), so
these lines never show float noise. ``--json`` prints the objects themselves (seconds).
"""

from __future__ import annotations

from collections.abc import Mapping
from typing import Any

from ..csvio import plural
from ..web.svg import fmt_duration as duration

__all__ = ["duration", "plan_lines", "sizing_lines"]


def _gap(result: Mapping[str, Any]) -> str:
    if result.get("proven_optimal"):
        return "0 (proven optimal)"
    gap = result.get("gap")
    return "unknown (no positive bound)" if gap is None else f"{100 * gap:.3f} %"


def plan_lines(result: Mapping[str, Any]) -> str:
    """A plan's ``result`` object, a few lines for people."""
    scale = f"{plural(int(result['nodes']), 'node')}, {plural(int(result['jobs']), 'job')}"
    lines = [
        f"method          {result['method']} (stopped: {result['stop_reason']})",
        f"makespan        {duration(result['makespan'])} on {scale}",
        f"lower bound     {duration(result['lower_bound'])} ({result['bound_source']})",
        f"gap             {_gap(result)}",
    ]
    if result.get("worst_case_ratio") is not None:
        lines.append(f"a-priori ratio  {result['worst_case_ratio']:.6g}")
    dl = result.get("deadline")
    if dl:
        verdict = "met" if dl["met"] else "missed"
        if dl["provably_unreachable"]:
            verdict += " (no plan can meet it)"
        lines.append(
            f"deadline        {duration(dl['deadline'])}: {verdict}, "
            f"slack {'-' if dl['slack'] < 0 else ''}{duration(abs(dl['slack']))}"
        )
    lines.append(f"solve time      {duration(result['solve_seconds'])}")
    return "\n".join(lines)


def sizing_lines(result: Mapping[str, Any]) -> str:
    """A node-count sizing's ``result`` object, a few lines for people."""
    verdict = "proven optimal" if result["proven_optimal"] else "not proven optimal"
    lines = [
        f"nodes needed    {result['nodes_needed']} ({result.get('method', '-')}; {verdict}, "
        f"stopped: {result['stop_reason']})",
        f"lower bound     {plural(int(result['nodes_lower_bound']), 'node')} "
        f"({result['bound_source']})",
        f"deadline        {duration(result['deadline'])}; plan makespan "
        f"{duration(result['makespan'])} ({result.get('plan_method', '-')})",
    ]
    if "ffd" in (result.get("upper_bounds") or {}):
        lines.append(f"first fit dec.  {plural(int(result['upper_bounds']['ffd']), 'node')}")
    if result.get("estimated_cost") is not None:
        lines.append(
            f"estimated cost  {result['estimated_cost']:.2f} (billed per {result['billing']})"
        )
    if result.get("curve"):
        lines.append("curve           nodes  makespan      lower bound   cost")
        for row in result["curve"]:
            cost = "-" if row.get("cost") is None else f"{row['cost']:.2f}"
            mark = "*" if row["nodes"] == result["nodes_needed"] else " "
            lines.append(
                f"              {mark}{row['nodes']:6d}  {duration(row['makespan']):<12}  "
                f"{duration(row['lower_bound']):<12}  {cost}"
            )
    lines.append(f"solve time      {duration(result['solve_seconds'])}")
    return "\n".join(lines)
