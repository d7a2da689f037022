"""``spanwright solve FILE``: plan a request body locally and print the result."""

from __future__ import annotations

import argparse
import json
import math
import sys

from workers.planning import Instance, solve
from workers.planning.errors import InvalidInstance, Issue
from workers.planning.solve import METHODS

from ._io import read_json

NAME = "solve"
HELP = "solve a batch file (the JSON body of POST /v1/plans) locally and print the plan"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", help="request body as JSON ('-' for standard input)")
    p.add_argument("--method", choices=METHODS, help="overrides the file's 'method'")
    p.add_argument("--time-budget", type=float, help="seconds of search (exact and auto)")
    p.add_argument("--json", action="store_true", help="print exactly the result object")


def run(args: argparse.Namespace) -> int:
    body = read_json(args.file)
    if not isinstance(body, dict):
        raise InvalidInstance("the file must hold a JSON object", [Issue("", "not an object")])
    method = args.method or body.get("method", "longest_first")
    if method not in METHODS:
        raise InvalidInstance(
            f"unknown method {method!r}", [Issue("/method", f"must be one of {METHODS}")]
        )
    budget = args.time_budget if args.time_budget is not None else body.get("time_budget", 5.0)
    if (
        not isinstance(budget, int | float)
        or isinstance(budget, bool)
        or not 0 <= budget < math.inf  # NaN and inf fail too: a budget must end
    ):
        raise InvalidInstance(
            "bad time budget", [Issue("/time_budget", "must be a finite number >= 0")]
        )
    inst = Instance.from_request(body)
    if method in ("exact", "auto"):
        from workers.planning.warmup import warm_up_exact as warm_up

        warm_up()  # load the compiled search before its clock starts, not out of the budget
    result = solve(inst, method, time_budget=float(budget))
    if args.json:
        json.dump(result.to_dict(), sys.stdout, allow_nan=False)
        sys.stdout.write("\n")
    else:
        print(result.summary())
    return 0
