"""``spanwright export ID --format csv|json``: the assignment, for submission scripts."""

from __future__ import annotations

import argparse
import json
import sys
from pathlib import Path

from ..csvio import write_assignment_csv
from . import _remote

NAME = "export"
HELP = "export a finished plan's assignment as CSV (node,job,start,end) or JSON"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("id", help="plan id")
    p.add_argument("--format", choices=("csv", "json"), default="csv")
    p.add_argument("-o", "--output", help="write to this file instead of standard output")
    _remote.add_server_arguments(p)


def run(args: argparse.Namespace) -> int:
    doc = _remote.fetch(args)
    if isinstance(doc, int):
        return doc  # the server's error, reported
    result = doc.get("result")
    if doc.get("status") != "done" or not result:
        print(f"spanwright: plan {args.id} is {doc.get('status')}, not done", file=sys.stderr)
        return _remote.EXIT_FAILED
    if args.format == "csv":
        text = write_assignment_csv(result["assignment"])
    else:
        text = json.dumps(result["assignment"]) + "\n"
    if args.output:
        Path(args.output).write_text(text, encoding="utf-8")
    else:
        sys.stdout.write(text)
    return _remote.EXIT_OK
