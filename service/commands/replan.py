"""``spanwright replan REQUEST RESULT EVENTS``: plan what is left of a batch mid-run."""

from __future__ import annotations

import argparse
from typing import Any

from workers.planning.errors import InvalidInstance, Issue
from workers.planning.solve import METHODS

from ..csvio import plural
from ._io import print_json, read_json
from ._text import duration, plan_lines

NAME = "replan"
HELP = (
    "re-plan a batch mid-run: the original request, its result, and an events file "
    "(elapsed, finished, running, lost_nodes, added_nodes); times in the new plan count "
    "from the re-planning moment"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("request_file", help="the original request body (JSON)")
    p.add_argument("result_file", help="the original result object, or the plan with 'result'")
    p.add_argument("events_file", help="what happened since the start (JSON)")
    p.add_argument("--method", choices=METHODS, help="overrides the events' and request's")
    p.add_argument("--time-budget", type=float, help="seconds of search (exact and auto)")
    p.add_argument("--json", action="store_true", help="print exactly the result object")


def _object(path: str) -> dict[str, object]:
    body = read_json(path)
    if not isinstance(body, dict):
        raise InvalidInstance(f"{path} must hold a JSON object", [Issue((), "not an object")])
    return body


def run(args: argparse.Namespace) -> int:
    from workers.planning.budget import DEFAULT_SECONDS, Budget
    from workers.planning.replan import replan
    from workers.planning.stages.problem import StageProblem
    from workers.planning.stages.replan import replan_stages

    from .. import reading
    from ..schemas import load_plan_request, load_replan_request
    from ._io import settings_from_env

    request = _object(args.request_file)
    result = _object(args.result_file)
    events = load_replan_request(_object(args.events_file))  # the API's checks of events
    if args.time_budget is not None and not args.time_budget >= 0:
        raise InvalidInstance("bad time budget", [Issue(("time_budget",), "must be >= 0")])
    ev = reading.read_events(events)
    method = args.method or ev.method or request.get("method") or "longest_first"
    budget = args.time_budget
    if budget is None:
        budget = ev.time_budget if ev.time_budget is not None else request.get("time_budget")
    problem = reading.read_problem(load_plan_request(request, settings_from_env()))
    seconds = DEFAULT_SECONDS if budget is None else float(budget)
    if isinstance(problem, StageProblem):  # waits, limits and slots carried over
        res: Any = replan_stages(
            problem,
            reading.planned_nodes(result),
            ev,
            method=str(method),
            budget=Budget(seconds),
        )
    else:
        res = replan(
            problem, reading.planned_nodes(result), ev, method=str(method), time_budget=seconds
        )
    from workers.planning import rounding

    grid = rounding.grid_decimals(float(request.get("resolution", 1.0)))  # type: ignore[arg-type]
    doc = rounding.round_plan(res.to_dict(), grid, res.exact_value)  # as the service writes it
    if args.json:
        print_json(doc)
    else:
        print(plan_lines(doc))
        info = doc["replan"]
        print(f"time origin     {duration(info['time_origin'])} after the original start")
        print(
            f"kept running    {plural(len(info['running']), 'job')}; planned again "
            f"{plural(info['planned'], 'job')}, {len(info['replanned_from_lost_nodes'])} from "
            "lost nodes"
        )
    return 0
