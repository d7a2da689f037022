"""Renting to a deadline (issue 18): the cheapest mix of node kinds on top of the farm.

The model. The farm you have: existing ``Node``s (speed, provides, free_at) costing nothing
unless an optional ``hour_cost`` each. Kinds you may rent: name, speed, provides,
hour_cost, boot (seconds from the start before a rented node can run anything, billed),
max_count. A rented node is billed from the start until its last job ends (boot included),
rounded up to the billing unit (second, minute, hour) with an optional min_billed seconds;
a kind's node that runs nothing is not rented and costs nothing. Find a plan in which
every job (durations on a speed-1 node, ``requires`` tags) ends by the deadline, at the
least total cost; among equal costs, fewer rented nodes. (A farm node with an
``hour_cost`` is billed like a rented node, its ``free_at`` in the place of the boot.)

:func:`rent` answers a :class:`RentalArgs` with a :class:`RentalResult`: what to rent, the
plan (:mod:`.rental_plan`, checked exactly), its exact cost, and a lower bound on the
cheapest cost proven in exact arithmetic (:mod:`.rental_bounds`: ``work``,
``lp_patterns``; :mod:`.rental_cover`: ``cover``). The search (:mod:`.rental_search`): a
first plan (the free farm filled scarcest class first, then nodes of the kind with the
least cost per work), the ``cover`` relaxation's optimum packed node by node to the tick
(which proves the plan optimal when everything fits), for a batch of a few jobs an
exhaustive search (:mod:`.rental_branch`, the ``search`` bound), then moves that re-kind
or close rented nodes and, while the gap is open, more packings until the budget is
spent. :mod:`.rental_frontier` answers a list of deadlines.
The cost is for the given estimates and prices, not a purchasing decision.
"""

from __future__ import annotations

import dataclasses
import math
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

import numpy as np

from .budget import Budget, StopReason
from .certified import Certified
from .errors import Infeasible, InvalidInstance, Issue
from .model import FloatArray, Instance, Node
from .rational import down
from .rental_cover import hall_sets
from .rental_plan import Market, Offer
from .rental_search import Found, search
from .result import Schedule
from .sizing_result import BILLING

CAUTION = "The cost is for the given duration estimates and prices, not a purchasing decision."


@dataclass(frozen=True, slots=True)
class Kind:
    """A kind of node you may rent (see the module docstring)."""

    name: str
    speed: float
    provides: frozenset[str]
    hour_cost: float
    boot: float = 0.0
    max_count: int = 1000


