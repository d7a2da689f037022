"""The rental frontier (issue 18, point 3): the cheapest cost for each of several deadlines,
so a script sees what an hour more or less is worth.

:func:`frontier` answers one rental request (:class:`.rental.RentalArgs`) at each deadline
of a list, each with its own share of the budget, by :func:`.rental.rent`: every point has
its plan's exact cost, a proven lower bound and ``proven_optimal``, or the reason no plan
meets that deadline. A later deadline never costs more at the optimum (a plan that meets a
deadline meets every later one, at the same bill), so the lower bound of a point also
holds for every earlier deadline and the cost of a point for every later one; the points
report both as found and as tightened by that rule (``bound_frontier``,
``cost_frontier``), each still a proof.
"""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from typing import Any

from .budget import Budget
from .errors import Infeasible, InvalidInstance, Issue
from .rational import down
from .rental import RentalArgs, RentalResult, rent


def frontier(args: RentalArgs, deadlines: list[float], budget: Budget) -> list[dict[str, Any]]:
    """The cheapest rental found at each deadline (in the order given), within ``budget``
    split evenly over the deadlines left. Each point: ``deadline``, ``feasible``, and when
    feasible ``cost``, ``cost_lower_bound``, ``proven_optimal``, ``rent``, ``gap`` and the
    tightened ``cost_frontier`` / ``bound_frontier``; else ``reason``."""
    bad = [
        Issue(("deadlines", i), "must be a finite number > 0")
        for i, d in enumerate(deadlines)
        if not (isinstance(d, int | float) and math.isfinite(d) and d > 0)
    ]
    if bad or not deadlines:
        raise InvalidInstance(
            "deadlines must be a nonempty list of finite numbers > 0",
            bad or [Issue(("deadlines",), "empty")],
        )
    order = sorted(range(len(deadlines)), key=lambda i: deadlines[i])
    found: dict[int, RentalResult | str] = {}
    for k, i in enumerate(order):
        inst = dataclasses.replace(args.instance, deadline=float(deadlines[i]))
        share = budget.child(1.0 / (len(order) - k))
        try:
            found[i] = rent(dataclasses.replace(args, instance=inst), share)
        except (Infeasible, InvalidInstance) as e:
            found[i] = e.detail
    # a bound holds for every earlier deadline, a cost for every later one
    bound_after: dict[int, Fraction] = {}
    best = Fraction(0)
    for i in reversed(order):
        res = found[i]
        if isinstance(res, RentalResult):
            best = max(best, res.exact_lower_bound)
        bound_after[i] = best
    cost_before: dict[int, Fraction | None] = {}
    cheapest: Fraction | None = None
    for i in order:
        res = found[i]
        if isinstance(res, RentalResult):
            cheapest = res.exact_value if cheapest is None else min(cheapest, res.exact_value)
        cost_before[i] = cheapest
    out = []
    for i, d in enumerate(deadlines):
        res = found[i]
        if not isinstance(res, RentalResult):
            out.append({"deadline": float(d), "feasible": False, "reason": res})
            continue
        cost = cost_before[i]
        bound = bound_after[i]
        if cost is None or bound > cost:
            raise ArithmeticError("a frontier bound passed a frontier cost: a bound is wrong")
        out.append(
            {
                "deadline": float(d),
                "feasible": True,
                "rent": dict(res.rent),
                "cost": res.cost,
                "cost_lower_bound": res.cost_lower_bound,
                "proven_optimal": res.proven_optimal,
                "gap": res.gap if math.isfinite(res.gap) else None,
                "cost_frontier": float(cost),
                "bound_frontier": down(bound),
                "proven_frontier": bound >= cost,
            }
        )
    return out


__all__ = ["frontier"]
