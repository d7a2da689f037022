"""A stage graph: a batch whose jobs wait for other jobs, share limits, and run in node slots.

:class:`StageProblem` wraps a validated :class:`~workers.planning.model.Instance` (jobs
with durations and ``requires`` tags, nodes with speed, ``free_at`` and ``provides``) and
adds four things:

``after``   for each job, the jobs it waits for (finish-to-start arcs), stored as CSR
            integer arrays: the predecessors of job ``j`` are
            ``after_idx[after_ptr[j]:after_ptr[j + 1]]``;
``uses``    for each job, the limits it uses (CSR the same way);
``limits``  each limit's name and capacity: at most that many jobs using it run at once;
``slots``   per node, how many jobs it runs at once (each at the node's speed).

Build one with :meth:`StageProblem.build` from plain Python values (ids and names); it
refuses, with :class:`~workers.planning.errors.InvalidInstance`, an unknown id in
``after``, a job waiting for itself, a cycle (naming the jobs of one cycle, in order), a
limit used but not given, a capacity below 1 and a slot count below 1.

A re-planned graph also carries the jobs still running at its time 0 (:mod:`.carried`:
the slots, limits and waits they hold until they end); a fresh one carries none.

Every time of a plan is counted in whole ticks of ``instance.resolution``
(:mod:`.timing`); :attr:`StageProblem.timing` holds those tick tables.
"""

from __future__ import annotations

import copy
from collections.abc import Mapping, Sequence
from dataclasses import dataclass
from functools import cached_property
from itertools import chain
from typing import TypeGuard, TypeVar

import numpy as np
import numpy.typing as npt

from ..errors import InvalidInstance, Issue
from ..model import Instance
from .carried import Carried
from .timing import Timing, build_timing

I64 = npt.NDArray[np.int64]

#: at most this many issues are listed for one request
MAX_ISSUES = 50


def csr(rows: Sequence[Sequence[int]]) -> tuple[I64, I64]:
    """Rows of integers as CSR arrays ``(ptr, idx)``."""
    lengths = np.fromiter(map(len, rows), dtype=np.int64, count=len(rows))
    ptr = np.zeros(len(rows) + 1, dtype=np.int64)
    np.cumsum(lengths, out=ptr[1:])
    idx = np.fromiter((x for row in rows for x in row), dtype=np.int64, count=int(ptr[-1]))
    return ptr, idx


def transpose(ptr: I64, idx: I64, n: int) -> tuple[I64, I64]:
    """The CSR arrays of the reversed arcs (row ``i`` lists every ``j`` with ``i`` in
    row ``j``), each row in increasing order; O(n + arcs) with numpy."""
    rows = np.repeat(np.arange(n, dtype=np.int64), np.diff(ptr))
    order = np.argsort(idx, kind="stable")
    counts = np.bincount(idx, minlength=n).astype(np.int64)
    tptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(counts, out=tptr[1:])
    return tptr, rows[order]


#: Kahn's algorithm runs level by level in numpy while a level has at least this many
#: jobs, then one job at a time in plain Python
LEVEL_MIN = 64


def gather(ptr: I64, idx: I64, rows: I64) -> tuple[I64, I64]:
    """The CSR entries of ``rows``, concatenated, and how many each row has."""
    counts = ptr[rows + 1] - ptr[rows]
    total = int(counts.sum())
    offsets = np.repeat(ptr[rows] - np.cumsum(counts) + counts, counts)
    return idx[offsets + np.arange(total, dtype=np.int64)], counts


def sorted_unique(x: I64) -> I64:
    """``np.unique(x)`` for integers, by a sort (numpy's hash-based ``unique`` was the
    slowest step of reading a 200,000-arc graph: ``bench/stages_scale.py``)."""
    if x.size < 2:
        return np.array(x, dtype=np.int64)
    ordered = np.sort(x)
    keep = np.empty(ordered.size, dtype=bool)
    keep[0] = True
    np.not_equal(ordered[1:], ordered[:-1], out=keep[1:])
    out: I64 = ordered[keep]
    return out


