"""The instance model: jobs with estimated durations, nodes, and their validation.

An :class:`Instance` is columnar (ids in a list, durations in a numpy array) so that a
batch of a million jobs costs a few tens of bytes per job rather than a Python object
each. All times are seconds; a job's ``duration`` is its run time on a node of speed 1.
"""

from __future__ import annotations

import math
import re
from collections.abc import Iterable, Mapping, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property, lru_cache
from typing import Any

import numpy as np
import numpy.typing as npt

from .errors import InvalidInstance, Issue
from .rational import MAX_TICKS, decimal_up

#: longest id we accept for a job or node (characters)
MAX_ID_LENGTH = 200

FloatArray = npt.NDArray[np.float64]

#: what no id, tag or group may hold: control characters (C0, DEL, C1), unpaired UTF-16
#: surrogates (not text: a page cannot even encode them) and the bidirectional controls of
#: Unicode's UAX #9 (they reorder how the text around them is shown: the "Trojan Source"
#: risk, Boucher and Anderson 2021)
CONTROL = re.compile(
    "[\x00-\x1f\x7f-\x9f\ud800-\udfff\u061c\u200e\u200f\u202a-\u202e\u2066-\u2069]"
)
#: the words for it in messages
CONTROL_WORDS = "control, bidirectional-control or unpaired surrogate characters"


@dataclass(frozen=True, slots=True)
class Node:
    """One node of the farm. ``speed`` divides durations; ``free_at`` is when it can start."""

    id: str
    speed: float = 1.0
    provides: frozenset[str] = frozenset()
    free_at: float = 0.0

    @property
    def is_plain(self) -> bool:
        """True for a speed-1 node that is free at time 0 (tags do not matter here)."""
        return self.speed == 1.0 and self.free_at == 0.0


