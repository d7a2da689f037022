"""The LP phase of deadline sizing (:mod:`.sizing`): the matching and LP bounds of
:mod:`.sizing_lp`, and their plan at the bound (the LP's fractional packing rounded by
:mod:`.sizing_round`, or its dive), taken into the interval a sizing keeps."""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from .budget import Budget
from .sizing_fit import Fit
from .sizing_lp import LPOutcome, lp_step
from .sizing_round import round_packing

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]


@dataclass
class State:
    """The interval so far and the plan that proves its upper end."""

    lower: int
    source: str
    upper: int
    method: str
    bin_of: npt.NDArray[np.int32]  # by job index
    start: F64


def take_lp(
    out: LPOutcome,
    state: State,
    fit: Fit,
    notes: tuple[dict[str, int], dict[str, Any], dict[str, int]],
) -> None:
    """The matching and LP bounds' raise of the lower bound, and the LP dive's packing at
    the new bound if it found one (:mod:`.sizing_lp`); ``notes`` are the result's bounds,
    evidence and upper bounds."""
    bounds, evidence, upper_bounds = notes
    rule = str(out.evidence.get("rule", "lp_farley"))
    evidence["lp"] = out.evidence
    if out.lower > state.lower:
        state.lower, state.source = out.lower, rule
        bounds[rule] = out.lower
    if out.packing is not None and out.bins < state.upper:
        name = "lp_round" if out.evidence.get("rounded") else "lp_dive"
        bin_of, used, start = fit.settle(out.packing, out.bins)
        upper_bounds[name] = used
        if used < state.upper:
            state.upper, state.method = used, name
            state.bin_of, state.start = bin_of, start


def lp_phase(
    state: State,
    batch: tuple[I64, I64, int],
    fit: Fit,
    lp_budget: Budget,
    notes: tuple[dict[str, int], dict[str, Any], dict[str, int]],
    report: Callable[[], None],
    dive: bool = True,
) -> bool:
    """The matching and LP bounds and the LP's plan at the bound (:func:`.sizing_lp.lp_step`)
    within ``lp_budget`` (without the LP's dives unless ``dive``); ``batch`` is (ticks
    rounded down, up, capacity). True if the caller cancelled."""
    q_lo, q_hi, cap = batch
    out = lp_step(
        q_lo,
        q_hi,
        cap,
        state.lower,
        state.upper,
        lp_budget.remaining(),
        lp_budget.expired,
        round_packing,
        state.bin_of,
        dive,
    )
    take_lp(out, state, fit, notes)
    report()
    return lp_budget.cancelled
