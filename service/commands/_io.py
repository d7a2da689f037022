"""Shared helpers of the subcommands: reading request files (JSON bodies and CSV batches),
the options that fill in a body, and the API's checks of it."""

from __future__ import annotations

import argparse
import json
import math
from collections.abc import Callable, Iterator
from contextlib import contextmanager
from dataclasses import dataclass, field
from pathlib import Path
from typing import TYPE_CHECKING, Any

from workers.planning.errors import InvalidInstance, Issue, SpanwrightError

from ..csvio import CsvError, CsvRows, read_jobs_table, read_nodes_table

if TYPE_CHECKING:
    from workers.planning.usecases import PlanAnswer

    from ..settings import Settings


def _reject_constant(name: str) -> float:
    raise ValueError(f"{name} is not a JSON number")


def read_text(path: str, encoding: str = "utf-8") -> str:
    """A text file (``-`` for standard input); a file that cannot be read is an input error."""
    import sys

    try:
        return sys.stdin.read() if path == "-" else Path(path).read_text(encoding=encoding)
    except OSError as exc:
        raise InvalidInstance(f"cannot read {path}: {exc.strerror}", [Issue((), str(exc))]) from exc
    except UnicodeDecodeError as exc:
        raise InvalidInstance(f"{path} is not {encoding} text: {exc}") from exc


def read_json(path: str) -> Any:
    """Read a JSON file (``-`` for standard input); NaN and Infinity are refused."""
    text = read_text(path)
    try:
        return json.loads(text, parse_constant=_reject_constant)
    except (ValueError, RecursionError) as exc:
        raise InvalidInstance(f"{path} is not valid JSON: {exc}", [Issue((), str(exc))]) from exc


def print_json(doc: Any, *, allow_nan: bool = False) -> None:
    """``doc`` as one line of JSON on standard output (NaN refused unless ``allow_nan``)."""
    import sys

    json.dump(doc, sys.stdout, allow_nan=allow_nan)
    sys.stdout.write("\n")


def plan_request(data: dict[str, Any], budget: float) -> PlanAnswer:
    """The plan of a checked plan body (:func:`load_request`), as the worker makes it."""
    from workers.planning import usecases

    from .. import reading

    problem, spread = reading.read_plan_body(data)
    return usecases.plan(problem, method=data["method"], spread=spread, time_budget=budget)


def on_grid(answer: Any, data: dict[str, Any], kind: str, **options: bool) -> dict[str, Any]:
    """``answer.to_dict(**options)`` with its times on the grid of the request's
    ``resolution``, rounded as the service writes them (``workers.planning.rounding``):
    ``--json`` prints what ``GET /v1/{kind}s/{id}`` would answer."""
    from workers.planning import rounding

    grid = rounding.grid_decimals(float(data.get("resolution", 1.0)))
    doc = answer.to_dict(**options)
    if kind == "plan":
        return rounding.round_plan(doc, grid, answer.result.exact_value)
    return rounding.round_sizing(doc, grid, rounding.exact_makespan_of(answer.result))


def finite(x: float) -> float | None:
    return x if math.isfinite(x) else None


def load_request(path: str, kind: str) -> dict[str, Any]:
    """A request file read and checked exactly as the API checks its body (the same
    schemas, limits and messages; settings from the environment, as ``serve`` reads
    them): ``kind`` is ``plan`` or ``sizing``. Defaults are filled in (``time_budget``)."""
    return check_request(read_json(path), kind)


def check_request(body: Any, kind: str) -> dict[str, Any]:
    """:func:`load_request` for a body already read (from JSON, or a CSV batch)."""
    from ..schemas import load_plan_request, load_sizing_request

    settings = settings_from_env()
    if kind == "plan":
        return load_plan_request(body, settings)
    return load_sizing_request(body, settings)


@dataclass
class Batch:
    """A request body read from a file, and where its lists came from when that was CSV
    (``sources["jobs"]``, ``sources["nodes"]``), so problems can be named by line."""

    body: dict[str, Any]
    sources: dict[str, CsvRows] = field(default_factory=dict)

    def place(self, issue: Issue) -> Issue:
        """``issue`` named by CSV line and column when it is about a row read from CSV
        (``("jobs", 3, "duration")`` -> ``line 5, column 2 (duration)``); else as it is."""
        path = issue.path
        rows = self.sources.get(str(path[0])) if path else None
        if rows is None or len(path) < 2 or not isinstance(path[1], int):
            return issue
        if not 0 <= path[1] < len(rows.lines):
            return issue
        name = path[2] if len(path) > 2 and isinstance(path[2], str) else None
        return Issue((), f"{rows.place(path[1], name)}: {issue.detail}")

    @contextmanager
    def lines(self) -> Iterator[None]:
        """Problems raised inside, about rows read from CSV, named by line and column."""
        try:
            yield
        except SpanwrightError as exc:
            placed = [self.place(i) for i in exc.issues]
            if placed == exc.issues:
                raise
            raise CsvError(exc.detail, placed) from exc


def _csv(path: str, read: Any) -> CsvRows:
    try:
        rows: CsvRows = read(read_text(path, "utf-8-sig"))
    except CsvError as exc:
        exc.detail = f"{path}: {exc.detail}"
        raise
    return rows


def read_batch(path: str) -> Batch:
    """A request body from JSON (``-``: standard input), or the jobs of a CSV batch
    (a name ending in ``.csv``; RFC 4180 with a header row, see ``service/csvio.py``)."""
    if path.lower().endswith(".csv"):
        rows = _csv(path, read_jobs_table)
        return Batch({"jobs": rows.items}, {"jobs": rows})
    body = read_json(path)
    if not isinstance(body, dict):
        raise InvalidInstance(f"{path} must hold a JSON object", [Issue((), "not an object")])
    return Batch(body)


