"""Planning a stage graph: the rules, and an anytime improver within a time budget.

:func:`solve_stages` is the entry point. ``list`` and ``longest_first`` run one priority
rule of :mod:`.listing`; ``exact`` and ``auto`` run :func:`improve`: every rule of
:data:`.listing.RULES`, then, until the budget is spent or the plan meets the best lower
bound (a proof of optimality), rounds of

* **justification** (Valls, Ballestin and Quintanilla 2005, "Justification and RCPSP: a
  technique that pays", from memory), done with our list scheduler: a backward pass
  plans the reversed graph with the jobs that end latest first; its mirror image is a
  plan of the same length (every wait, slot and limit mirrors); a forward pass then
  plans the jobs in the order of the mirror's starts. Only when every node is free at
  the same tick and no job is carried in (else the mirror could start a job before its
  node, its slot or its release);
* **priority perturbation**: the bottom level, or the best plan's starts, with random
  noise (a seeded generator, so a run with a round limit is reproducible).

Every plan is a list schedule of the tick-rounded problem (:mod:`.timing`) and is
checked against its rules (:meth:`.plan.StagePlan.violations`) before it is returned.

``worst_case_ratio``: ``2 - 1/m`` (Graham 1966) where it is proven: every plan here is a
list schedule that never leaves a slot idle while a job it may run is ready, and on
identical single-slot nodes, all free at 0, with no limits and no tags, Graham's
argument bounds such a plan by ``(2 - 1/m)`` times the optimum (of the tick-rounded
problem, whose running times are the same on every node). ``None`` elsewhere: with
limits, slots of mixed use, speeds or tags no published guarantee is used here.
"""

from __future__ import annotations

import dataclasses
import time
from collections.abc import Callable

import numpy as np
import numpy.typing as npt

from ..budget import DEFAULT_SECONDS, Budget, StopReason
from .bounds import StageBounds, stage_bounds
from .listing import RULES, Lister, by_keys, priority
from .paths import Paths, longest_paths
from .plan import StagePlan
from .problem import StageProblem
from .result import StageResult

I64 = npt.NDArray[np.int64]

METHODS = ("list", "longest_first", "exact", "auto")
#: noise levels of the bottom-level perturbation, used in turn
NOISE = (0.05, 0.15, 0.4)
#: one round in this many perturbs a priority; the others make a local move
PERTURB_EVERY = 8
#: the walk restarts from the next perturbed plan after this many rounds without a
#: shorter plan
RESTART_AFTER = 400


def worst_case_ratio(problem: StageProblem) -> float | None:
    """``2 - 1/m`` on identical single-slot nodes without limits (see the module doc)."""
    if problem.plain_nodes and not problem.has_limits:
        return 2.0 - 1.0 / problem.m
    return None


def _plan(problem: StageProblem, lister: Lister, rank: I64) -> StagePlan:
    got = lister.schedule(rank)
    return StagePlan(problem, got.node, got.slot, got.start)


def justify(problem: StageProblem, lister: Lister, plan: StagePlan) -> list[StagePlan]:
    """The mirror of a backward pass and the forward pass after it (module doc); empty
    when the nodes are not all free at the same tick or jobs are carried in."""
    free = problem.timing.free
    if not (free == free[0]).all() or not problem.timing.carried_free:
        return []
    f0 = int(free[0])
    back = lister.schedule(by_keys(-plan.end, plan.start), reverse=True)
    mirror = StagePlan(problem, back.node, back.slot, back.start)  # only its ends are used
    horizon = int(mirror.end.max())
    starts = f0 + horizon - mirror.end
    mirrored = StagePlan(problem, back.node, back.slot, starts)
    forward = _plan(problem, lister, by_keys(starts, -plan.end))
    return [mirrored, forward]


class _Walk:
    """The state of the improver: the best plan, and the priority list a local search
    walks from (see :func:`improve`)."""

    def __init__(self, problem: StageProblem, lister: Lister, budget: Budget) -> None:
        self.problem = problem
        self.lister = lister
        self.budget = budget
        self.best: StagePlan | None = None
        self.rule = ""

    def offer(self, cand: StagePlan, rule: str) -> bool:
        """Keep ``cand`` if it is shorter than the best; whether it was."""
        if self.best is None or cand.makespan_ticks < self.best.makespan_ticks:
            self.best, self.rule = cand, rule
            return True
        return False

    def polish(self, plan: StagePlan) -> StagePlan:
        """Forward-backward improvement: justify ``plan`` while that shortens it (each
        pass is two list schedules; stops early when the budget is spent)."""
        while not self.budget.expired():
            got = min(
                justify(self.problem, self.lister, plan),
                key=lambda x: x.makespan_ticks,
                default=None,
            )
            if got is None or got.makespan_ticks >= plan.makespan_ticks:
                break
            plan = got
        return plan


