"""CSV in and out: batches and farms from spreadsheets, assignments back to them.

Batch CSV (header row required; columns in any order, unknown columns refused):
``id,duration[,group][,requires][,duration_p90][,after][,uses]``, with ``requires`` (tags),
``after`` (ids of the jobs this one waits for) and ``uses`` (names of the limits it uses)
lists separated by spaces or semicolons. Farm CSV: ``id[,speed][,provides][,free_at]
[,slots]``.
Assignment CSV: ``node,job,start,end`` (seconds), one row per job, in node then start order.

Files are RFC 4180 CSV with a header row (line 1). A file with problems is refused with
every problem at once, each named by line (where its record starts: a quoted field may
span lines) and column, duplicate ids by the line they repeat on and the line they first
appeared on. Cells a spreadsheet would run as formulas are neutralised on the way out
and restored on the way in (OWASP, "CSV Injection").
"""

from __future__ import annotations

import csv
import io
import math
from collections.abc import Callable, Iterable
from dataclasses import dataclass
from typing import Any

from workers.planning.errors import InvalidInstance, Issue

ASSIGNMENT_COLUMNS = ("node", "job", "start", "end")


class CsvError(InvalidInstance):
    """A CSV file that cannot be read as a batch or farm, or a request read from one that
    the checks refused; each issue names the line (and column) it is about."""


def plural(n: int, one: str, many: str | None = None) -> str:
    """``n`` and the noun in the form that agrees with it: ``1 node``, ``2 nodes``."""
    return f"{n} {one if n == 1 else (many or one + 's')}"


class _Bad(ValueError):
    """A cell that cannot be read; the message says why (the caller adds where)."""


@dataclass(frozen=True)
class CsvRows:
    """The data rows of a CSV file as JSON objects, with where each came from: ``lines[i]``
    is the line on which item ``i`` starts (RFC 4180 allows line breaks inside quoted
    fields, so records and lines are counted apart) and ``header`` the column names."""

    items: list[dict[str, Any]]
    lines: list[int]
    header: list[str]

    def place(self, index: int, name: str | None = None) -> str:
        """Where item ``index`` (and its field ``name``) is: ``line 4, column 2 (duration)``."""
        text = f"line {self.lines[index]}"
        if name in self.header:
            text += f", column {self.header.index(name) + 1} ({name})"
        return text


def _number(value: str, *, low: float = 0.0) -> float:
    try:
        x = float(value)
    except ValueError:
        x = math.nan
    if not math.isfinite(x) or x < low:
        raise _Bad(f"{value!r} is not a finite number >= {low:g}")
    return x


def _speed(value: str) -> float:
    return _number(value, low=1e-9)


def _tags(value: str) -> list[str]:
    return [t for t in value.replace(";", " ").split() if t]


def _ids(value: str) -> list[str]:
    """A list of ids (``after``): like tags, each read back as :func:`neutral` wrote it."""
    return [restored(t) for t in _tags(value)]


def _whole(value: str) -> int:
    try:
        x = _number(value, low=1.0)
    except _Bad:
        x = 0.5
    if not x.is_integer():
        raise _Bad(f"{value!r} is not a whole number >= 1")
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


def _text(value: str) -> str:
    return restored(value)


def _id(value: str) -> str:
    if not value:
        raise _Bad("empty")
    return restored(value)


#: how a cell becomes a field (raising :class:`_Bad` with the reason when it cannot)
Reader = Callable[[str], Any]
#: the columns of a batch and of a farm CSV, in order, and how each is read
JOB_READERS: dict[str, Reader] = {
    "id": _id,
    "duration": _number,
    "group": _text,
    "requires": _tags,
    "duration_p90": _number,
    "after": _ids,
    "uses": _tags,
}
NODE_READERS: dict[str, Reader] = {
    "id": _id,
    "speed": _speed,
    "provides": _tags,
    "free_at": _number,
    "slots": _whole,
}