@dataclass(frozen=True, eq=False)
class Instance:
    """A batch of jobs and the nodes to run it on.

    Build one with :meth:`Instance.build` (from Python values) or
    :meth:`Instance.from_request` (from the JSON body of ``POST /v1/plans``); both validate.
    """

    job_ids: tuple[str, ...]
    durations: FloatArray
    nodes: tuple[Node, ...]
    requires: tuple[frozenset[str], ...] | None = None
    groups: tuple[str | None, ...] | None = None
    deadline: float | None = None
    resolution: float = 1.0
    duration_p90: tuple[float | None, ...] | None = field(default=None)

    # -- construction -----------------------------------------------------------------
    @classmethod
    def build(
        cls,
        durations: Iterable[float] | npt.ArrayLike,
        nodes: int | Sequence[Node],
        *,
        job_ids: Sequence[str] | None = None,
        requires: Sequence[Iterable[str]] | None = None,
        groups: Sequence[str | None] | None = None,
        deadline: float | None = None,
        resolution: float = 1.0,
        duration_p90: Sequence[float | None] | None = None,
    ) -> Instance:
        """Validate and build an instance from plain values.

        ``nodes`` is either a count of identical nodes (named ``node-001``...) or a list of
        :class:`Node`. ``job_ids`` default to ``job-0``, ``job-1``, ...
        """
        d = np.asarray(durations, dtype=np.float64)
        if d.ndim != 1:
            raise InvalidInstance("durations must be a flat list", [Issue("/jobs", "not a list")])
        ids = tuple(job_ids) if job_ids is not None else tuple(f"job-{i}" for i in range(d.size))
        node_tuple = identical_nodes(nodes) if isinstance(nodes, int) else tuple(nodes)
        req = tuple(frozenset(r) for r in requires) if requires is not None else None
        inst = cls(
            job_ids=ids,
            durations=d,
            nodes=node_tuple,
            requires=req if req and any(req) else None,
            groups=tuple(groups) if groups is not None and any(g for g in groups) else None,
            deadline=None if deadline is None else float(deadline),
            resolution=float(resolution),
            duration_p90=tuple(duration_p90) if duration_p90 is not None else None,
        )
        inst.validate()
        return inst

    @classmethod
    def from_request(cls, body: Mapping[str, Any]) -> Instance:
        """Build from a ``POST /v1/plans`` body (see ``openapi/openapi.yaml``).

        Type errors and semantic errors are collected and raised together as one
        :class:`InvalidInstance` whose issues carry JSON Pointers into ``body``.
        """
        return _RequestReader(body).read()

    @classmethod
    def from_columns(
        cls,
        body: Mapping[str, Any],
        job_ids: Sequence[str],
        durations: npt.ArrayLike,
        groups: Sequence[str | None] | None = None,
    ) -> Instance:
        """Build from a ``POST /v1/plans`` body whose jobs come as columns.

        ``body`` holds everything but the jobs (``nodes`` or ``node_count``, ``deadline``,
        ``resolution``); ``job_ids[j]``, ``durations[j]`` and ``groups[j]`` are job ``j``'s
        ``id``, ``duration`` and ``group``. The result and every error are exactly those of
        :meth:`from_request` on the body with ``jobs`` written out as objects; the jobs are
        checked column by column (no Python object per job), so this is the fast way in
        for a batch that was already read into columns.
        """
        ids = tuple(job_ids)
        d = np.asarray(durations, dtype=np.float64)
        grp = tuple(groups) if groups is not None else None
        if not _plain_columns(ids, d, grp):  # let the per-job reader name every problem
            jobs: list[dict[str, Any]] = [
                {"id": i, "duration": x} for i, x in zip(ids, d.tolist(), strict=False)
            ]
            if grp is not None:
                for job, g in zip(jobs, grp, strict=False):
                    if g is not None:
                        job["group"] = g
            return _RequestReader({**body, "jobs": jobs}).read()
        reader = _RequestReader(body)
        nodes = reader.read_nodes()
        deadline = reader.number(body, "deadline", "", None)
        resolution = reader.number(body, "resolution", "", 1.0)
        if reader.issues:  # as from_request: with other issues, duplicate ids are listed too
            reader.issues.extend(_duplicates(ids, "/jobs", "job"))
            raise InvalidInstance(f"{len(reader.issues)} problem(s) in the request", reader.issues)
        inst = cls(
            job_ids=ids,
            durations=d,
            nodes=nodes,
            groups=grp if grp is not None and any(g is not None for g in grp) else None,
            deadline=deadline,
            resolution=resolution if resolution is not None else 1.0,
        )
        inst.validate()
        return inst

    # -- derived views ----------------------------------------------------------------
    @property
    def n(self) -> int:
        """Number of jobs."""
        return len(self.job_ids)

    @property
    def m(self) -> int:
        """Number of nodes."""
        return len(self.nodes)

    @cached_property
    def identical(self) -> bool:
        """True when every node is speed 1, free at 0, and no job requires a tag."""
        return self.requires is None and all(nd.is_plain for nd in self.nodes)

    @cached_property
    def total(self) -> float:
        """Total work in seconds."""
        return float(self.durations.sum())

    @cached_property
    def order_longest_first(self) -> npt.NDArray[np.intp]:
        """Job indices by duration, longest first; ties by position in the batch."""
        return longest_first_order(self.durations)

    @cached_property
    def sorted_desc(self) -> FloatArray:
        """Durations sorted longest first."""
        return self.durations[self.order_longest_first]

    # -- validation -------------------------------------------------------------------
    def validate(self) -> None:
        """Raise :class:`InvalidInstance` listing every problem found."""
        issues: list[Issue] = []
        d = self.durations
        if d.size == 0:
            issues.append(Issue("/jobs", "the batch has no jobs"))
        if len(self.job_ids) != d.size:
            issues.append(Issue("/jobs", "job ids and durations differ in number"))
        bad = np.flatnonzero(~np.isfinite(d) | (d < 0))
        for i in bad[:20]:
            issues.append(
                Issue(f"/jobs/{i}/duration", f"must be a finite number >= 0, got {d[i]!r}")
            )
        if self.m < 1:
            issues.append(Issue("/node_count", "at least one node is needed"))
        issues.extend(_duplicates(self.job_ids, "/jobs", "job"))
        issues.extend(_duplicates([nd.id for nd in self.nodes], "/nodes", "node"))
        for k, nd in enumerate(self.nodes):
            if not (math.isfinite(nd.speed) and nd.speed > 0):
                issues.append(Issue(f"/nodes/{k}/speed", "must be a finite number > 0"))
            if not (math.isfinite(nd.free_at) and nd.free_at >= 0):
                issues.append(Issue(f"/nodes/{k}/free_at", "must be a finite number >= 0"))
        if self.deadline is not None and not (math.isfinite(self.deadline) and self.deadline > 0):
            issues.append(Issue("/deadline", "must be a finite number > 0"))
        if not (math.isfinite(self.resolution) and self.resolution > 0):
            issues.append(Issue("/resolution", "must be a finite number > 0"))
        if not issues:
            issues.extend(_tick_range(self))
        if issues:
            raise InvalidInstance(f"{len(issues)} problem(s) in the batch", issues)


def longest_first_order(durations: npt.NDArray[np.float64]) -> npt.NDArray[np.intp]:
    """Job indices longest first, equal durations in batch order.

    numpy's default (introsort) argsort is the floor on cost; it is not stable, so runs
    of equal durations are put back in batch order afterwards, at a cost proportional to
    the number of tied jobs (one sort of composite integer keys).
    """
    n = durations.size
    order = np.argsort(durations)[::-1].copy()
    sd = durations[order]
    eq = sd[1:] == sd[:-1]
    if n > 1 and eq.any():
        in_run = np.zeros(n, dtype=bool)
        in_run[1:] |= eq
        in_run[:-1] |= eq
        pos = np.flatnonzero(in_run)
        run_id = np.concatenate(([0], np.cumsum(~eq)))
        key = run_id[pos].astype(np.int64) * n + order[pos]
        key.sort()
        order[pos] = key % n
    return order