@dataclass(frozen=True, eq=False)
class RentalArgs:
    """A rental request as core objects: the jobs, the farm nodes (``instance.nodes``, may
    be empty: see :func:`rental_instance`), the deadline and resolution (``instance``),
    the kinds, the billing unit, ``min_billed`` seconds and an optional hour cost per
    farm node."""

    instance: Instance
    kinds: tuple[Kind, ...]
    billing: str = "second"
    min_billed: float = 0.0
    farm_hour_cost: tuple[float | None, ...] | None = None

    def check(self) -> Market:
        """Validate and price the request (raises :class:`InvalidInstance` by field path,
        :class:`Infeasible` naming the jobs no node can run or finish in time)."""
        issues = self._issues()
        if issues:
            raise InvalidInstance(f"{len(issues)} problem(s) in the rental request", issues)
        inst = self.instance
        probes = [
            Node(f"rental-probe-{i}", k.speed, k.provides, k.boot) for i, k in enumerate(self.kinds)
        ]
        dataclasses.replace(inst, nodes=(*inst.nodes, *probes)).validate()
        costs = self.farm_hour_cost or (None,) * inst.m
        offers = [
            Offer(k.name, k.speed, k.provides, k.hour_cost, k.boot, k.max_count) for k in self.kinds
        ]
        # a farm node busy until the deadline or later can run nothing by it: it is left
        # out of the search (it runs nothing and costs nothing)
        open_ = [Fraction(nd.free_at) < Fraction(inst.deadline or 0) for nd in inst.nodes]
        offers += [
            Offer(nd.id, nd.speed, nd.provides, float(c), nd.free_at, 1, f)
            for f, (nd, c) in enumerate(zip(inst.nodes, costs, strict=True))
            if c is not None and open_[f]
        ]
        free = tuple(f for f, c in enumerate(costs) if c is None and open_[f])
        mk = Market(inst, tuple(offers), int(BILLING[self.billing]), float(self.min_billed), free)
        _check_runnable(mk)
        _check_counts(mk)
        return mk

    def _issues(self) -> list[Issue]:
        inst, out = self.instance, []
        if inst.deadline is None:
            out.append(Issue(("deadline",), "a rental needs a deadline"))
        if self.billing not in BILLING:
            out.append(Issue(("billing",), f"must be one of {', '.join(BILLING)}"))
        if not _finite_nonneg(self.min_billed):
            out.append(Issue(("min_billed",), "must be a finite number >= 0"))
        if self.farm_hour_cost is not None:
            if len(self.farm_hour_cost) != inst.m:
                out.append(Issue(("farm",), "one hour_cost (or none) per farm node"))
            for f, c in enumerate(self.farm_hour_cost):
                if c is not None and not _finite_nonneg(c):
                    out.append(Issue(("farm", f, "hour_cost"), "must be a finite number >= 0"))
        if not self.kinds and inst.m == 0:
            out.append(Issue(("kinds",), "no kind to rent and no farm node"))
        names = [k.name for k in self.kinds]
        for i, k in enumerate(self.kinds):
            where = ("kinds", i)
            if not k.name or names.index(k.name) != i:
                out.append(Issue((*where, "name"), f"empty or duplicate kind name {k.name!r}"))
            if not (_finite_nonneg(k.speed) and k.speed > 0):
                out.append(Issue((*where, "speed"), "must be a finite number > 0"))
            for field in ("hour_cost", "boot"):
                if not _finite_nonneg(getattr(k, field)):
                    out.append(Issue((*where, field), "must be a finite number >= 0"))
            if not (isinstance(k.max_count, int) and k.max_count >= 0):
                out.append(Issue((*where, "max_count"), "must be a whole number >= 0"))
        return out


def _finite_nonneg(x: object) -> bool:
    return isinstance(x, int | float) and math.isfinite(x) and x >= 0


def rental_instance(
    durations: FloatArray | list[float],
    farm: tuple[Node, ...] | list[Node],
    deadline: float,
    *,
    job_ids: list[str] | None = None,
    requires: list[frozenset[str]] | None = None,
    resolution: float = 1.0,
) -> Instance:
    """The ``instance`` of a :class:`RentalArgs` (the farm may be empty, which
    ``Instance.build`` refuses; :meth:`RentalArgs.check` validates it with the kinds)."""
    d = np.asarray(durations, dtype=np.float64)
    req = tuple(frozenset(r) for r in requires) if requires is not None else None
    return Instance(
        job_ids=tuple(job_ids) if job_ids is not None else tuple(f"job-{i}" for i in range(d.size)),
        durations=d,
        nodes=tuple(farm),
        requires=req if req and any(req) else None,
        deadline=float(deadline),
        resolution=float(resolution),
    )


def _check_runnable(mk: Market) -> None:
    """Refuse, by name, a job no node provides the tags for, and a job no node that can
    run it finishes by the deadline (exactly: start + duration / speed <= deadline)."""
    inst, d = mk.instance, mk.d_exact
    names, cls = mk.classes
    starts = [(nd.provides, Fraction(nd.free_at), Fraction(nd.speed)) for nd in inst.nodes]
    starts += [
        (o.provides, Fraction(o.boot), Fraction(o.speed)) for o in mk.offers if o.farm is None
    ]
    no_tag, too_long = [], []
    longest: dict[int, Fraction] = {}  # per class: the most work a node serving it can do
    for c, req in enumerate(names):
        caps = [sp * (d - st) for prov, st, sp in starts if req <= prov and st <= d]
        if caps:
            longest[c] = max(caps)
    durations = inst.durations
    for c in range(len(names)):
        members = np.flatnonzero(cls == c)
        if not members.size:
            continue
        if c not in longest:
            no_tag += members.tolist()
        elif Fraction(float(durations[members].max())) > longest[c]:  # the rare refusal
            too_long += [j for j in members.tolist() if Fraction(float(durations[j])) > longest[c]]
    no_tag.sort()
    too_long.sort()
    for bad, why in (
        (no_tag, "require tags no kind or farm node provides"),
        (too_long, "are too long for the deadline on every node that can run them"),
    ):
        if bad:
            ids = [inst.job_ids[j] for j in bad]
            raise Infeasible(
                f"{len(bad)} job(s) {why}: "
                + ", ".join(ids[:10])
                + (" ..." if len(ids) > 10 else ""),
                jobs=ids,
                issues=[
                    Issue(("jobs", j, "requires" if bad is no_tag else "duration"), why)
                    for j in bad[:20]
                ],
            )


