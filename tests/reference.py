"""Outside references the tests compare against: brute force, scipy's MILP (HiGHS), and
exact references in rational arithmetic (optimum, fewest nodes, plan check).

None uses any spanwright code, so an agreement is evidence, not an echo.
"""

from __future__ import annotations

import itertools
import math
from collections.abc import Iterable, Mapping, Sequence
from fractions import Fraction
from typing import Any

import numpy as np


def brute_force_makespan(p: list[float], m: int) -> float:
    """Optimum makespan by exhaustive search over assignments (n <= ~11).

    Jobs go longest first; a job may only open the first empty node (the nodes are
    identical, so the others are symmetric), and branches at or above the best are cut.
    """
    jobs = sorted(p, reverse=True)
    best = [sum(jobs)]
    loads = [0.0] * m

    def place(i: int) -> None:
        if i == len(jobs):
            best[0] = min(best[0], max(loads))
            return
        seen_empty = False
        for k in range(m):
            if loads[k] == 0.0:
                if seen_empty:
                    continue
                seen_empty = True
            if loads[k] + jobs[i] >= best[0] and i > 0:
                continue
            loads[k] += jobs[i]
            place(i + 1)
            loads[k] -= jobs[i]

    place(0)
    return best[0]


def milp_makespan(p: list[float], m: int, time_limit: float = 20.0) -> float:
    """Optimum makespan from the assignment MILP solved by scipy.optimize.milp (HiGHS).

    Variables x[j, k] (job j on node k) and C; minimise C subject to each job on one node
    and every node's load <= C; node loads are ordered to break symmetry. Raises if HiGHS
    does not prove optimality within ``time_limit``.
    """
    from scipy.optimize import Bounds, LinearConstraint, milp
    from scipy.sparse import lil_matrix

    n = len(p)
    nv = n * m + 1
    c = np.zeros(nv)
    c[-1] = 1.0
    rows = n + m + (m - 1)
    a = lil_matrix((rows, nv))
    lo = np.zeros(rows)
    hi = np.zeros(rows)
    for j in range(n):
        for k in range(m):
            a[j, j * m + k] = 1.0
        lo[j] = hi[j] = 1.0
    for k in range(m):
        r = n + k
        for j in range(n):
            a[r, j * m + k] = p[j]
        a[r, -1] = -1.0
        lo[r], hi[r] = -np.inf, 0.0
    for k in range(m - 1):  # load(k) >= load(k+1)
        r = n + m + k
        for j in range(n):
            a[r, j * m + k] = p[j]
            a[r, j * m + k + 1] = -p[j]
        lo[r], hi[r] = 0.0, np.inf
    integrality = np.ones(nv)
    integrality[-1] = 0
    ub = np.ones(nv)
    ub[-1] = np.inf
    res = milp(
        c,
        constraints=LinearConstraint(a.tocsr(), lo, hi),
        integrality=integrality,
        bounds=Bounds(np.zeros(nv), ub),
        options={"time_limit": time_limit, "mip_rel_gap": 0.0},
    )
    if res.status != 0:
        raise RuntimeError(f"HiGHS did not prove optimality: {res.message}")
    return float(res.fun)


# -- exact references in rational arithmetic ---------------------------------------------
#
# Every duration, speed, free_at and deadline we are given is an IEEE double, and every
# double is an exact rational number. The functions below decide questions about those
# rationals exactly (``fractions.Fraction``, no round-off at all), so a certificate that is
# off by one unit in the last place is caught. They share no code with spanwright.

#: a node of the exact references: (speed, free_at, provides)
ExactNode = tuple[float, float, frozenset[str]]


def _exact_nodes(nodes: int | Sequence[ExactNode]) -> list[tuple[Fraction, Fraction, frozenset]]:
    if isinstance(nodes, int):
        return [(Fraction(1), Fraction(0), frozenset())] * nodes
    return [(Fraction(s), Fraction(f), frozenset(p)) for s, f, p in nodes]


def _exact_requires(n: int, requires: Sequence[Iterable[str]] | None) -> list[frozenset]:
    return [frozenset()] * n if requires is None else [frozenset(r) for r in requires]


