"""``spanwright status ID``: show where a plan or a sizing stands."""

from __future__ import annotations

import argparse
from typing import Any

from ..csvio import plural
from ..web.pages import certificate_sentence, deadline_text
from . import _remote
from ._io import print_json
from ._text import duration

NAME = "status"
HELP = "show the status (and certificate, when done) of a plan or a sizing on a server"


def add_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("id", help="plan id or sizing id")
    p.add_argument("--json", action="store_true", help="print the status body as JSON")
    _remote.add_server_arguments(p)


def sizing_sentence(result: dict[str, Any]) -> str:
    """A finished sizing for people: the answer for these estimates and what proves it."""
    need, low = int(result["nodes_needed"]), int(result["nodes_lower_bound"])
    text = (
        f"{plural(need, 'node')} {'meets' if need == 1 else 'meet'} the deadline of "
        f"{deadline_text(result, float(result['deadline']))} for these estimates (the plan "
        f"finishes in {duration(float(result['makespan']))})"
    )
    if need == low:
        text += "; no fewer can (proven), so this is the fewest."
    else:
        text += f"; no plan with fewer than {plural(low, 'node')} can."
    return text


def run(args: argparse.Namespace) -> int:
    found = _remote.fetch(args)
    if isinstance(found, int):
        return found  # the server's error, reported
    kind, doc = found
    if args.json:
        print_json(doc, allow_nan=True)
    else:
        if kind == "sizings":
            print(f"sizing {doc.get('id', args.id)}")
        print(_remote.ProgressLine.render(doc))
        result = doc.get("result")
        if result:
            print(sizing_sentence(result) if kind == "sizings" else certificate_sentence(result))
        if doc.get("error"):
            print(f"error: {doc['error']}")
    return _remote.EXIT_FAILED if doc.get("status") in ("failed", "cancelled") else 0
