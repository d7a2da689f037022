"""``spanwright submit FILE --server URL``: send a batch (JSON or CSV) to the service."""

from __future__ import annotations

import argparse
import json
import sys
from typing import Any

from ..cli import (
    EXIT_DEADLINE_MISSED,
    EXIT_DEADLINE_UNREACHABLE,
    EXIT_FAILURE,
    EXIT_INVALID,
    EXIT_OK,
    EXIT_SERVER,
)
from ..client import ClientError
from ..web.pages import deadline_text
from . import _remote
from ._io import add_plan_options, plan_batch
from ._text import duration

NAME = "submit"
HELP = "submit a batch (JSON body or CSV of jobs) to a spanwright server"

EPILOG = f"""\
exit status (the table in service/cli.py):
  {EXIT_OK}  submitted (without --wait), or done and the deadline, if any, met
  {EXIT_FAILURE}  the plan failed or was cancelled
  {EXIT_INVALID}  the batch or an option is invalid (the server's 4xx for a body)
  {EXIT_SERVER}  the server refused otherwise or could not be reached
  {EXIT_DEADLINE_MISSED}  done, but the plan misses the deadline; a better plan might still meet it
  {EXIT_DEADLINE_UNREACHABLE}  done, and no plan can meet the deadline (its lower bound is above it)
"""


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.epilog = EPILOG
    p.formatter_class = argparse.RawDescriptionHelpFormatter
    p.add_argument("file", help="batch: JSON request body, or CSV with id,duration,... columns")
    add_plan_options(p)
    p.add_argument("--method", choices=("list", "longest_first", "exact", "auto"))
    p.add_argument("--time-budget", type=float, help="seconds of search")
    p.add_argument(
        "--wait",
        action="store_true",
        help="follow progress until the plan is done (the server's event stream, else polling)",
    )
    p.add_argument("--json", action="store_true", help="print the final status body as JSON")
    _remote.add_server_arguments(p)


def deadline_verdict(result: dict[str, Any]) -> tuple[str, int] | None:
    """The result's ``deadline`` object as one line and its exit code (met 0, missed 4,
    provably unreachable 5); None when the request had no deadline."""
    dl = result.get("deadline")
    if not dl:
        return None
    when = deadline_text(result, float(dl["deadline"]))
    if dl.get("met"):
        return f"deadline {when}: met, {duration(float(dl['slack']))} to spare", EXIT_OK
    late = duration(-float(dl["slack"]))
    if dl.get("provably_unreachable"):
        return (
            f"deadline {when}: provably unreachable: no plan can finish before "
            f"{duration(float(result['lower_bound']))} ({result['bound_source']}); "
            f"this one is {late} late",
            EXIT_DEADLINE_UNREACHABLE,
        )
    return (
        f"deadline {when}: missed by {late}; a better plan might still meet it",
        EXIT_DEADLINE_MISSED,
    )


def run(args: argparse.Namespace) -> int:
    batch = plan_batch(args)
    body = batch.body
    for key, value in (("method", args.method), ("time_budget", args.time_budget)):
        if value is not None:
            body[key] = value
    api = _remote.client(args)
    try:
        doc = api.submit(body)
        print(f"submitted {doc['id']} ({doc.get('status')})", file=sys.stderr)
        if args.wait:
            line = _remote.ProgressLine(sys.stderr)
            doc = _remote.follow(api, doc["id"], on_update=line)  # live, through SSE
            line.close()
    except ClientError as err:
        return _remote.report_client_error(err, batch)
    res = doc.get("result")
    status = doc.get("status")
    verdict = deadline_verdict(res) if res and status == "done" else None
    if args.json:
        json.dump(doc, sys.stdout)
        sys.stdout.write("\n")
        if verdict:
            print(verdict[0], file=sys.stderr)
    else:
        print(doc["id"])
        if res:
            print(
                f"makespan {duration(res['makespan'])}, lower bound "
                f"{duration(res['lower_bound'])} ({res['bound_source']}), "
                f"gap {100 * res['gap']:.3f}%"
            )
        if verdict:
            print(verdict[0])
    if status == "failed":
        error = doc.get("error") or {}
        print(
            f"spanwright: {doc['id']} failed: {error.get('detail', 'no reason given')}",
            file=sys.stderr,
        )
    if status in ("queued", "solving"):
        return EXIT_OK
    if status != "done":
        return EXIT_FAILURE
    return verdict[1] if verdict else EXIT_OK
