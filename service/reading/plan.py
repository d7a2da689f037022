"""Reading a ``POST /v1/plans`` body into an :class:`Instance`: the one place it is done.

The marshmallow schemas (``service/schemas.py``) check the shape first; this module turns
a body into core objects, collecting every problem with its field path (the core's
:class:`Issue`; ``service/problems.py`` writes them as JSON Pointers). The worker and the
command line call the same readers, so one body gives one verdict everywhere.
"""

from __future__ import annotations

import math
from collections.abc import Mapping, Sequence
from typing import Any

import numpy as np
import numpy.typing as npt

from workers.planning.confidence.request import SpreadRequest
from workers.planning.errors import InvalidInstance, Issue, Path
from workers.planning.model import (
    CONTROL,
    CONTROL_WORDS,
    MAX_ID_LENGTH,
    FloatArray,
    Instance,
    Node,
    duplicates,
    identical_nodes,
)

from .clock import in_seconds
from .spread import read_spread
from .stages import Problem, with_stages


def read_instance(body: Mapping[str, Any]) -> Instance:
    """Build from a ``POST /v1/plans`` body (see ``openapi/openapi.yaml``).

    Type errors and semantic errors are collected and raised together as one
    :class:`InvalidInstance` whose issues carry JSON Pointers into ``body``. Clock-time
    fields are read as seconds first (``service/reading/clock.py``).
    """
    return PlanReader(in_seconds(body)).read()


def read_problem(body: Mapping[str, Any]) -> Problem:
    """:func:`read_instance`, as a :class:`StageProblem` when the body uses ``after``,
    ``uses``, ``limits`` or ``slots`` (``service/reading/stages.py``)."""
    return with_stages(read_instance(body), body)


def read_plan_body(body: Mapping[str, Any]) -> tuple[Problem, SpreadRequest | None]:
    """What a ``POST /v1/plans`` body asks for: the batch (or stage graph) and, with
    estimate spread, what to simulate."""
    return read_problem(body), read_spread(body)


def read_columns(
    body: Mapping[str, Any],
    job_ids: Sequence[str],
    durations: npt.ArrayLike,
    groups: Sequence[str | None] | None = None,
    *,
    checked: bool = False,
) -> Instance:
    """Build from a ``POST /v1/plans`` body whose jobs come as columns.

    ``body`` holds everything but the jobs (``nodes`` or ``node_count``, ``deadline``,
    ``resolution``); ``job_ids[j]``, ``durations[j]`` and ``groups[j]`` are job ``j``'s
    ``id``, ``duration`` and ``group``. The result and every error are exactly those of
    :func:`read_instance` on the body with ``jobs`` written out as objects; the jobs are
    checked column by column (no Python object per job), so this is the fast way in
    for a batch that was already read into columns. ``checked``: the columns passed
    ``schemas.job_columns`` already (the same per-job checks), so they are not run again.
    """
    body = in_seconds(body)
    ids = tuple(job_ids)
    d = np.asarray(durations, dtype=np.float64)
    grp = tuple(groups) if groups is not None else None
    if not checked and not _plain_columns(ids, d, grp):  # the per-job reader names each
        jobs: list[dict[str, Any]] = [
            {"id": i, "duration": x} for i, x in zip(ids, d.tolist(), strict=False)
        ]
        if grp is not None:
            for job, g in zip(jobs, grp, strict=False):
                if g is not None:
                    job["group"] = g
        return PlanReader({**body, "jobs": jobs}).read()
    reader = PlanReader(body)
    nodes = reader.read_nodes()
    deadline = reader.number(body, "deadline", (), None)
    resolution = reader.number(body, "resolution", (), 1.0)
    if reader.issues:  # as from_request: with other issues, duplicate ids are listed too
        reader.issues.extend(duplicates(ids, ("jobs",), "job"))
        raise InvalidInstance(f"{len(reader.issues)} problem(s) in the request", reader.issues)
    inst = Instance(
        job_ids=ids,
        durations=d,
        nodes=nodes,
        groups=grp if grp is not None and any(g is not None for g in grp) else None,
        deadline=deadline,
        resolution=resolution if resolution is not None else 1.0,
    )
    inst.validate()
    return inst


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


def _is_number(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool)


_NO_TAGS: frozenset[str] = frozenset()


