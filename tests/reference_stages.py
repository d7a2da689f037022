"""Outside references for stage graphs: an exact brute force, a plan checker and Graham's
list scheduler, written here from plain values with no spanwright code.

The problem they solve is the tick-rounded one the planning package promises to solve
(its ``stages/timing.py`` docstring): job j on node k runs ``ceil(p_j / (s_k res))``
ticks (only where node k provides every tag j requires), node k's ``slots`` slots are
free from ``ceil(free_at_k / res)``, starts at whole ticks, finish-to-start waits, and
at most ``cap_L`` jobs using limit L at once; the makespan is
``max(latest end, latest node start time)``.

The brute force rests on one fact, proven here: list the jobs of an optimal plan by
start time (waiting jobs after what they wait for) and place each, on its node in that
plan, at the earliest tick where it fits beside the jobs placed before it. By induction
each lands no later than in the optimal plan: at any instant of its optimal run the jobs
placed earlier that run then also ran then in the optimal plan (each started no later
than it and ends no earlier), so it fits there. So some order of jobs and choice of
nodes, each job placed as early as it fits, gives an optimal plan; the search below
tries them all (depth first, pruning branches that cannot beat the best).

Jobs running at time 0 (a re-planned graph) enter as fixed intervals placed before every
job (``busy``: one slot of a node kept until a tick; ``held``: one place of a limit until
a tick) and per-job releases (``release``: no start before that tick). The argument is
unchanged: the fixed intervals are the same in every plan, so they are among "the jobs
placed before" at every step, and a job's earliest fit respects its release as it
respects its node's start time.
"""

from __future__ import annotations

import functools
import math
from collections.abc import Sequence
from dataclasses import dataclass, field
from fractions import Fraction


@dataclass
class Tiny:
    """A small stage graph in plain values (indices for waits, limits and nodes)."""

    p: list[float]
    speeds: list[float]
    after: list[list[int]]
    free_at: list[float] = field(default_factory=list)
    slots: list[int] = field(default_factory=list)
    requires: list[set[str]] = field(default_factory=list)
    provides: list[set[str]] = field(default_factory=list)
    uses: list[list[int]] = field(default_factory=list)
    caps: list[int] = field(default_factory=list)
    resolution: float = 1.0
    #: per job, seconds before which it may not start (empty: none)
    release: list[float] = field(default_factory=list)
    #: (node, until seconds): a job running at 0 keeps one slot of that node until then
    busy: list[tuple[int, float]] = field(default_factory=list)
    #: (limit, until seconds): a job running at 0 holds one place of that limit until then
    held: list[tuple[int, float]] = field(default_factory=list)
    #: the number of jobs and of nodes (of ``p`` and ``speeds``), set at construction
    n: int = field(init=False, repr=False, compare=False)
    m: int = field(init=False, repr=False, compare=False)

    def __post_init__(self) -> None:
        n, m = self.n, self.m = len(self.p), len(self.speeds)
        self.free_at = self.free_at or [0.0] * m
        self.slots = self.slots or [1] * m
        self.requires = self.requires or [set() for _ in range(n)]
        self.provides = self.provides or [set() for _ in range(m)]
        self.uses = self.uses or [[] for _ in range(n)]
        self.release = self.release or [0.0] * n

    def ticks(self, j: int, k: int) -> int | None:
        """Running time of job j on node k in ticks, or None where it may not run."""
        if not self.requires[j] <= self.provides[k]:
            return None
        q = Fraction(self.p[j]) / (Fraction(self.speeds[k]) * Fraction(self.resolution))
        return math.ceil(q)

    def free(self, k: int) -> int:
        return math.ceil(Fraction(self.free_at[k]) / Fraction(self.resolution))

    def tick(self, seconds: float) -> int:
        """A time in seconds as whole ticks, rounded up."""
        return math.ceil(Fraction(seconds) / Fraction(self.resolution))

    def busy_on(self, k: int) -> list[tuple[int, int]]:
        """The fixed intervals [0, until) of the jobs running at 0 on node k."""
        return [(0, self.tick(e)) for node, e in self.busy if node == k]

    def held_on(self, lim: int) -> list[tuple[int, int]]:
        """The fixed intervals [0, until) of the places of limit ``lim`` held at 0."""
        return [(0, self.tick(e)) for x, e in self.held if x == lim]


