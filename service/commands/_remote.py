"""Shared by the client subcommands: server options, progress display, exit codes."""

from __future__ import annotations

import argparse
import json
import sys
import urllib.error
import urllib.request
from collections.abc import Callable, Iterator
from typing import Any, TextIO

from workers.planning.errors import Issue

from ..cli import EXIT_FAILURE as EXIT_FAILED
from ..cli import EXIT_INVALID, EXIT_OK, EXIT_SERVER
from ..client import FINISHED, Client, ClientError
from ..csvio import plural
from ._io import Batch
from ._text import duration

__all__ = ["EXIT_FAILED", "EXIT_INVALID", "EXIT_OK", "EXIT_SERVER"]


def add_server_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--server", help="API base URL (default $SPANWRIGHT_SERVER or 127.0.0.1:8080)")
    p.add_argument("--key", help="API key (default $SPANWRIGHT_KEY)")


def client(args: argparse.Namespace) -> Client:
    return Client(args.server, args.key)


def fetch(args: argparse.Namespace) -> tuple[str, dict[str, Any]] | int:
    """The record ``args.id`` on the server, a plan or a sizing (its kind, ``plans`` or
    ``sizings``, and its status body), or the exit code of the error (reported)."""
    try:
        return client(args).get_any(args.id)
    except ClientError as err:
        return report_client_error(err)


def events(api: Client, rid: str, kind: str = "plans") -> Iterator[tuple[str, str]]:
    """The ``(event, data)`` pairs of ``GET /v1/{kind}/{rid}/events`` as they arrive, parsed
    as the WHATWG HTML standard's event-stream says: ``field: value`` lines (one space
    after the colon dropped), ``data`` lines joined by newlines, a blank line dispatches,
    lines starting with ``:`` and unknown fields are ignored. Errors are the client's."""
    headers = {"Accept": "text/event-stream", "Cache-Control": "no-cache"}
    if api.key:
        headers["Authorization"] = f"Bearer {api.key}"
    url = f"{api.server}/v1/{kind}/{rid}/events"
    req = urllib.request.Request(url, headers=headers)
    try:
        resp = urllib.request.urlopen(req, timeout=api.timeout)
    except urllib.error.HTTPError as err:
        raise ClientError(err.code, {"detail": f"no event stream ({err.code})"}) from None
    except (urllib.error.URLError, OSError) as err:
        raise ClientError(0, {"detail": f"cannot reach {api.server}: {err}"}) from None
    with resp:
        name, data = "message", []
        for raw in resp:
            line = raw.decode("utf-8").rstrip("\r\n")
            if not line:
                if data:
                    yield name, "\n".join(data)
                name, data = "message", []
                continue
            field, _, value = line.partition(":")
            value = value.removeprefix(" ")
            if field == "event":
                name = value
            elif field == "data":
                data.append(value)


def follow(
    api: Client,
    rid: str,
    kind: str = "plans",
    on_update: Callable[[dict[str, Any]], None] | None = None,
) -> dict[str, Any]:
    """Follow a record to its end through its event stream (``progress`` events, then one
    ``end``; a ``timeout`` means reconnect); ``on_update`` sees every status document. A
    server without the stream, a stream refused (429) or one that breaks off is followed
    by polling instead (:meth:`Client.wait`), so the result is the same."""
    try:
        while True:
            for name, data in events(api, rid, kind):
                if name not in ("progress", "end"):
                    continue  # "timeout" (then the stream closes) or unknown: go on
                doc = json.loads(data)
                if name == "end" and doc.get("status") not in FINISHED:  # expired
                    return api.get(rid, kind)  # its 404, as polling would say
                if on_update:
                    on_update(doc)
                if name == "end":
                    return dict(doc)
    except (ClientError, OSError, ValueError):
        return api.wait(rid, kind, on_update=on_update)


def report_client_error(err: ClientError, batch: Batch | None = None) -> int:
    """The server's error on one line (and its field errors below), exit 2 for a request
    the server refused as invalid, else 3. Field errors about rows of a CSV ``batch`` are
    named by line and column instead of JSON Pointer."""
    if batch is not None and batch.sources:
        for e in err.problem.get("errors") or []:
            parts = str(e.get("pointer", "")).split("/")[1:]
            path = tuple(int(p) if p.isdigit() else p for p in parts)
            placed = batch.place(Issue(path, ""))
            if placed.path != path:
                e["pointer"] = placed.detail.removesuffix(": ")
    print(f"spanwright: {err}", file=sys.stderr)
    if err.status == 0:
        return EXIT_SERVER
    return EXIT_INVALID if err.status in (400, 413, 415, 422) else EXIT_SERVER


class ProgressLine:
    """One line of progress: elapsed against budget, best makespan against the bound.

    On a terminal the line redraws in place; otherwise a new line is written whenever
    the state changes, so logs of pipelines keep the history.
    """

    def __init__(self, out: TextIO) -> None:
        self.out = out
        self.tty = out.isatty()
        self.last = ""

    def __call__(self, doc: dict[str, Any]) -> None:
        line = self.render(doc)
        if line == self.last:
            return
        self.last = line
        if self.tty:
            self.out.write("\r" + line.ljust(100))
        else:
            self.out.write(line + "\n")
        self.out.flush()

    def close(self) -> None:
        if self.tty and self.last:
            self.out.write("\n")
            self.out.flush()

    @staticmethod
    def render(doc: dict[str, Any]) -> str:
        status = doc.get("status", "?")
        prog = doc.get("progress") or {}
        res = doc.get("result") or {}
        elapsed = float(prog.get("elapsed", res.get("solve_seconds", 0.0)) or 0.0)
        budget = float(prog.get("time_budget") or 0.0)
        frac = min(1.0, elapsed / budget) if budget > 0 else (1.0 if status == "done" else 0.0)
        bar = "#" * round(20 * frac) + "-" * (20 - round(20 * frac))
        best = prog.get("best_makespan", res.get("makespan"))
        bound = prog.get("best_lower_bound", res.get("lower_bound"))
        parts = [f"{status:<9} [{bar}] {duration(elapsed):>6} of {duration(budget)}"]
        need = prog.get("nodes_needed", res.get("nodes_needed"))
        if need is not None:  # a sizing: the node interval, not makespans
            low = prog.get("nodes_lower_bound", res.get("nodes_lower_bound"))
            parts.append(f"{plural(int(need), 'node')} meet{'s' if need == 1 else ''} the deadline")
            if low is not None:
                parts.append(f"no fewer than {plural(int(low), 'node')} can")
            return "  ".join(parts)
        if best is not None:
            parts.append(f"best {duration(float(best))}")
        if bound is not None:
            parts.append(f"bound {duration(float(bound))}")
        if best is not None and bound:
            parts.append(f"gap {100 * (float(best) - float(bound)) / float(bound):.2f}%")
        return "  ".join(parts)