def kahn_order(n: int, pred_ptr: I64, succ_ptr: I64, succ_idx: I64) -> tuple[I64, I64]:
    """Kahn's algorithm (1962): a topological order of the jobs, or a shorter one when
    the arcs hold a cycle (the jobs left out are exactly those on or after a cycle).

    Returns ``(order, levels)``: while the jobs whose waits are all met are many, they
    are taken a whole level at a time with numpy (``order[levels[i]:levels[i + 1]]`` is
    one level: no job in it waits for another in it); the rest one at a time in plain
    Python (``order[levels[-1]:]``). O(n + arcs) either way.
    """
    indeg = np.diff(pred_ptr)
    frontier = np.flatnonzero(indeg == 0)
    parts: list[I64] = []
    cuts = [0]
    while frontier.size >= LEVEL_MIN:
        parts.append(frontier)
        cuts.append(cuts[-1] + int(frontier.size))
        succ, _ = gather(succ_ptr, succ_idx, frontier)
        np.subtract.at(indeg, succ, 1)
        frontier = sorted_unique(succ[indeg[succ] == 0])
    rest = frontier.tolist()
    if rest:
        deg = indeg.tolist()
        sp = succ_ptr.tolist()
        si = succ_idx.tolist()
        head = 0
        while head < len(rest):
            j = rest[head]
            head += 1
            for x in si[sp[j] : sp[j + 1]]:
                deg[x] -= 1
                if deg[x] == 0:
                    rest.append(x)
    parts.append(np.asarray(rest, dtype=np.int64))
    return np.concatenate(parts), np.asarray(cuts, dtype=np.int64)


def one_cycle(n: int, pred_ptr: I64, pred_idx: I64, placed: I64) -> list[int]:
    """The jobs of one cycle, each waiting for the one before it (and the first for the
    last), among the jobs Kahn's algorithm could not place.

    Every job left unplaced waits for at least one other unplaced job (else its count of
    unplaced predecessors would have reached zero), so walking from any of them to an
    unplaced predecessor must revisit a job: the walk from that job on is a cycle.
    """
    left = np.ones(n, dtype=bool)
    left[placed] = False
    j = int(np.flatnonzero(left)[0])
    seen: dict[int, int] = {}
    walk: list[int] = []
    while j not in seen:
        seen[j] = len(walk)
        walk.append(j)
        preds = pred_idx[pred_ptr[j] : pred_ptr[j + 1]]
        j = int(preds[left[preds]][0])
    cycle = walk[seen[j] :]  # each waits for the next one in walk order
    cycle.reverse()  # now each waits for the one before it
    return cycle


