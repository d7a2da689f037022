"""Deadline sizing for stage graphs: the fewest nodes of one kind (with its slots) on which
every job of the graph ends by the deadline, proven from both sides (issue 17, point 4).

The lower side rests on one fact: a plan on ``k`` nodes is also a plan on ``k + 1`` (one
stays idle), so a count refuted by a proven bound refutes every smaller count too. Counts
are refuted by the stage bounds (:mod:`.stages.bounds`: critical path, mean load with
slots, limit load, heads and tails, energetic reasoning on small graphs) computed on the
graph with every time rounded *down* to whole ticks (:meth:`StageProblem.relaxed`), whose
optimum is at most the stated one; and by the exact mean load ``sum p / (speed * slots *
D)``. A graph whose critical path alone exceeds the deadline is refused with the path
named. The upper side is a plan that meets the deadline exactly for the stated durations
(:class:`.stages.result.StageResult`), found by the stage search from the lower count up.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass
from fractions import Fraction
from typing import Any, NamedTuple

from .budget import Budget, StopReason
from .certified import NodeCountAnswer
from .errors import Infeasible, InvalidInstance, Issue
from .model import Instance, Node
from .rational import array_sum
from .sizing_result import COST_MODEL, DEFAULT_BILLING, cost_of
from .stages.bounds import stage_bounds
from .stages.paths import longest_paths
from .stages.problem import StageProblem
from .stages.result import StageResult
from .stages.search import solve_stages

#: energetic reasoning is left out of the refutations above this many jobs (it is
#: quadratic); the other bounds stay
ENERGETIC_UP_TO = 300


class NodeFloor(NamedTuple):
    """The fewest nodes no bound refutes, the rule that refuted the count below (or
    ``mean_load``), and the count each rule proves."""

    nodes: int
    rule: str
    counts: dict[str, int]


@dataclass(frozen=True, eq=False)
class StageSizingArgs:
    """A sizing request for a stage graph: the graph on one node of the kind to rent
    (``template``: jobs, waits, limits, the node's speed, tags and slots, the deadline and
    resolution) and the options."""

    template: StageProblem
    max_nodes: int
    node_hour_cost: float | None
    billing: str = DEFAULT_BILLING

    @property
    def node(self) -> Node:
        return self.template.instance.nodes[0]

    @property
    def slots(self) -> int:
        return int(self.template.slots[0])

    @property
    def deadline(self) -> float:
        d = self.template.instance.deadline
        if d is None:
            raise InvalidInstance("sizing needs a deadline", [Issue(("deadline",), "required")])
        return d

    def on(self, k: int) -> StageProblem:
        """The graph on ``k`` nodes of the kind, named ``node-001``..."""
        t = self.template
        node = self.node
        width = max(3, len(str(k)))
        nodes = tuple(Node(f"node-{i + 1:0{width}d}", node.speed, node.provides) for i in range(k))
        return StageProblem.from_indices(
            t.instance.with_nodes(nodes),
            (t.after_ptr, t.after_idx),
            (t.uses_ptr, t.uses_idx),
            t.limit_names,
            t.capacities.tolist(),
            [self.slots] * k,
        )

    def check(self) -> NodeFloor:
        """The checks that need no plan: the critical path against the deadline (refused
        naming the path), and the lower bound against ``max_nodes``. Returns the lower
        bound with its rule and every rule's count."""
        d = Fraction(self.deadline)
        one = self.template.relaxed()
        paths = longest_paths(one)
        res = Fraction(self.template.instance.resolution)
        cp_ticks, path = paths.critical_path()
        if cp_ticks * res > d:
            ids = [self.template.instance.job_ids[j] for j in path]
            raise Infeasible(
                f"the critical path takes at least {float(cp_ticks * res):g} s on this kind "
                f"of node, beyond the deadline of {self.deadline:g} s: " + " -> ".join(ids),
                jobs=ids,
                issues=[
                    Issue(("deadline",), "shorter than the critical path: " + " -> ".join(ids))
                ],
            )
        floor = self._lower()
        if floor.nodes > self.max_nodes:
            raise Infeasible(
                f"at least {floor.nodes} nodes are needed ({floor.rule}), above max_nodes "
                f"({self.max_nodes})",
                jobs=[],
                issues=[Issue(("max_nodes",), f"at least {floor.nodes} nodes are needed")],
            )
        return floor

    def _lower(self) -> NodeFloor:
        """The fewest nodes no bound refutes (see the module docstring)."""
        inst = self.template.instance
        node = self.node
        work = array_sum(inst.durations) / Fraction(node.speed)
        per_node = self.slots * Fraction(self.deadline)
        mean = max(1, math.ceil(work / per_node))
        counts = {"mean_load": mean}
        lower, source = mean, "mean_load"
        cap = min(self.max_nodes, max(inst.n, 1))
        if lower >= cap:
            return NodeFloor(lower, source, counts)
        # the largest count refuted by the stage bounds (any refuted count refutes all
        # below it, so a binary search for one is enough)
        lo, hi = lower, cap  # lo: not yet refuted, hi: an upper end
        refuted_by = ""
        best = lower - 1
        while lo <= hi:
            mid = (lo + hi) // 2
            why = self._refutes(mid)
            if why:
                best, refuted_by = mid, why
                lo = mid + 1
            else:
                hi = mid - 1
        if best + 1 > lower:
            lower, source = best + 1, refuted_by
            counts[refuted_by] = lower
        return NodeFloor(lower, source, counts)

    def _refutes(self, k: int) -> str:
        """The name of a stage bound proving no plan on ``k`` nodes meets the deadline."""
        low = self.on(k).relaxed()
        found = stage_bounds(low, longest_paths(low), energetic_on=low.n <= ENERGETIC_UP_TO)
        res = Fraction(self.template.instance.resolution)
        best = found.best
        return best.name if best.ticks * res > Fraction(self.deadline) else ""