def _swap(rank: I64, rng: np.random.Generator, members: list[I64]) -> I64:
    """A copy of ``rank`` with one or two pairs of jobs swapped, each pair of one class
    (same limits, same eligible nodes: the jobs that compete for the same capacity) and
    at most a few places apart among that class in the list."""
    out = rank.copy()
    for _ in range(int(rng.integers(1, 3))):
        group = members[int(rng.integers(0, len(members)))]
        if group.size < 2:
            continue
        seq = group[np.argsort(out[group], kind="stable")]
        width = max(2, seq.size // 10)
        a = int(rng.integers(0, seq.size))
        b = min(seq.size - 1, max(0, a + int(rng.integers(-width, width + 1))))
        ja, jb = int(seq[a]), int(seq[b])
        out[ja], out[jb] = out[jb], out[ja]
    return out


def _blocker_swap(plan: StagePlan, rank: I64, cls: I64, rng: np.random.Generator) -> I64:
    """A copy of ``rank`` in which a job on a critical chain of ``plan`` trades places
    with a job of its class that ended exactly when it started (one that held the slot
    or limit it waited for), so that the chain's job goes first.

    The chain is walked back from a job that ends last: at each job, to a job that
    ended at its start (a predecessor or a job of its class), picked at random."""
    end, start = plan.end, plan.start
    j = int(rng.choice(np.flatnonzero(end == end.max())))
    chain: list[int] = []
    for _ in range(plan.problem.n):
        chain.append(j)
        before = np.flatnonzero(end == start[j])
        if not before.size or start[j] == 0:
            break
        j = int(rng.choice(before))
    rng.shuffle(chain)
    out = rank.copy()
    for j in chain:
        rivals = np.flatnonzero((end == start[j]) & (cls == cls[j]) & (rank < rank[j]))
        if rivals.size:
            k = int(rng.choice(rivals))
            out[j], out[k] = out[k], out[j]
            return out
    return out


def _key(plan: StagePlan, paths: Paths) -> tuple[int, int]:
    """What the local search minimises: the makespan, then how many jobs are critical
    (their end plus their tail reaches it): fewer, and a shorter plan is nearer."""
    span = plan.makespan_ticks
    return span, int(np.count_nonzero(plan.end + paths.tail >= span))


def _classes(lister: Lister, n: int) -> list[I64]:
    """The jobs of each class of the list scheduler with at least two jobs, each class
    listed once per job it holds (a random class is then picked by job)."""
    cls = np.asarray(lister.cls, dtype=np.int64)
    out = [np.flatnonzero(cls == c) for c in np.unique(cls).tolist()]
    out = [g for g in out if g.size >= 2]
    if not out:
        return [np.arange(n, dtype=np.int64)]
    weights = [max(1, g.size * 20 // n) for g in out]
    return [g for g, w in zip(out, weights, strict=True) for _ in range(w)]


def improve(
    problem: StageProblem,
    budget: Budget,
    *,
    seed: int = 0,
    max_rounds: int | None = None,
    paths: Paths | None = None,
) -> tuple[StagePlan, StageBounds, str, bool, int]:
    """Best plan found, the bounds, the rule that found it, whether time ran out, rounds.

    After the rules, each round either perturbs a priority (the bottom level or the best
    plan's starts, with noise) and polishes the result by forward-backward improvement,
    or (most rounds) makes a local move: one or two swaps of nearby jobs in the current
    priority list, kept when the plan is no longer (a walk over equal makespans too);
    a new best is polished as well. Stops when the plan meets the best bound, the budget
    is spent, or ``max_rounds`` rounds were made (for reproducible runs).
    """
    paths = paths or longest_paths(problem)
    walk = _Walk(problem, Lister(problem), budget)
    for name in RULES:
        walk.offer(_plan(problem, walk.lister, priority(paths, name)), name)
    assert walk.best is not None
    bounds = stage_bounds(problem, paths, upper=walk.best.makespan_ticks)
    target = bounds.ticks
    walk.offer(walk.polish(walk.best), "search")
    rng = np.random.default_rng(seed)
    rounds = 0
    ran_out = False
    span = float(max(int(paths.d.max()), 1))
    bottom = -paths.bottom.astype(np.float64)
    members = _classes(walk.lister, problem.n)
    cls = np.asarray(walk.lister.cls, dtype=np.int64)
    cur = walk.best
    cur_rank = by_keys(cur.start, bottom)
    stall = 0
    cur_key = _key(cur, paths)
    while walk.best.makespan_ticks > target:
        if budget.expired():
            ran_out = True
            break
        if max_rounds is not None and rounds >= max_rounds:
            break
        rounds += 1
        if rounds % PERTURB_EVERY == 0:
            noise = NOISE[(rounds // PERTURB_EVERY) % len(NOISE)]
            if rounds % (2 * PERTURB_EVERY):
                key = paths.bottom * (1.0 + noise * rng.uniform(-1.0, 1.0, problem.n))
                rank = by_keys(-key, -paths.d.astype(np.float64))
            else:
                key = walk.best.start + noise * span * rng.uniform(0.0, 1.0, problem.n)
                rank = by_keys(key, bottom)
            cand = walk.polish(_plan(problem, walk.lister, rank))
            walk.offer(cand, "search")
            stall += PERTURB_EVERY
            if cand.makespan_ticks <= cur.makespan_ticks or stall >= RESTART_AFTER:
                stall = 0 if cand.makespan_ticks < cur.makespan_ticks else stall
                stall = 0 if stall >= RESTART_AFTER else stall
                cur, cur_rank = cand, by_keys(cand.start, bottom)
                cur_key = _key(cur, paths)
            continue
        if rounds % 2:
            rank = _swap(cur_rank, rng, members)
        else:
            rank = _blocker_swap(cur, cur_rank, cls, rng)
        cand = _plan(problem, walk.lister, rank)
        cand_key = _key(cand, paths)
        if cand_key <= cur_key:
            if cand.makespan_ticks < cur.makespan_ticks:
                stall = 0
            cur, cur_rank, cur_key = cand, rank, cand_key
            if walk.offer(cand, "search"):
                cur = walk.polish(cand)
                walk.offer(cur, "search")
                cur_rank = by_keys(cur.start, bottom)
                cur_key = _key(cur, paths)
    return walk.best, bounds, walk.rule, ran_out, rounds


def solve_stages(
    problem: StageProblem,
    method: str = "longest_first",
    budget: Budget | None = None,
    *,
    seed: int = 0,
    max_rounds: int | None = None,
    answer: Callable[..., StageResult] = StageResult,
) -> StageResult:
    """Plan ``problem`` with ``method`` (one of :data:`METHODS`) and certify the plan.

    ``answer`` builds the result from :class:`StageResult`'s fields (a subclass that adds
    its own, such as a re-plan's, whose makespan also counts the jobs carried in).

    ``list`` and ``longest_first`` are one pass of their rule; ``exact`` and ``auto`` run
    :func:`improve` within ``budget`` (default :data:`~workers.planning.budget.
    DEFAULT_SECONDS`). The plan is checked before it is returned.
    """
    if method not in METHODS:
        raise ValueError(f"unknown method {method!r}; expected one of {METHODS}")
    t0 = time.perf_counter()
    budget = budget or Budget(DEFAULT_SECONDS)
    paths = longest_paths(problem)
    rounds, ran_out = 0, False
    if method in ("list", "longest_first"):
        rule = method
        plan = _plan(problem, Lister(problem), priority(paths, method))
        # the certificate's bounds only (below): one pass of them, not two
        bounds = (
            None if problem.rounded else stage_bounds(problem, paths, upper=plan.makespan_ticks)
        )
    else:
        plan, bounds, rule, ran_out, rounds = improve(
            problem, budget, seed=seed, max_rounds=max_rounds, paths=paths
        )
    plan.check()
    if bounds is not None and bounds.ticks > plan.makespan_ticks:  # pragma: no cover
        raise AssertionError("a lower bound above a feasible plan: a bound is wrong")
    if problem.rounded:  # bounds that hold for the times as given (see .result)
        low = problem.relaxed()
        bounds = stage_bounds(low, longest_paths(low), upper=plan.makespan_ticks)
    assert bounds is not None
    out = answer(
        plan=plan,
        bounds=bounds,
        method=method,
        rule=rule,
        stop_reason=StopReason.HEURISTIC,
        worst_case_ratio=worst_case_ratio(problem),
        rounds=rounds,
        solve_seconds=0.0,
    )
    stop = budget.stop_reason(proven=out.proven_optimal, ran_out=ran_out)
    return dataclasses.replace(out, stop_reason=stop, solve_seconds=time.perf_counter() - t0)