@dataclass(frozen=True, eq=False)
class StageProblem:
    """A validated stage graph (see the module docstring); build with :meth:`build`."""

    instance: Instance
    after_ptr: I64
    after_idx: I64
    uses_ptr: I64
    uses_idx: I64
    limit_names: tuple[str, ...]
    capacities: I64
    slots: I64
    succ_ptr: I64  # CSR of the reversed arcs: the jobs that wait for each job
    succ_idx: I64
    order: I64  # a topological order (Kahn's), checked at build time
    levels: I64  # where its whole levels start (see kahn_order)
    carried: Carried | None = None  # jobs running at time 0 (a re-planned graph)

    # -- construction -----------------------------------------------------------------
    @classmethod
    def build(
        cls,
        instance: Instance,
        *,
        after: Sequence[Sequence[str] | None] | None = None,
        uses: Sequence[Sequence[str] | None] | None = None,
        limits: Mapping[str, int] | None = None,
        slots: Sequence[int] | Mapping[str, int] | None = None,
    ) -> StageProblem:
        """Validate plain values and build the problem.

        ``after[j]`` lists the ids of the jobs job ``j`` waits for and ``uses[j]`` the
        names of the limits it uses (both aligned with ``instance.job_ids``; ``None``
        for none); ``limits`` maps a limit's name to its capacity; ``slots`` gives each
        node's slot count, aligned with ``instance.nodes`` or by node id (default 1).
        Repeated ids or names within one job count once.
        """
        n = instance.n
        issues: list[Issue] = []
        names = tuple(limits) if limits else ()
        caps = _read_limits(limits or {}, issues)
        slot_arr = _read_slots(instance, slots, issues)
        jobs = {x: i for i, x in enumerate(instance.job_ids)}
        lims = {x: i for i, x in enumerate(names)}
        a_csr = _fast_csr(after, jobs, n, no_self=True)
        if a_csr is None:
            a_csr = csr(_read_after(instance, after, jobs, issues))
        u_csr = _fast_csr(uses, lims, n, no_self=False)
        if u_csr is None:
            u_csr = csr(_read_uses(n, uses, lims, issues))
        if issues:
            raise InvalidInstance(f"{len(issues)} problem(s) in the stage graph", issues)
        return cls.from_indices(instance, a_csr, u_csr, names, caps, slot_arr.tolist())

    @classmethod
    def from_indices(
        cls,
        instance: Instance,
        after: Sequence[Sequence[int]] | tuple[I64, I64],
        uses: Sequence[Sequence[int]] | tuple[I64, I64],
        limit_names: Sequence[str],
        capacities: Sequence[int],
        slots: Sequence[int],
        carried: Carried | None = None,
    ) -> StageProblem:
        """Build from job, limit and node indices (rows or CSR ``(ptr, idx)`` arrays),
        checking the graph for cycles and the ticks for range; the fast way in when the
        ids were already resolved (the other checks are :meth:`build`'s). ``carried``:
        the jobs running at time 0 of a re-planned graph (:mod:`.carried`)."""
        n = instance.n
        a_ptr, a_idx = after if isinstance(after, tuple) else csr(after)
        u_ptr, u_idx = uses if isinstance(uses, tuple) else csr(uses)
        if a_ptr.shape != (n + 1,) or u_ptr.shape != (n + 1,) or len(slots) != instance.m:
            raise ValueError("after, uses and slots must match the instance's jobs and nodes")
        if carried is not None and (
            carried.wait_ptr.shape != (n + 1,)
            or len(carried.node_free) != len(slots)
            or (np.bincount(carried.node, minlength=len(slots)) > np.asarray(slots)).any()
        ):
            raise ValueError("carried jobs must wait-match the jobs and fit in their nodes' slots")
        s_ptr, s_idx = transpose(a_ptr, a_idx, n)
        order, levels = kahn_order(n, a_ptr, s_ptr, s_idx)
        if order.size < n:
            cycle = one_cycle(n, a_ptr, a_idx, order)
            ids = [instance.job_ids[j] for j in cycle]
            text = " -> ".join([*ids, ids[0]])
            raise InvalidInstance(
                f"the jobs wait for each other in a cycle: {text} (each waits for the one "
                "before it)",
                [
                    Issue(
                        ("jobs", j, "after"),
                        f"job {instance.job_ids[j]!r} is on a cycle: {text}",
                    )
                    for j in cycle[:MAX_ISSUES]
                ],
            )
        problem = cls(
            instance=instance,
            after_ptr=a_ptr,
            after_idx=a_idx,
            uses_ptr=u_ptr,
            uses_idx=u_idx,
            limit_names=tuple(limit_names),
            capacities=np.asarray(capacities, dtype=np.int64).reshape(len(limit_names)),
            slots=np.asarray(slots, dtype=np.int64),
            succ_ptr=s_ptr,
            succ_idx=s_idx,
            order=order,
            levels=levels,
            carried=carried,
        )
        _ = problem.timing  # refuses ticks beyond rational.MAX_TICKS here, at build time
        return problem

    # -- derived views ----------------------------------------------------------------
    @property
    def n(self) -> int:
        """Number of jobs."""
        return self.instance.n

    @property
    def m(self) -> int:
        """Number of nodes."""
        return self.instance.m

    @property
    def arcs(self) -> int:
        """Number of finish-to-start arcs."""
        return int(self.after_idx.size)

    def successors_of(self, j: int) -> I64:
        """The jobs that wait for job ``j``."""
        return self.succ_idx[self.succ_ptr[j] : self.succ_ptr[j + 1]]

    @cached_property
    def timing(self) -> Timing:
        """Running times and node start times in whole ticks (see :mod:`.timing`)."""
        return build_timing(self.instance, slots=self.slots, carried=self.carried)

    @cached_property
    def rounded(self) -> bool:
        """Whether whole ticks changed any stated time (a running time, a ``free_at`` or a
        carried job's end that is not a whole number of ticks)."""
        low = build_timing(self.instance, down=True, slots=self.slots, carried=self.carried)
        high = self.timing
        return not all(
            np.array_equal(getattr(low, key), getattr(high, key))
            for key in ("run", "free", "slot_free", "release", "held_end")
        )

    def relaxed(self) -> StageProblem:
        """This graph with every time rounded *down* to whole ticks: its optimum is at
        most the stated problem's, so its bounds hold for the durations as given."""
        if not self.rounded:
            return self
        out = copy.copy(self)
        out.__dict__["timing"] = build_timing(
            self.instance, down=True, slots=self.slots, carried=self.carried
        )
        out.__dict__["rounded"] = False
        return out

    def predecessors_of(self, j: int) -> I64:
        """The jobs job ``j`` waits for."""
        return self.after_idx[self.after_ptr[j] : self.after_ptr[j + 1]]

    def limits_of(self, j: int) -> I64:
        """The limits job ``j`` uses."""
        return self.uses_idx[self.uses_ptr[j] : self.uses_ptr[j + 1]]

    @property
    def has_limits(self) -> bool:
        """Whether any job uses a limit."""
        return bool(self.uses_idx.size)

    @property
    def single_slot(self) -> bool:
        """Whether every node runs one job at a time."""
        return bool((self.slots == 1).all())

    @property
    def plain_nodes(self) -> bool:
        """Identical single-slot nodes: one speed, all free at 0, no tags, one slot each
        (and no job carried in)."""
        t = self.timing
        return (
            self.carried is None
            and bool((self.slots == 1).all())
            and bool((t.free == 0).all())
            and len(t.speeds) == 1
            and t.all_eligible
        )