class PlanReader:
    """Reads the instance part of a request body, collecting every issue it meets."""

    def __init__(self, body: Mapping[str, Any]) -> None:
        self.body = body
        self.issues: list[Issue] = []

    def fail(self, path: Path, detail: str) -> None:
        self.issues.append(Issue(path, detail))

    def number(self, obj: Mapping[str, Any], key: str, ptr: Path, default: float | None) -> Any:
        x = obj.get(key)
        if x is None:
            return default
        if (type(x) is float or type(x) is int) and x - x == 0:
            return float(x)  # finite: inf - inf and nan - nan are nan
        if not _is_number(x):
            self.fail((*ptr, key), f"must be a number, got {type(x).__name__}")
            return default
        if not math.isfinite(x):
            self.fail((*ptr, key), "must be finite")
            return default
        return float(x)

    def ident(self, obj: Mapping[str, Any], ptr: Path) -> str:
        x = obj.get("id")
        if not isinstance(x, str) or not x:
            self.fail((*ptr, "id"), "must be a non-empty string")
            return ""
        if len(x) > MAX_ID_LENGTH:
            self.fail((*ptr, "id"), f"longer than {MAX_ID_LENGTH} characters")
        elif CONTROL.search(x):
            self.fail((*ptr, "id"), f"contains {CONTROL_WORDS}")
        return x

    def tags(self, obj: Mapping[str, Any], key: str, ptr: Path) -> frozenset[str]:
        x = obj.get(key)
        if not x and x is not None and isinstance(x, list):
            return _NO_TAGS
        if x is None:
            return _NO_TAGS
        if not isinstance(x, list) or not all(isinstance(t, str) and t for t in x):
            self.fail((*ptr, key), "must be a list of non-empty strings")
            return frozenset()
        if CONTROL.search("".join(x)):
            self.fail((*ptr, key), f"contains {CONTROL_WORDS}")
        return frozenset(x)

    def read(self) -> Instance:
        body = self.body
        if not isinstance(body, Mapping):
            raise InvalidInstance(
                "the request body must be a JSON object", [Issue((), "not an object")]
            )
        jobs = body.get("jobs")
        ids: list[str] = []
        durations: list[float] = []
        requires: list[frozenset[str]] = []
        groups: list[str | None] = []
        p90: list[float | None] = []
        if not isinstance(jobs, list):
            self.fail(("jobs",), "required: a list of jobs")
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
            ptr = ("jobs", i)
            if not isinstance(job, Mapping):
                self.fail(ptr, "must be an object")
                continue
            ids.append(self.ident(job, ptr))
            if "duration" not in job:
                self.fail((*ptr, "duration"), "required")
            dur = self.number(job, "duration", ptr, 0.0)
            if dur is not None and dur < 0:
                self.fail((*ptr, "duration"), "must be >= 0")
            durations.append(dur if dur is not None else 0.0)
            requires.append(self.tags(job, "requires", ptr))
            g = job.get("group")
            if g is not None and not isinstance(g, str):
                self.fail((*ptr, "group"), "must be a string")
                g = None
            elif g is not None and CONTROL.search(g):
                self.fail((*ptr, "group"), f"contains {CONTROL_WORDS}")
            groups.append(g)
            q = self.number(job, "duration_p90", ptr, None)
            if q is not None and dur is not None and q < dur:
                self.fail((*ptr, "duration_p90"), "must be >= duration")
            p90.append(q)
            if len(self.issues) > 50:
                break
        nodes = self.read_nodes()
        deadline = self.number(body, "deadline", (), None)
        resolution = self.number(body, "resolution", (), 1.0)
        if self.issues:
            self.issues.extend(duplicates(ids, ("jobs",), "job"))
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
            self.fail(("node_count",), "give either 'nodes' (a list) or 'node_count', not both")
            return ()
        if has_count:
            c = body["node_count"]
            if not _is_number(c) or c != int(c) or c < 1:
                self.fail(("node_count",), "must be a whole number >= 1")
                return ()
            return identical_nodes(int(c))
        raw = body["nodes"]
        if not isinstance(raw, list) or not raw:
            self.fail(("nodes",), "must be a non-empty list of nodes")
            return ()
        out: list[Node] = []
        for k, nd in enumerate(raw):
            ptr = ("nodes", k)
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
