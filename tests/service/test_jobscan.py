"""Reading plain jobs into columns from a plan body's bytes (``service/jobscan.py``, issue 16).

The reference is the standard library: whenever :func:`jobscan.scan` answers, its columns
and envelope are what ``json.loads`` reads from the same bytes (RFC 8259 JSON: strings and
their escapes, numbers, whitespace), durations compared bit for bit; on bytes
``json.loads`` refuses, it answers None. Verdicts of the API path are compared with the
per-job path it replaces (``load_plan_request`` then ``read_instance``, marshmallow and
the reader), on the same bodies.
"""

from __future__ import annotations

import dataclasses
import json
from typing import Any

import numpy as np
import pytest
from hypothesis import assume, event, example, given, settings
from hypothesis import strategies as st

from service import jobscan, payload
from service.reading import read_instance
from service.schemas import load_plan_request
from service.settings import Settings
from tests.service.plan_verdicts import envelopes, verdict

S = Settings(max_jobs=10, max_nodes=4, max_time_budget=3.0, default_time_budget=1.0)


def _reference(raw: bytes) -> tuple[dict[str, Any], list[Any], list[float], list[Any] | None]:
    """(envelope, ids, durations as floats, groups or None) as ``json.loads`` reads them."""
    body = json.loads(raw)
    jobs = body["jobs"]
    groups = [j.get("group") for j in jobs]
    return (
        {k: v for k, v in body.items() if k != "jobs"},
        [j["id"] for j in jobs],
        [float(j["duration"]) for j in jobs],
        groups if any(g is not None for g in groups) else None,
    )


def _same(cols: payload.Columns, raw: bytes) -> bool:
    """Whether ``cols`` is exactly what ``json.loads`` reads (durations bit for bit)."""
    envelope, ids, durations, groups = _reference(raw)
    want = np.array(durations, dtype=np.float64)
    return (
        cols.envelope == envelope
        and json.dumps(cols.envelope) == json.dumps(envelope)  # order and types too
        and cols.ids == ids
        and all(type(i) is str for i in cols.ids)
        and cols.durations.dtype == np.float64
        and cols.durations.tobytes() == want.tobytes()
        and cols.groups == groups
    )


def _loads_or_none(raw: bytes) -> Any:
    try:
        return json.loads(raw)
    except (ValueError, RecursionError):
        return None


# -- bodies ------------------------------------------------------------------------------

_ws = st.sampled_from(["", " ", "\n", "\t", "\r\n  "])
_text = st.one_of(
    st.text(max_size=6),
    st.sampled_from(['a"b', "a\\b", "é", "𝄞", "\u2028", "x/y", "\x00", "\x7f", "]},{"]),
)
_number = st.one_of(
    st.integers(0, 10**12),
    st.floats(0, 1e12, allow_nan=False),
    st.sampled_from([0, 0.0, 5e-324, 1.7976931348623157e308, 2**53 + 1, 10**30, 0.1]),
)


@st.composite
def _number_text(draw: st.DrawFn) -> str:
    """A JSON number as a client may write it (RFC 8259 section 6: exponents, fractions,
    leading zeros of the fraction, ``-0``), or, one time in ten, a token that is not one
    or a number ``json.loads`` reads otherwise."""
    if draw(st.integers(0, 9)):
        return draw(
            st.one_of(
                _number.map(json.dumps),
                st.sampled_from(
                    ["1e3", "1E+3", "1.0e-2", "0.000", "-0", "-0.0", "1e400", "1" * 31]
                ),
            )
        )
    return draw(
        st.sampled_from(
            [
                "-1",
                "1" * 40,
                "01",
                "1.",
                ".5",
                "+1",
                "NaN",
                "Infinity",
                "-Infinity",
                "true",
                "null",
                '"5"',
                "[1]",
                "{}",
            ]
        )
    )


@st.composite
def _string_text(draw: st.DrawFn) -> str:
    """A JSON string as a client may write it: ``json.dumps`` with or without
    ``ensure_ascii`` (``\\uXXXX`` escapes), or, one time in ten, a lone surrogate escape
    or a token that is not a string."""
    if draw(st.integers(0, 9)):
        return json.dumps(draw(_text), ensure_ascii=draw(st.booleans()))
    return draw(
        st.sampled_from(
            [
                '"\\ud800"',
                '"a\\udc00b"',
                '"\\ud83d\\ude00"',
                '"\\u0041\\n"',
                "null",
                "7",
                "[]",
                '{"id":"x"}',
            ]
        )
    )


