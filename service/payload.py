"""A plan body with its plain jobs in columns, and the layout that stores them.

The API reads a body of plain ``{id, duration[, group]}`` jobs into :class:`Columns`
(``service/jobscan.py``, ``service/schemas.py``) without a Python object per job. The
stored form of a checked request (``service/workform.py``) keeps such jobs in this
module's layout (:func:`write`, :func:`read`) under its own first two lines; this
module's own document, ``spanwright-columns/1`` (:func:`encode`, :func:`decode`: the body
without its jobs as the header), is what an API before that form stored, which a worker
still reads.

Layout (one Redis string, five parts separated by the first four newlines)::

    spanwright-columns/1         (the document's name)
    {"node_count": 40, ...}      a header: here the body without "jobs", compact JSON
    ["ep2_sc14_0101", ...]       job ids, JSON (escaped: no raw newline inside)
    null | ["ep2_sc14", null]    job groups, JSON
    <8 bytes per job>            durations, IEEE 754 float64, little-endian

JSON escapes every newline inside a string, so only the float64 tail may hold newline
bytes, and it is last.
"""

from __future__ import annotations

import json
from collections.abc import Sequence
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

MAGIC = b"spanwright-columns/1"
_FLOAT64 = np.dtype("<f8")


@dataclass(frozen=True, slots=True)
class Columns:
    """A plan body without its jobs, and the jobs as columns."""

    envelope: dict[str, Any]
    ids: list[str]
    durations: npt.NDArray[np.float64]
    groups: list[str | None] | None = None
    #: plain jobs read past the last one kept (``jobscan.scan``'s ``keep``): a batch that
    #: long is refused by its count, so its ids are not held
    more: int = 0


#: ids (or groups) written to JSON at a time: the stored copy is built in one buffer
#: without a whole-column string beside it (memory per request, issue 16)
_CHUNK = 4096


def _json_list(out: bytearray, values: Sequence[Any]) -> None:
    """``json.dumps(list(values))``, compact, appended to ``out`` a chunk at a time."""
    out += b"["
    for i in range(0, len(values), _CHUNK):
        if i:
            out += b","
        out += json.dumps(list(values[i : i + _CHUNK]), separators=(",", ":"))[1:-1].encode()
    out += b"]"


def encode(cols: Columns) -> bytearray:
    """The stored form of a plan body (``cols.envelope`` must not hold ``jobs``), built in
    one buffer (Redis takes it as it is)."""
    if "jobs" in cols.envelope:
        raise ValueError("the envelope must not hold the jobs")
    envelope = json.dumps(dict(cols.envelope), allow_nan=False, separators=(",", ":"))
    return write(MAGIC, envelope.encode(), cols)


def write(magic: bytes, header: bytes, cols: Columns) -> bytearray:
    """``magic``, ``header`` (one line) and the job columns of ``cols``, in this module's
    layout (``service/workform.py`` writes its own header the same way)."""
    d = np.ascontiguousarray(cols.durations, dtype=_FLOAT64)
    groups = cols.groups
    if d.shape != (len(cols.ids),) or (groups is not None and len(groups) != len(cols.ids)):
        raise ValueError("job columns differ in length")
    out = bytearray(magic)
    out += b"\n"
    out += header
    out += b"\n"
    _json_list(out, cols.ids)
    out += b"\n"
    if groups is None:
        out += b"null"
    else:
        _json_list(out, groups)
    out += b"\n"
    out += memoryview(d).cast("B")
    return out


def is_columns(raw: bytes | bytearray) -> bool:
    """Whether ``raw`` is this layout (a raw JSON body starts with ``{`` or blank)."""
    return raw.startswith(MAGIC + b"\n")


def decode(raw: bytes | bytearray) -> Columns:
    """Read what :func:`encode` wrote; ``ValueError`` if it is not that."""
    header, cols = read(MAGIC, raw)
    envelope = json.loads(header)
    if not isinstance(envelope, dict) or cols is None:
        raise ValueError("not a spanwright-columns/1 document")
    return Columns(envelope, cols.ids, cols.durations, cols.groups)


def read(magic: bytes, raw: bytes | bytearray) -> tuple[bytes | bytearray, Columns | None]:
    """What :func:`write` wrote: the header line, and the jobs in columns (None when its
    ids are ``null``: a document with no jobs in columns); ``ValueError`` if it is not
    that."""
    parts = raw.split(b"\n", 4)
    if len(parts) != 5 or parts[0] != magic:
        raise ValueError(f"not a {magic.decode()} document")
    ids = json.loads(parts[2])
    groups = json.loads(parts[3])
    if ids is None:
        return parts[1], None
    if len(parts[4]) != 8 * len(ids):
        raise ValueError("job columns differ in length")
    durations = np.frombuffer(parts[4], dtype=_FLOAT64).astype(np.float64)
    if not isinstance(ids, list):
        raise ValueError(f"not a {magic.decode()} document")
    if groups is not None and (not isinstance(groups, list) or len(groups) != len(ids)):
        raise ValueError("job columns differ in length")
    return parts[1], Columns({}, ids, durations, groups)