def _fits(t: int, d: int, placed: Sequence[tuple[int, int]], room: int) -> bool:
    """Whether [t, t + d) keeps fewer than ``room`` of the ``placed`` intervals open at
    every instant (so one more fits)."""
    if d == 0:
        return True
    points = [t] + [a for a, _ in placed if t < a < t + d]
    return all(sum(1 for a, b in placed if a <= x < b) < room for x in points)


def brute_force_optimum(g: Tiny) -> int:
    """The optimum makespan in ticks (module docstring); for up to about 7 jobs."""
    n, m = g.n, g.m
    d = [[g.ticks(j, k) for k in range(m)] for j in range(n)]
    free = [g.free(k) for k in range(m)]
    rel = [g.tick(x) for x in g.release]
    floor = max(free + [g.tick(e) for _, e in g.busy])
    fastest = [min(x for x in row if x is not None) for row in d]
    succ: list[list[int]] = [[] for _ in range(n)]
    for j in range(n):
        for i in g.after[j]:
            succ[i].append(j)
    tail = [0] * n

    def longest_tail(j: int) -> int:
        return max((fastest[s] + longest_tail(s) for s in succ[j]), default=0)

    tail = [longest_tail(j) for j in range(n)]
    kind = [
        (g.speeds[k], free[k], g.slots[k], frozenset(g.provides[k]), tuple(sorted(g.busy_on(k))))
        for k in range(m)
    ]
    start: list[int | None] = [None] * n
    end = [0] * n
    node_of = [0] * n
    late = max([floor, *rel] + [g.tick(e) for _, e in g.held])
    best = [sum(max(x for x in row if x is not None) for row in d) + late]

    def dfs(done: int, span: int) -> None:
        if done == n:
            best[0] = min(best[0], span)
            return
        for j in range(n):
            if start[j] is not None or any(start[i] is None for i in g.after[j]):
                continue
            ready = max((end[i] for i in g.after[j]), default=0)
            for k in range(m):
                dj = d[j][k]
                if dj is None:
                    continue
                if any(  # an identical node before k, still empty: symmetric
                    kind[h] == kind[k]
                    and all(start[x] is None or node_of[x] != h for x in range(n))
                    and all(start[x] is None or node_of[x] != k for x in range(n))
                    for h in range(k)
                ):
                    continue
                t0 = max(ready, free[k], rel[j])
                on_node = g.busy_on(k) + [
                    (start[x], end[x]) for x in range(n) if start[x] is not None and node_of[x] == k
                ]
                lim = [
                    g.held_on(L)
                    + [
                        (start[x], end[x])
                        for x in range(n)
                        if start[x] is not None and L in g.uses[x]
                    ]
                    for L in g.uses[j]
                ]
                cands = sorted(
                    {t0}
                    | {b for _, b in on_node if b > t0}
                    | {b for r in lim for _, b in r if b > t0}
                )
                for t in cands:
                    if _fits(t, dj, on_node, g.slots[k]) and all(
                        _fits(t, dj, r, g.caps[L]) for r, L in zip(lim, g.uses[j], strict=True)
                    ):
                        break
                else:  # pragma: no cover - the last end always fits
                    raise AssertionError("no start found")
                if max(span, t + dj + tail[j]) >= best[0]:
                    continue
                start[j], end[j], node_of[j] = t, t + dj, k
                dfs(done + 1, max(span, t + dj))
                start[j] = None

    dfs(0, floor)
    return best[0]