def _header(
    header: list[str], readers: dict[str, Reader], required: tuple[str, ...], what: str
) -> tuple[dict[str, int], list[tuple[int, int, str]]]:
    """The column of each known name (0-based) and the header's problems, every one."""
    where: dict[str, int] = {}
    bad: list[tuple[int, int, str]] = []
    for c, name in enumerate(header):
        if name not in readers:
            expected = ", ".join(readers)
            bad.append((1, c + 1, f": unknown column {name!r} (expected {expected})"))
        elif name in where:
            bad.append((1, c + 1, f": column {name!r} again (first as column {where[name] + 1})"))
        else:
            where[name] = c
    for name in required:
        if name not in where:
            bad.append((1, 0, f"no {name!r} column (the {what} CSV needs {', '.join(required)})"))
    return where, bad


def _read(
    text: str, readers: dict[str, Reader], required: tuple[str, ...], what: str, items: str
) -> CsvRows:
    """Every data row as a JSON object: the required columns always, the others when filled,
    in the order of ``readers``. Every problem of the file is found before any is reported
    (each by line, and column where there is one), duplicate ids among them; refused too
    when there is no data row. Rows with no text at all are skipped."""
    reader = csv.reader(io.StringIO(text))
    try:
        header = [h.strip().lower() for h in next(reader)]
    except StopIteration:
        raise CsvError(f"the {what} CSV is empty", [Issue((), "line 1: no header row")]) from None
    # (line, column or 0, what is wrong): after a column, the message starts with " (its
    # name): " or ": "
    cols, bad = _header(header, readers, required, what)
    rows = CsvRows([], [], header)
    first_line: dict[str, int] = {}
    end = reader.line_num
    try:
        for row in reader:
            line, end = end + 1, reader.line_num  # a record may span lines (RFC 4180, 2.6)
            if not row or all(not cell.strip() for cell in row):
                continue
            if len(row) != len(header):
                fields = plural(len(row), "field")
                bad.append((line, 0, f"{fields}, the header has {len(header)}"))
                continue
            item, ok = {}, True
            for name, read in readers.items():
                c = cols.get(name)
                cell = row[c].strip() if c is not None else ""
                if c is None or not (cell or name in required):
                    continue
                try:
                    item[name] = read(cell)
                except _Bad as why:
                    bad.append((line, c + 1, f" ({name}): {why}"))
                    ok = False
            if "id" in item:
                seen = first_line.setdefault(item["id"], line)
                if seen != line:
                    msg = f" (id): duplicate id {item['id']!r} (first on line {seen})"
                    bad.append((line, cols["id"] + 1, msg))
                    ok = False
            if ok and not bad:
                rows.items.append(item)
                rows.lines.append(line)
    except csv.Error as exc:  # the reader cannot go on past this
        bad.append((reader.line_num, 0, f"not CSV: {exc}"))
    if bad:
        issues = [
            Issue((), f"line {line}, column {c}{msg}" if c else f"line {line}: {msg}")
            for line, c, msg in sorted(bad, key=lambda b: b[:2])
        ]
        lines = len({b[0] for b in bad})
        detail = (
            issues[0].detail
            if len(issues) == 1
            else f"{plural(len(issues), 'problem')} on {plural(lines, 'line')} of the {what} CSV"
        )
        raise CsvError(detail, issues)
    if not rows.items:
        raise CsvError(f"the {what} CSV has no {items}", [Issue((), "no data rows")])
    return rows


def read_jobs_table(text: str) -> CsvRows:
    """Jobs of a batch CSV as the JSON objects of ``POST /v1/plans``, with their lines."""
    return _read(text, JOB_READERS, ("id", "duration"), "batch", "jobs")


def read_nodes_table(text: str) -> CsvRows:
    """Nodes of a farm CSV as the JSON objects of ``POST /v1/plans``, with their lines."""
    return _read(text, NODE_READERS, ("id",), "farm", "nodes")


def read_jobs_csv(text: str) -> list[dict[str, Any]]:
    """Jobs of a batch CSV as the JSON objects of ``POST /v1/plans``."""
    return read_jobs_table(text).items


def read_nodes_csv(text: str) -> list[dict[str, Any]]:
    """Nodes of a farm CSV as the JSON objects of ``POST /v1/plans``."""
    return read_nodes_table(text).items


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
