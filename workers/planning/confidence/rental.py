"""Renting under estimate spread (issue 18 point 5): the rental answer's plan simulated,
and the cheapest rental found whose plan meets the deadline with a confidence q.

:func:`check_rental_spread` makes the checks that need no sampling (the spread model; with
a target q, a q the sample count cannot show, or that no rental can reach: a closed-form
upper bound). :func:`rental_confidence` gives the ``confidence`` block of the answer's plan
(static, with dynamic inside, exactly as for a plan) and, with a target q,
``confidence_rental``: the search of :func:`rent_to_confidence`, whose rule is
:data:`RULE`.

A rental's plan is simulated over the farm's nodes (their speeds, ``provides`` and
``free_at``) and the rented ones (free at their kind's boot), against the request's
deadline: "meets" is every job ends by the deadline. An idle farm node that is free only
at or after the deadline is left out of the simulation (:func:`simulated_plan`): it runs
none of the plan's jobs, and a job that dynamic dispatch would hand it ends late on any
node, so the deadline probability is the same without it and the makespan quantiles are
those of the batch.
"""

from __future__ import annotations

import dataclasses
import math
import time
from fractions import Fraction
from typing import Any

import numpy as np

from ..budget import Budget, StopReason
from ..errors import Infeasible, InvalidInstance, Issue
from ..model import Instance
from ..rental import RentalArgs, RentalResult, rent
from ..result import Schedule
from .request import SpreadRequest
from .simulation import (
    POLICIES,
    ConfidenceResult,
    _check_args,
    _simulate,
    block_of,
    wilson_interval,
)
from .spread import SpreadModel, job_probabilities
from .target import check_samples_show

CAUTION = (
    "The probability is for the spread given (the lognormal model of the estimates), not "
    "a measurement of the wall clock; a cost is the plan's bill at the estimates and prices "
    "given (under spread the bill moves with the actual durations), not a purchasing "
    "decision."
)

RULE = (
    "the cheapest candidate (then fewest rented nodes) whose 95% Wilson lower limit of "
    "P(every job ends by the deadline) >= q under the request's policy; the candidates are "
    "the cheapest rentals the deterministic search finds for search deadlines D' <= the "
    "deadline, each plan simulated against the deadline itself with the same seed; D' "
    "starts at the deadline and, while candidates fail, tightens to D' * deadline / m (m: "
    "the failing plan's sampled makespan quantile at the upper end of the Wilson interval "
    "around q), by at least 1% of the deadline; after the first pass, D' is bisected "
    "between the tightest failing and the loosest passing D' while they differ by more "
    "than 0.2% of the deadline; at most 12 candidates, within the time budget"
)

#: most rentals searched for one target q (the answer's own included)
MAX_CANDIDATES = 12
#: least tightening of the search deadline per step, as a share of the deadline
MIN_STEP = 0.01
#: the bisection stops when the search deadlines differ by less than this share
RESOLUTION = 0.002
#: share of the time left that each candidate's search may use
STEP_SHARE = 0.25


def simulated_plan(schedule: Schedule, asked: Instance) -> Schedule:
    """The rental plan as simulated against ``asked.deadline``: the request's
    ``duration_p90`` on its jobs, and the idle farm nodes free only at or after the
    deadline left out (see the module docstring)."""
    inst = schedule.instance
    if inst.job_ids != asked.job_ids:
        raise ValueError("the rental plan is not of the asked jobs")
    deadline = float(asked.deadline) if asked.deadline is not None else float("inf")
    used = np.zeros(inst.m, dtype=bool)
    used[schedule.node_of] = True
    keep = [k for k, nd in enumerate(inst.nodes) if used[k] or nd.free_at < deadline]
    index = np.full(inst.m, -1, dtype=np.int64)
    index[keep] = np.arange(len(keep))
    nodes = tuple(inst.nodes[k] for k in keep)
    out = dataclasses.replace(inst, nodes=nodes, duration_p90=asked.duration_p90)
    node_of = index[schedule.node_of].astype(schedule.node_of.dtype)
    return Schedule(out, node_of, schedule.start)


