"""Shared helpers of the subcommands: reading request files."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import TYPE_CHECKING, Any

from workers.planning.errors import InvalidInstance, Issue

if TYPE_CHECKING:
    from workers.planning.usecases import PlanAnswer

    from ..settings import Settings


def _reject_constant(name: str) -> float:
    raise ValueError(f"{name} is not a JSON number")


def read_json(path: str) -> Any:
    """Read a JSON file (``-`` for standard input); NaN and Infinity are refused."""
    import sys

    try:
        text = sys.stdin.read() if path == "-" else Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise InvalidInstance(f"cannot read {path}: {exc.strerror}", [Issue((), str(exc))]) from exc
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


def finite(x: float) -> float | None:
    return x if math.isfinite(x) else None


def load_request(path: str, kind: str) -> dict[str, Any]:
    """A request file read and checked exactly as the API checks its body (the same
    schemas, limits and messages; settings from the environment, as ``serve`` reads
    them): ``kind`` is ``plan`` or ``sizing``. Defaults are filled in (``time_budget``)."""
    from ..schemas import load_plan_request, load_sizing_request

    body = read_json(path)
    settings = settings_from_env()
    if kind == "plan":
        return load_plan_request(body, settings)
    return load_sizing_request(body, settings)


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
