"""Phases of deadline sizing (:mod:`.sizing`) that move the interval it keeps.

``lp_phase``     the matching and LP bounds of :mod:`.sizing_lp`, and their plan at the
                 bound (the LP's fractional packing rounded by :mod:`.sizing_round`, or
                 its dive);
``split_phase``  on batches of long jobs and short fillers (:mod:`.sizing_split`): the
                 filler-waste bound, the plan that packs the long jobs first and fills
                 their gaps exactly (their gaps repaired by :mod:`.sizing_gaps` so that
                 the plan reaches the lower bound when it can), and the LP bound on the
                 long jobs alone (on a farm night of renders and transcode chunks, the
                 renders decide the optimum and their LP, without the chunks' rows,
                 ends within the budget).
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass
from typing import Any

import numpy as np
import numpy.typing as npt

from .budget import Budget
from .sizing_fit import Fit
from .sizing_lp import LPOutcome, lp_lower, lp_step
from .sizing_round import round_packing
from .sizing_split import filler_waste_bound, split_plan, split_point

F64 = npt.NDArray[np.float64]
I64 = npt.NDArray[np.int64]

#: the long-jobs plan may use this share of the split phase's time (the rest is for the
#: LP bound on the long jobs), which runs on at most LONG_LP_LENGTHS distinct lengths
SPLIT_PLAN_SHARE, LONG_LP_LENGTHS = 0.35, 2048
#: the gap repair of the long jobs' plan at the lower bound may use this share of the
#: split phase's time (within it, the fills keep the time they need)
REGAP_SHARE = 0.5


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


def split_phase(
    state: State,
    batch: tuple[I64, I64, int],
    fit: Fit,
    budget: Budget,
    notes: tuple[dict[str, int], dict[str, Any], dict[str, int]],
    report: Callable[[], None],
) -> None:
    """On a batch of long jobs and short fillers (:mod:`.sizing_split`): the bound from
    the waste the fillers cannot avoid, and the plan that packs the long jobs first and
    fills their gaps exactly."""
    q_lo, q_hi, cap = batch
    split = split_point(q_lo, cap)
    if split <= 0:
        return
    bounds, evidence, upper_bounds = notes
    lower, waste = filler_waste_bound(q_lo, cap, split)
    evidence["filler_waste"] = {"split_ticks": split, "waste_ticks": waste}
    if lower > state.lower:
        state.lower, state.source = lower, "filler_waste"
        bounds["filler_waste"] = lower
        report()
    if state.lower >= state.upper or budget.expired():
        return
    left = budget.remaining()
    # at the lower bound itself when the long jobs' gaps allow it (:mod:`.sizing_gaps`)
    out = split_plan(
        q_hi, cap, split, SPLIT_PLAN_SHARE * left, left, state.lower, REGAP_SHARE * left
    )
    if out is None:  # out of time (every job fits a node: checked before)
        return
    bin_of, used, start = fit.settle(*out)
    upper_bounds["split_fill"] = used
    if used < state.upper:
        state.upper, state.method = used, "split_fill"
        state.bin_of, state.start = bin_of, start
        report()
    if state.lower < state.upper and not budget.expired():
        _long_lp(state, (q_lo, cap, split), out[0], budget, notes)
        report()


def _long_lp(
    state: State,
    batch: tuple[I64, int, int],
    plan: npt.NDArray[np.int32],
    budget: Budget,
    notes: tuple[dict[str, int], dict[str, Any], dict[str, int]],
) -> None:
    """The LP bound (:func:`.sizing_lp.lp_lower`, Farley's certificate checked in
    integers) on the long jobs alone, when the plan needs more nodes for them than the
    bound proves: the long jobs that share a node with no other long job (it and the
    shortest other one exceed the capacity) need a node each, and the LP bounds the
    nodes of the others; dropping the short jobs only lowers the optimum, so their sum
    bounds the batch. The plan's nodes (``plan``, a node per job) seed its columns."""
    q_lo, cap, split = batch
    longs = np.flatnonzero(q_lo >= split)
    if longs.size < 2 or np.unique(plan[longs]).size <= state.lower:
        return
    ql = q_lo[longs]
    two = np.partition(ql, 1)[:2]
    alone = ql + np.where(ql == two[0], two[1], two[0]) > cap
    rest = longs[~alone]
    single = int(alone.sum())
    if np.unique(q_lo[rest]).size > LONG_LP_LENGTHS:
        return
    out = LPOutcome(0)
    if rest.size:
        out = lp_lower(
            q_lo[rest],
            cap,
            state.lower - single,
            state.upper - single,
            budget.remaining(),
            budget.expired,
            exact_lengths=LONG_LP_LENGTHS,
            packing=plan[rest],
        )
    bounds, evidence, _ = notes
    evidence["lp_long_jobs"] = {"alone": single, "others": int(rest.size), **out.evidence}
    if out.lower + single > state.lower:
        state.lower, state.source = out.lower + single, "lp_farley"
        bounds["lp_farley"] = state.lower