@st.composite
def _job_text(draw: st.DrawFn) -> str:
    """A job object, written by hand: plain keys in any order with any whitespace, and now
    and then another key, a duplicate, a key written with escapes or a missing one."""
    members = [("id", draw(_string_text())), ("duration", draw(_number_text()))]
    if draw(st.booleans()):
        members.append(("group", draw(_string_text())))
    extra = draw(
        st.sampled_from([None] * 30 + ["requires", "id", "duration", "group", "\\u0069d", "drop"])
    )
    if extra == "drop":
        members.pop(draw(st.integers(0, len(members) - 1)))
    elif extra is not None:
        members.append((extra, draw(st.one_of(_string_text(), _number_text()))))
    members = draw(st.permutations(members))
    w = [draw(_ws) for _ in range(4)]
    inner = ",".join(f'{w[0]}"{k}"{w[1]}:{w[2]}{v}{w[3]}' for k, v in members)
    return "{" + inner + "}"


@st.composite
def _body(draw: st.DrawFn) -> bytes:
    """A plan body: jobs (mostly plain) and other top-level fields in any order."""
    jobs = draw(st.lists(_job_text(), min_size=1, max_size=4))
    fields = [("jobs", "[" + ",".join(jobs) + "]")]
    fields += draw(
        st.lists(
            st.sampled_from(
                [
                    ("node_count", "3"),
                    ("node_count", "1" * 35),
                    ("name", '"batch \\"7\\""'),
                    ("name", '"NaN"'),
                    ("nodes", '[{"id":"n1"},{"id":"n2","speed":2.5}]'),
                    ("nodes", '[{"id":"a","duration":1}]'),  # a plain-looking object
                    ("deadline", "1e3"),
                    ("jobs", "[]"),  # a second jobs: the last one counts
                    ("j\\u006fbs", '[{"id":"q","duration":2}]'),
                    ("limits", '{"gpu": 2}'),
                ]
            ),
            max_size=3,
        )
    )
    fields = draw(st.permutations(fields))
    w = draw(_ws)
    return ("{" + w + ("," + w).join(f'"{k}"{w}:{w}{v}' for k, v in fields) + w + "}").encode()


def _plain_body(jobs: list[dict[str, Any]], envelope: dict[str, Any], ascii_only: bool) -> bytes:
    return json.dumps({**envelope, "jobs": jobs}, ensure_ascii=ascii_only).encode()


def _mutate(raw: bytes, data: st.DataObject) -> bytes:
    """``raw`` with a few bytes inserted, deleted or replaced by JSON's own characters,
    digits, non-ASCII and invalid UTF-8 (the adversarial neighbours of a valid body)."""
    out = bytearray(raw)
    for _ in range(data.draw(st.integers(1, 3))):
        at = data.draw(st.integers(0, len(out)))
        byte = data.draw(st.sampled_from([*b'"\\{}[],:-.eE0159 \n', 0x00, 0xC3, 0xED, 0xFF]))
        how = data.draw(st.sampled_from(["insert", "delete", "replace"]))
        if how == "insert" or at == len(out):
            out.insert(at, byte)
        elif how == "delete":
            del out[at]
        else:
            out[at] = byte
    return bytes(out)


# -- agreement with json.loads -----------------------------------------------------------


@settings(max_examples=1500, deadline=None)
@given(_body())
@example(b'{"jobs":[{"id":"a","duration":-0}]}')
@example(b'{"jobs":[{"id":"a","duration":1},{"id":"b","duration":2}],"jobs":[]}')
@example(b'{"jobs":[],"jobs":[{"id":"b","duration":2}]}')
@example(b'{"j\\u006fbs":[{"id":"a","duration":1}],"jobs":[{"id":"b","duration":2}]}')
def test_columns_are_what_json_loads_reads(raw: bytes) -> None:
    """Bodies written by hand (RFC 8259 whitespace, key orders, escapes, numbers, other
    keys, duplicates): when columns come back they are exactly ``json.loads``'s."""
    cols = jobscan.scan(raw)
    assert cols is None or (_loads_or_none(raw) is not None and _same(cols, raw))


_plain_job = st.fixed_dictionaries(
    {"id": st.text(min_size=1, max_size=8), "duration": _number},
    optional={"group": st.text(max_size=4)},
)
_plain_bodies = st.builds(
    lambda jobs, n, ascii_only: json.dumps(
        {"jobs": jobs, "node_count": n}, ensure_ascii=ascii_only
    ).encode(),
    st.lists(_plain_job, min_size=1, max_size=4),
    st.integers(1, 9),
    st.booleans(),
)


