"""``spanwright solve FILE``: plan a batch locally and print the result."""

from __future__ import annotations

import argparse

from workers.planning.solve import METHODS

from ._io import (
    add_local_arguments,
    add_plan_options,
    check_request,
    on_grid,
    plan_batch,
    plan_request,
    print_json,
    time_budget,
)

NAME = "solve"
HELP = (
    "solve a batch file locally and print the plan: the JSON body of POST /v1/plans, or a "
    "CSV of jobs (id,duration,... columns) with --nodes N or --farm FILE"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    budget, json_help = "seconds of search (exact and auto)", "print exactly the result object"
    add_local_arguments(p, add_plan_options, budget_help=budget, json_help=json_help)
    p.add_argument("--method", choices=METHODS, help="overrides the file's 'method'")


def run(args: argparse.Namespace) -> int:
    batch = plan_batch(args)
    if args.method:
        batch.body["method"] = args.method
    with batch.lines():  # CSV rows named by line and column
        data = check_request(batch.body, "plan")  # the API's checks, its messages
        budget = time_budget(args.time_budget, data)
        if data.get("method") in ("exact", "auto"):
            from workers.planning.warmup import warm_up_exact as warm_up

            warm_up()  # load the compiled search before its clock starts, not out of the budget
        answer = plan_request(data, budget)
    doc = on_grid(answer, data, "plan")
    if args.json:
        print_json(doc)
    else:
        from ._text import plan_lines
        from .confidence import block_lines

        print(plan_lines(doc))
        if "confidence" in doc:
            print(block_lines(doc["confidence"]))
    return 0