def _reach(args: RentalArgs) -> np.ndarray:
    """Per job, the most work one node that can run it does by the deadline: a farm node
    ``speed * (deadline - free_at)``, a kind's node ``speed * (deadline - boot)`` (0 when
    none can run it; malformed kinds are skipped here, :meth:`RentalArgs.check` refuses
    them)."""
    inst = args.instance
    deadline = float(inst.deadline)  # type: ignore[arg-type]
    servers = [(nd.provides, nd.speed, nd.free_at) for nd in inst.nodes]
    servers += [
        (k.provides, k.speed, k.boot)
        for k in args.kinds
        if isinstance(k.max_count, int)
        and k.max_count >= 1
        and math.isfinite(k.speed)
        and k.speed > 0
        and math.isfinite(k.boot)
    ]
    reqs = inst.requires if inst.requires is not None else (frozenset(),) * inst.n
    best: dict[frozenset[str], float] = {}
    for req in set(reqs):
        caps = [sp * (deadline - st) for prov, sp, st in servers if req <= prov]
        best[req] = max([0.0, *caps])
    return np.array([best[r] for r in reqs], dtype=np.float64)


def check_rental_spread(args: RentalArgs, asked: SpreadRequest) -> SpreadModel:
    """The checks that need no sampling, for the jobs, farm, kinds and deadline of ``args``.

    The spread model (a p90 on a zero estimate, a spread too wide); with a target q, a q
    the sample count cannot show (:func:`.target.check_samples_show`), and a q no rental
    can reach: in any plan job j runs on one node, so it ends by the deadline only if its
    actual duration is at most the most work a node that can run it does by then
    (:func:`_reach`); the jobs are independent, so the product of those closed-form
    chances (the lognormal cdf, :func:`.spread.job_probabilities`) bounds P(meet) from
    above for every rental, however many nodes. A job no node can run is left to
    :meth:`RentalArgs.check`. Returns the spread model.
    """
    inst = args.instance
    model = SpreadModel.from_instance(inst, asked.spread)
    if asked.target is None or inst.deadline is None:
        return model
    q, deadline = asked.target, float(inst.deadline)
    _check_args(asked.samples, asked.policy, deadline)
    check_samples_show(model, asked.samples, q)
    caps = _reach(args)
    ok = caps > 0
    run_times = np.where(ok, inst.durations * deadline / np.where(ok, caps, 1.0), 0.0)
    reach = job_probabilities(model, run_times, deadline)
    alone = float(np.prod(reach))
    if alone < q:
        worst = np.argsort(reach, kind="stable")[: max(1, int(np.sum(reach < q)))][:20]
        raise Infeasible(
            f"no rental can meet the deadline with confidence {q}: even alone on the node "
            f"that does the most work by the deadline, the jobs together make it with "
            f"probability {alone:.4g}",
            jobs=[inst.job_ids[j] for j in worst],
            issues=[Issue(("confidence",), f"at most {alone:.4g} can be reached")]
            + [
                Issue(
                    ("jobs", int(j)),
                    f"alone on its best node it ends in time with P = {reach[j]:.4g}",
                )
                for j in worst
            ],
        )
    return model


def rental_confidence(
    res: RentalResult,
    args: RentalArgs,
    asked: SpreadRequest,
    budget: Budget,
    *,
    threads: int | None = None,
) -> dict[str, Any]:
    """The ``confidence`` block of the rental answer ``res`` (its plan simulated against
    the deadline of ``args``, static with dynamic inside, as for a plan) and, with a
    target q, ``confidence_rental`` (:func:`rent_to_confidence`, within ``budget``)."""
    model = check_rental_spread(args, asked)
    deadline = args.instance.deadline
    plan = simulated_plan(res.schedule, args.instance)
    sims: dict[str, ConfidenceResult] = {}
    seconds = 0.0
    for policy in POLICIES:
        start = time.perf_counter()
        sims[policy] = _simulate(plan, model, asked.samples, asked.seed, deadline, policy, threads)
        if policy == asked.policy:
            seconds = time.perf_counter() - start
    out: dict[str, Any] = {"confidence": block_of(sims["static"], sims["dynamic"])}
    if asked.target is not None:
        found = Candidates(args, asked, model, budget, threads)
        found.sim_seconds = seconds
        out["confidence_rental"] = rent_to_confidence(found, res, sims[asked.policy])
    return out