def read_farm(path: str) -> tuple[list[dict[str, Any]], CsvRows | None]:
    """The nodes of a farm file: CSV (``id,speed,provides,free_at,slots``) or JSON (a list,
    or an object with ``nodes``); with the CSV rows when it was CSV."""
    if path.lower().endswith(".csv"):
        rows = _csv(path, read_nodes_table)
        return rows.items, rows
    nodes = read_json(path)
    if isinstance(nodes, dict) and isinstance(nodes.get("nodes"), list):
        return list(nodes["nodes"]), None
    if isinstance(nodes, list):
        return nodes, None
    raise InvalidInstance(
        f"{path} must hold a JSON list of nodes or an object with 'nodes'",
        [Issue((), "not a list of nodes")],
    )


def add_local_arguments(
    p: argparse.ArgumentParser,
    body_options: Callable[[argparse.ArgumentParser], None],
    *,
    budget_help: str,
    json_help: str,
) -> None:
    """What ``solve`` and ``size`` take alike: the batch file (a JSON request body or a CSV
    of jobs), the options that fill in its body, ``--time-budget`` and ``--json``."""
    p.add_argument(
        "file", help="request body as JSON ('-' for standard input), or jobs as FILE.csv"
    )
    body_options(p)
    p.add_argument("--time-budget", type=float, help=budget_help)
    p.add_argument("--json", action="store_true", help=json_help)


def add_plan_options(p: argparse.ArgumentParser) -> None:
    """The options that fill in a plan body: nodes, deadline, shared limits."""
    nodes = p.add_mutually_exclusive_group()
    nodes.add_argument("--nodes", type=int, help="that many identical nodes")
    nodes.add_argument("--farm", help="nodes file: CSV (id,speed,provides,free_at,slots) or JSON")
    p.add_argument("--deadline", type=float, help="deadline in seconds from the start")
    _add_limit(p)


def _add_limit(p: argparse.ArgumentParser) -> None:
    p.add_argument(
        "--limit",
        action="append",
        default=[],
        metavar="NAME=COUNT",
        help="a shared limit: at most COUNT jobs that use NAME run at once (repeatable)",
    )


def add_sizing_options(p: argparse.ArgumentParser) -> None:
    """The options that fill in a sizing body: the deadline and the one kind of node."""
    p.add_argument("--deadline", type=float, help="deadline in seconds from the start")
    p.add_argument("--speed", type=float, help="speed of the node kind (default 1)")
    p.add_argument(
        "--provides",
        action="append",
        metavar="TAG",
        help="a tag the node kind provides (repeatable)",
    )
    p.add_argument("--slots", type=int, help="jobs one node runs at once (default 1)")
    p.add_argument("--max-nodes", type=int, help="the most nodes to consider")
    _add_limit(p)


def _limits(items: list[str]) -> dict[str, int]:
    out = {}
    for item in items:
        name, sep, count = item.partition("=")
        if not sep or not name or not count.strip().isdigit():
            raise InvalidInstance(f"--limit {item!r}: write NAME=COUNT")
        out[name] = int(count)
    return out


def _merge(body: dict[str, Any], key: str, given: dict[str, Any]) -> None:
    """``body[key]`` with the fields ``given`` by options over those of the file."""
    old = body.get(key)
    body[key] = {**(old if isinstance(old, dict) else {}), **given}


def plan_batch(args: argparse.Namespace) -> Batch:
    """The batch of ``args.file`` with :func:`add_plan_options` applied (an option wins
    over the file); a CSV batch is refused without nodes from an option."""
    batch = read_batch(args.file)
    body = batch.body
    if args.nodes is not None:
        body.pop("nodes", None)
        body["node_count"] = args.nodes
    if args.farm:
        body.pop("node_count", None)
        body["nodes"], rows = read_farm(args.farm)
        if rows is not None:
            batch.sources["nodes"] = rows
    if args.deadline is not None:
        body["deadline"] = args.deadline
    if args.limit:
        _merge(body, "limits", _limits(args.limit))
    if batch.sources and "nodes" not in body and "node_count" not in body:
        raise InvalidInstance("a CSV batch needs --nodes N or --farm FILE")
    return batch  # a JSON body without nodes is the schema's to refuse, as the API does


def sizing_batch(args: argparse.Namespace) -> Batch:
    """The batch of ``args.file`` with :func:`add_sizing_options` applied (an option wins
    over the file); a CSV batch is refused without ``--deadline``."""
    batch = read_batch(args.file)
    body = batch.body
    node = {
        "speed": args.speed,
        "provides": args.provides,
        "slots": args.slots,
    }
    given = {k: v for k, v in node.items() if v is not None}
    if given:
        _merge(body, "node", given)
    for key, value in (("deadline", args.deadline), ("max_nodes", args.max_nodes)):
        if value is not None:
            body[key] = value
    if args.limit:
        _merge(body, "limits", _limits(args.limit))
    if batch.sources and "deadline" not in body:
        raise InvalidInstance("a CSV batch needs --deadline SECONDS")
    return batch  # a JSON body without one is the schema's to refuse, as the API does


def settings_from_env() -> Settings:
    """The service's settings from the environment, as ``serve`` reads them."""
    import os

    from ..settings import Settings

    return Settings.from_env(os.environ)


def time_budget(override: float | None, data: dict[str, Any]) -> float:
    """``--time-budget`` when given (finite, >= 0: a budget must end), else the body's."""
    budget = override if override is not None else data["time_budget"]
    if not 0 <= budget < math.inf:  # NaN and inf fail too
        raise InvalidInstance(
            "bad time budget", [Issue(("time_budget",), "must be a finite number >= 0")]
        )
    return float(budget)
