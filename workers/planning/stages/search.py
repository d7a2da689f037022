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
* **a local walk** on the priority list (:mod:`.walk_kernel`, compiled: thousands of
  list schedules in the time Python takes for a few hundred): swaps and moves of nearby
  jobs and of jobs of one class, and swaps that let a job of a critical chain go before
  the job it waited for; :data:`WALKERS` walks advance in turn, a chunk of moves each;
* **priority perturbation**: the bottom level, or the best plan's starts, with random
  noise (a seeded generator, so a run with a round limit is reproducible); a walk that
  found nothing shorter for :data:`RESTART_AFTER` moves restarts from one.

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
from .walk_kernel import MODULUS

I64 = npt.NDArray[np.int64]

METHODS = ("list", "longest_first", "exact", "auto")
#: noise levels of the perturbations, used in turn
NOISE = (0.05, 0.15, 0.4)
#: moves per call of the compiled walk: about this many jobs scheduled, within the range
CHUNK_JOBS = 20_000
CHUNK_MIN = 1
CHUNK_MAX = 4_000
#: a swap move trades jobs at most n // WIDTH_DIV (at least 2) places apart
WIDTH_DIV = 4
#: independent walks, advanced in turn
WALKERS = 4
#: the walk restarts from the next perturbed plan after this many moves without a
#: shorter plan
RESTART_AFTER = 5_000


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


@dataclasses.dataclass
class _Walker:
    """One walk of :func:`improve`: its plan, the priority it goes on from, and how
    many moves it made since its plan last got shorter."""

    plan: StagePlan
    rank: I64
    stall: int = 0


def improve(
    problem: StageProblem,
    budget: Budget,
    *,
    seed: int = 0,
    max_rounds: int | None = None,
    paths: Paths | None = None,
) -> tuple[StagePlan, StageBounds, str, bool, int]:
    """Best plan found, the bounds, the rule that found it, whether time ran out, rounds.

    After the rules, each episode advances one of the :data:`WALKERS` walks by a chunk
    of local moves (:func:`.walk_kernel.walk`; a round is one move), polishes the plan
    it reached by forward-backward improvement, and tries one perturbed priority
    (the bottom level or the best plan's starts, with noise; polished too), which the
    walk takes when shorter than its own or when it is stalled. Stops when the plan
    meets the best bound, the budget is spent, or ``max_rounds`` rounds were made (for
    reproducible runs).
    """
    paths = paths or longest_paths(problem)
    walk = _Walk(problem, Lister(problem, compiled=True), budget)
    for name in RULES:
        walk.offer(_plan(problem, walk.lister, priority(paths, name)), name)
    assert walk.best is not None
    bounds = stage_bounds(problem, paths, upper=walk.best.makespan_ticks)
    target = bounds.ticks
    walk.offer(walk.polish(walk.best), "search")
    rng = np.random.default_rng(seed)
    rounds = episode = 0
    ran_out = False
    span = float(max(int(paths.d.max()), 1))
    bottom = -paths.bottom.astype(np.float64)
    chunk = min(CHUNK_MAX, max(CHUNK_MIN, CHUNK_JOBS // max(problem.n, 1)))
    width = max(2, problem.n // WIDTH_DIV)
    walkers = [_Walker(walk.best, by_keys(walk.best.start, bottom)) for _ in range(WALKERS)]
    while walk.best.makespan_ticks > target:
        if budget.expired():
            ran_out = True
            break
        if max_rounds is not None and rounds >= max_rounds:
            break
        moves = chunk if max_rounds is None else min(chunk, max_rounds - rounds)
        me = walkers[episode % WALKERS]
        episode += 1
        kseed = 1 + (seed * 1_000_003 + episode) % (MODULUS - 2)
        rank, last = walk.lister.walk(me.rank, moves, kseed, width, paths.tail)
        rounds += moves
        cand = _plan(problem, walk.lister, rank)
        me.stall = 0 if cand.makespan_ticks < me.plan.makespan_ticks else me.stall + moves
        me.plan, me.rank = cand, last
        walk.offer(cand, "search")
        polished = walk.polish(cand)  # forward-backward passes out of the walk's optimum
        walk.offer(polished, "search")
        if polished.makespan_ticks < cand.makespan_ticks:
            me.plan, me.rank = polished, by_keys(polished.start, bottom)
        if budget.expired():  # (on large graphs a pass takes a good part of the budget)
            ran_out = True
            break
        # one perturbed priority per chunk: kept when shorter, or to restart a stalled walk
        noise = NOISE[episode % len(NOISE)]
        if episode % 2:
            key = paths.bottom * (1.0 + noise * rng.uniform(-1.0, 1.0, problem.n))
            prank = by_keys(-key, -paths.d.astype(np.float64))
        else:
            key = walk.best.start + noise * span * rng.uniform(0.0, 1.0, problem.n)
            prank = by_keys(key, bottom)
        pert = walk.polish(_plan(problem, walk.lister, prank))
        walk.offer(pert, "search")
        if pert.makespan_ticks < me.plan.makespan_ticks or me.stall >= RESTART_AFTER:
            me.plan, me.rank, me.stall = pert, by_keys(pert.start, bottom), 0
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