def _check_counts(mk: Market) -> None:
    """Refuse, naming the kinds' ``max_count``, a set of jobs whose work beyond the free
    farm exceeds what every node that can run them can do, each kind at its max_count."""
    for sub, need, offers in hall_sets(mk):
        room_all = sum(
            (max(Fraction(0), mk.capacity(o, mk.htop(o))) * mk.offers[o].max_count for o in offers),
            Fraction(0),
        )
        if room_all < need:
            kinds = [o for o in sorted(offers) if mk.offers[o].farm is None]
            _, cls = mk.classes
            idx = np.flatnonzero(np.isin(cls, sorted(sub))).tolist()
            jobs = [mk.instance.job_ids[j] for j in idx]
            if not kinds:
                raise Infeasible(
                    f"the farm cannot finish {len(jobs)} job(s) by the deadline and no kind "
                    "can run them: " + ", ".join(jobs[:10]) + (" ..." if len(jobs) > 10 else ""),
                    jobs=jobs,
                    issues=[Issue(("jobs", j, "requires"), "no kind can run it") for j in idx[:20]],
                )
            raise InvalidInstance(
                f"more nodes are needed than max_count allows: {float(need):.6g} s of work "
                f"beyond the farm, at most {float(room_all):.6g} s on the kinds that can run it",
                [Issue(("kinds", o, "max_count"), "too few nodes for the work") for o in kinds],
            )


# -- the answer ------------------------------------------------------------------------


@dataclass(frozen=True, eq=False)
class RentalResult(Certified):
    """What to rent, the plan, its exact cost and a proven lower bound on the cheapest
    cost (:class:`~.certified.Certified` decides ``proven_optimal`` and ``gap``)."""

    schedule: Schedule
    rent: dict[str, int]
    cost_exact: Fraction
    bound_exact: Fraction
    bound_source: str
    bounds: dict[str, float]
    evidence: dict[str, Any]
    stop_reason: StopReason
    solve_seconds: float
    first_answer_seconds: float
    single_kind: dict[str, dict[str, Any]]
    kinds: tuple[Kind, ...]
    billing: str
    min_billed: float
    farm_hour_cost: tuple[float | None, ...] | None = None

    def __post_init__(self) -> None:
        object.__setattr__(self, "stop_reason", StopReason(self.stop_reason))
        self.check_certificate()

    @property
    def exact_value(self) -> Fraction:
        return self.cost_exact

    @property
    def exact_lower_bound(self) -> Fraction:
        return self.bound_exact

    @property
    def cost(self) -> float:
        """The plan's cost, exactly summed, rounded to the nearest float."""
        return float(self.cost_exact)

    @property
    def cost_lower_bound(self) -> float:
        """The proven bound, rounded down."""
        return down(self.bound_exact)

    def to_dict(self, *, with_plan: bool = True) -> dict[str, Any]:
        """The contract's rental answer."""
        inst = self.schedule.instance
        m = len(inst.nodes) - sum(self.rent.values())
        costs = self.farm_hour_cost or (None,) * m
        out: dict[str, Any] = {
            "farm": [
                {
                    "id": nd.id,
                    "speed": nd.speed,
                    "provides": sorted(nd.provides),
                    "free_at": nd.free_at,
                    "hour_cost": c,
                }
                for nd, c in zip(inst.nodes[:m], costs, strict=True)
            ],
            "kinds": [
                {
                    "name": k.name,
                    "speed": k.speed,
                    "provides": sorted(k.provides),
                    "hour_cost": k.hour_cost,
                    "boot": k.boot,
                    "max_count": k.max_count,
                }
                for k in self.kinds
            ],
            "billing": self.billing,
            "min_billed": self.min_billed,
            "deadline": inst.deadline,
            "rent": dict(self.rent),
            "cost": self.cost,
            "cost_lower_bound": self.cost_lower_bound,
            "bound_source": self.bound_source,
            "bounds": dict(self.bounds),
            "proven_optimal": self.proven_optimal,
            "gap": self.gap if math.isfinite(self.gap) else None,
            "stop_reason": str(self.stop_reason),
            "solve_seconds": self.solve_seconds,
            "first_answer_seconds": self.first_answer_seconds,
            "certificate": dict(self.evidence),
            "single_kind": dict(self.single_kind),
            "caution": CAUTION,
        }
        if with_plan:
            out["plan"] = self.schedule.to_assignment()
        return out


