"""Shared helpers of the subcommands: reading request files."""

from __future__ import annotations

import json
import math
from pathlib import Path
from typing import Any

from workers.planning.errors import InvalidInstance, Issue


def _reject_constant(name: str) -> float:
    raise ValueError(f"{name} is not a JSON number")


def read_json(path: str) -> Any:
    """Read a JSON file (``-`` for standard input); NaN and Infinity are refused."""
    import sys

    try:
        text = sys.stdin.read() if path == "-" else Path(path).read_text(encoding="utf-8")
    except OSError as exc:
        raise InvalidInstance(f"cannot read {path}: {exc.strerror}", [Issue("", str(exc))]) from exc
    try:
        return json.loads(text, parse_constant=_reject_constant)
    except (ValueError, RecursionError) as exc:
        raise InvalidInstance(f"{path} is not valid JSON: {exc}", [Issue("", str(exc))]) from exc


def finite(x: float) -> float | None:
    return x if math.isfinite(x) else None
