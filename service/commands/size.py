"""``spanwright size FILE``: the fewest nodes that meet a deadline, computed locally."""

from __future__ import annotations

import argparse
from typing import Any

from ..csvio import plural
from ._io import (
    add_local_arguments,
    add_sizing_options,
    check_request,
    on_grid,
    print_json,
    sizing_batch,
    time_budget,
)
from ._text import duration, sizing_lines
from .confidence import block_lines, target_lines

NAME = "size"
HELP = (
    "size a farm for a deadline (FILE is the JSON body of POST /v1/sizings, or a CSV of "
    "jobs with --deadline SECONDS and the node kind from options) and print the fewest "
    "nodes, the proof and the node-count curve; with estimate spread, also how likely the "
    "answer makes the deadline and, with 'confidence', the nodes for it"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    budget, json_help = "seconds of search (overrides the file)", "print exactly the result object"
    add_local_arguments(p, add_sizing_options, budget_help=budget, json_help=json_help)
    p.add_argument("--no-plan", action="store_true", help="leave the plan out of --json")


def run(args: argparse.Namespace) -> int:
    from workers.planning import usecases
    from workers.planning.warmup import warm_up_sizing as warm_up

    from .. import reading

    batch = sizing_batch(args)
    with batch.lines():  # CSV rows named by line and column
        data = check_request(batch.body, "sizing")  # the API's checks, its messages
        budget = time_budget(args.time_budget, data)
        warm_up()  # load (or compile) the kernels before the clock starts
        answer = usecases.size(
            reading.read_sizing_request(data), spread=reading.read_spread(data), time_budget=budget
        )
    doc = on_grid(answer, data, "sizing", with_plan=not args.no_plan)
    if args.json:
        print_json(doc)
    elif "rent" in doc:
        print(rental_lines(doc))
    else:
        print(sizing_lines(doc))
        if "confidence" in doc:
            print(block_lines(doc["confidence"]))
        if "confidence_sizing" in doc:
            print(target_lines(doc["confidence_sizing"]))
    return 0


def rental_lines(doc: dict[str, Any]) -> str:
    """A rental answer (``farm`` and ``kinds``), a few lines for people."""
    rent = rent_text(doc["rent"])
    verdict = "proven cheapest" if doc["proven_optimal"] else f"gap {100 * (doc['gap'] or 0):.2f} %"
    lines = [
        f"rent            {rent}",
        f"cost            {doc['cost']:,.2f} (at least {doc['cost_lower_bound']:,.2f}, "
        f"{doc['bound_source']}; {verdict}; stopped: {doc['stop_reason']})",
    ]
    for kind, alone in (doc.get("single_kind") or {}).items():
        if alone.get("feasible"):
            count = plural(int(alone["rent"]), "node")
            lines.append(f"only {kind:<10} {count}, {alone['cost']:,.2f}")
    lines += frontier_lines(doc.get("frontier") or [])
    lines.append(f"solve time      {duration(doc['solve_seconds'])}")
    lines.append(doc["caution"])
    return "\n".join(lines)


def rent_text(rent: dict[str, int]) -> str:
    """{'cpu-small': 3} -> '3 x cpu-small'; nothing rented -> 'nothing'."""
    return ", ".join(f"{n} x {k}" for k, n in rent.items() if n) or "nothing"


def frontier_lines(points: list[dict[str, Any]]) -> list[str]:
    """A rental frontier (``deadlines``) as a small table, one row per deadline: the cost
    found, the proven floor, whether they meet, what to rent; ``*`` marks the answer's
    row, and a deadline no plan meets says why."""
    if not points:
        return []
    rows = [("", "deadline", "cost", "at least", "proven", "rent")]
    for pt in points:
        mark, when = "*" if pt.get("answer") else "", duration(float(pt["deadline"]))
        if pt.get("feasible"):
            proven = "yes" if pt["proven_optimal"] else "no"
            cost, low = f"{pt['cost']:,.2f}", f"{pt['cost_lower_bound']:,.2f}"
            rows.append((mark, when, cost, low, proven, rent_text(pt["rent"])))
        else:
            rows.append((mark, when, "-", "-", "-", f"no plan: {pt.get('reason', '')}"))
    width = [max(len(r[i]) for r in rows) for i in range(5)]
    lines = ["frontier        the cheapest cost found at each deadline (* the answer)"]
    for r in rows:
        cells = [r[0].ljust(1), r[1].ljust(width[1])]
        cells += [c.rjust(w) for c, w in zip(r[2:4], width[2:4], strict=True)]
        lines.append("  " + "  ".join([*cells, r[4].ljust(width[4]), r[5]]).rstrip())
    return lines
