"""Sizing from a sizing request in core objects (:class:`~.sizing.SizingArgs`).

The service reads a ``POST /v1/sizings`` body into :class:`SizingArgs` at its edge
(``service/reading/sizing.py``); :meth:`SizingArgs.check` runs the checks that need no
search (the API answers those 422s at once); :func:`size_request` sizes.
"""

from __future__ import annotations

from collections.abc import Callable

from .budget import Budget
from .sizing import SizingArgs as SizingArgs  # read at the service's edge, sized here
from .sizing import SizingProgressHook, SizingResult, _size


def size_request(
    args: SizingArgs,
    *,
    time_budget: float,
    progress: SizingProgressHook | None = None,
    should_stop: Callable[[], bool] | None = None,
) -> SizingResult:
    """Size ``args`` (the fewest nodes of its kind meeting its deadline) within
    ``time_budget`` seconds."""
    return _size(args, Budget(float(time_budget), should_stop), progress)
