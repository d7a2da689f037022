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

import numpy as np
import numpy.typing as npt

from .paths import Paths
from .problem import StageProblem

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

    def __init__(self, problem: StageProblem) -> None:
        self.problem = problem
        t = problem.timing
        cls, self.class_type, self.class_limits = job_classes(problem)
        self.cls = cls.tolist()
        group, self.gcol, self.type_groups = node_groups(problem)
        self.node_group = group.tolist()
        slots = problem.slots.tolist()
        self.slot_base = [0] * (problem.m + 1)
        for k in range(problem.m):
            self.slot_base[k + 1] = self.slot_base[k] + slots[k]
        self.slot_node = [k for k in range(problem.m) for _ in range(slots[k])]
        self.run_cols: list[list[int]] = [t.run[:, c].tolist() for c in range(len(t.speeds))]
        self.free = t.free.tolist()
        self.slot_free = t.slot_free.tolist()
        self.release = [(j, r) for j, r in enumerate(t.release.tolist()) if r > 0]
        self.held = list(zip(t.held_limit.tolist(), t.held_end.tolist(), strict=True))
        self.cap = problem.capacities.tolist()
        self.forward = (
            np.diff(problem.after_ptr).tolist(),
            problem.succ_ptr.tolist(),
            problem.succ_idx.tolist(),
        )
        self.backward = (
            np.diff(problem.succ_ptr).tolist(),
            problem.after_ptr.tolist(),
            problem.after_idx.tolist(),
        )

    def schedule(self, rank: I64, *, reverse: bool = False, free: I64 | None = None) -> Placement:
        """The list schedule for priority ``rank`` (rank 0 first).

        ``reverse`` plans the reversed graph (a job waits for the jobs that waited for
        it); ``free`` overrides the node start times ``F_k`` (both for the backward pass
        of the justification in :mod:`.search`). Jobs carried in (releases, slots kept,
        limit holds) count in forward plans only.
        """
        problem = self.problem
        n = problem.n
        indeg, sp, si = self.backward if reverse else self.forward
        waiting = list(indeg)
        cls_l = self.cls
        class_type, class_limits = self.class_type, self.class_limits
        gcol, type_groups = self.gcol, self.type_groups
        node_group, slot_node, slot_base = self.node_group, self.slot_node, self.slot_base
        run_cols = self.run_cols
        free_at = self.free if free is None else free.tolist()
        cap = self.cap
        usage = [0] * len(cap)
        has_limits = problem.has_limits
        release = [] if reverse else self.release
        held = [] if reverse else self.held
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
            events = [self.slot_free[s] * span + n + s for s in range(nslot)]
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
