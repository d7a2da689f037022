"""``spanwright confidence FILE``: plan a request body, then say how likely it makes the deadline.

The body is the same JSON as ``POST /v1/plans``; jobs may carry ``duration_p90`` and the
body ``spread`` (a coefficient of variation) and ``confidence_samples``. The plan is made
with the body's ``method`` by the planning core, then simulated under both policies
(``workers.planning.confidence``).
"""

from __future__ import annotations

import argparse
from typing import Any

from workers.planning.errors import InvalidInstance, Issue

from ..csvio import plural
from ._io import load_request, on_grid, plan_request, print_json, time_budget
from ._text import duration, plan_lines

NAME = "confidence"
HELP = "plan a batch file and estimate by simulation how likely it makes its deadline"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", help="request body as JSON ('-' for standard input)")
    p.add_argument("--samples", type=int, help="samples to draw (default: the file's, or 1000)")
    p.add_argument("--seed", type=int, help="random seed (default: the file's, or 0)")
    p.add_argument("--json", action="store_true", help="print exactly the confidence block")


def run(args: argparse.Namespace) -> int:
    data = load_request(args.file, "plan")  # the API's checks, its messages
    if args.samples is not None:
        if args.samples < 10:
            raise InvalidInstance(
                "bad sample count", [Issue(("confidence_samples",), "must be at least 10")]
            )
        data["confidence_samples"] = args.samples
    data.setdefault("confidence_samples", 1000)  # what the API would draw with spread
    if args.seed is not None:
        data["confidence_seed"] = args.seed
    answer = plan_request(data, time_budget(None, data))
    doc = on_grid(answer, data, "plan")
    if args.json:
        print_json(doc["confidence"])
        return 0
    print(plan_lines(doc))
    print(block_lines(doc["confidence"]))
    return 0


def block_lines(block: dict[str, Any]) -> str:
    """The ``confidence`` block of a plan or sizing result, a few lines for people."""
    model = block["model"]
    lines = [
        f"spread model    {model['distribution']}, {block['samples']} samples, "
        f"seed {block['seed']}",
    ]
    for title, part in (("static", block), ("dynamic", block["dynamic"])):
        lines.append(
            f"{title:<16}p50 {duration(part['makespan_p50'])}, "
            f"p90 {duration(part['makespan_p90'])}, p99 {duration(part['makespan_p99'])}"
        )
        p = part["deadline_probability"]
        if p is not None:
            lo, hi = part["interval"]
            lines.append(f"{'':<16}P(meet deadline) {p:.4f} (95% interval {lo:.4f} - {hi:.4f})")
        crit = ", ".join(f"{c['node']} {100 * c['share']:.1f} %" for c in part["critical_nodes"])
        lines.append(f"{'':<16}last to finish: {crit}")
    return "\n".join(lines)


def target_lines(sizing: dict[str, Any]) -> str:
    """The ``confidence_sizing`` of a sizing result: the answer, the count below, the rule."""
    chosen, fewer = sizing["chosen"], sizing["fewer"]
    lo, hi = chosen["interval"]
    lines = [
        f"to confidence   {sizing['confidence']:g}: {plural(sizing['nodes_needed'], 'node')}, "
        f"P(meet deadline) {chosen['deadline_probability']:.4f} "
        f"(95% interval {lo:.4f} - {hi:.4f})",
    ]
    if fewer is not None:
        lo, hi = fewer["interval"]
        lines.append(
            f"{'':<16}{plural(fewer['nodes'], 'node')}: P(meet deadline) "
            f"{fewer['deadline_probability']:.4f} (95% interval {lo:.4f} - {hi:.4f})"
        )
    lines.append(f"{'':<16}rule: {sizing['rule']}; {sizing['samples']} samples each")
    return "\n".join(lines)
