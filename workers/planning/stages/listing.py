"""List scheduling of a stage graph: precedence, limits, slots, eligibility, busy nodes, speeds.

The scheduler advances through time from event to event (a job ends, a node becomes
free): Graham's list scheduling (1966) with the "parallel" rule that keeps every slot
busy while a job it may run waits. At each event time ``t``:

1. the jobs that ended at ``t`` free their slots and their limits, and the jobs that
   waited only for them become **ready**;
2. ready jobs are taken in priority order; each goes to the eligible slot, free at ``t``,
   on which it would finish first (a faster node), ties to the lowest node index, then
   the lowest slot; a job whose limits are full, or for which no eligible slot is free,
   waits for a later event while jobs behind it may start.

A graph with jobs carried in (a re-planned one, :mod:`.carried`) adds three kinds of
event: each slot becomes available at its own ``slot_free`` tick; a job with a release
becomes ready only once its release tick has come (one more thing it waits for); a limit
starts with the places its carried jobs hold, each given back at that job's end.

So a ready job starts on the slot that can start it first (a slot free now starts it at
``t``; any other only later). No deadlock is possible: whenever nothing runs, every limit
is empty and every slot is free (after the last ``F_k``), so the first ready job starts;
and the graph is acyclic, so some job is ready until all have run (with jobs carried in:
whenever nothing runs and a job is not ready or not placed, a release, a hold or a slot
is still to come, an event at which the argument is made again).

Cost: ready jobs are kept in one heap per *class* (same eligible nodes, same limits:
such jobs are blocked or not together), with a heap of the classes' best jobs; a
blocked class is set aside for the rest of the event. With few classes and few node
groups (nodes of one speed and one eligibility pattern) this is O((n + arcs) log n).

The same scheduler runs compiled (:mod:`.list_kernel`, numba) or in plain Python
(:meth:`Lister.schedule_pure`), with the same decisions job by job (tested equal);
compiled, a pass costs several to tens of times less (bench/RESULTS.md), which is what
lets the search of :mod:`.search` try tens of thousands of priorities a second.

Priority rules (``RULES``), each a total order with ties by batch order:

``list``               batch order;
``longest_first``      longest remaining path first: bottom level ``d_j + q_j`` on the
                       fastest eligible times (:mod:`.paths`), ties by longer ``d_j``;
``most_successors``    most jobs waiting directly for it, ties by bottom level;
``longest_duration``   longer ``d_j`` first;
``longest_tail``       longest tail ``q_j`` first (Jackson's rule for delivery times),
                       ties by longer ``d_j``.
"""

from __future__ import annotations

import heapq
from dataclasses import dataclass
from functools import cached_property

import numpy as np
import numpy.typing as npt

from ..kernels import HAVE_JIT
from .list_kernel import list_pass, use_kernel
from .paths import Paths, longest_paths
from .problem import StageProblem, csr
from .walk_kernel import walk

I64 = npt.NDArray[np.int64]

RULES = ("list", "longest_first", "most_successors", "longest_duration", "longest_tail")


def rank_of(order: npt.ArrayLike) -> I64:
    """Inverse permutation: ``rank[order[i]] = i`` (rank 0 goes first)."""
    o = np.asarray(order, dtype=np.int64)
    rank = np.empty(o.size, dtype=np.int64)
    rank[o] = np.arange(o.size, dtype=np.int64)
    return rank


def by_keys(*keys: npt.NDArray[np.int64] | npt.NDArray[np.float64]) -> I64:
    """Ranks for ascending ``keys`` (the first key decides first), ties by batch order."""
    n = keys[0].size
    order = np.lexsort((np.arange(n), *reversed(keys)))
    return rank_of(order)


def priority(paths: Paths, rule: str) -> I64:
    """The rank of every job under a rule of :data:`RULES`."""
    p = paths.problem
    if rule == "list":
        return np.arange(p.n, dtype=np.int64)
    if rule == "longest_first":
        return by_keys(-paths.bottom, -paths.d)
    if rule == "most_successors":
        return by_keys(-np.diff(p.succ_ptr), -paths.bottom)
    if rule == "longest_duration":
        return by_keys(-paths.d)
    if rule == "longest_tail":
        return by_keys(-paths.tail, -paths.d)
    raise ValueError(f"unknown priority rule {rule!r}")


