"""The stored form of a validated request: the core objects the edge's checks made.

The API reads and checks a body once (``service/reading``, issue 15: "the stored request
is the canonical validated form, so the worker never parses again"). What those checks
built (the batch or stage graph, a sizing's arguments, what to simulate, a stage graph's
re-plan events) is stored beside the raw body as this form, and the worker rebuilds the
same objects from it with their plain constructors: no reader, no check runs again. The
raw body stays stored as it came (pages, re-planning, idempotency read it).

Layout (one Redis string; the parts after the tree are the jobs of a plan of plain jobs,
in columns, as ``service/payload.py`` writes them, or empty)::

    spanwright-work/1
    {"$c": "Work", ...}          the objects, compact JSON (below)
    ["ep2_sc14_0101", ...]       plain jobs' ids, JSON, or null
    null | ["ep2_sc14", null]    their groups, JSON
    <8 bytes per job>            their durations, IEEE 754 float64, little-endian

In the tree a dataclass of :data:`TYPES` is ``{"$c": name, "$v": {field: value}}``; a
tuple ``{"$t": [...]}``, a frozenset ``{"$s": [...]}`` (sorted), a mapping ``{"$d":
{...}}``, a numpy array ``{"$a": [dtype, shape, base64 of its bytes]}``, a fraction
``{"$q": [p, q]}``, a non-finite float ``{"$f": "inf"}``; a tuple of nodes ``{"$n":
rows}`` (``{"$n": count}`` for identical ones) and a tuple of tag sets ``{"$ts":
[distinct sets, index of each]}``, the tables a batch holds. JSON writes every float so
that it reads back exactly. Decoding builds only the classes
named in :data:`TYPES`.
"""

from __future__ import annotations

import base64
import dataclasses
import json
import math
from collections.abc import Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from workers.planning.confidence.request import SpreadRequest
from workers.planning.model import Instance, Node, identical_nodes
from workers.planning.rental import Kind, RentalArgs
from workers.planning.replan import Events, Running
from workers.planning.sizing import SizingArgs
from workers.planning.stage_sizing import StageSizingArgs
from workers.planning.stages.problem import StageProblem
from workers.planning.usecases import FrontierArgs

from . import payload

MAGIC = b"spanwright-work/1"


@dataclass(frozen=True, slots=True)
class Work:
    """A validated request as core objects: what the worker solves."""

    #: a plan's Instance or StageProblem; a sizing's SizingArgs, StageSizingArgs,
    #: RentalArgs or FrontierArgs; None in a plain plan's stored form (its jobs are the
    #: columns, the rest is ``plain``)
    core: Any
    #: what to simulate (estimate spread, a confidence target), or None
    spread: SpreadRequest | None = None
    #: the result's ``clock`` block (``reading.clock.echo``), or None
    clock: dict[str, str | None] | None = None
    #: the grid the answer is written on (the request's ``resolution``)
    resolution: float = 1.0
    #: a stage graph's re-plan: the original plan's node per job, and the events
    planned_on: dict[str, str] | None = None
    events: Events | None = None
    #: a plan of plain jobs: its Instance without the jobs, and its limits and slots
    #: (``(limit names, capacities, slots)``) when it has any
    plain: Instance | None = None
    stages: tuple[tuple[str, ...], tuple[int, ...], tuple[int, ...]] | None = None


#: the classes the tree may name (nothing else is built from it)
TYPES: dict[str, type] = {
    c.__name__: c
    for c in (
        Work,
        Instance,
        Node,
        StageProblem,
        SpreadRequest,
        SizingArgs,
        StageSizingArgs,
        RentalArgs,
        Kind,
        FrontierArgs,
        Events,
        Running,
    )
}


def _tree(x: Any) -> Any:
    """``x`` as JSON values (see the module docstring)."""
    if x is None or isinstance(x, bool | int | str):
        return x
    if isinstance(x, float):
        return x if math.isfinite(x) else {"$f": repr(x)}
    if isinstance(x, tuple):
        return _tuple(x)
    if isinstance(x, list):
        return [_tree(v) for v in x]
    if isinstance(x, frozenset):
        return {"$s": sorted(x)}
    if isinstance(x, Mapping):
        return {"$d": {str(k): _tree(v) for k, v in x.items()}}
    if isinstance(x, np.ndarray):
        return {"$a": [x.dtype.str, list(x.shape), base64.b64encode(x.tobytes()).decode()]}
    if isinstance(x, Fraction):
        return {"$q": [x.numerator, x.denominator]}
    name = type(x).__name__
    if dataclasses.is_dataclass(x) and TYPES.get(name) is type(x):
        values = {f.name: _tree(getattr(x, f.name)) for f in dataclasses.fields(x) if f.init}
        return {"$c": name, "$v": values}
    raise TypeError(f"cannot store a {name} in the work form")