def _quantile_level(q: float, samples: int) -> float:
    """The upper end of the 95% Wilson interval around a share q of ``samples``: a plan
    whose makespan quantile at this level is the deadline has about q N samples in
    time with a Wilson lower limit near q."""
    return wilson_interval(round(q * samples), samples)[1]


class Candidates:
    """The candidates of :func:`rent_to_confidence`, by search deadline: the request
    (``args``, ``asked``, its spread ``model``) and the time its search may use."""

    def __init__(
        self,
        args: RentalArgs,
        asked: SpreadRequest,
        model: SpreadModel,
        budget: Budget,
        threads: int | None,
    ) -> None:
        self.args, self.asked, self.model = args, asked, model
        self.budget, self.threads = budget, threads
        self.deadline = float(args.instance.deadline)  # type: ignore[arg-type]
        self.rows: list[dict[str, Any]] = []
        self.found: dict[float, tuple[RentalResult, ConfidenceResult]] = {}
        #: the rule stopped early: the time budget ran out (or the caller cancelled)
        self.ran_out = False
        #: how long the last simulation of a plan took
        self.sim_seconds = 0.0
        #: the least time a rent call takes, past any budget (its first answers: the mix
        #: and each kind alone); estimated from the answer's, then the least seen
        self.rent_seconds = 0.0

    def evaluate(
        self, dp: float, res: RentalResult | None = None, sim: ConfidenceResult | None = None
    ) -> bool | None:
        """Rent at search deadline ``dp`` (unless ``res`` is that rental) and simulate its
        plan against the deadline (unless ``sim`` is that simulation): True passes, False
        fails, None no plan found."""
        if res is None:
            inst = dataclasses.replace(self.args.instance, deadline=dp)
            start = time.perf_counter()
            try:
                res = rent(
                    dataclasses.replace(self.args, instance=inst), self.budget.child(STEP_SHARE)
                )
            except (Infeasible, InvalidInstance) as e:
                self.rows.append({"search_deadline": dp, "found": False, "reason": e.detail})
                return None
            finally:
                self.rent_seconds = min(self.rent_seconds, time.perf_counter() - start)
        asked = self.asked
        if sim is None:
            start = time.perf_counter()
            sim = _simulate(
                simulated_plan(res.schedule, self.args.instance),
                self.model,
                asked.samples,
                asked.seed,
                self.deadline,
                asked.policy,
                self.threads,
            )
            self.sim_seconds = time.perf_counter() - start
        iv = sim.interval
        assert iv is not None and asked.target is not None
        self.found[dp] = (res, sim)
        self.rows.append(
            {
                "search_deadline": dp,
                "found": True,
                "rent": dict(res.rent),
                "cost": res.cost,
                "rented_nodes": sum(res.rent.values()),
                "cheapest_at_search_deadline": res.proven_optimal,
                "planned_makespan": res.schedule.makespan,
                "deadline_probability": sim.deadline_probability,
                "interval": list(iv),
                "makespan_p90": sim.quantile(0.9),
                "passes": iv[0] >= asked.target,
            }
        )
        return bool(self.rows[-1]["passes"])

    def room(self) -> bool:
        """Whether another candidate may be tried (fewer than :data:`MAX_CANDIDATES`, and
        time left for at least its search's first answers and its simulation)."""
        need = self.rent_seconds + self.sim_seconds
        if self.budget.expired() or self.budget.remaining() < need:
            self.ran_out = True
            return False
        return len(self.rows) < MAX_CANDIDATES


