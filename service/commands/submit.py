"""``spanwright submit FILE --server URL``: send a batch (JSON or CSV) to the service."""

from __future__ import annotations

import argparse
import json
import sys

from ..client import ClientError
from ..web.svg import fmt_duration
from . import _remote

NAME = "submit"
HELP = "submit a batch (JSON body or CSV of jobs) to a spanwright server"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("file", help="batch: JSON request body, or CSV with id,duration,... columns")
    nodes = p.add_mutually_exclusive_group()
    nodes.add_argument("--nodes", type=int, help="that many identical nodes")
    nodes.add_argument("--farm", help="nodes file: CSV (id,speed,provides,free_at) or JSON")
    p.add_argument("--method", choices=("list", "longest_first", "exact", "auto"))
    p.add_argument("--time-budget", type=float, help="seconds of search")
    p.add_argument("--deadline", type=float, help="deadline in seconds from the start")
    p.add_argument(
        "--limit",
        action="append",
        default=[],
        metavar="NAME=COUNT",
        help="a shared limit: at most COUNT jobs that use NAME run at once (repeatable)",
    )
    p.add_argument("--wait", action="store_true", help="follow progress until the plan is done")
    p.add_argument("--json", action="store_true", help="print the final status body as JSON")
    _remote.add_server_arguments(p)


def run(args: argparse.Namespace) -> int:
    body = _remote.read_batch(args.file)
    if args.nodes is not None:
        body.pop("nodes", None)
        body["node_count"] = args.nodes
    if args.farm:
        body.pop("node_count", None)
        body["nodes"] = _remote.read_farm(args.farm)
    for key, value in (
        ("method", args.method),
        ("time_budget", args.time_budget),
        ("deadline", args.deadline),
    ):
        if value is not None:
            body[key] = value
    for item in args.limit:
        name, sep, count = item.partition("=")
        if not sep or not name or not count.strip().isdigit():
            print(f"spanwright: --limit {item!r}: write NAME=COUNT", file=sys.stderr)
            return _remote.EXIT_INVALID
        body.setdefault("limits", {})[name] = int(count)
    if "nodes" not in body and "node_count" not in body:
        print("spanwright: give --nodes N or --farm FILE (or nodes in the JSON)", file=sys.stderr)
        return _remote.EXIT_INVALID
    api = _remote.client(args)
    try:
        doc = api.submit(body)
        print(f"submitted {doc['id']} ({doc.get('status')})", file=sys.stderr)
        if args.wait:
            line = _remote.ProgressLine(sys.stderr)
            doc = api.wait(doc["id"], on_update=line)
            line.close()
    except ClientError as err:
        return _remote.report_client_error(err)
    if args.json:
        json.dump(doc, sys.stdout)
        sys.stdout.write("\n")
    else:
        print(doc["id"])
        res = doc.get("result")
        if res:
            print(
                f"makespan {fmt_duration(res['makespan'])}, lower bound "
                f"{fmt_duration(res['lower_bound'])} ({res['bound_source']}), "
                f"gap {100 * res['gap']:.3f}%"
            )
    status = doc.get("status")
    if status == "failed":
        error = doc.get("error") or {}
        print(
            f"spanwright: {doc['id']} failed: {error.get('detail', 'no reason given')}",
            file=sys.stderr,
        )
    return _remote.EXIT_OK if status in ("done", "queued", "solving") else _remote.EXIT_FAILED