def _tick_range(inst: Instance) -> list[Issue]:
    """Refuse an instance whose times, counted in ticks of ``resolution``, could exceed
    :data:`rational.MAX_TICKS` (2**53): past it ticks are no longer exact, and the
    searches' int64 arithmetic could overflow.

    The horizon is the latest any sensible plan ends: the last ``free_at`` plus all the
    work on the slowest node; a capacity on the fastest node is that times its speed.
    """
    speeds = [nd.speed for nd in inst.nodes]
    horizon = max(nd.free_at for nd in inst.nodes) + inst.total / min(speeds)
    if inst.deadline is not None:
        horizon = max(horizon, inst.deadline)
    reach = horizon * max(1.0, max(speeds))
    if reach / inst.resolution <= MAX_TICKS:
        return []
    finest = decimal_up(Fraction(reach) * (1 + Fraction(1, 10**9)) / MAX_TICKS)
    return [
        Issue(
            "/resolution",
            f"too fine for these times: the plan may span {reach / inst.resolution:.3g} ticks "
            f"of {inst.resolution:g} s, above the limit of 2**53; use a resolution of at "
            f"least {finest} s",
        )
    ]


@lru_cache(maxsize=8)
def identical_nodes(count: int) -> tuple[Node, ...]:
    """``count`` identical nodes named ``node-001``, ``node-002``, ...

    Remembered for the last few counts: the tuple and its frozen nodes cannot change, and a
    service reading many requests for the same farm size builds them once.
    """
    width = max(3, len(str(count)))
    return tuple(Node(f"node-{k + 1:0{width}d}") for k in range(count))


def _plain_columns(
    ids: tuple[str, ...], d: FloatArray, groups: tuple[str | None, ...] | None
) -> bool:
    """Whether job columns pass every per-job check of the request reader (vectorised)."""
    n = len(ids)
    if n == 0 or d.shape != (n,) or (groups is not None and len(groups) != n):
        return False
    if set(map(type, ids)) != {str}:
        return False
    lengths = list(map(len, ids))
    if min(lengths) < 1 or max(lengths) > MAX_ID_LENGTH or CONTROL.search("".join(ids)):
        return False
    if not (np.isfinite(d).all() and (d >= 0).all()):
        return False
    if groups is None:
        return True
    if not set(map(type, groups)) <= {str, type(None)}:
        return False
    return not CONTROL.search("".join(g for g in groups if g is not None))


def _duplicates(ids: Sequence[str], where: str, what: str) -> list[Issue]:
    if len(set(ids)) == len(ids):
        return []  # the common case, at C speed
    seen: dict[str, int] = {}
    out: list[Issue] = []
    for i, x in enumerate(ids):
        if x in seen:
            out.append(Issue(f"{where}/{i}/id", f"duplicate {what} id {x!r} (first at {seen[x]})"))
            if len(out) >= 20:
                break
        else:
            seen[x] = i
    return out