@dataclass(frozen=True, eq=False)
class Placement:
    """What a list schedule decided: node, slot within the node, and start tick per job."""

    node: I64
    slot: I64
    start: I64


def job_classes(problem: StageProblem) -> tuple[I64, list[int], list[tuple[int, ...]]]:
    """Each job's class (same type, same limits), and each class's type and limits.

    Class ``t`` is type ``t`` with no limit; classes with limits follow."""
    t = problem.timing
    ntypes = int(t.eligible.shape[0])
    cls = t.job_type.astype(np.int64)
    class_type = list(range(ntypes))
    class_limits: list[tuple[int, ...]] = [() for _ in range(ntypes)]
    up, ui = problem.uses_ptr, problem.uses_idx
    users = np.flatnonzero(np.diff(up))
    keys: dict[tuple[int, tuple[int, ...]], int] = {}
    for j, ty, a, b in zip(
        users.tolist(), cls[users].tolist(), up[users].tolist(), up[users + 1].tolist(), strict=True
    ):
        key = (ty, tuple(sorted(ui[a:b].tolist())))
        c = keys.get(key)
        if c is None:
            c = keys[key] = len(class_type)
            class_type.append(ty)
            class_limits.append(key[1])
        cls[j] = c
    return cls, class_type, class_limits


def node_groups(problem: StageProblem) -> tuple[I64, list[int], list[list[int]]]:
    """Nodes grouped by (speed, which job types may run there): each node's group, each
    group's speed column, and per job type its eligible groups."""
    t = problem.timing
    keys: dict[tuple[int, bytes], int] = {}
    group = np.empty(problem.m, dtype=np.int64)
    for k in range(problem.m):
        key = (int(t.speed_col[k]), t.eligible[:, k].tobytes())
        group[k] = keys.setdefault(key, len(keys))
    gcol = [k[0] for k in keys]
    per_type: list[list[int]] = [[] for _ in range(t.eligible.shape[0])]
    for k in range(problem.m):
        for ty in np.flatnonzero(t.eligible[:, k]).tolist():
            g = int(group[k])
            if g not in per_type[ty]:
                per_type[ty].append(g)
    for gs in per_type:
        gs.sort(key=lambda g: gcol[g])  # fastest first
    return group, gcol, per_type


def list_schedule(
    problem: StageProblem, rank: I64, *, reverse: bool = False, free: I64 | None = None
) -> Placement:
    """The list schedule for priority ``rank`` (see the module docstring and
    :meth:`Lister.schedule`)."""
    return Lister(problem).schedule(rank, reverse=reverse, free=free)


