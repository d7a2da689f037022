"""Reading a plan body's plain jobs straight into columns, without a dict per job.

A large plan body is nearly always ``{"jobs": [{"id": ..., "duration": ...}, ...], ...}``.
``json.loads`` makes a dict per job (with its keys and values, about 10 times the bytes
of the body in all), which the service then reads into columns anyway
(``service/payload.py``). :func:`scan` has the standard library's own parser read the
bytes (``json.loads``, so every string escape, number and whitespace rule is its own),
with an ``object_pairs_hook`` that takes each *plain* job object as it is parsed (keys
``id``: a string, ``duration``: a number, and optionally ``group``: a string, each once,
in any order), appends its values to the columns and leaves one shared marker in its
place; every other object becomes the dict ``json.loads`` would have made. A job's parsed
pairs are freed as soon as the hook returns, so the peak is the columns, a list of
markers and the decoded text.

The columns are taken when the top-level object's ``jobs`` is a non-empty array of
markers only, and every plain object the hook took is in it; otherwise (another key in a
job, a duplicate key, a nested value, a ``null`` group, a plain-looking object elsewhere,
``NaN`` or ``Infinity`` anywhere, a body that is not UTF-8, a lone surrogate in an id or a
group) :func:`scan` answers None and the caller reads the body as before.

Why not a regular expression over the bytes: on Python 3.11 ``re.sub`` expands a
template in Python for every match, and a scan of 100,000 jobs that way took 2.5 times as
long as ``json.loads`` plus the column checks it replaces; this hook is a little faster
than that path from about 100,000 jobs, a little slower below (``bench/jobscan.py``), so
the route reads bodies under :data:`MIN_BYTES` per job.
"""

from __future__ import annotations

import json
import re
from array import array
from collections.abc import Callable
from itertools import accumulate
from typing import Any

import numpy as np

from workers.planning.model import CONTROL, MAX_ID_LENGTH

from .payload import Columns
from .schemas import MAX_SECONDS

#: bodies from this size on are worth reading in columns: below it ``json.loads`` and the
#: per-job checks are faster (its dicts cost C, the hook here a Python call per job: 0.84
#: against 0.71 ms for 1,000 jobs, 41 kB; bench/jobscan.py) and cost a few hundred kB
MIN_BYTES = 1 << 16


class _Marker:
    """What a plain job object parses to: one shared object, compared by identity."""


_MARK = _Marker()
#: a UTF-16 surrogate in a Python string (``json.loads`` pairs the escapes of a valid
#: pair into one character, so any left is unpaired)
_SURROGATE = re.compile("[\ud800-\udfff]")
_KEYS = frozenset(("id", "duration", "group"))


def _constant(name: str) -> Any:
    """``NaN``, ``Infinity`` and ``-Infinity`` are not JSON numbers (RFC 8259, section 6)."""
    raise ValueError(f"{name} is not a JSON number")


def scan(
    raw: bytes, parse_int: Callable[[str], Any] | None = None, keep: int | None = None
) -> Columns | None:
    """The body's other top-level fields and its plain jobs in columns, exactly as
    ``json.loads(raw, parse_int=parse_int)`` reads them; None when the body is not of
    that shape (see above).

    With ``keep``, plain jobs after the first ``keep`` are counted (``Columns.more``),
    not held: a batch past the service's ``max_jobs`` is refused by its count before any
    job is read, so holding its ids would only grow the worker (issue 16)."""
    if json.detect_encoding(raw) != "utf-8" or b'"duration"' not in raw:
        return None  # (a body without a plain job is not parsed twice)
    ids: list[str] = []  # the ids of the jobs read since the last pack()
    seconds = array("d")
    grouped = b'"group"' in raw  # a group key written with escapes is not plain here
    groups: list[str | None] = []
    add_id, add_seconds, add_group = ids.append, seconds.append, groups.append
    packed = _Packed(len(raw) if keep is None else keep)

    def pack() -> None:
        """Hold the batch's ids in one string (a Python str per id costs ~50 bytes more
        than its text, more than the body's bytes for short ids); past ``keep``, count."""
        kept = packed.add(ids)
        if kept < len(ids):
            del seconds[packed.kept :]
            if grouped:
                del groups[packed.kept :]
        ids.clear()

    def hook(pairs: list[tuple[str, Any]]) -> Any:
        if len(ids) >= _BATCH:  # the jobs read so far into one text, before the next
            pack()
        if len(pairs) == 2:  # the common case first: {"id": ..., "duration": ...}
            (k1, v1), (k2, v2) = pairs
            if k1 == "id" and k2 == "duration" and type(v1) is str:
                t = type(v2)
                if t is float or t is int:
                    add_id(v1)
                    add_seconds(v2)
                    if grouped:
                        add_group(None)
                    return _MARK
        elif len(pairs) != 3 or not grouped:
            return dict(pairs)
        else:  # then {"id": ..., "duration": ..., "group": ...}, as json.dumps writes it
            (k1, v1), (k2, v2), (k3, v3) = pairs
            if k1 == "id" and k2 == "duration" and k3 == "group" and type(v1) is str:
                t = type(v2)
                if (t is float or t is int) and type(v3) is str:
                    add_id(v1)
                    add_seconds(v2)
                    add_group(v3)
                    return _MARK
        job = dict(pairs)  # any other order, or not plain
        if len(job) == len(pairs) and _KEYS.issuperset(job) and "id" in job:
            ident, x, group = job["id"], job.get("duration"), job.get("group")
            t = type(x)
            if (
                type(ident) is str
                and (t is float or t is int)
                and (type(group) is str or (len(job) == 2 and group is None))
            ):
                add_id(ident)
                add_seconds(x)
                if grouped:
                    add_group(group)
                return _MARK
        return job

    try:
        top = json.loads(
            raw,
            object_pairs_hook=hook,
            parse_constant=_constant,
            parse_int=parse_int,
        )
    except (ValueError, RecursionError, OverflowError):  # OverflowError: a huge duration
        return None
    pack()
    jobs = top.get("jobs") if type(top) is dict else None
    n = packed.kept + packed.more
    if type(jobs) is not list or not jobs or len(jobs) != n or jobs.count(_MARK) != n:
        return None  # not all jobs plain, or a plain-looking object elsewhere
    envelope = {k: v for k, v in top.items() if k != "jobs"}
    del jobs, top  # the list of markers goes before the ids are unpacked
    columns = Columns(
        envelope,
        packed.unpack(),
        np.frombuffer(seconds, dtype=np.float64),
        groups if any(g is not None for g in groups) else None,
        packed.more,
    )
    if (b"\\u" in raw or b"\xed" in raw) and _surrogate(columns):  # an escape or UTF-8 of
        return None  # a surrogate ("surrogatepass", as json.loads decodes bytes)
    return columns