@dataclass(frozen=True, eq=False)
class StageSizingResult(NodeCountAnswer):
    """The fewest nodes of one kind on which the graph meets its deadline, and the plan."""

    args: StageSizingArgs
    nodes_needed: int
    #: the proven fewest nodes, the rule that proved it and every rule's count
    floor: NodeFloor
    plan: StageResult
    stop_reason: StopReason
    solve_seconds: float

    @property
    def nodes_lower_bound(self) -> int:  # type: ignore[override]
        return self.floor.nodes

    @property
    def bound_source(self) -> str:  # type: ignore[override]
        return self.floor.rule

    @property
    def cost(self) -> float | None:
        return cost_of(
            self.nodes_needed, self.plan.makespan, self.args.node_hour_cost, self.args.billing
        )

    def to_dict(self, *, with_plan: bool = True) -> dict[str, Any]:
        """The sizing result object, as for batches, with the graph's plan."""
        node = self.args.node
        deadline = self.args.deadline
        plan = self.plan.to_dict(with_assignment=with_plan)
        out: dict[str, Any] = {
            **self.contract_head(self.floor.counts, self.gap),
            "method": "stages",
            "plan_method": self.plan.method,
            "deadline": deadline,
            "makespan": self.plan.makespan,
            "slack": float(Fraction(deadline) - self.plan.exact_value),
            "node": {
                "speed": node.speed,
                "provides": sorted(node.provides),
                "slots": self.args.slots,
            },
            "jobs": self.args.template.n,
            "resolution": self.args.template.instance.resolution,
            "certificate": {"plan": plan["certificate"], "plan_bound": plan["lower_bound"]},
            "estimated_cost": self.cost,
            "node_hour_cost": self.args.node_hour_cost,
            "billing": self.args.billing,
            "cost_model": COST_MODEL,
            "curve": [],
            "stages": plan["stages"],
        }
        if with_plan:
            out["plan"] = plan["assignment"]
        return out

    def summary(self) -> str:
        verdict = "proven optimal" if self.proven_optimal else "not proven optimal"
        return "\n".join(
            [
                f"nodes needed    {self.nodes_needed} ({verdict}, stopped: {self.stop_reason})",
                f"lower bound     {self.nodes_lower_bound} node(s) ({self.bound_source})",
                f"deadline        {self.args.deadline:.6g} s; plan makespan "
                f"{self.plan.makespan:.6g} s ({self.plan.method})",
                f"solve time      {self.solve_seconds:.4f} s",
            ]
        )


def size_stages(args: StageSizingArgs, budget: Budget) -> StageSizingResult:
    """The fewest nodes of the kind on which a plan of the graph meets the deadline.

    From the lower bound up: ``longest_first`` on each count, then the anytime search
    with a share of what is left, until a plan meets the deadline exactly; a count's plan
    that misses sends the search one node up (plans never get worse with more nodes).
    """
    t0 = time.perf_counter()
    floor = args.check()
    deadline = Fraction(args.deadline)
    k = floor.nodes
    best: StageResult | None = None
    while k <= args.max_nodes:
        problem = args.on(k)
        got = solve_stages(problem, "longest_first", budget.child(0.0))
        if got.exact_value > deadline and not budget.expired():
            got = solve_stages(problem, "exact", budget.child(0.5))
        if got.exact_value <= deadline:
            best = got
            break
        k += 1 if budget.remaining() > 0 else max(1, k // 4)
    if best is None:
        raise Infeasible(
            f"no plan found on up to max_nodes ({args.max_nodes}) nodes meets the deadline",
            jobs=[],
            issues=[Issue(("max_nodes",), "no plan found within this many nodes")],
        )
    return StageSizingResult(
        args=args,
        nodes_needed=k,
        floor=floor,
        plan=best,
        stop_reason=budget.stop_reason(proven=floor.nodes == k, ran_out=budget.expired()),
        solve_seconds=time.perf_counter() - t0,
    )


def template_of(
    inst: Instance,
    after: list[Any] | None,
    uses: list[Any] | None,
    limits: dict[str, int] | None,
    slots: int,
) -> StageProblem:
    """The graph on one node of the kind (``inst`` has that node and the deadline)."""
    return StageProblem.build(inst, after=after, uses=uses, limits=limits, slots=[slots])