def exact_optimum(
    durations: Sequence[float | Fraction],
    nodes: int | Sequence[ExactNode],
    requires: Sequence[Iterable[str]] | None = None,
) -> Fraction:
    """The optimum makespan, exactly, by depth-first branch and bound over assignments.

    ``durations[j]`` is job ``j``'s run time on a speed-1 node; ``nodes`` is a count of
    plain nodes (speed 1, free at 0, no tags) or a list of ``(speed, free_at, provides)``;
    ``requires[j]`` (optional) is the set of tags job ``j`` needs, all of which its node
    must provide. A node runs its jobs back to back from ``free_at``, so it finishes at
    ``free_at + (sum of its durations) / speed``, and the makespan is the latest finish over
    **every** node (an idle node finishes at its ``free_at``). Raises ValueError when some
    job has no eligible node.

    Arithmetic: every input is converted to a Fraction, then every time is put over one
    common denominator, so the search adds Python integers: exact, and fast enough for
    n <= 9 jobs on up to 4 nodes (well under a second). Search: jobs longest first, an
    earliest-finish greedy as the first incumbent, a branch cut as soon as some node reaches
    the incumbent; symmetry breaking: among nodes that are identical (same speed, free_at
    and tags) and still empty, only the first is tried, and of two identical consecutive
    jobs (same duration and tags) the second never goes to a lower node index. Both rules
    keep the lexicographically smallest assignment of every symmetric class, so they cut
    no optimum.
    """
    n = len(durations)
    nd = _exact_nodes(nodes)
    req = _exact_requires(n, requires)
    m = len(nd)
    if m < 1:
        raise ValueError("no nodes")
    d = [Fraction(x) for x in durations]
    elig = [[k for k in range(m) if req[j] <= nd[k][2]] for j in range(n)]
    for j in range(n):
        if not elig[j]:
            raise ValueError(f"job {j} has no eligible node")
    # times[j][k] = d_j / s_k and free_k over one common denominator
    exact_t = [[d[j] / nd[k][0] for k in range(m)] for j in range(n)]
    exact_f = [nd[k][1] for k in range(m)]
    den = 1
    for x in [*exact_f, *(t for row in exact_t for t in row)]:
        den = den * x.denominator // math.gcd(den, x.denominator)
    t = [[int(exact_t[j][k] * den) for k in range(m)] for j in range(n)]
    free = [int(exact_f[k] * den) for k in range(m)]
    # jobs longest first (by their time on a speed-1 node), ties by tags then index
    order = sorted(range(n), key=lambda j: (-d[j], sorted(req[j]), j))
    t = [t[j] for j in order]
    elig = [elig[j] for j in order]
    same_as_prev = [
        i > 0 and d[order[i]] == d[order[i - 1]] and req[order[i]] == req[order[i - 1]]
        for i in range(n)
    ]
    # class of every node (identical nodes share one); first node of each class
    kind = [nd.index(x) for x in nd]

    loads = list(free)
    # first incumbent: earliest finish, longest first
    for i in range(n):
        k = min(elig[i], key=lambda k: (loads[k] + t[i][k], k))
        loads[k] += t[i][k]
    best = [max(loads)]
    loads = list(free)
    used = [False] * m
    node_of = [0] * n

    def place(i: int, current: int) -> None:
        if i == n:
            if current < best[0]:
                best[0] = current
            return
        tried_empty_kinds: set[int] = set()
        low = node_of[i - 1] if same_as_prev[i] else 0
        ti = t[i]
        for k in elig[i]:
            if k < low:
                continue
            if not used[k]:
                if kind[k] in tried_empty_kinds:
                    continue
                tried_empty_kinds.add(kind[k])
            new = loads[k] + ti[k]
            if new >= best[0]:
                continue
            was_used = used[k]
            loads[k] = new
            used[k] = True
            node_of[i] = k
            place(i + 1, new if new > current else current)
            loads[k] -= ti[k]
            used[k] = was_used

    place(0, max(free))
    return Fraction(best[0], den)