class Lister:
    """A problem prepared for list scheduling (classes, node groups, plain lists), so
    that a search can run many priorities at little cost each."""

    def __init__(self, problem: StageProblem, *, compiled: bool | None = None) -> None:
        """``compiled``: whether :meth:`schedule` runs the compiled kernel (where numba
        is present); ``None`` (the default) leaves it to :func:`.list_kernel.use_kernel`:
        compiled once the kernel is loaded in this process (by a search, or a warm-up:
        :func:`warm_up`) or on many jobs, else the plain-Python twin, because loading
        the kernel in a fresh process starts numba's runtime (a few tenths of a
        second), more than the plain pass costs on fewer jobs."""
        self.problem = problem
        self.compiled = compiled
        self.cls, self.class_type, self.class_limits = job_classes(problem)
        self.node_group, self.gcol, self.type_groups = node_groups(problem)
        self.arrays = _KernelArrays.of(self, problem)

    def schedule(self, rank: I64, *, reverse: bool = False, free: I64 | None = None) -> Placement:
        """The list schedule for priority ``rank`` (rank 0 first).

        ``reverse`` plans the reversed graph (a job waits for the jobs that waited for
        it); ``free`` overrides the node start times ``F_k`` (both for the backward pass
        of the justification in :mod:`.search`). Jobs carried in (releases, slots kept,
        limit holds) count in forward plans only.

        Runs the compiled kernel of :mod:`.list_kernel` where numba is present, else
        :meth:`schedule_pure` (the same decisions; the tests compare the two).
        """
        use = use_kernel(self.problem.n) if self.compiled is None else self.compiled
        if not (HAVE_JIT and use):
            return self.schedule_pure(rank, reverse=reverse, free=free)
        rank = np.ascontiguousarray(rank, dtype=np.int64)
        order = np.argsort(rank, kind="stable").astype(np.int64)
        slot, start, done = list_pass(rank, order, *self.kernel_args(reverse=reverse, free=free))
        if done != self.problem.n:  # pragma: no cover - excluded by the module docstring
            raise RuntimeError(f"list scheduling placed {done} of {self.problem.n} jobs")
        return self.placement(slot, start)

    def walk(self, rank: I64, rounds: int, seed: int, width: int, tail: I64) -> tuple[I64, I64]:
        """The best priority met in ``rounds`` moves of :func:`.walk_kernel.walk` from
        ``rank``, and the one it ended on (forward plans; compiled where numba is
        present, else in plain Python)."""
        start = np.ascontiguousarray(rank, dtype=np.int64)
        best, _, last = walk(
            start,
            rounds,
            seed,
            width,
            tail,
            self.kernel_args(),
        )
        return best, last

    def placement(self, slot: I64, start: I64) -> Placement:
        """A :class:`Placement` from each job's global slot index and start."""
        a = self.arrays
        node = a.slot_node[slot]
        return Placement(node=node, slot=slot - a.slot_base[node], start=start)

    def kernel_args(self, *, reverse: bool = False, free: I64 | None = None) -> tuple[I64, ...]:
        """The arguments of :func:`.list_kernel.list_pass` after ``rank`` and ``order``
        (the same as :meth:`schedule`'s options); the first, how many jobs each waits
        for, is a fresh array."""
        a = self.arrays
        p = self.problem
        t = p.timing
        if reverse:
            waiting, sp, si = np.diff(p.succ_ptr), p.after_ptr, p.after_idx
        else:
            waiting, sp, si = np.diff(p.after_ptr), p.succ_ptr, p.succ_idx
        if free is not None:
            slot_time = np.asarray(free, dtype=np.int64)[a.slot_node]
        elif reverse:
            slot_time = t.free[a.slot_node]
        else:
            slot_time = t.slot_free
        none = a.none
        carried = (none,) * 4 if reverse else (a.rel_job, a.rel_time, a.held_lim, a.held_end)
        return (
            waiting.astype(np.int64),
            sp,
            si,
            a.cls,
            a.class_type,
            a.cl_ptr,
            a.cl_idx,
            a.tg_ptr,
            a.tg_idx,
            a.gcol,
            a.slot_group,
            a.gs_base,
            t.run,
            np.ascontiguousarray(slot_time, dtype=np.int64),
            *carried,
            a.cap,
        )

    @cached_property
    def plain(self) -> _Plain:
        """The tables as plain lists, for :meth:`schedule_pure` (built on first use)."""
        return _Plain.of(self)

    def schedule_pure(
        self, rank: I64, *, reverse: bool = False, free: I64 | None = None
    ) -> Placement:
        """:meth:`schedule` in plain Python (the twin of the compiled kernel)."""
        problem = self.problem
        n = problem.n
        pl = self.plain
        indeg, sp, si = pl.backward if reverse else pl.forward
        waiting = list(indeg)
        cls_l = pl.cls
        class_type, class_limits = self.class_type, self.class_limits
        gcol, type_groups = self.gcol, self.type_groups
        node_group, slot_node, slot_base = pl.node_group, pl.slot_node, pl.slot_base
        run_cols = pl.run_cols
        free_at = pl.free if free is None else free.tolist()
        cap = pl.cap
        usage = [0] * len(cap)
        has_limits = problem.has_limits
        release = [] if reverse else pl.release
        held = [] if reverse else pl.held
        for j, _ in release:
            waiting[j] += 1  # its release is one more thing it waits for
        rank_l = rank.tolist()
        order = np.argsort(rank, kind="stable").tolist()

        nclass = len(class_type)
        cheap: list[list[int]] = [[] for _ in range(nclass)]
        for j in range(n):
            if waiting[j] == 0:
                cheap[cls_l[j]].append(rank_l[j])
        # heap entries are single ints (fast to compare): a class head is
        # rank * nclass + class; an event is time * span + code, where a code below n is
        # the end of that job, n + s makes slot s available, n + S + j releases job j and
        # n + S + n + h ends hold h (S slots)
        heads: list[int] = []
        for c in range(nclass):
            if cheap[c]:
                heapq.heapify(cheap[c])
                heads.append(cheap[c][0] * nclass + c)
        heapq.heapify(heads)
        free_slots: list[list[int]] = [[] for _ in gcol]
        nslot = slot_base[-1]
        span = 2 * n + nslot + len(held)
        if free is None and not reverse:
            events = [pl.slot_free[s] * span + n + s for s in range(nslot)]
        else:
            events = [free_at[slot_node[s]] * span + n + s for s in range(nslot)]
        events += [r * span + n + nslot + j for j, r in release]
        for hold, (lim, until) in enumerate(held):
            usage[lim] += 1
            events.append(until * span + 2 * n + nslot + hold)
        heapq.heapify(events)
        free_count = 0
        blocked_at = [-1] * nclass

        node_of = [0] * n
        slot_of = [0] * n
        start = [0] * n
        done = 0
        heappush, heappop = heapq.heappush, heapq.heappop
        rounds = 0
        while events:
            now = events[0] // span
            limit = (now + 1) * span
            while events and events[0] < limit:
                code = heappop(events) - now * span
                woken: list[int] | tuple[int, ...] = ()
                if code < n:  # a job ends: its slot, its limits, the jobs waiting for it
                    s = slot_of[code]
                    done += 1
                    if has_limits:
                        for lim in class_limits[cls_l[code]]:
                            usage[lim] -= 1
                    woken = si[sp[code] : sp[code + 1]]
                elif code < n + nslot:  # a slot becomes available
                    s = code - n
                elif code < 2 * n + nslot:  # a job's release has come
                    s = -1
                    woken = (code - n - nslot,)
                else:  # a carried job gives back a limit's place
                    usage[held[code - 2 * n - nslot][0]] -= 1
                    continue
                for x in woken:
                    waiting[x] -= 1
                    if waiting[x] == 0:
                        c = cls_l[x]
                        h = cheap[c]
                        r = rank_l[x]
                        if not h or r < h[0]:
                            heappush(heads, r * nclass + c)
                        heappush(h, r)
                if s >= 0:
                    heappush(free_slots[node_group[slot_node[s]]], s)
                    free_count += 1
            rounds += 1
            blocked: list[int] = []
            while heads and free_count:
                r, c = divmod(heappop(heads), nclass)
                h = cheap[c]
                if not h or h[0] != r or blocked_at[c] == rounds:
                    continue  # a stale entry
                if has_limits:
                    full = False
                    for lim in class_limits[c]:
                        if usage[lim] >= cap[lim]:
                            full = True
                            break
                    if full:
                        blocked_at[c] = rounds
                        blocked.append(c)
                        continue
                j = order[r]
                groups = type_groups[class_type[c]]
                if len(groups) == 1:
                    fs = free_slots[groups[0]]
                    if not fs:
                        blocked_at[c] = rounds
                        blocked.append(c)
                        continue
                    d = run_cols[gcol[groups[0]]][j]
                else:
                    best_g, best_key = -1, (0, 0)
                    for g in groups:
                        fs = free_slots[g]
                        if fs:
                            key = (run_cols[gcol[g]][j], fs[0])
                            if best_g < 0 or key < best_key:
                                best_g, best_key = g, key
                    if best_g < 0:
                        blocked_at[c] = rounds
                        blocked.append(c)
                        continue
                    fs = free_slots[best_g]
                    d = best_key[0]
                s = heappop(fs)
                free_count -= 1
                node_of[j] = slot_node[s]
                slot_of[j] = s
                start[j] = now
                heappush(events, (now + d) * span + j)
                if has_limits:
                    for lim in class_limits[c]:
                        usage[lim] += 1
                heappop(h)
                if h:
                    heappush(heads, h[0] * nclass + c)
            for c in blocked:
                if cheap[c]:
                    heappush(heads, cheap[c][0] * nclass + c)
        if done != n:  # pragma: no cover - excluded by the argument in the module docstring
            raise RuntimeError(f"list scheduling placed {done} of {n} jobs")
        node_arr = np.asarray(node_of, dtype=np.int64)
        base = np.asarray(slot_base[:-1], dtype=np.int64)
        return Placement(
            node=node_arr,
            slot=np.asarray(slot_of, dtype=np.int64) - base[node_arr],
            start=np.asarray(start, dtype=np.int64),
        )


