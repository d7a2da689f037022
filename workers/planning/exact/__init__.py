"""``method: exact`` for identical nodes: constructions, local search, exact decision search.

See :mod:`.driver` for the anytime loop and how real durations relate to the integer ticks
the search works on, :mod:`.decision` for the search and its rules.
"""

from .driver import solve_exact as solve_exact

__all__ = ["solve_exact"]