def exact_min_nodes(
    durations: Sequence[float | Fraction],
    deadline: float | Fraction,
    speed: float = 1.0,
    provides: Iterable[str] = (),
    requires: Sequence[Iterable[str]] | None = None,
) -> int | None:
    """The fewest nodes of one kind (``speed``, ``provides``, free at 0) on which the jobs
    can all finish by ``deadline``, exactly: the smallest ``k`` whose :func:`exact_optimum`
    on ``k`` such nodes is ``<= deadline``. None when no count can: a job needs a tag the
    node lacks, or one job alone runs longer than the deadline. Brute force over ``k`` from
    the total work over the deadline upwards (n <= 9)."""
    n = len(durations)
    prov = frozenset(provides)
    req = _exact_requires(n, requires)
    s, dl = Fraction(speed), Fraction(deadline)
    d = [Fraction(x) for x in durations]
    if any(not r <= prov for r in req) or any(x / s > dl for x in d):
        return None
    if n == 0:
        return 0
    k = max(1, math.ceil(sum(d) / s / dl)) if dl > 0 else 1
    while k < n and exact_optimum(d, [(speed, 0.0, prov)] * k, req) > dl:
        k += 1
    return min(k, n)


def _job_index(n: int, job_ids: Sequence[str] | None) -> dict[str, int]:
    """{job id: job index}, the ids ``job_ids`` or by default ``job-<j>``."""
    ids = list(job_ids) if job_ids is not None else [f"job-{j}" for j in range(n)]
    return {x: j for j, x in enumerate(ids)}


def plan_problems(
    result: Mapping[str, Any],
    durations: Sequence[float | Fraction],
    nodes: int | Sequence[ExactNode],
    requires: Sequence[Iterable[str]] | None = None,
    job_ids: Sequence[str] | None = None,
    deadline: float | None = None,
    rel: float = 1e-12,
) -> list[str]:
    """Everything wrong with the plan of a result dict, checked in exact arithmetic.

    The plan is ``result["assignment"]`` (a plan) or ``result["plan"]`` (a sizing): one
    entry per node, in the order of ``nodes``, each with ``jobs: [{id, start, end}]``. Job
    ``j`` has id ``job_ids[j]`` (default ``job-<j>``). Checked, comparing the stated floats
    exactly (as Fractions): every job runs exactly once, on a node that provides every tag
    it requires, no earlier than that node's ``free_at``; no two jobs overlap on a node
    (the end of one <= the start of the next); each stated ``end - start`` is the job's
    ``duration / speed`` up to the rounding of the stated floats (relative ``rel`` of the
    larger of the end and the run time); the stated ``makespan`` (when present) is the
    latest stated end or node ``free_at`` up to the same rounding (both are floats that may
    round the exact makespan, by rounding only). With a ``deadline``, every node's exact
    finish (``free_at`` + the sum of its durations / speed) is within it. Returns a list of
    sentences, empty when the plan is sound.
    """
    n = len(durations)
    nd = _exact_nodes(nodes)
    req = _exact_requires(n, requires)
    index = _job_index(n, job_ids)
    plan = result.get("assignment", result.get("plan"))
    out: list[str] = []
    if not isinstance(plan, list) or len(plan) != len(nd):
        return [
            f"the plan has {len(plan) if isinstance(plan, list) else 'no'} node entries, "
            f"expected {len(nd)}"
        ]
    seen: dict[int, int] = {}
    latest = max(f for _, f, _ in nd)
    tol = Fraction(rel)
    for k, entry in enumerate(plan):
        speed, free_at, provides = nd[k]
        jobs = []
        for job in entry["jobs"]:
            j = index.get(job["id"])
            if j is None:
                out.append(f"node {k}: unknown job id {job['id']!r}")
                continue
            if j in seen:
                out.append(f"job {j} runs twice (nodes {seen[j]} and {k})")
            seen[j] = k
            start, end = Fraction(job["start"]), Fraction(job["end"])
            if not req[j] <= provides:
                out.append(f"job {j} requires {sorted(req[j])}, node {k} lacks some")
            if start < free_at:
                out.append(
                    f"job {j} starts at {job['start']!r} on node {k}, before its "
                    f"free_at {float(free_at)!r}"
                )
            run = Fraction(durations[j]) / speed
            if abs((end - start) - run) > tol * max(end, run):
                out.append(
                    f"job {j} on node {k}: end - start = {float(end - start)!r}, "
                    f"but duration / speed = {float(run)!r}"
                )
            jobs.append((start, end, j))
            latest = max(latest, end)
        jobs.sort()
        for (_, e1, j1), (s2, _, j2) in itertools.pairwise(jobs):
            if s2 < e1:
                out.append(
                    f"jobs {j1} and {j2} overlap on node {k} ({float(e1)!r} > {float(s2)!r})"
                )
    if deadline is not None:
        work = [Fraction(0)] * len(nd)
        for j, k in seen.items():
            work[k] += Fraction(durations[j])
        late = [k for k, (s, f, _) in enumerate(nd) if f + work[k] / s > Fraction(deadline)]
        if late:
            out.append(f"nodes {late} finish after the deadline {deadline!r}, exactly")
    missing = sorted(set(range(n)) - set(seen))
    if missing:
        out.append(f"jobs {missing} are not planned")
    if "makespan" in result:
        ms = Fraction(result["makespan"])
        if abs(ms - latest) > tol * latest:
            out.append(
                f"makespan {result['makespan']!r} is not the latest end or free_at "
                f"{float(latest)!r}"
            )
    return out


