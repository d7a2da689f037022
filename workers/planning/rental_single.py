"""One kind, no farm, no boot: today's deadline sizing (:mod:`.sizing`) as a rental
candidate and bound.

With a single kind to rent, no farm node and no boot, a rental is a set of identical
nodes that must finish every job by the deadline, which is exactly what
:func:`.sizing_request.size_request` answers: its plan is a rental plan (verified again
exactly by :func:`.rental_plan.verify`), and its proven lower bound ``L`` on the number of
nodes bounds the cost: at least ``L`` nodes run positive work (one running only
zero-length jobs could give them to another), each billed at least ``max(hmin, 1)``
units: ``cost >= L * max(hmin, 1) * unit price``.
"""

from __future__ import annotations

import dataclasses
from fractions import Fraction
from typing import Any

from .budget import Budget
from .errors import Infeasible, InvalidInstance
from .model import Node
from .rental_plan import Bin, Market, Verified, verify
from .sizing_request import SizingArgs, size_request


def applies(mk: Market) -> bool:
    """One priced offer (a kind), no farm node at all, no boot."""
    return (
        mk.instance.m == 0
        and len(mk.offers) == 1
        and mk.offers[0].farm is None
        and mk.offers[0].boot == 0
    )


def from_sizing(mk: Market, budget: Budget) -> tuple[Verified | None, Fraction, dict[str, Any]]:
    """The sizing's plan as a verified rental plan (or None), the ``nodes`` bound on the
    cost, and its evidence."""
    off = mk.offers[0]
    node = Node(off.name, off.speed, off.provides)
    base = dataclasses.replace(mk.instance, nodes=(node,))
    args = SizingArgs(base, off.max_count, off.hour_cost, "second", ())
    try:
        res = size_request(args, time_budget=max(0.01, budget.remaining()))
    except (Infeasible, InvalidInstance) as e:
        return None, Fraction(0), {"skipped": e.detail}
    lower = res.nodes_lower_bound
    # at least ``lower`` nodes run positive work (a node of zero-length jobs only could
    # give them to another), each billed at least one unit once it ends after 0
    least = max(mk.hmin(0), 1 if float(mk.instance.durations.max(initial=0.0)) > 0 else 0)
    bound = lower * least * mk.unit_cost(0)
    bins = [Bin(0, None) for _ in range(res.nodes_needed)]
    p = mk.instance.durations
    for j, k in enumerate(res.schedule.node_of.tolist()):
        bins[k].jobs.append(j)
        bins[k].work += float(p[j])
    v = verify(mk, [b for b in bins if b.jobs])
    return (
        v,
        bound,
        {
            "nodes_lower_bound": lower,
            "bound_source": res.bound_source,
            "nodes_needed": res.nodes_needed,
            "proven_optimal": res.proven_optimal,
        },
    )
