"""``method: exact`` for identical nodes: constructions, local search, exact decision search.

See :mod:`.driver` for the anytime loop and how real durations relate to the integer ticks
the search works on, :mod:`.decision` for the search and its rules, :mod:`.lpbound` for the
LP bound of bin packing and the dives it guides.
"""

from .driver import solve_exact as solve_exact
from .driver import warm_up as warm_up

__all__ = ["solve_exact", "warm_up"]