def exact_plan_makespan(
    result: Mapping[str, Any],
    durations: Sequence[float | Fraction],
    nodes: int | Sequence[ExactNode],
    job_ids: Sequence[str] | None = None,
) -> Fraction:
    """The exact makespan of a result's assignment: the latest node finish, ``free_at``
    plus the exact sum of its jobs' durations over its speed (the stated times unused)."""
    nd = _exact_nodes(nodes)
    index = _job_index(len(durations), job_ids)
    plan = result.get("assignment", result.get("plan"))
    assert isinstance(plan, list) and len(plan) == len(nd)
    finish = []
    for (speed, free_at, _), entry in zip(nd, plan, strict=True):
        work = sum((Fraction(durations[index[job["id"]]]) for job in entry["jobs"]), Fraction(0))
        finish.append(free_at + work / speed)
    return max(finish)


def check_plan_exact(*args: Any, **kwargs: Any) -> None:
    """Raise AssertionError listing every problem :func:`plan_problems` finds (called with
    the same arguments)."""
    problems = plan_problems(*args, **kwargs)
    assert not problems, "; ".join(problems[:10])


def float_below(x: Fraction) -> float:
    """The largest double strictly below ``x``."""
    f = float(x)  # the nearest double
    return math.nextafter(f, -math.inf) if Fraction(f) >= x else f


def float_at_or_above(x: Fraction) -> float:
    """The smallest double not below ``x``."""
    f = float(x)
    return math.nextafter(f, math.inf) if Fraction(f) < x else f


def tick_count(
    durations: Sequence[float | Fraction],
    nodes: int | Sequence[ExactNode],
    resolution: float,
    deadline: float | None = None,
) -> Fraction:
    """The largest count of ticks of ``resolution`` an instance can reach, exactly: all the
    work on the slowest node after the latest ``free_at``, or the deadline on the fastest
    node."""
    nd = _exact_nodes(nodes)
    slow = min(s for s, _, _ in nd)
    horizon = max(f for _, f, _ in nd) + sum(map(Fraction, durations)) / slow
    if deadline is not None:
        horizon = max(horizon, Fraction(deadline) * max(s for s, _, _ in nd))
    return horizon / Fraction(resolution)


def float_near(x: Fraction, where: str) -> float:
    """A double by ``x``: ``below`` (the largest one below it), ``at`` (the smallest one
    not below it), ``under`` or ``over`` (10 % below or above, rounded to nearest)."""
    if where == "below":
        return float_below(x)
    if where == "at":
        return float_at_or_above(x)
    return float(x * (Fraction(9, 10) if where == "under" else Fraction(11, 10)))
