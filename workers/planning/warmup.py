"""One registry of the compiled kernels to load before a clock starts.

A cold numba compile takes seconds and loading a cached one a good part of a second; a
process that will time a solve (a worker, ``spanwright solve`` or ``size``, a test) calls
one of these first so that the cost is not charged to the first budget.
"""

from __future__ import annotations


def warm_up_sizing() -> None:
    """Every kernel of deadline sizing: the packings, the exact fill and the LP bound
    with its dive (:mod:`.sizing_lp`)."""
    from . import binpacking, perfect, sizing_lp

    binpacking.warm_up()
    perfect.warm_up()
    sizing_lp.warm_up()


def warm_up_exact() -> None:
    """Every kernel of the exact searches: identical nodes (LP bound included), farms
    (the pattern LP's knapsack and scipy's LP solver) and stage graphs (the list
    scheduler and its local walk)."""
    from . import farm_exact_lp
    from .exact import warm_up
    from .stages import listing

    warm_up()
    farm_exact_lp.warm_up()
    listing.warm_up()


def warm_up_rental() -> None:
    """What renting to a deadline loads: the schedule kernel and a small rental."""
    from .rental import warm_up_rental as warm

    warm()


def warm_up_all() -> None:
    """Everything: the greedy rules, the farm rules, sizing and the exact search."""
    from .model import Instance, Node
    from .solve import solve

    solve(Instance.build([3.0, 2.0, 2.0, 1.0], 2), "longest_first")
    solve(Instance.build([3.0, 2.0, 2.0, 1.0], 2), "list")
    farm = [Node("a", speed=2.0), Node("b", free_at=1.0)]
    solve(Instance.build([3.0, 2.0, 2.0, 1.0] * 600, farm), "longest_first")
    warm_up_sizing()
    warm_up_exact()
    warm_up_rental()