@dataclass(frozen=True, eq=False)
class _Plain:
    """A :class:`Lister`'s tables as plain Python lists (what the pure scheduler reads)."""

    cls: list[int]
    node_group: list[int]
    slot_base: list[int]
    slot_node: list[int]
    run_cols: list[list[int]]
    free: list[int]
    slot_free: list[int]
    release: list[tuple[int, int]]
    held: list[tuple[int, int]]
    cap: list[int]
    forward: tuple[list[int], list[int], list[int]]
    backward: tuple[list[int], list[int], list[int]]

    @classmethod
    def of(cls, lister: Lister) -> _Plain:
        p = lister.problem
        t = p.timing
        a = lister.arrays
        return cls(
            cls=lister.cls.tolist(),
            node_group=lister.node_group.tolist(),
            slot_base=a.slot_base.tolist(),
            slot_node=a.slot_node.tolist(),
            run_cols=[t.run[:, c].tolist() for c in range(len(t.speeds))],
            free=t.free.tolist(),
            slot_free=t.slot_free.tolist(),
            release=[(j, r) for j, r in enumerate(t.release.tolist()) if r > 0],
            held=list(zip(t.held_limit.tolist(), t.held_end.tolist(), strict=True)),
            cap=p.capacities.tolist(),
            forward=(np.diff(p.after_ptr).tolist(), p.succ_ptr.tolist(), p.succ_idx.tolist()),
            backward=(np.diff(p.succ_ptr).tolist(), p.after_ptr.tolist(), p.after_idx.tolist()),
        )


