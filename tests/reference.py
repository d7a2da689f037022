"""Outside references the tests compare against: brute force and scipy's MILP (HiGHS).

Neither uses any spanwright code, so an agreement is evidence, not an echo.
"""

from __future__ import annotations

import numpy as np


def brute_force_makespan(p: list[float], m: int) -> float:
    """Optimum makespan by exhaustive search over assignments (n <= ~11).

    Jobs go longest first; a job may only open the first empty node (the nodes are
    identical, so the others are symmetric), and branches at or above the best are cut.
    """
    jobs = sorted(p, reverse=True)
    best = [sum(jobs)]
    loads = [0.0] * m

    def place(i: int) -> None:
        if i == len(jobs):
            best[0] = min(best[0], max(loads))
            return
        seen_empty = False
        for k in range(m):
            if loads[k] == 0.0:
                if seen_empty:
                    continue
                seen_empty = True
            if loads[k] + jobs[i] >= best[0] and i > 0:
                continue
            loads[k] += jobs[i]
            place(i + 1)
            loads[k] -= jobs[i]

    place(0)
    return best[0]


def milp_makespan(p: list[float], m: int, time_limit: float = 20.0) -> float:
    """Optimum makespan from the assignment MILP solved by scipy.optimize.milp (HiGHS).

    Variables x[j, k] (job j on node k) and C; minimise C subject to each job on one node
    and every node's load <= C; node loads are ordered to break symmetry. Raises if HiGHS
    does not prove optimality within ``time_limit``.
    """
    from scipy.optimize import Bounds, LinearConstraint, milp
    from scipy.sparse import lil_matrix

    n = len(p)
    nv = n * m + 1
    c = np.zeros(nv)
    c[-1] = 1.0
    rows = n + m + (m - 1)
    a = lil_matrix((rows, nv))
    lo = np.zeros(rows)
    hi = np.zeros(rows)
    for j in range(n):
        for k in range(m):
            a[j, j * m + k] = 1.0
        lo[j] = hi[j] = 1.0
    for k in range(m):
        r = n + k
        for j in range(n):
            a[r, j * m + k] = p[j]
        a[r, -1] = -1.0
        lo[r], hi[r] = -np.inf, 0.0
    for k in range(m - 1):  # load(k) >= load(k+1)
        r = n + m + k
        for j in range(n):
            a[r, j * m + k] = p[j]
            a[r, j * m + k + 1] = -p[j]
        lo[r], hi[r] = 0.0, np.inf
    integrality = np.ones(nv)
    integrality[-1] = 0
    ub = np.ones(nv)
    ub[-1] = np.inf
    res = milp(
        c,
        constraints=LinearConstraint(a.tocsr(), lo, hi),
        integrality=integrality,
        bounds=Bounds(np.zeros(nv), ub),
        options={"time_limit": time_limit, "mip_rel_gap": 0.0},
    )
    if res.status != 0:
        raise RuntimeError(f"HiGHS did not prove optimality: {res.message}")
    return float(res.fun)
