"""The instance model: jobs with estimated durations, nodes, and their validation.

An :class:`Instance` is columnar (ids in a list, durations in a numpy array) so that a
batch of a million jobs costs a few tens of bytes per job rather than a Python object
each. All times are seconds; a job's ``duration`` is its run time on a node of speed 1.
"""

from __future__ import annotations

import dataclasses
import math
import re
from collections.abc import Iterable, Sequence
from dataclasses import dataclass, field
from fractions import Fraction
from functools import cached_property, lru_cache

import numpy as np
import numpy.typing as npt

from .errors import InvalidInstance, Issue, Path
from .rational import MAX_TICKS, array_sum, decimal_up, floor_ticks

#: longest id we accept for a job or node (characters)
MAX_ID_LENGTH = 200

FloatArray = npt.NDArray[np.float64]

#: the cached views of an Instance that depend on its jobs alone (Instance.with_nodes)
JOB_CACHES = ("total", "order_longest_first", "sorted_desc", "total_exact")
#: ... and those it passes on only once they have been computed
LAZY_JOB_CACHES = ("sorted_desc_ticks",)

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

    Build one with :meth:`Instance.build` (from Python values); the service reads request
    bodies into one at its edge (``service/reading``). Both validate.
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
            raise InvalidInstance("durations must be a flat list", [Issue(("jobs",), "not a list")])
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

    @cached_property
    def total_exact(self) -> Fraction:
        """Total work in seconds, exactly (no rounding)."""
        return array_sum(self.durations)

    @cached_property
    def sorted_desc_ticks(self) -> npt.NDArray[np.int64] | None:
        """:attr:`sorted_desc` in whole ticks of ``resolution``, rounded down exactly; None
        when the total work is past ``rational.MAX_TICKS`` ticks (a tick count there, or
        a sum of them, need not be exact)."""
        if self.total_exact > MAX_TICKS * Fraction(self.resolution):
            return None
        return floor_ticks(self.sorted_desc, self.resolution)

    def with_nodes(self, nodes: Sequence[Node]) -> Instance:
        """The same jobs on ``nodes``, keeping what was derived from the jobs alone (the
        longest-first order, the sorted durations, the exact total): a sizing asks the
        same batch on many node counts."""
        out = dataclasses.replace(self, nodes=tuple(nodes))
        for key in JOB_CACHES:
            out.__dict__[key] = getattr(self, key)  # computed once, on self
        for key in LAZY_JOB_CACHES:
            if key in self.__dict__:
                out.__dict__[key] = self.__dict__[key]
        return out

    # -- validation -------------------------------------------------------------------
    def validate(self) -> None:
        """Raise :class:`InvalidInstance` listing every problem found."""
        issues: list[Issue] = []
        d = self.durations
        if d.size == 0:
            issues.append(Issue(("jobs",), "the batch has no jobs"))
        if len(self.job_ids) != d.size:
            issues.append(Issue(("jobs",), "job ids and durations differ in number"))
        bad = np.flatnonzero(~np.isfinite(d) | (d < 0))
        for i in bad[:20]:
            issues.append(
                Issue(("jobs", i, "duration"), f"must be a finite number >= 0, got {d[i]!r}")
            )
        if self.m < 1:
            issues.append(Issue(("node_count",), "at least one node is needed"))
        issues.extend(duplicates(self.job_ids, ("jobs",), "job"))
        issues.extend(duplicates([nd.id for nd in self.nodes], ("nodes",), "node"))
        for k, nd in enumerate(self.nodes):
            if not (math.isfinite(nd.speed) and nd.speed > 0):
                issues.append(Issue(("nodes", k, "speed"), "must be a finite number > 0"))
            if not (math.isfinite(nd.free_at) and nd.free_at >= 0):
                issues.append(Issue(("nodes", k, "free_at"), "must be a finite number >= 0"))
        if self.deadline is not None and not (math.isfinite(self.deadline) and self.deadline > 0):
            issues.append(Issue(("deadline",), "must be a finite number > 0"))
        if not (math.isfinite(self.resolution) and self.resolution > 0):
            issues.append(Issue(("resolution",), "must be a finite number > 0"))
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
            ("resolution",),
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


#: from this many ids on, :func:`duplicates` first compares hashes in an int64 array
#: (8 bytes an id) instead of building a set (about 40 bytes an id)
HASHED_FROM = 20_000


def duplicates(ids: Sequence[str], where: Path, what: str) -> list[Issue]:
    """An issue per repeated id (at most 20), each naming where the id came first."""
    if len(ids) >= HASHED_FROM:
        h = np.fromiter(map(hash, ids), dtype=np.int64, count=len(ids))
        h.sort()
        if not (h[1:] == h[:-1]).any():
            return []  # no two hashes equal: no two ids equal
    elif len(set(ids)) == len(ids):
        return []  # the common case, at C speed
    seen: dict[str, int] = {}
    out: list[Issue] = []
    for i, x in enumerate(ids):
        if x in seen:
            out.append(Issue((*where, i, "id"), f"duplicate {what} id {x!r} (first at {seen[x]})"))
            if len(out) >= 20:
                break
        else:
            seen[x] = i
    return out
