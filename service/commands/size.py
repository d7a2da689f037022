"""``spanwright size FILE``: the fewest nodes that meet a deadline, computed locally."""

from __future__ import annotations

import argparse
from typing import Any

from ..csvio import plural
from ._io import add_sizing_options, check_request, print_json, sizing_batch, time_budget
from .confidence import block_lines, target_lines

NAME = "size"
HELP = (
    "size a farm for a deadline (FILE is the JSON body of POST /v1/sizings, or a CSV of "
    "jobs with --deadline SECONDS and the node kind from options) and print the fewest "
    "nodes, the proof and the node-count curve; with estimate spread, also how likely the "
    "answer makes the deadline and, with 'confidence', the nodes for it"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "file", help="request body as JSON ('-' for standard input), or jobs as FILE.csv"
    )
    add_sizing_options(p)
    p.add_argument("--time-budget", type=float, help="seconds of search (overrides the file)")
    p.add_argument("--json", action="store_true", help="print exactly the sizing result object")
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
    if args.json:
        print_json(answer.to_dict(with_plan=not args.no_plan))
    elif "rent" in (doc := answer.to_dict(with_plan=False)):
        print(rental_lines(doc))
    else:
        print(answer.result.summary())
        if "confidence" in answer.extra:
            print(block_lines(answer.extra["confidence"]))
        if "confidence_sizing" in answer.extra:
            print(target_lines(answer.extra["confidence_sizing"]))
    return 0


def rental_lines(doc: dict[str, Any]) -> str:
    """A rental answer (``farm`` and ``kinds``), a few lines for people."""
    rent = ", ".join(f"{n} x {k}" for k, n in doc["rent"].items() if n) or "nothing"
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
    lines.append(f"solve time      {doc['solve_seconds']:.4f} s")
    lines.append(doc["caution"])
    return "\n".join(lines)
