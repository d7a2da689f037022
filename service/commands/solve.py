"""``spanwright solve FILE``: plan a request body locally and print the result."""

from __future__ import annotations

import argparse

from workers.planning.solve import METHODS

from ._io import load_request, plan_request, print_json, time_budget

NAME = "solve"
HELP = "solve a batch file (the JSON body of POST /v1/plans) locally and print the plan"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", help="request body as JSON ('-' for standard input)")
    p.add_argument("--method", choices=METHODS, help="overrides the file's 'method'")
    p.add_argument("--time-budget", type=float, help="seconds of search (exact and auto)")
    p.add_argument("--json", action="store_true", help="print exactly the result object")


def run(args: argparse.Namespace) -> int:
    data = load_request(args.file, "plan")  # the API's checks, its messages
    if args.method:
        data["method"] = args.method
    budget = time_budget(args.time_budget, data)
    if data.get("method") in ("exact", "auto"):
        from workers.planning.warmup import warm_up_exact as warm_up

        warm_up()  # load the compiled search before its clock starts, not out of the budget
    answer = plan_request(data, budget)
    if args.json:
        print_json(answer.to_dict())
    else:
        from .confidence import block_lines

        print(answer.result.summary())
        if "confidence" in answer.extra:
            print(block_lines(answer.extra["confidence"]))
    return 0