@settings(max_examples=1500, deadline=None)
@given(st.one_of(_body(), _plain_bodies), st.data())
def test_damaged_bodies_give_none_or_what_json_loads_reads(raw: bytes, data: st.DataObject) -> None:
    """Adversarial bytes next to a valid body (a quote, backslash, bracket, digit, an
    invalid UTF-8 byte inserted, deleted or replaced): bytes ``json.loads`` refuses give
    None, the rest give None or exactly its reading."""
    bad = _mutate(raw, data)
    cols = jobscan.scan(bad)
    assert cols is None or (_loads_or_none(bad) is not None and _same(cols, bad))


@settings(max_examples=500, deadline=None)
@given(
    st.lists(_plain_job, min_size=1, max_size=8),
    st.fixed_dictionaries({}, optional={"node_count": st.integers(1, 9), "name": st.text()}),
    st.booleans(),
)
def test_plain_bodies_are_read_in_columns(
    jobs: list[dict[str, Any]], envelope: dict[str, Any], ascii_only: bool
) -> None:
    """The common shape is recognised: every body ``json.dumps`` writes of plain jobs
    (string ids and groups, numeric durations) comes back in columns, equal to
    ``json.loads``'s reading, unless an id, group or name holds a lone surrogate (refused
    by design: the per-job path names it)."""
    assume(not any(0xD800 <= ord(c) <= 0xDFFF for c in json.dumps([jobs, envelope])[::1]))
    raw = _plain_body(jobs, envelope, ascii_only)
    cols = jobscan.scan(raw)
    assert cols is not None and _same(cols, raw)


@pytest.mark.parametrize(
    "raw",
    [
        b'{"jobs":[{"id":"a","duration":1,"requires":["gpu"]}]}',  # another key
        b'{"jobs":[{"id":"a","duration":[1]}]}',  # a nested value
        b'{"jobs":[{"id":"a","duration":1,"id":"b"}]}',  # a duplicate key
        b'{"jobs":[{"id":"a","duration":true}]}',  # a boolean is not a number
        b'{"jobs":[{"id":"a","duration":1,"group":null}]}',  # a null group
        b'{"jobs":[{"id":"a","duration":NaN}]}',
        b'{"jobs":[{"id":"a","duration":Infinity}]}',
        b'{"jobs":[{"id":"a","duration":1}],"deadline":-Infinity}',
        b'{"jobs":[{"id":"\\ud800x","duration":1}]}',  # a lone surrogate escape
        b'{"jobs":[{"id":"a","duration":1,"group":"\\udfff"}]}',
        b'{"jobs":[{"id":"\xed\xa0\x80","duration":1}]}',  # UTF-8 of a surrogate
        b'{"jobs":[{"id":"\xff","duration":1}]}',  # invalid UTF-8
        b'\xef\xbb\xbf{"jobs":[{"id":"a","duration":1}]}',  # a byte-order mark
        '{"jobs":[{"id":"a","duration":1}]}'.encode("utf-16-le"),
        b'{"jobs":[]}',
        b'{"jobs":{"id":"a","duration":1}}',
        b'[{"id":"a","duration":1}]',
        b'{"id":"a","duration":1}',
        b'{"jobs":[{"id":"a","duration":1}],"nodes":[{"id":"n","duration":2}]}',
        b'{"jobs":[{"id":"a","duration":1' + b"0" * 5000 + b"}]}",  # past int's digit limit
        b'{"jobs":[{"id":"a","duration":1}]',  # truncated
        b'{"jobs":[{"id":"a","duration":1},]}',  # a trailing comma
    ],
)
def test_what_is_not_exactly_plain_gives_none(raw: bytes) -> None:
    """Each of these is refused by ``json.loads`` or is not the plain shape (RFC 8259:
    ``NaN``/``Infinity`` are not numbers, ``true`` is not a number; a lone surrogate
    escape is no character): the caller then reads the body as before."""
    assert jobscan.scan(raw) is None


def test_long_integers_are_read_as_the_caller_reads_them() -> None:
    """``parse_int`` is the caller's (the route reads integers past 30 digits as floats):
    the durations are ``json.loads``'s with the same ``parse_int``, bit for bit, and the
    envelope's integers too."""

    def parse_int(text: str) -> float:
        return float(text)

    raw = b'{"jobs":[{"id":"a","duration":' + b"9" * 40 + b'}],"node_count":' + b"7" * 35 + b"}"
    cols = jobscan.scan(raw, parse_int)
    want = json.loads(raw, parse_int=parse_int)
    assert cols is not None and cols.envelope == {"node_count": want["node_count"]}
    assert cols.durations.tobytes() == np.array([want["jobs"][0]["duration"]]).tobytes()