# -- readers of plain values ------------------------------------------------------------
def _fast_csr(
    rows: Sequence[Sequence[str] | None] | None, index: Mapping[str, int], n: int, no_self: bool
) -> tuple[I64, I64] | None:
    """CSR arrays of rows of known names, vectorised; ``None`` when anything is off (a
    row that is not a list, an unknown name, a job waiting for itself, a repeat) so that
    the per-row reader names every problem."""
    if rows is None:
        return np.zeros(n + 1, dtype=np.int64), np.zeros(0, dtype=np.int64)
    if len(rows) != n or not set(map(type, rows)) <= {list, tuple, type(None)}:
        return None
    clean = [r if r else () for r in rows]
    lengths = np.fromiter(map(len, clean), dtype=np.int64, count=n)
    total = int(lengths.sum())
    try:
        idx = np.fromiter(
            map(index.__getitem__, chain.from_iterable(clean)), dtype=np.int64, count=total
        )
    except (KeyError, TypeError):
        return None
    ptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(lengths, out=ptr[1:])
    owner = np.repeat(np.arange(n, dtype=np.int64), lengths)
    if no_self and (owner == idx).any():
        return None
    width = max(len(index), 1)
    key = owner * width + idx
    if key.size > 1 and (key[1:] <= key[:-1]).any():  # not sorted: look for repeats
        key = sorted_unique(key)
        if key.size < idx.size:  # a name repeated within a row counts once
            idx = key % width
            np.cumsum(np.bincount(key // width, minlength=n), out=ptr[1:])
    return ptr, idx


_Row = TypeVar("_Row")


def _one_row_per_job(
    rows: Sequence[_Row] | None, key: str, n: int, issues: list[Issue]
) -> TypeGuard[Sequence[_Row]]:
    """Whether ``rows`` (the request's ``key``) is given with one row per job; a count
    that is not is an issue."""
    if rows is None:
        return False
    if len(rows) != n:
        issues.append(Issue(("jobs",), f"'{key}' has {len(rows)} rows for {n} jobs"))
        return False
    return True


def _read_after(
    inst: Instance,
    after: Sequence[Sequence[str] | None] | None,
    index: Mapping[str, int],
    issues: list[Issue],
) -> list[list[int]]:
    n = inst.n
    if not _one_row_per_job(after, "after", n, issues):
        return [[] for _ in range(n)]
    rows: list[list[int]] = []
    for j, ids in enumerate(after):
        if not ids:
            rows.append([])
            continue
        if isinstance(ids, str):
            issues.append(Issue(("jobs", j, "after"), "must be a list of job ids"))
            rows.append([])
            continue
        got = [index.get(x, -1) if isinstance(x, str) else -1 for x in ids]
        if min(got) < 0 or j in got:
            for k, (x, i) in enumerate(zip(ids, got, strict=True)):
                if i < 0:
                    issues.append(Issue(("jobs", j, "after", k), f"unknown job id {x!r}"))
                elif i == j:
                    issues.append(Issue(("jobs", j, "after", k), f"job {x!r} waits for itself"))
            got = [i for i in got if i >= 0 and i != j]
        rows.append(list(dict.fromkeys(got)) if len(set(got)) < len(got) else got)
        if len(issues) >= MAX_ISSUES:
            break
    rows.extend([] for _ in range(n - len(rows)))
    return rows


def _read_limits(limits: Mapping[str, int], issues: list[Issue]) -> list[int]:
    caps: list[int] = []
    for name, cap in limits.items():
        ok = isinstance(cap, int | np.integer) and not isinstance(cap, bool) and cap >= 1
        if not ok:
            issues.append(
                Issue(("limits", name), f"capacity must be a whole number >= 1, got {cap!r}")
            )
        caps.append(int(cap) if ok else 1)
    return caps


def _read_uses(
    n: int,
    uses: Sequence[Sequence[str] | None] | None,
    index: Mapping[str, int],
    issues: list[Issue],
) -> list[list[int]]:
    if not _one_row_per_job(uses, "uses", n, issues):
        return [[] for _ in range(n)]
    rows: list[list[int]] = []
    for j, names in enumerate(uses):
        row: list[int] = []
        for k, x in enumerate(names or ()):
            i = index.get(x, -1) if isinstance(x, str) else -1
            if i < 0:
                issues.append(Issue(("jobs", j, "uses", k), f"limit {x!r} is used but not given"))
            elif i not in row:
                row.append(i)
        rows.append(row)
    return rows


def _read_slots(
    inst: Instance, slots: Sequence[int] | Mapping[str, int] | None, issues: list[Issue]
) -> I64:
    m = inst.m
    if slots is None:
        return np.ones(m, dtype=np.int64)
    if isinstance(slots, Mapping):
        known = {nd.id for nd in inst.nodes}
        issues.extend(
            Issue(("slots", k), f"slots given for unknown node {k!r}")
            for k in slots
            if k not in known
        )
        values: list[object] = [slots.get(nd.id, 1) for nd in inst.nodes]
    else:
        values = list(slots)
        if len(values) != m:
            issues.append(Issue(("nodes",), f"'slots' has {len(values)} values for {m} nodes"))
            return np.ones(m, dtype=np.int64)
    out = np.ones(m, dtype=np.int64)
    for k, v in enumerate(values):
        if isinstance(v, int | np.integer) and not isinstance(v, bool) and v >= 1:
            out[k] = int(v)
        else:
            issues.append(Issue(("nodes", k, "slots"), f"must be a whole number >= 1, got {v!r}"))
    return out