#: ids read between two packs
_BATCH = 4096


class _Packed:
    """Ids held as joined text and lengths while the body is parsed (its decoded text is
    alive then), at most ``keep`` of them; the rest only counted."""

    def __init__(self, keep: int) -> None:
        self.keep, self.kept, self.more = keep, 0, 0
        self.texts: list[str] = []
        self.lengths: list[array[int]] = []

    def add(self, ids: list[str]) -> int:
        """Holds the first of ``ids`` up to ``keep`` in all, counts the others; returns
        how many it held."""
        take = min(len(ids), self.keep - self.kept)
        self.more += len(ids) - take
        if take > 0:
            batch = ids if take == len(ids) else ids[:take]
            self.texts.append("".join(batch))
            self.lengths.append(array("L", map(len, batch)))
            self.kept += take
        return take

    def unpack(self) -> list[str]:
        """The ids held, in order, as separate strings (equal to the ones read)."""
        out: list[str] = []
        for text, lengths in zip(self.texts, self.lengths, strict=True):
            ends = list(accumulate(lengths))
            out.extend([text[a:b] for a, b in zip([0, *ends[:-1]], ends, strict=True)])
        self.texts.clear()
        self.lengths.clear()
        return out


def _surrogate(columns: Columns) -> bool:
    text = "".join(columns.ids)
    if columns.groups is not None:
        text += "".join(g for g in columns.groups if g is not None)
    return _SURROGATE.search(text) is not None


def plain(columns: Columns) -> bool:
    """Whether every job passes the per-job checks of the request's shape
    (``schemas.JobSchema``, as ``schemas.job_columns`` checks them): an id of 1 to
    ``MAX_ID_LENGTH`` characters and a group of at most that, neither with control
    characters; a duration from 0 to ``MAX_SECONDS``."""
    ids, d = columns.ids, columns.durations
    if min(map(len, ids)) < 1 or max(map(len, ids)) > MAX_ID_LENGTH:
        return False
    if CONTROL.search("".join(ids)):
        return False
    if not (np.isfinite(d).all() and (d >= 0).all() and (d <= MAX_SECONDS).all()):
        return False
    if columns.groups is None:
        return True
    named = [g for g in columns.groups if g is not None]
    return max(map(len, named)) <= MAX_ID_LENGTH and not CONTROL.search("".join(named))


def read_plain(
    raw: bytes, parse_int: Callable[[str], Any] | None = None, keep: int | None = None
) -> Columns | None:
    """:func:`scan`, when every job kept is :func:`plain`; else None (the per-job path
    then names each problem)."""
    columns = scan(raw, parse_int, keep)
    return columns if columns is not None and plain(columns) else None


def counted(columns: Columns) -> dict[str, Any]:
    """The body as the checks that only count its jobs see it (the limits of
    ``schemas.check_plan_limits``, ``queue.simulation_allowance``): its other fields and a
    placeholder per job, as a plain job has none of the fields they read."""
    return {**columns.envelope, "jobs": [None] * (len(columns.ids) + columns.more)}
