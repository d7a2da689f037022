"""An exact plan for small farms: a MILP solved by HiGHS through ``scipy.optimize.milp``.

Variables: ``x[j, k]`` in {0, 1} for every job ``j`` and node ``k`` that may run it, and the
makespan ``C``. Minimise ``C`` subject to every job on exactly one node and, for every node,
``f_k + sum_j x[j, k] p_j / s_k <= C``. ``C`` is boxed between a proven lower bound and the
makespan of a known plan (both valid: the optimum lies between them). HiGHS stops at
``time_limit``; its best plan and its dual bound are returned either way.

Both are **hints**. HiGHS works in floating point with tolerances (integrality, primal and
dual feasibility, presolve reductions); at durations of 1e8 s and more its "optimal" dual
bound was found up to 50 % above the true optimum. The caller measures the plan again in
exact arithmetic and never reports the dual bound as proven (``farm_exact`` proves).
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
import numpy.typing as npt

from .farm_bounds import Eligibility
from .model import Instance

#: instances with more (job, node) pairs than this are not given to the MILP: above it,
#: HiGHS rarely finishes in a budget of a second and its share of the time does more in
#: the exact decision search (``farm_exact.bisect``: on bench/farm_exact.py's farms of
#: 500-2500 pairs it found no plan at all in half the time and took that half from the
#: search, which proves them; issue 21)
MAX_PAIRS = 200
#: ... nor instances with more jobs than this
MAX_JOBS = 300


@dataclass(frozen=True)
class MilpOutcome:
    """What HiGHS returned: a plan (node of each job) if it found one, and its bound."""

    node_of: npt.NDArray[np.int32] | None
    dual_bound: float
    optimal: bool
    status: int
    message: str


def small_enough(inst: Instance, elig: Eligibility) -> bool:
    """True when the MILP has at most MAX_PAIRS binaries and MAX_JOBS jobs."""
    pairs = int(elig.eligible[elig.job_type].sum()) if inst.n else 0
    return inst.n <= MAX_JOBS and pairs <= MAX_PAIRS


def _twin_pairs(inst: Instance) -> list[tuple[int, int]]:
    """Consecutive pairs of interchangeable nodes (same speed, provides and free_at)."""
    last: dict[tuple[float, frozenset[str], float], int] = {}
    out: list[tuple[int, int]] = []
    for k, nd in enumerate(inst.nodes):
        key = (nd.speed, nd.provides, nd.free_at)
        if key in last:
            out.append((last[key], k))
        last[key] = k
    return out


def solve_milp(
    inst: Instance, elig: Eligibility, lower: float, upper: float, time_limit: float
) -> MilpOutcome:
    """Solve the MILP of the module doc with HiGHS in at most ``time_limit`` seconds."""
    from scipy.optimize import Bounds, LinearConstraint, milp  # heavy: only when needed
    from scipy.sparse import coo_matrix

    n, m = inst.n, inst.m
    s = np.array([nd.speed for nd in inst.nodes], dtype=np.float64)
    f = np.array([nd.free_at for nd in inst.nodes], dtype=np.float64)
    ok = elig.eligible[elig.job_type]  # [n, m]
    jj, kk = np.nonzero(ok)
    nv = jj.size + 1  # the last variable is C
    c = np.zeros(nv)
    c[-1] = 1.0
    # every job on exactly one node
    a1 = coo_matrix((np.ones(jj.size), (jj, np.arange(jj.size))), shape=(n, nv))
    # every node's finish below C:  sum_j p_j / s_k x_jk - C <= -f_k
    rows = np.concatenate((kk, np.arange(m)))
    cols = np.concatenate((np.arange(jj.size), np.full(m, nv - 1)))
    vals = np.concatenate((inst.durations[jj] / s[kk], -np.ones(m)))
    a2 = coo_matrix((vals, (rows, cols)), shape=(m, nv))
    cons = [
        LinearConstraint(a1.tocsr(), np.ones(n), np.ones(n)),
        LinearConstraint(a2.tocsr(), -np.inf, -f),
    ]
    # symmetry: among interchangeable nodes (same speed, tags, free_at) loads are ordered,
    # which every plan satisfies after renaming those nodes, so the optimum is kept
    pairs = _twin_pairs(inst)
    if pairs:
        r3, c3, v3 = [], [], []
        for row, (a, b) in enumerate(pairs):
            for k, sign in ((a, 1.0), (b, -1.0)):
                sel = np.flatnonzero(kk == k)
                r3.append(np.full(sel.size, row))
                c3.append(sel)
                v3.append(sign * inst.durations[jj[sel]])
        a3 = coo_matrix(
            (np.concatenate(v3), (np.concatenate(r3), np.concatenate(c3))),
            shape=(len(pairs), nv),
        )
        cons.append(LinearConstraint(a3.tocsr(), 0.0, np.inf))
    lo = np.zeros(nv)
    hi = np.ones(nv)
    lo[-1], hi[-1] = lower, max(upper, lower)
    integrality = np.ones(nv)
    integrality[-1] = 0
    res = milp(
        c,
        constraints=cons,
        integrality=integrality,
        bounds=Bounds(lo, hi),
        options={"time_limit": max(0.01, time_limit), "mip_rel_gap": 0.0, "disp": False},
    )
    node_of: npt.NDArray[np.int32] | None = None
    if res.x is not None:
        x = res.x[:-1]
        node_of = np.full(n, -1, dtype=np.int32)
        # each job goes where its x is largest (HiGHS returns 0/1 up to tolerance)
        best = np.full(n, -1.0)
        for v in np.argsort(x, kind="stable").tolist():
            j = int(jj[v])
            if x[v] > best[j]:
                best[j], node_of[j] = x[v], int(kk[v])
    dual = getattr(res, "mip_dual_bound", None)
    dual_bound = float(dual) if dual is not None and np.isfinite(dual) else lower
    return MilpOutcome(
        node_of=node_of,
        dual_bound=max(dual_bound, lower),
        optimal=res.status == 0,
        status=int(res.status),
        message=str(res.message),
    )
