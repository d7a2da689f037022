"""Clock-time fields of a request: the one place they become seconds.

A plan or sizing body may give times on a clock (RFC 3339, with an offset) beside the
seconds the core works in:

``start_at``      when time 0 is; without it, "now" (the API fills in the time it
                  accepted the request, :func:`with_start`; the command line the time of
                  the run)
``deadline_at``   the deadline as a time; instead of ``deadline`` (seconds), never with it
``free_at_time``  when a node (of ``nodes``, or of a rental's ``farm``) is free; instead
                  of its ``free_at``; a time before ``start_at`` counts as free at 0

:func:`in_seconds` turns a loaded body into the same body in seconds (``deadline``,
``free_at``; the clock fields dropped), so every reader after it reads seconds only. The
differences are taken exactly (every digit of the fractions of a second) and rounded to
a double on the safe side: a deadline down (a plan that meets it in seconds meets the
time), a ``free_at`` up (a plan never starts a job before its node is free).
:func:`echo` is what a result says back: ``{start_at, deadline_at}``.
"""

from __future__ import annotations

import re
from collections.abc import Mapping
from datetime import UTC, datetime, timedelta
from fractions import Fraction
from typing import Any

from workers.planning.errors import InvalidInstance, Issue, Path
from workers.planning.rational import down, up

#: RFC 3339 section 5.6 ``date-time``: full date, ``T`` (or ``t``, or a space: its note),
#: full time with optional fraction, and an offset (``Z`` or ``+hh:mm``); nothing else
RFC3339 = re.compile(
    r"(\d{4}-\d\d-\d\d)[Tt ](\d\d:\d\d:\d\d)(\.\d+)?([Zz]|[+-]\d\d:\d\d)",
    re.ASCII,
)

#: the request fields this module reads (top level, and of each node)
TOP_FIELDS = ("start_at", "deadline_at")
NODE_FIELD = "free_at_time"
#: the lists of nodes that may carry ``free_at_time``: a plan's, a rental's farm
NODE_LISTS = ("nodes", "farm")

_EPOCH = datetime(1970, 1, 1, tzinfo=UTC)
_SECOND = timedelta(seconds=1)


class ClockTime:
    """One parsed RFC 3339 timestamp: the text as given, the aware datetime (to whole
    seconds; its offset is the one to show it in) and the exact fraction of a second."""

    __slots__ = ("fraction", "text", "when")

    def __init__(self, text: str) -> None:
        m = RFC3339.fullmatch(text) if isinstance(text, str) else None
        if m is None:
            raise ValueError(
                "not an RFC 3339 timestamp with an offset, like 2026-12-04T06:00:00+01:00"
            )
        date, clock, frac, offset = m.groups()
        offset = "+00:00" if offset in ("Z", "z") else offset
        self.when = datetime.fromisoformat(f"{date}T{clock}{offset}")  # ValueError if no day
        self.fraction = Fraction(frac) if frac else Fraction(0)
        self.text = text

    def exact(self) -> Fraction:
        """Seconds since 1970-01-01T00:00:00Z, exactly."""
        return (self.when - _EPOCH) // _SECOND + self.fraction

    def shifted(self, seconds: float) -> str | None:
        """This time plus ``seconds``, as RFC 3339 in this time's offset (``Z`` if it was
        written so), to the microsecond; None past the year 9999."""
        try:
            later = self.when + timedelta(seconds=float(self.fraction) + seconds)
        except OverflowError:
            return None
        text = later.isoformat(timespec="microseconds" if later.microsecond else "seconds")
        return text[:-6] + "Z" if self.text[-1] in "Zz" else text


def parse_time(text: Any) -> ClockTime:
    """An RFC 3339 timestamp with an offset; ``ValueError`` says what is wrong otherwise."""
    if not isinstance(text, str):
        raise ValueError("must be an RFC 3339 timestamp (a string)")
    return ClockTime(text)


def now_text() -> str:
    """The time now, UTC, RFC 3339 to the millisecond (as the store writes its times)."""
    return datetime.now(UTC).isoformat(timespec="milliseconds")[:-6] + "Z"


def _nodes(body: Mapping[str, Any]) -> list[tuple[str, int, Mapping[str, Any]]]:
    out = []
    for key in NODE_LISTS:
        raw = body.get(key)
        if isinstance(raw, list):
            out += [(key, k, nd) for k, nd in enumerate(raw) if isinstance(nd, Mapping)]
    return out


