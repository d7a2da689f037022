"""Sizing to a confidence: the fewest nodes whose plan meets the deadline with P >= q.

:func:`confidence_target` makes the checks that need no sampling (closed forms);
:meth:`ConfidenceTarget.fewest_nodes` then searches the node count, simulating the
longest-first plan of each count it tries and deciding on the lower end of the 95% Wilson
interval; :func:`nodes_for_confidence` does both.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from fractions import Fraction
from typing import Any, TypedDict, Unpack

import numpy as np

from ..errors import Infeasible, InvalidInstance, Issue
from ..kernels import least_loaded
from ..model import FloatArray, Instance, Node, identical_nodes
from ..rational import ceil_div, exact_sum
from ..result import Schedule
from .simulation import Z95, Policy, _check_args, _simulate, wilson_interval
from .spread import SpreadModel, _with_p90, job_probabilities


@dataclass(frozen=True)
class ConfidenceSizing:
    """The fewest nodes whose plan meets the deadline with the asked confidence."""

    nodes: int
    confidence: float
    deadline: float
    samples: int
    level: float
    rule: str
    chosen: dict[str, Any]
    previous: dict[str, Any] | None
    curve: list[dict[str, Any]]
    nodes_lower_bound: int
    schedule: Schedule
    seed: int = 0
    policy: str = "static"

    def to_dict(self) -> dict[str, Any]:
        """The ``confidence_sizing`` object of a sizing result (``POST /v1/sizings``)."""
        return {
            "nodes_needed": self.nodes,
            "confidence": self.confidence,
            "deadline": self.deadline,
            "samples": self.samples,
            "seed": self.seed,
            "policy": self.policy,
            "interval_level": self.level,
            "rule": self.rule,
            "chosen": self.chosen,
            "fewer": self.previous,
            "deterministic_lower_bound": self.nodes_lower_bound,
            "curve": self.curve,
        }


def lpt_plan(inst: Instance) -> Schedule:
    """Longest first on identical nodes of any (common) speed."""
    speed = inst.nodes[0].speed
    node_of, start = least_loaded(inst.order_longest_first, inst.durations / speed, inst.m)
    return Schedule(inst, node_of, start)


def check_samples_show(model: SpreadModel, samples: int, q: float) -> None:
    """Refuse a q that ``samples`` cannot show: with N samples the Wilson lower limit is at
    most N / (N + z^2), reached when every sample meets the deadline (no limit without
    spread: the answer is exact)."""
    best_limit = 1.0 if model.deterministic else wilson_interval(samples, samples)[0]
    if best_limit < q:
        need = math.ceil(Z95 * Z95 * q / (1 - q))
        raise InvalidInstance(
            f"with {samples} samples the 95% lower limit cannot reach {q}",
            [Issue(("confidence_samples",), f"need at least about {need} samples for q = {q}")],
        )


def confidence_target(
    durations: Sequence[float] | FloatArray,
    deadline: float,
    q: float,
    *,
    speed: float = 1.0,
    duration_p90: Sequence[float | None] | None = None,
    spread: float | None = None,
    samples: int = 1000,
    policy: Policy = "static",
    job_ids: Sequence[str] | None = None,
) -> ConfidenceTarget:
    """The checks of a sizing to confidence ``q`` that need no sampling.

    Raises :class:`InvalidInstance` for bad arguments and when ``samples`` cannot show
    ``q`` at all (with N samples the Wilson lower limit is at most N / (N + z^2), reached
    when every sample meets the deadline), and :class:`Infeasible` when no node count can
    reach ``q``: with every job alone on a node the makespan is the longest job, so the
    product of the jobs' own chances (:func:`job_probabilities`, a closed form) bounds
    P(meet) from above for any plan. Returns the target, ready for its search
    (:meth:`ConfidenceTarget.fewest_nodes`).
    """
    d = np.asarray(durations, dtype=np.float64)
    issues: list[Issue] = []
    if not (isinstance(q, int | float) and not isinstance(q, bool) and 0 < q < 1):
        issues.append(Issue(("confidence",), "must be a number strictly between 0 and 1"))
    if not (isinstance(speed, int | float) and math.isfinite(speed) and speed > 0):
        issues.append(Issue(("node", "speed"), "must be a finite number > 0"))
    if not (isinstance(deadline, int | float) and math.isfinite(deadline) and deadline > 0):
        issues.append(Issue(("deadline",), "must be a finite number > 0"))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the sizing request", issues)
    _check_args(samples, policy, float(deadline))
    one = Instance.build(d, 1, deadline=deadline, job_ids=job_ids)
    if duration_p90 is not None:
        one = _with_p90(one, duration_p90)
    model = SpreadModel.from_instance(one, spread)
    check_samples_show(model, samples, q)
    reach = job_probabilities(model, one.durations / speed, float(deadline))
    alone = float(np.prod(reach))
    if alone < q:
        worst = np.argsort(reach, kind="stable")[: max(1, int(np.sum(reach < q)))][:20]
        raise Infeasible(
            f"no node count can meet the deadline with confidence {q}: even alone on a node, "
            f"the jobs together make it with probability {alone:.4g}",
            jobs=[one.job_ids[j] for j in worst],
            issues=[Issue(("confidence",), f"at most {alone:.4g} can be reached")]
            + [
                Issue(("jobs", j), f"alone on a node it meets the deadline with P = {reach[j]:.4g}")
                for j in worst
            ],
        )
    return ConfidenceTarget(one, model, deadline, q, speed, samples, policy)


class TargetOptions(TypedDict, total=False):
    """The keyword options of :func:`confidence_target` (its defaults apply to those left
    out), as :func:`nodes_for_confidence` takes them."""

    speed: float
    duration_p90: Sequence[float | None] | None
    spread: float | None
    samples: int
    policy: Policy
    job_ids: Sequence[str] | None


def nodes_for_confidence(
    durations: Sequence[float] | FloatArray,
    deadline: float,
    q: float,
    *,
    seed: int = 0,
    max_nodes: int | None = None,
    threads: int | None = None,
    **options: Unpack[TargetOptions],
) -> ConfidenceSizing:
    """Fewest identical nodes (of ``speed``) whose LPT plan meets ``deadline`` with P >= q:
    the checks that need no sampling (:func:`confidence_target`, with ``options``), then
    the search (:meth:`ConfidenceTarget.fewest_nodes`)."""
    target = confidence_target(durations, deadline, q, **options)
    return target.fewest_nodes(seed=seed, max_nodes=max_nodes, threads=threads)


@dataclass(frozen=True, eq=False)
class ConfidenceTarget:
    """A sizing to confidence ``q`` that passed the checks needing no sampling
    (:func:`confidence_target`): the jobs on one node (the node count is what the search
    varies), their spread model, and what the search decides by."""

    one: Instance
    model: SpreadModel
    deadline: float
    q: float
    speed: float
    samples: int
    policy: Policy

    def fewest_nodes(
        self, *, seed: int = 0, max_nodes: int | None = None, threads: int | None = None
    ) -> ConfidenceSizing:
        """Fewest identical nodes (of ``speed``) whose LPT plan meets ``deadline`` with
        P >= q.

        Decided on the **lower end of the 95% Wilson interval**, so that the answer holds
        despite the simulation's own error: a count passes when the Wilson lower limit of
        its P(meet) is at least ``q``. The search starts at the deterministic lower bound
        ``ceil(total / (speed * deadline))``, gallops upward (1, 2, 4, ... more nodes) to
        the first passing count, bisects back between the last failing and the first
        passing count, then steps down while the count below also passes; the answer
        passes and the count below it was simulated and failed. LPT plans are not monotone
        in the node count (Graham 1969's anomalies), so "fewest" is this search's answer,
        verified at the answer and one below. Every count uses the same seed: paired
        comparisons.
        """
        return _fewest_nodes(self, seed, max_nodes, threads)


def _fewest_nodes(
    target: ConfidenceTarget, seed: int, max_nodes: int | None, threads: int | None
) -> ConfidenceSizing:
    """The search of :meth:`ConfidenceTarget.fewest_nodes`."""
    one, model, deadline, q = target.one, target.model, target.deadline, target.q
    speed, samples, policy = target.speed, target.samples, target.policy
    n = one.n
    upper = n if max_nodes is None else min(int(max_nodes), max(n, 1))
    # the work needs this many nodes by the deadline, in exact arithmetic
    lower = max(1, ceil_div(exact_sum(one.durations), Fraction(speed) * Fraction(deadline)))
    if lower > upper:
        raise InvalidInstance(
            f"max_nodes {upper} is below the {lower} node(s) the work needs by the deadline",
            [Issue(("max_nodes",), f"at least {lower} node(s) are needed")],
        )
    rows: dict[int, dict[str, Any]] = {}
    plans: dict[int, Schedule] = {}

    def evaluate(c: int) -> bool:
        if c not in rows:
            nodes = tuple(Node(nd.id, speed=speed) for nd in identical_nodes(c))
            inst = replace(one, nodes=nodes)  # same jobs, p90s and deadline
            sched = lpt_plan(inst)
            res = _simulate(sched, model, samples, seed, float(deadline), policy, threads)
            iv = res.interval
            assert iv is not None
            rows[c] = {
                "nodes": c,
                "planned_makespan": sched.makespan,
                "deadline_probability": res.deadline_probability,
                "interval": list(iv),
                "makespan_p90": res.quantile(0.9),
                "passes": iv[0] >= q,
            }
            plans[c] = sched
        return bool(rows[c]["passes"])

    last_fail = lower - 1
    step = 1
    c = lower
    while not evaluate(c):
        last_fail = c
        if c >= upper:
            best = max(r["interval"][0] for r in rows.values())
            raise Infeasible(
                f"no count up to {upper} node(s) meets the deadline with confidence {q} "
                f"(best lower limit {best:.4f})",
                jobs=[],
                issues=[
                    Issue(("max_nodes",), f"no count up to {upper} passes")
                    if max_nodes is not None and upper == int(max_nodes)
                    else Issue(("confidence",), f"the best 95% lower limit is {best:.4f}")
                ],
            )
        c = min(upper, c + step)
        step *= 2
    # bisect between the last failing count and the first passing one
    lo, hi = last_fail, c
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if evaluate(mid):
            hi = mid
        else:
            lo = mid
    c = hi
    while c > 1 and evaluate(c - 1):
        c -= 1
    prev = rows[c - 1] if c > 1 else None  # the loop above evaluated it
    return ConfidenceSizing(
        nodes=c,
        confidence=float(q),
        deadline=float(deadline),
        samples=samples,
        level=0.95,
        rule="fewest nodes whose 95% Wilson lower limit of P(makespan <= deadline) >= q",
        chosen=rows[c],
        previous=prev,
        curve=[rows[key] for key in sorted(rows)],
        nodes_lower_bound=lower,
        schedule=plans[c],
        seed=seed,
        policy=policy,
    )