def rent_to_confidence(
    s: Candidates, first: RentalResult, first_sim: ConfidenceResult | None = None
) -> dict[str, Any]:
    """The ``confidence_rental`` object: the cheapest rental found whose plan meets the
    deadline with the asked confidence, by :data:`RULE`.

    ``first`` is the rental answer at the deadline itself (the first candidate;
    ``first_sim`` its simulation under the asked policy, when already made). The
    deterministic search is called as it is (:func:`.rental.rent`) at each search
    deadline. The rule's "cheapest" is this search's: the cheapest rental at a search
    deadline need not be the cheapest rental with P >= q (a mix that gives only the
    riskiest jobs a faster node can be cheaper), so no lower bound is claimed; every
    candidate tried is listed with its probability.
    """
    q = s.asked.target
    if q is None:
        raise ValueError("rent_to_confidence needs a target confidence")
    deadline = s.deadline
    level = _quantile_level(q, s.asked.samples)
    s.rent_seconds = first.first_answer_seconds * (1 + len(s.args.kinds))
    dp, status = deadline, s.evaluate(deadline, first, first_sim)
    fail_at: float | None = None if status else deadline
    pass_at: float | None = deadline if status else None
    none_at: float | None = None
    # tighten while every candidate fails
    while pass_at is None and fail_at is not None and s.room():
        _, sim = s.found[fail_at]
        m = sim.quantile(level)
        nxt = fail_at - MIN_STEP * deadline
        if m > deadline:
            nxt = min(nxt, fail_at * deadline / m)
        if none_at is not None:
            if fail_at - none_at <= RESOLUTION * deadline:
                break
            nxt = max(nxt, 0.5 * (fail_at + none_at))
        if nxt <= 0:
            break
        dp = nxt
        status = s.evaluate(dp)
        if status is None:
            none_at = dp
        elif status:
            pass_at = dp
        else:
            fail_at = dp
    # bisect back towards cheaper plans between the tightest failing and loosest passing
    while (
        pass_at is not None
        and fail_at is not None
        and fail_at - pass_at > RESOLUTION * deadline
        and s.room()
    ):
        mid = 0.5 * (fail_at + pass_at)
        if s.evaluate(mid):
            pass_at = mid
        else:
            fail_at = mid
    return _answer(s, first, q)


def _answer(s: Candidates, first: RentalResult, q: float) -> dict[str, Any]:
    """The ``confidence_rental`` object from the candidates tried."""
    asked = s.asked
    found = [r for r in s.rows if r["found"]]
    key: dict[int, tuple[Fraction, int, float]] = {}
    for r in found:
        res, _ = s.found[r["search_deadline"]]
        key[id(r)] = (res.cost_exact, r["rented_nodes"], -r["interval"][0])
    passing = sorted((r for r in found if r["passes"]), key=lambda r: key[id(r)])
    chosen = passing[0] if passing else None
    cheaper = None
    if chosen is not None:
        below = [r for r in found if not r["passes"] and key[id(r)][0] < key[id(chosen)][0]]
        cheaper = max(below, key=lambda r: key[id(r)][0]) if below else None
    if s.budget.cancelled:
        stop = StopReason.CANCELLED
    elif s.ran_out:
        stop = StopReason.TIME_BUDGET
    else:
        stop = StopReason.HEURISTIC
    reason = None
    plan = None
    if chosen is None:
        best = max((r["interval"][0] for r in found), default=0.0)
        reason = (
            f"no candidate tried passes: the best 95% lower limit is {best:.4f} "
            f"({len(s.rows)} candidate(s), stopped: {stop})"
        )
    else:
        plan = s.found[chosen["search_deadline"]][0].schedule.to_assignment()
    return {
        "confidence": q,
        "deadline": s.deadline,
        "samples": asked.samples,
        "seed": asked.seed,
        "policy": asked.policy,
        "interval_level": 0.95,
        "rule": RULE,
        "met": chosen is not None,
        "rent": None if chosen is None else chosen["rent"],
        "cost": None if chosen is None else chosen["cost"],
        "premium": None
        if chosen is None
        else float(s.found[chosen["search_deadline"]][0].cost_exact - first.cost_exact),
        "chosen": chosen,
        "cheaper": cheaper,
        "candidates": s.rows,
        "plan": plan,
        "stop_reason": str(stop),
        "reason": reason,
        "caution": CAUTION,
    }


__all__ = [
    "CAUTION",
    "RULE",
    "Candidates",
    "check_rental_spread",
    "rent_to_confidence",
    "rental_confidence",
    "simulated_plan",
]