def check_rows(g: Tiny, rows: Sequence[tuple[int, int, int, int]]) -> list[str]:
    """Everything wrong with a plan given as (node, slot, start, end) ticks per job."""
    bad: list[str] = []
    if len(rows) != g.n:
        return ["not one row per job"]
    for j, (k, s, a, b) in enumerate(rows):
        dj = g.ticks(j, k)
        if dj is None:
            bad.append(f"job {j} may not run on node {k}")
        elif b - a != dj:
            bad.append(f"job {j} runs {b - a} ticks, not {dj}")
        if not 0 <= s < g.slots[k]:
            bad.append(f"job {j} on slot {s} of node {k}")
        if a < g.free(k):
            bad.append(f"job {j} starts before node {k} is free")
        if a < g.tick(g.release[j]):
            bad.append(f"job {j} starts before its release")
        if b > a:
            beside = [(r[2], r[3]) for r in rows if r[0] == k] + g.busy_on(k)
            if sum(1 for x, y in beside if x <= a < y) > g.slots[k]:
                bad.append(f"node {k} runs more jobs than slots at {a}")
        for i in g.after[j]:
            if a < rows[i][3]:
                bad.append(f"job {j} starts before job {i} ends")
    for i in range(g.n):
        for j in range(i + 1, g.n):
            (ki, si, ai, bi), (kj, sj, aj, bj) = rows[i], rows[j]
            if (ki, si) == (kj, sj) and ai < bj and aj < bi:
                bad.append(f"jobs {i} and {j} overlap on a slot")
    for L, cap in enumerate(g.caps):
        users = [rows[j] for j in range(g.n) if L in g.uses[j]]
        users += [(-1, -1, a, b) for a, b in g.held_on(L)]
        for _, _, a, b in users:
            if a < b and sum(1 for _, _, x, y in users if x <= a < y) > cap:
                bad.append(f"limit {L} above capacity at {a}")
    return bad


def makespan(g: Tiny, rows: Sequence[tuple[int, int, int, int]]) -> int:
    """Latest end, node start time or end of a job running at 0, in ticks."""
    return max(
        [r[3] for r in rows] + [g.free(k) for k in range(g.m)] + [g.tick(e) for _, e in g.busy]
    )


def graham_list_schedule(
    p: Sequence[int], after: Sequence[Sequence[int]], m: int, order: Sequence[int]
) -> int:
    """Graham's list scheduling on m identical processors (1966, 1969): whenever a
    processor is idle it takes the first job of the list whose predecessors have all
    finished. Integer times; returns the makespan."""
    n = len(p)
    end: list[int | None] = [None] * n
    busy_until = [0] * m
    t = 0
    left = list(order)
    while left:
        for k in range(m):
            if busy_until[k] > t:
                continue
            for j in left:
                if all(end[i] is not None and end[i] <= t for i in after[j]):  # type: ignore[operator]
                    end[j] = t + p[j]
                    busy_until[k] = t + p[j]
                    left.remove(j)
                    break
        later = [b for b in busy_until if b > t] + [e for e in end if e is not None and e > t]
        if not later:
            break
        t = min(later)
    return max(e for e in end if e is not None)


def identical_optimum(p: Sequence[int], after: Sequence[Sequence[int]], m: int) -> int:
    """The optimum makespan on m identical single-slot processors, all free at 0, integer
    times, by exhaustive search over decision times (for about 10 jobs).

    Some optimal plan starts every job at 0 or when another job ends (shift each job left
    as far as it goes: it then touches the end of what it waits for or of the job before
    it on its processor). So at each such time it tries every set of ready jobs to start
    on the idle processors (any of them, or none while something runs), remembering the
    best finish of each state (jobs done, jobs running with their time left).
    """

    n = len(p)
    preds = [frozenset(a) for a in after]

    @functools.cache
    def best(done: frozenset[int], running: tuple[tuple[int, int], ...]) -> int:
        if len(done) == n:
            return 0
        busy = {j for j, _ in running}
        ready = [j for j in range(n) if j not in done and j not in busy and preds[j] <= done]
        idle = m - len(running)
        out = None
        from itertools import combinations

        for size in range(min(idle, len(ready)), -1, -1):
            for chosen in combinations(ready, size):
                now = running + tuple((j, p[j]) for j in chosen)
                if not now:
                    continue
                step = min(left for _, left in now)
                ended = frozenset(j for j, left in now if left == step)
                rest = tuple(sorted((j, left - step) for j, left in now if left > step))
                value = step + best(done | ended, rest)
                out = value if out is None else min(out, value)
        assert out is not None
        return out

    return best(frozenset(), ())