def _is_number(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


_NO_TAGS: frozenset[str] = frozenset()


class _RequestReader:
    """Reads the instance part of a request body, collecting every issue it meets."""

    def __init__(self, body: Mapping[str, Any]) -> None:
        self.body = body
        self.issues: list[Issue] = []

    def fail(self, pointer: str, detail: str) -> None:
        self.issues.append(Issue(pointer, detail))

    def number(self, obj: Mapping[str, Any], key: str, ptr: str, default: float | None) -> Any:
        x = obj.get(key)
        if x is None:
            return default
        if (type(x) is float or type(x) is int) and x - x == 0:
            return float(x)  # finite: inf - inf and nan - nan are nan
        if not _is_number(x):
            self.fail(f"{ptr}/{key}", f"must be a number, got {type(x).__name__}")
            return default
        if not math.isfinite(x):
            self.fail(f"{ptr}/{key}", "must be finite")
            return default
        return float(x)

    def ident(self, obj: Mapping[str, Any], ptr: str) -> str:
        x = obj.get("id")
        if not isinstance(x, str) or not x:
            self.fail(f"{ptr}/id", "must be a non-empty string")
            return ""
        if len(x) > MAX_ID_LENGTH:
            self.fail(f"{ptr}/id", f"longer than {MAX_ID_LENGTH} characters")
        elif CONTROL.search(x):
            self.fail(f"{ptr}/id", f"contains {CONTROL_WORDS}")
        return x

    def tags(self, obj: Mapping[str, Any], key: str, ptr: str) -> frozenset[str]:
        x = obj.get(key)
        if not x and x is not None and isinstance(x, list):
            return _NO_TAGS
        if x is None:
            return _NO_TAGS
        if not isinstance(x, list) or not all(isinstance(t, str) and t for t in x):
            self.fail(f"{ptr}/{key}", "must be a list of non-empty strings")
            return frozenset()
        if CONTROL.search("".join(x)):
            self.fail(f"{ptr}/{key}", f"contains {CONTROL_WORDS}")
        return frozenset(x)

    def read(self) -> Instance:
        body = self.body
        if not isinstance(body, Mapping):
            raise InvalidInstance(
                "the request body must be a JSON object", [Issue("", "not an object")]
            )
        jobs = body.get("jobs")
        ids: list[str] = []
        durations: list[float] = []
        requires: list[frozenset[str]] = []
        groups: list[str | None] = []
        p90: list[float | None] = []
        if not isinstance(jobs, list):
            self.fail("/jobs", "required: a list of jobs")
            jobs = []
        search_control = CONTROL.search
        for i, job in enumerate(jobs):
            # fast path: {"id", "duration"[, "group"]} with plain, valid values
            if type(job) is dict and 2 <= len(job) <= 3:
                jid, dur, grp = job.get("id"), job.get("duration"), job.get("group")
                if (
                    len(job) == (2 if grp is None else 3)
                    and type(jid) is str
                    and 0 < len(jid) <= MAX_ID_LENGTH
                    and (type(dur) is float or type(dur) is int)
                    and dur >= 0
                    and dur - dur == 0
                    and (grp is None or (type(grp) is str and not search_control(grp)))
                    and not search_control(jid)
                ):
                    ids.append(jid)
                    durations.append(float(dur))
                    requires.append(_NO_TAGS)
                    groups.append(grp)
                    p90.append(None)
                    continue
            ptr = f"/jobs/{i}"
            if not isinstance(job, Mapping):
                self.fail(ptr, "must be an object")
                continue
            ids.append(self.ident(job, ptr))
            if "duration" not in job:
                self.fail(f"{ptr}/duration", "required")
            dur = self.number(job, "duration", ptr, 0.0)
            if dur is not None and dur < 0:
                self.fail(f"{ptr}/duration", "must be >= 0")
            durations.append(dur if dur is not None else 0.0)
            requires.append(self.tags(job, "requires", ptr))
            g = job.get("group")
            if g is not None and not isinstance(g, str):
                self.fail(f"{ptr}/group", "must be a string")
                g = None
            elif g is not None and CONTROL.search(g):
                self.fail(f"{ptr}/group", f"contains {CONTROL_WORDS}")
            groups.append(g)
            q = self.number(job, "duration_p90", ptr, None)
            if q is not None and dur is not None and q < dur:
                self.fail(f"{ptr}/duration_p90", "must be >= duration")
            p90.append(q)
            if len(self.issues) > 50:
                break
        nodes = self.read_nodes()
        deadline = self.number(body, "deadline", "", None)
        resolution = self.number(body, "resolution", "", 1.0)
        if self.issues:
            self.issues.extend(_duplicates(ids, "/jobs", "job"))
            raise InvalidInstance(f"{len(self.issues)} problem(s) in the request", self.issues)
        inst = Instance(
            job_ids=tuple(ids),
            durations=np.asarray(durations, dtype=np.float64),
            nodes=nodes,
            requires=tuple(requires) if any(requires) else None,
            groups=tuple(groups) if any(g is not None for g in groups) else None,
            deadline=deadline,
            resolution=resolution if resolution is not None else 1.0,
            duration_p90=tuple(p90) if any(q is not None for q in p90) else None,
        )
        inst.validate()
        return inst

    def read_nodes(self) -> tuple[Node, ...]:
        body = self.body
        has_list, has_count = body.get("nodes") is not None, body.get("node_count") is not None
        if has_list == has_count:
            self.fail("/node_count", "give either 'nodes' (a list) or 'node_count', not both")
            return ()
        if has_count:
            c = body["node_count"]
            if not _is_number(c) or c != int(c) or c < 1:
                self.fail("/node_count", "must be a whole number >= 1")
                return ()
            return identical_nodes(int(c))
        raw = body["nodes"]
        if not isinstance(raw, list) or not raw:
            self.fail("/nodes", "must be a non-empty list of nodes")
            return ()
        out: list[Node] = []
        for k, nd in enumerate(raw):
            ptr = f"/nodes/{k}"
            if not isinstance(nd, Mapping):
                self.fail(ptr, "must be an object")
                continue
            out.append(
                Node(
                    id=self.ident(nd, ptr),
                    speed=self.number(nd, "speed", ptr, 1.0),
                    provides=self.tags(nd, "provides", ptr),
                    free_at=self.number(nd, "free_at", ptr, 0.0),
                )
            )
        return tuple(out)
