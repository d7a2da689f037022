"""``spanwright status ID``: show where a plan stands."""

from __future__ import annotations

import argparse
import json
import sys

from ..client import ClientError
from ..web.pages import certificate_sentence
from . import _remote

NAME = "status"
HELP = "show the status (and certificate, when done) of a plan on a server"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("id", help="plan id")
    p.add_argument("--json", action="store_true", help="print the status body as JSON")
    _remote.add_server_arguments(p)


def run(args: argparse.Namespace) -> int:
    try:
        doc = _remote.client(args).get(args.id)
    except ClientError as err:
        return _remote.report_client_error(err)
    if args.json:
        json.dump(doc, sys.stdout)
        sys.stdout.write("\n")
    else:
        print(_remote.ProgressLine.render(doc))
        if doc.get("result"):
            print(certificate_sentence(doc["result"]))
        if doc.get("error"):
            print(f"error: {doc['error']}")
    return _remote.EXIT_FAILED if doc.get("status") in ("failed", "cancelled") else 0