@dataclass(frozen=True, eq=False)
class _KernelArrays:
    """A :class:`Lister`'s tables as the flat int64 arrays :func:`.list_kernel.list_pass`
    reads."""

    cls: I64
    class_type: I64
    cl_ptr: I64
    cl_idx: I64
    tg_ptr: I64
    tg_idx: I64
    gcol: I64
    slot_node: I64
    slot_base: I64
    slot_group: I64
    gs_base: I64
    rel_job: I64
    rel_time: I64
    held_lim: I64
    held_end: I64
    cap: I64
    none: I64

    @classmethod
    def of(cls, lister: Lister, problem: StageProblem) -> _KernelArrays:
        def i64(x: object) -> I64:
            return np.ascontiguousarray(np.asarray(x, dtype=np.int64))

        cl_ptr, cl_idx = csr(lister.class_limits)
        tg_ptr, tg_idx = csr(lister.type_groups)
        slot_node = np.repeat(np.arange(problem.m, dtype=np.int64), problem.slots)
        slot_base = np.zeros(problem.m + 1, dtype=np.int64)
        np.cumsum(problem.slots, out=slot_base[1:])
        slot_group = lister.node_group[slot_node]
        gs_base = np.zeros(len(lister.gcol) + 1, dtype=np.int64)
        np.cumsum(np.bincount(slot_group, minlength=len(lister.gcol)), out=gs_base[1:])
        t = problem.timing
        rel = np.flatnonzero(t.release > 0)
        return cls(
            cls=i64(lister.cls),
            class_type=i64(lister.class_type),
            cl_ptr=cl_ptr,
            cl_idx=cl_idx,
            tg_ptr=tg_ptr,
            tg_idx=tg_idx,
            gcol=i64(lister.gcol),
            slot_node=slot_node,
            slot_base=slot_base,
            slot_group=i64(slot_group),
            gs_base=gs_base,
            rel_job=i64(rel),
            rel_time=i64(t.release[rel]),
            held_lim=i64(t.held_limit),
            held_end=i64(t.held_end),
            cap=i64(problem.capacities),
            none=np.zeros(0, dtype=np.int64),
        )


def warm_up() -> None:
    """Load (or compile, the first time) the kernels of the list scheduler and the
    local walk on a tiny graph, so that neither is charged to a timed solve."""
    from ..model import Instance

    inst = Instance.build([3.0, 2.0, 2.0, 1.0], 2, job_ids=["a", "b", "c", "d"])
    problem = StageProblem.build(
        inst, after=[[], ["a"], ["a"], ["b", "c"]], uses=[["x"], [], ["x"], []], limits={"x": 1}
    )
    lister = Lister(problem, compiled=True)
    rank = np.arange(problem.n, dtype=np.int64)
    lister.schedule(rank)
    lister.walk(rank, 4, 1, 2, np.zeros(problem.n, dtype=np.int64))
    longest_paths(problem, compiled=True)