# -- the API path against the per-job path -----------------------------------------------


_envelopes = envelopes(6, confidence_samples=st.sampled_from([10, 5, 10**9]))
_api_jobs = st.lists(
    st.fixed_dictionaries(
        {
            "id": st.sampled_from([*"abcdefghijklmnop", "a\n", "x" * 300, "\u202e", ""]),
            "duration": st.sampled_from([0, 1, 2.5, 60, 7, 0.5, 1e-300, 1e10, 1e11, 10**20]),
        },
        optional={"group": st.sampled_from(["g", "", "h", "g", "y" * 300, "\x1b"])},
    ),
    min_size=1,
    max_size=6,
)


@settings(max_examples=1500, deadline=None)
@given(_api_jobs, _envelopes, st.one_of(st.none(), st.integers(1, 5)))
def test_api_verdicts_match_the_per_job_path(
    jobs: list[Any], envelope: dict[str, Any], most: int | None
) -> None:
    """What the route does (columns when ``read_plain`` gives them, else the parsed body)
    gives exactly the verdict of the per-job path it replaces (``load_plan_request`` then
    ``read_instance``, on ``json.loads`` of the same bytes): the same problem with the same
    issues (pointers and messages, in order), or the same loaded fields. With a ``max_jobs``
    of ``most``, the route holds at most that many plain jobs and counts the rest (issue
    16: a batch past the limit must not grow the worker by its ids), same verdicts."""
    from service.routes.plans import read_plan

    limits = S if most is None else dataclasses.replace(S, max_jobs=most)
    raw = json.dumps({**envelope, "jobs": jobs}).encode()
    body = json.loads(raw)

    def reference() -> Any:
        data = load_plan_request(body, limits)
        read_instance(data)
        return {k: v for k, v in data.items() if k != "jobs"}

    cols = jobscan.read_plain(raw, keep=most)  # what the route hands read_plan
    event("read per job" if cols is None else "counted past" if cols.more else "all held")
    assert cols is None or len(cols.ids) <= (most or len(jobs))
    routed = body if cols is None else cols
    assert verdict(lambda: read_plan(routed, limits).data) == verdict(reference)


@settings(max_examples=500, deadline=None)
@given(st.one_of(_body(), _plain_bodies), st.integers(1, 3), st.integers(1, 6))
def test_ids_packed_in_batches_are_what_json_loads_reads(raw: bytes, batch: int, keep: int) -> None:
    """Ids are held as joined text between batches while the body is parsed; with batches
    of 1 to 3 jobs (so every body crosses several) and at most ``keep`` jobs held, the
    columns are still exactly ``json.loads``'s, cut after ``keep`` with the rest counted."""
    old = jobscan._BATCH
    jobscan._BATCH = batch
    try:
        whole, cut = jobscan.scan(raw), jobscan.scan(raw, keep=keep)
    finally:
        jobscan._BATCH = old
    # the jobs past ``keep`` are counted, not held, so only a surrogate among them can
    # make the whole body None and the cut one not (the count refuses that body anyway)
    assert whole is None or cut is not None
    assert cut is None or whole is not None or cut.more > 0
    assert whole is None or _same(whole, raw)
    assert whole is None or cut is None or cut.ids == whole.ids[:keep]
    assert whole is None or cut is None or len(cut.ids) + cut.more == len(whole.ids)
    assert whole is None or cut is None or list(cut.durations) == list(whole.durations[:keep])


def test_worker_copy_is_the_bodys_columns() -> None:
    """The form stored for the worker holds the body's own ids, durations and groups and
    its node count (checked against ``json.loads`` of the body)."""
    from service import workform
    from service.routes.plans import read_plan

    raw = (
        b'{"node_count": 2, "jobs": [{"duration": 1840, "id": "sh\\u00e9"},'
        b' {"id": "f2", "group": "g", "duration": 2.5e0}]}'
    )
    inst = workform.decode(read_plan(jobscan.read_plain(raw), S).stored_work() or b"").core
    cols = payload.Columns({"node_count": inst.m}, list(inst.job_ids), inst.durations)
    cols = dataclasses.replace(cols, groups=list(inst.groups or [None] * inst.n))
    assert _same(cols, raw)
