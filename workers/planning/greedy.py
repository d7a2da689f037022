"""The fast rules: ``list`` (jobs in the given order) and ``longest_first`` (LPT).

Both give each job to the node that becomes free first (Graham 1966). ``longest_first``
takes the jobs longest first (Graham 1969). Ties are broken deterministically: equal
durations keep batch order, equal node loads go to the lowest node index.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from .kernels import assign_in_order
from .model import Instance, longest_first_order
from .result import Schedule


def list_ratio(m: int) -> float:
    """Graham (1966): list scheduling is within 2 - 1/m of the optimum."""
    return 2.0 - 1.0 / m


def lpt_ratio(m: int) -> float:
    """Graham (1969): LPT is within 4/3 - 1/(3m) of the optimum."""
    return 4.0 / 3.0 - 1.0 / (3.0 * m)


def coffman_sethi_ratio(k: int, m: int) -> float:
    """Coffman and Sethi (1976): with at least k jobs on every node, LPT is within
    (k+1)/k - 1/(km) of the optimum (formula from memory; property-tested against brute
    force in tests/workers/test_greedy.py)."""
    return (k + 1) / k - 1.0 / (k * m)


def longest_first_assign(
    durations: npt.NDArray[np.float64], m: int, order: npt.NDArray[np.intp] | None = None
) -> tuple[npt.NDArray[np.int32], npt.NDArray[np.float64]]:
    """LPT on raw durations: (node of each job, start of each job), indexed by job;
    ``order``: the jobs longest first, when already known."""
    if order is None:
        order = longest_first_order(durations)
    node_sorted, start_sorted = assign_in_order(durations[order], m)
    node_of = np.empty_like(node_sorted)
    node_of[order] = node_sorted
    start = np.empty_like(start_sorted)
    start[order] = start_sorted
    return node_of, start


def list_schedule(inst: Instance) -> Schedule:
    """Jobs in batch order, each onto the node that is free first."""
    node_of, start = assign_in_order(inst.durations, inst.m)
    return Schedule(inst, node_of, start)


def longest_first_schedule(inst: Instance) -> Schedule:
    """LPT: jobs longest first, each onto the node that is free first."""
    node_of, start = longest_first_assign(inst.durations, inst.m, inst.order_longest_first)
    return Schedule(inst, node_of, start)


def a_posteriori_ratio(schedule: Schedule) -> tuple[float, int]:
    """The Coffman-Sethi bound for an LPT schedule, with the k it used.

    k is the least number of jobs on any node; the ratio is never reported above
    Graham's 4/3 - 1/(3m), which is also what a node left empty gets (k = 0, possible when
    jobs of zero length remain). With no more jobs than nodes LPT is optimal (ratio 1).
    """
    m = schedule.instance.m
    if schedule.instance.n <= m:
        return 1.0, 1
    k = int(schedule.jobs_per_node().min())
    if k == 0:  # a node left empty (zero-length jobs): Coffman-Sethi needs k >= 1
        return lpt_ratio(m), 0
    return min(lpt_ratio(m), coffman_sethi_ratio(k, m)), k