def is_clocked(body: Any) -> bool:
    """Whether a body gives any clock field (and so needs :func:`in_seconds`)."""
    if not isinstance(body, Mapping):
        return False
    if any(body.get(f) is not None for f in TOP_FIELDS):
        return True
    return any(nd.get(NODE_FIELD) is not None for _, _, nd in _nodes(body))


def needs_start(body: Any) -> bool:
    """Whether a body measures times from a start it does not give ("starting now")."""
    return is_clocked(body) and body.get("start_at") is None


def with_start(body: Mapping[str, Any], start_at: str) -> dict[str, Any]:
    """``body`` with ``start_at`` filled in (where :func:`needs_start`), so a re-read
    gives the same seconds as the first read."""
    out = dict(body)
    if needs_start(body):
        out["start_at"] = start_at
    return out


def in_seconds(body: Mapping[str, Any], now: str | None = None) -> Mapping[str, Any]:
    """The body with its clock fields turned into seconds from ``start_at``.

    A body without clock fields comes back as it is (no copy). Otherwise a copy comes
    back, with ``deadline`` from ``deadline_at`` and each node's ``free_at`` from its
    ``free_at_time``, and no clock field left (so a second call changes nothing). A
    missing ``start_at`` is ``now`` (default: the time of the call). Every problem is
    raised together, by field path, as one :class:`InvalidInstance`.
    """
    if not is_clocked(body):
        return body
    from ..ranges import MAX_SECONDS, MIN_DEADLINE

    issues: list[Issue] = []

    def read(obj: Mapping[str, Any], key: str, path: Path) -> ClockTime | None:
        raw = obj.get(key)
        if raw is None:
            return None
        try:
            return parse_time(raw)
        except ValueError as exc:
            issues.append(Issue(path, str(exc)))
            return None

    if body.get("start_at") is None:
        start: ClockTime | None = parse_time(now or now_text())
    else:
        start = read(body, "start_at", ("start_at",))
    out = {k: v for k, v in body.items() if k not in TOP_FIELDS}
    deadline_at = read(body, "deadline_at", ("deadline_at",))
    seconds_given = body.get("deadline")
    if body.get("deadline_at") is not None and seconds_given is not None:
        issues.append(
            Issue(("deadline_at",), "give either 'deadline' (seconds) or 'deadline_at', not both")
        )
    elif _number(seconds_given) and start is not None and start.shifted(seconds_given) is None:
        issues.append(Issue(("deadline",), "ends after the year 9999 from start_at"))
    elif deadline_at is not None and start is not None:
        seconds = deadline_at.exact() - start.exact()
        if seconds <= 0:
            issues.append(
                Issue(("deadline_at",), f"must be after start_at ({start.text}), not at or before")
            )
        elif not MIN_DEADLINE <= seconds <= MAX_SECONDS:
            issues.append(
                Issue(
                    ("deadline_at",),
                    f"must be {MIN_DEADLINE} s to {MAX_SECONDS:g} s after start_at ({start.text})",
                )
            )
        else:
            out["deadline"] = down(seconds)
    for key, k, nd in _nodes(body):
        if nd.get(NODE_FIELD) is None:
            continue
        path = (key, k, NODE_FIELD)
        free = read(nd, NODE_FIELD, path)
        if nd.get("free_at") is not None:
            issues.append(
                Issue(path, "give either 'free_at' (seconds) or 'free_at_time', not both")
            )
            continue
        if free is None or start is None:
            continue
        seconds = max(Fraction(0), free.exact() - start.exact())
        if seconds > MAX_SECONDS:
            issues.append(Issue(path, f"more than {MAX_SECONDS:g} s after start_at"))
            continue
        nodes = out[key] if out[key] is not body[key] else list(body[key])
        nodes[k] = {**{f: v for f, v in nd.items() if f != NODE_FIELD}, "free_at": up(seconds)}
        out[key] = nodes
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the request", issues)
    return out


def _number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


def echo(body: Any) -> dict[str, str | None] | None:
    """A result's ``clock``: the stored request's ``start_at`` and its ``deadline_at``
    (as given, or ``start_at`` plus ``deadline`` seconds in ``start_at``'s offset; None
    without a deadline); None when the request gave no ``start_at``."""
    if not isinstance(body, Mapping) or not isinstance(body.get("start_at"), str):
        return None
    start = parse_time(body["start_at"])
    deadline_at = body.get("deadline_at")
    seconds = body.get("deadline")
    if deadline_at is None and _number(seconds):
        deadline_at = start.shifted(float(seconds))
    return {"start_at": start.text, "deadline_at": deadline_at}
