"""CSV in and out: batches and farms from spreadsheets, assignments back to them.

Batch CSV (header row required; columns in any order, unknown columns refused):
``id,duration[,group][,requires][,duration_p90][,after][,uses]``, with ``requires`` (tags),
``after`` (ids of the jobs this one waits for) and ``uses`` (names of the limits it uses)
lists separated by spaces or semicolons. Farm CSV: ``id[,speed][,provides][,free_at]
[,slots]``.
Assignment CSV: ``node,job,start,end`` (seconds), one row per job, in node then start order.
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Callable, Iterable
from typing import Any

from workers.planning.errors import InvalidInstance, Issue

ASSIGNMENT_COLUMNS = ("node", "job", "start", "end")


class CsvError(InvalidInstance):
    """A CSV file that cannot be read as a batch or farm; the message names line and column."""


def _rows(text: str, columns: tuple[str, ...], required: tuple[str, ...], what: str):  # type: ignore[no-untyped-def]
    reader = csv.reader(io.StringIO(text))
    try:
        header = next(reader)
    except StopIteration:
        raise CsvError(f"the {what} CSV is empty", [Issue((), "line 1: no header row")]) from None
    header = [h.strip().lower() for h in header]
    for c, name in enumerate(header, start=1):
        if name not in columns:
            raise CsvError(
                f"line 1, column {c}: unknown column {name!r} (expected {', '.join(columns)})",
                [Issue((), f"line 1, column {c}: unknown column {name!r}")],
            )
    for name in required:
        if name not in header:
            raise CsvError(
                f"line 1: the {what} CSV needs a {name!r} column",
                [Issue((), f"line 1: missing column {name!r}")],
            )
    for line_no, row in enumerate(reader, start=2):
        if not row or all(not cell.strip() for cell in row):
            continue
        if len(row) != len(header):
            raise CsvError(
                f"line {line_no}: {len(row)} fields, the header has {len(header)}",
                [Issue((), f"line {line_no}: wrong number of fields")],
            )
        yield line_no, dict(zip(header, (cell.strip() for cell in row), strict=True)), header


def _number(value: str, line: int, header: list[str], name: str, *, low: float = 0.0) -> float:
    col = header.index(name) + 1
    try:
        x = float(value)
    except ValueError:
        x = math.nan
    if not math.isfinite(x) or x < low:
        raise CsvError(
            f"line {line}, column {col} ({name}): {value!r} is not a finite number >= {low:g}",
            [Issue((), f"line {line}, column {col}: bad {name}")],
        )
    return x


def _speed(value: str, line: int, header: list[str], name: str) -> float:
    return _number(value, line, header, name, low=1e-9)


def _tags(value: str, line: int, header: list[str], name: str) -> list[str]:
    return [t for t in value.replace(";", " ").split() if t]


def _ids(value: str, line: int, header: list[str], name: str) -> list[str]:
    """A list of ids (``after``): like tags, each read back as :func:`neutral` wrote it."""
    return [restored(t) for t in _tags(value, line, header, name)]


def _whole(value: str, line: int, header: list[str], name: str) -> int:
    x = _number(value, line, header, name, low=1.0)
    if not x.is_integer():
        col = header.index(name) + 1
        raise CsvError(
            f"line {line}, column {col} ({name}): {value!r} is not a whole number >= 1",
            [Issue((), f"line {line}, column {col}: bad {name}")],
        )
    return int(x)


#: a cell starting with one of these is a formula to a spreadsheet (OWASP, "CSV Injection")
FORMULA_STARTS = ("=", "+", "-", "@", "\t", "\r")


def neutral(cell: str) -> str:
    """A text cell as written to CSV: one that a spreadsheet would run as a formula gets a
    leading apostrophe (OWASP's advice), which :func:`restored` takes off again."""
    return "'" + cell if cell.startswith(FORMULA_STARTS) else cell


def restored(cell: str) -> str:
    """What :func:`neutral` wrote, read back."""
    return cell[1:] if cell.startswith("'") and cell[1:].startswith(FORMULA_STARTS) else cell


def _text(value: str, line: int, header: list[str], name: str) -> str:
    return restored(value)


def _job_id(value: str, line: int, header: list[str], name: str) -> str:
    if not value:
        raise CsvError(
            f"line {line}, column {header.index(name) + 1} (id): empty",
            [Issue((), f"line {line}: empty id")],
        )
    return restored(value)


#: how a cell becomes a field: (text, line number, header, column name) -> value
Reader = Callable[[str, int, list[str], str], Any]
#: the columns of a batch and of a farm CSV, in order, and how each is read
JOB_READERS: dict[str, Reader] = {
    "id": _job_id,
    "duration": _number,
    "group": _text,
    "requires": _tags,
    "duration_p90": _number,
    "after": _ids,
    "uses": _tags,
}
NODE_READERS: dict[str, Reader] = {
    "id": _text,
    "speed": _speed,
    "provides": _tags,
    "free_at": _number,
    "slots": _whole,
}


def _read(
    text: str, readers: dict[str, Reader], required: tuple[str, ...], what: str, items: str
) -> list[dict[str, Any]]:
    """Every data row as a JSON object: the required columns always, the others when filled,
    in the order of ``readers``; refused when there is no data row."""
    out = []
    for line, row, header in _rows(text, tuple(readers), required, what):
        out.append(
            {
                name: read(row[name], line, header, name)
                for name, read in readers.items()
                if name in required or row.get(name)
            }
        )
    if not out:
        raise CsvError(f"the {what} CSV has no {items}", [Issue((), "no data rows")])
    return out


def read_jobs_csv(text: str) -> list[dict[str, Any]]:
    """Jobs of a batch CSV as the JSON objects of ``POST /v1/plans``."""
    return _read(text, JOB_READERS, ("id", "duration"), "batch", "jobs")


def read_nodes_csv(text: str) -> list[dict[str, Any]]:
    """Nodes of a farm CSV as the JSON objects of ``POST /v1/plans``."""
    return _read(text, NODE_READERS, ("id",), "farm", "nodes")


def assignment_rows(assignment: Iterable[dict[str, Any]]) -> list[tuple[str, str, float, float]]:
    """(node, job, start, end) per job of a result's ``assignment``."""
    return [(a["node"], j["id"], j["start"], j["end"]) for a in assignment for j in a["jobs"]]


def write_assignment_csv(assignment: Iterable[dict[str, Any]]) -> str:
    """The assignment as CSV text with a header row; ids a spreadsheet would take for a
    formula are written with a leading apostrophe (:func:`neutral`)."""
    out = io.StringIO()
    w = csv.writer(out, lineterminator="\n")
    w.writerow(ASSIGNMENT_COLUMNS)
    for node, job, start, end in assignment_rows(assignment):
        w.writerow((neutral(node), neutral(job), repr(float(start)), repr(float(end))))
    return out.getvalue()
