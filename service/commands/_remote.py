"""Shared by the client subcommands: server options, progress display, exit codes."""

from __future__ import annotations

import argparse
import sys
from pathlib import Path
from typing import Any, TextIO

from ..client import Client, ClientError
from ..csvio import read_jobs_csv, read_nodes_csv
from ..web.svg import fmt_duration
from ._io import read_json

EXIT_OK, EXIT_FAILED, EXIT_INVALID, EXIT_SERVER = 0, 1, 2, 3


def add_server_arguments(p: argparse.ArgumentParser) -> None:
    p.add_argument("--server", help="API base URL (default $SPANWRIGHT_SERVER or 127.0.0.1:8080)")
    p.add_argument("--key", help="API key (default $SPANWRIGHT_KEY)")


def client(args: argparse.Namespace) -> Client:
    return Client(args.server, args.key)


def fetch(args: argparse.Namespace) -> dict[str, Any] | int:
    """The record ``args.id`` on the server, or the exit code of the error (reported)."""
    try:
        return client(args).get(args.id)
    except ClientError as err:
        return report_client_error(err)


def report_client_error(err: ClientError) -> int:
    print(f"spanwright: {err}", file=sys.stderr)
    if err.status == 0:
        return EXIT_SERVER
    return EXIT_INVALID if err.status in (400, 413, 415, 422) else EXIT_SERVER


def read_batch(path: str) -> dict[str, Any]:
    """A request body from JSON, or the jobs of a CSV batch."""
    if path.lower().endswith(".csv"):
        return {"jobs": read_jobs_csv(Path(path).read_text(encoding="utf-8-sig"))}
    body = read_json(path)
    if not isinstance(body, dict):
        from workers.planning.errors import InvalidInstance, Issue

        raise InvalidInstance(f"{path} must hold a JSON object", [Issue((), "not an object")])
    return body


def read_farm(path: str) -> list[dict[str, Any]]:
    if path.lower().endswith(".csv"):
        return read_nodes_csv(Path(path).read_text(encoding="utf-8-sig"))
    nodes = read_json(path)
    return list(nodes["nodes"] if isinstance(nodes, dict) else nodes)


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
        parts = [f"{status:<9} [{bar}] {elapsed:5.1f}/{budget:.1f} s"]
        if best is not None:
            parts.append(f"best {fmt_duration(float(best))}")
        if bound is not None:
            parts.append(f"bound {fmt_duration(float(bound))}")
        if best is not None and bound:
            parts.append(f"gap {100 * (float(best) - float(bound)) / float(bound):.2f}%")
        return "  ".join(parts)
