"""The worker's copy of a validated plan request, with its jobs in columns.

The API reads and checks a plan body once (``service/schemas.py``, then the core's
``Instance.from_columns``). When every job is a plain ``{id, duration[, group]}`` object it
also stores this copy next to the raw body, so the worker builds the instance without
parsing a JSON object per job or checking it again. The raw body stays stored as it came
(the pages and re-planning read it); the worker falls back to it when there is no copy.

Layout (one Redis string, five parts separated by the first four newlines)::

    spanwright-columns/1
    {"node_count": 40, ...}      the body without "jobs", compact JSON
    ["ep2_sc14_0101", ...]       job ids, JSON (escaped: no raw newline inside)
    null | ["ep2_sc14", null]    job groups, JSON
    <8 bytes per job>            durations, IEEE 754 float64, little-endian

JSON escapes every newline inside a string, so only the float64 tail may hold newline
bytes, and it is last.
"""

from __future__ import annotations

import json
from collections.abc import Mapping, Sequence
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


def encode(
    envelope: Mapping[str, Any],
    ids: Sequence[str],
    durations: npt.ArrayLike,
    groups: Sequence[str | None] | None = None,
) -> bytearray:
    """The stored form of a plan body (``envelope`` must not hold ``jobs``), built in one
    buffer (Redis takes it as it is)."""
    d = np.ascontiguousarray(durations, dtype=_FLOAT64)
    if d.shape != (len(ids),) or (groups is not None and len(groups) != len(ids)):
        raise ValueError("job columns differ in length")
    if "jobs" in envelope:
        raise ValueError("the envelope must not hold the jobs")
    out = bytearray(MAGIC)
    out += b"\n"
    out += json.dumps(dict(envelope), allow_nan=False, separators=(",", ":")).encode()
    out += b"\n"
    _json_list(out, ids)
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
    parts = raw.split(b"\n", 4)
    if len(parts) != 5 or parts[0] != MAGIC:
        raise ValueError("not a spanwright-columns/1 document")
    envelope = json.loads(parts[1])
    ids = json.loads(parts[2])
    groups = json.loads(parts[3])
    if len(parts[4]) != 8 * len(ids):
        raise ValueError("job columns differ in length")
    durations = np.frombuffer(parts[4], dtype=_FLOAT64).astype(np.float64)
    if not isinstance(envelope, dict) or not isinstance(ids, list):
        raise ValueError("not a spanwright-columns/1 document")
    if groups is not None and (not isinstance(groups, list) or len(groups) != len(ids)):
        raise ValueError("job columns differ in length")
    return Columns(envelope, ids, durations, groups)
