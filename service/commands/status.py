"""``spanwright status ID``: show where a plan stands."""

from __future__ import annotations

import argparse

from ..web.pages import certificate_sentence
from . import _remote
from ._io import print_json

NAME = "status"
HELP = "show the status (and certificate, when done) of a plan on a server"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("id", help="plan id")
    p.add_argument("--json", action="store_true", help="print the status body as JSON")
    _remote.add_server_arguments(p)


def run(args: argparse.Namespace) -> int:
    doc = _remote.fetch(args)
    if isinstance(doc, int):
        return doc  # the server's error, reported
    if args.json:
        print_json(doc, allow_nan=True)
    else:
        print(_remote.ProgressLine.render(doc))
        if doc.get("result"):
            print(certificate_sentence(doc["result"]))
        if doc.get("error"):
            print(f"error: {doc['error']}")
    return _remote.EXIT_FAILED if doc.get("status") in ("failed", "cancelled") else 0