# -- the search ------------------------------------------------------------------------

#: share of the budget the mixed search may use before the single-kind answers
MIX_SHARE = 0.75


def rent(args: RentalArgs, budget: Budget) -> RentalResult:
    """The cheapest rental found within ``budget``, with a proven lower bound on the
    cheapest cost (see the module docstring)."""
    mk = args.check()
    found = search(mk, budget.child(MIX_SHARE) if len(args.kinds) > 1 else budget, budget)
    single: dict[str, dict[str, Any]] = {}
    for i, k in enumerate(args.kinds):
        share = 1.0 / (len(args.kinds) - i)
        single[k.name] = _single(
            mk, i, budget.child(share) if len(args.kinds) > 1 else budget, found
        )
    src = found.source
    stop = budget.stop_reason(proven=found.proven, ran_out=found.ran_out or budget.expired())
    return RentalResult(
        schedule=found.best.schedule,
        rent=found.best.rent,
        cost_exact=found.best.cost,
        bound_exact=found.bound,
        bound_source=src,
        bounds={k: down(v) for k, v in found.bounds.items()},
        evidence=found.evidence,
        stop_reason=stop,
        solve_seconds=budget.elapsed(),
        first_answer_seconds=found.first,
        single_kind=single,
        kinds=args.kinds,
        billing=args.billing,
        min_billed=args.min_billed,
        farm_hour_cost=args.farm_hour_cost,
    )


def _single(mk: Market, i: int, budget: Budget, mixed: Found) -> dict[str, Any]:
    """The cheapest answer renting kind ``i`` only (with the whole farm)."""
    kind = mk.offers[i]
    offers = (kind, *[o for o in mk.offers if o.farm is not None])
    sub = dataclasses.replace(mk, offers=offers)
    if len(mk.offers) - sum(o.farm is not None for o in mk.offers) == 1:
        found = mixed
    else:
        try:
            _check_runnable(sub)
            _check_counts(sub)
            found = search(sub, budget, budget)
        except (Infeasible, InvalidInstance) as e:
            return {"feasible": False, "reason": e.detail}
    return {
        "feasible": True,
        "rent": found.best.rent.get(kind.name, 0),
        "cost": float(found.best.cost),
        "cost_lower_bound": down(found.bound),
        "proven_optimal": found.proven,
    }


def warm_up_rental() -> None:
    """Load what a rental's first answer would otherwise pay for: the compiled kernel of
    ``Schedule.sequenced`` (``kernels.chain_starts``, used past 2,000 jobs) and the
    solver paths on a small request. For ``warmup.py`` to register."""
    from .kernels import chain_starts

    chain_starts(
        np.zeros(1, dtype=np.intp),
        np.zeros(1, dtype=np.int32),
        np.ones(1, dtype=np.float64),
        np.zeros(1, dtype=np.float64),
    )
    farm = [Node("warm-farm", 1.5, frozenset({"gpu"}), 60.0)]
    kinds = (
        Kind("warm-a", 1.0, frozenset(), 1.0, 30.0),
        Kind("warm-b", 2.0, frozenset({"gpu"}), 3.0),
    )
    d = [float(30 + (7 * i) % 200) for i in range(60)]
    req = [frozenset({"gpu"}) if i % 5 == 0 else frozenset() for i in range(60)]
    for billing in ("hour", "second"):
        rent(
            RentalArgs(rental_instance(d, farm, 3600.0, requires=req), kinds, billing), Budget(0.3)
        )


__all__ = [
    "CAUTION",
    "Kind",
    "RentalArgs",
    "RentalResult",
    "rent",
    "rental_instance",
    "warm_up_rental",
]