def _tuple(x: tuple[Any, ...]) -> Any:
    """A tuple, with the two long kinds a batch holds written as tables: nodes (``{"$n":
    count}`` for ``node_count`` identical ones, else one row a node) and per-job tags."""
    if x and all(type(v) is Node for v in x):
        if x == identical_nodes(len(x)):
            return {"$n": len(x)}
        rows = [[nd.id, _tree(nd.speed), sorted(nd.provides), _tree(nd.free_at)] for nd in x]
        return {"$n": rows}
    if x and all(type(v) is frozenset for v in x):
        distinct = list(dict.fromkeys(x))  # a batch has few tag sets: each written once
        where = {tags: k for k, tags in enumerate(distinct)}
        return {"$ts": [[sorted(v) for v in distinct], [where[v] for v in x]]}
    return {"$t": [_tree(v) for v in x]}


_NO_TAGS: frozenset[str] = frozenset()


def _value(t: Any) -> Any:
    """What :func:`_tree` wrote, built again (plain constructors: nothing is checked)."""
    if isinstance(t, list):
        return [_value(v) for v in t]
    if not isinstance(t, dict):
        return t
    if "$c" in t:
        cls = TYPES[t["$c"]]
        return cls(**{k: _value(x) for k, x in t["$v"].items()})
    ((tag, v),) = t.items()
    if tag == "$t":
        if all(type(x) is not dict and type(x) is not list for x in v):
            return tuple(v)  # plain values: nothing to build
        return tuple(_value(x) for x in v)
    if tag == "$n":
        if isinstance(v, int):
            return identical_nodes(v)
        return tuple(Node(i, _value(s), frozenset(p), _value(f)) for i, s, p, f in v)
    if tag == "$ts":
        distinct = [frozenset(x) if x else _NO_TAGS for x in v[0]]
        return tuple(map(distinct.__getitem__, v[1]))
    if tag == "$s":
        return frozenset(v)
    if tag == "$d":
        return {k: _value(x) for k, x in v.items()}
    if tag == "$a":
        data = np.frombuffer(base64.b64decode(v[2]), dtype=np.dtype(v[0]))
        return data.reshape(v[1]).copy()  # its own, writable memory
    if tag == "$q":
        return Fraction(v[0], v[1])
    if tag == "$f":
        return float(v)
    raise ValueError(f"not a spanwright-work/1 value: {tag!r}")


def _header(work: Work) -> bytes:
    return json.dumps(_tree(work), allow_nan=False, separators=(",", ":")).encode()


def encode(work: Work) -> bytearray:
    """The stored form of ``work`` (no jobs in columns)."""
    out = bytearray(MAGIC)
    out += b"\n"
    out += _header(work)
    out += b"\nnull\nnull\n"
    return out


def encode_plain(work: Work, cols: payload.Columns) -> bytearray:
    """The stored form of a plan of plain jobs: ``work`` holds the rest of the batch
    (``plain``, ``stages``), ``cols`` the jobs."""
    return payload.write(MAGIC, _header(work), cols)


def is_work(raw: bytes | bytearray) -> bool:
    """Whether ``raw`` is this layout."""
    return raw.startswith(MAGIC + b"\n")


def decode(raw: bytes | bytearray) -> Work:
    """Read what :func:`encode` or :func:`encode_plain` wrote: the objects as the edge's
    checks made them (a plain plan's Instance and stage graph put together again)."""
    header, cols = payload.read(MAGIC, raw)
    work = _value(json.loads(header))
    if not isinstance(work, Work):
        raise ValueError("not a spanwright-work/1 document")
    if work.plain is None or cols is None:
        return work
    groups = cols.groups  # as ``reading.read_columns`` keeps them: none if all are null
    inst = dataclasses.replace(
        work.plain,
        job_ids=tuple(cols.ids),
        durations=cols.durations,
        groups=tuple(groups) if groups is not None and any(g is not None for g in groups) else None,
    )
    core: Any = inst
    if work.stages is not None:
        names, caps, slots = work.stages
        n = inst.n
        empty = (np.zeros(n + 1, dtype=np.int64), np.zeros(0, dtype=np.int64))
        core = StageProblem.from_indices(inst, empty, empty, names, caps, slots)
    return dataclasses.replace(work, core=core, plain=None, stages=None)


def plain_work(
    problem: Instance | StageProblem,
    spread: SpreadRequest | None,
    clock: dict[str, str | None] | None,
) -> Work:
    """The stored form's objects for a plan of plain jobs, without the jobs (kept
    small: the edge holds it while the jobs stay in columns)."""
    inst = problem if isinstance(problem, Instance) else problem.instance
    shell = dataclasses.replace(
        inst, job_ids=(), durations=np.zeros(0, dtype=np.float64), groups=None
    )
    stages = None
    if isinstance(problem, StageProblem):
        stages = (
            problem.limit_names,
            tuple(int(c) for c in problem.capacities),
            tuple(int(s) for s in problem.slots),
        )
    return Work(None, spread, clock, inst.resolution, plain=shell, stages=stages)


def resolution_of(body: Any) -> float:
    """A request body's ``resolution`` (default 1 s), the grid its answer is written on
    (a stage graph's re-plan: its original request's)."""
    env = body.envelope if isinstance(body, payload.Columns) else body
    env = env.get("stage_replan", {}).get("request", env)
    value = env.get("resolution")
    return float(value) if isinstance(value, int | float) and value > 0 else 1.0
