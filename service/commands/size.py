"""``spanwright size FILE``: the fewest nodes that meet a deadline, computed locally."""

from __future__ import annotations

import argparse
import json
import sys

from workers.planning.errors import InvalidInstance, Issue

from ._io import read_json
from .confidence import block_lines, target_lines

NAME = "size"
HELP = (
    "size a farm for a deadline (FILE is the JSON body of POST /v1/sizings) and print the "
    "fewest nodes, the proof and the node-count curve; with estimate spread, also how "
    "likely the answer makes the deadline and, with 'confidence', the nodes for it"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", help="request body as JSON ('-' for standard input)")
    p.add_argument("--time-budget", type=float, help="seconds of search (overrides the file)")
    p.add_argument("--json", action="store_true", help="print exactly the sizing result object")
    p.add_argument("--no-plan", action="store_true", help="leave the plan out of --json")


def run(args: argparse.Namespace) -> int:
    from workers.planning.confidence import SpreadRequest, sizing_confidence
    from workers.planning.sizing import size_from_request
    from workers.planning.warmup import warm_up_sizing as warm_up

    body = read_json(args.file)
    if not isinstance(body, dict):
        raise InvalidInstance("the file must hold a JSON object", [Issue("", "not an object")])
    budget = args.time_budget if args.time_budget is not None else body.get("time_budget", 5.0)
    if not isinstance(budget, int | float) or isinstance(budget, bool) or not budget >= 0:
        raise InvalidInstance("bad time budget", [Issue("/time_budget", "must be a number >= 0")])
    asked = SpreadRequest.from_body(body)  # bad spread inputs fail before the search
    warm_up()  # load (or compile) the kernels before the clock starts
    result = size_from_request(body, time_budget=float(budget))
    extra = sizing_confidence(result.schedule, asked) if asked is not None else {}
    if args.json:
        out = result.to_dict(with_plan=not args.no_plan)
        out.update(extra)
        json.dump(out, sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(result.summary())
        if "confidence" in extra:
            print(block_lines(extra["confidence"]))
        if "confidence_sizing" in extra:
            print(target_lines(extra["confidence_sizing"]))
    return 0
