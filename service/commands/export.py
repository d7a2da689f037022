"""``spanwright export ID --format csv|json``: the assignment, for submission scripts."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from ..csvio import write_assignment_csv
from . import _remote

NAME = "export"
HELP = (
    "export the assignment of a finished plan (a cancelled plan's best plan so far, or a "
    "sizing's plan) as CSV (node,job,start,end) or JSON"
)


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("id", help="plan id or sizing id")
    p.add_argument("--format", choices=("csv", "json"), default="csv")
    p.add_argument("-o", "--output", help="write to this file instead of standard output")
    _remote.add_server_arguments(p)


def run(args: argparse.Namespace) -> int:
    found = _remote.fetch(args)
    if isinstance(found, int):
        return found  # the server's error, reported
    kind, doc = found
    what = "sizing" if kind == "sizings" else "plan"
    status, result = doc.get("status"), doc.get("result") or {}
    # a plan's assignment; a sizing's plan on the nodes it needs (the same shape)
    assignment = result.get("plan" if kind == "sizings" else "assignment")
    if status not in ("done", "cancelled") or not assignment:
        if status == "cancelled":
            detail = "cancelled before any plan was found"
        elif status == "done":
            detail = "done, but its result holds no plan"
        else:
            detail = f"{status}, not done"
        print(f"spanwright: {what} {args.id} is {detail}", file=sys.stderr)
        return _remote.EXIT_FAILED
    if status == "cancelled":
        print(
            f"spanwright: {what} {args.id} was cancelled; exporting its best plan so far",
            file=sys.stderr,
        )
    if args.format == "csv":
        text = write_assignment_csv(assignment)
    else:
        text = json.dumps(assignment) + "\n"
    if args.output:
        Path(args.output).write_text(text, encoding="utf-8")
    else:
        sys.stdout.write(text)
    return _remote.EXIT_OK
