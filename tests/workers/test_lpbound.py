"""Tests of the LP bound of bin packing and its dive (workers/planning/exact/lpbound.py).

The references are outside the project: exhaustive enumeration of patterns and subsets,
the pattern LP solved by scipy.optimize.linprog (HiGHS), brute-force optima
(tests/reference.py) and instances whose optimum is known by construction.
"""

from __future__ import annotations

import itertools
from collections.abc import Iterator

import numpy as np
import numpy.typing as npt
import pytest
from reference import brute_force_makespan, milp_makespan

from workers.planning.exact import pricing
from workers.planning.exact.lpbound import (
    DIVE_FAILED,
    NOT_REFUTED,
    PACKED,
    PAUSED,
    REFUTED,
    LPBound,
    check_certificate,
)
from workers.planning.kernels import pure


def counts_of(p: list[int]) -> tuple[np.ndarray, np.ndarray]:
    """Distinct lengths (longest first) and their multiplicities."""
    v, c = np.unique(np.array(p, dtype=np.int64), return_counts=True)
    return v[::-1].copy(), c[::-1].astype(np.int64).copy()


def patterns(s: np.ndarray, d: np.ndarray, cap: int) -> list[tuple[int, ...]]:
    """Every non-empty pattern (count per length) that fits, by enumeration."""
    ranges = [range(min(int(di), cap // int(si)) + 1) for si, di in zip(s, d, strict=True)]
    out = []
    for a in itertools.product(*ranges):
        if any(a) and sum(x * int(si) for x, si in zip(a, s, strict=True)) <= cap:
            out.append(a)
    return out


def lp_value(s: np.ndarray, d: np.ndarray, cap: int) -> float:
    """min sum x_p subject to sum_p a_p x_p >= d, x >= 0, over all patterns (HiGHS)."""
    from scipy.optimize import linprog

    pats = np.array(patterns(s, d, cap), dtype=float).T
    res = linprog(np.ones(pats.shape[1]), A_ub=-pats, b_ub=-d.astype(float), method="highs")
    assert res.status == 0
    return float(res.fun)


def finish(lp: LPBound, how: str = "solve", step: int = 10**6) -> int:
    """Run a column generation to the end."""
    while True:
        st = lp.solve(step) if how == "solve" else lp.run(step)
        if st != PAUSED:
            return st


def test_knapsack_is_exact_for_every_capacity() -> None:
    """The DP table equals brute-force knapsack optima at every capacity, the pattern it
    returns is optimal, and each candidate is the best pattern made of one job of its
    length plus shorter ones (compiled and pure-Python twins alike)."""
    rng = np.random.default_rng(1)
    for _ in range(40):
        s = np.unique(rng.integers(2, 30, size=int(rng.integers(1, 6))))[::-1].astype(np.int64)
        d = rng.integers(1, 4, size=s.size).astype(np.int64)
        val = rng.integers(0, 50, size=s.size).astype(np.int64)
        dpcap = int(rng.integers(int(s[0]), 70))
        cap = int(rng.integers(int(s[0]), dpcap + 1))
        own = np.zeros(64, dtype=np.int32)
        cnt = np.zeros(64, dtype=np.int32)
        nch = pricing._chunks(s, d, dpcap, own, cnt)
        every = patterns(s, d, dpcap)

        def value(p: tuple[int, ...], val: np.ndarray = val) -> int:
            return sum(a * int(v) for a, v in zip(p, val, strict=True))

        def size(p: tuple[int, ...], s: np.ndarray = s) -> int:
            return sum(a * int(x) for a, x in zip(p, s, strict=True))

        for fn in (pricing._knapsack, pure(pricing._knapsack)):
            dp = np.zeros(dpcap + 1, dtype=np.int64)
            take = np.zeros((max(nch, 1), dpcap + 1), dtype=np.uint8)
            pat = np.zeros(s.size, dtype=np.int64)
            cand = np.zeros(s.size, dtype=np.int64)
            best = fn(s, val, dpcap, cap, own, cnt, nch, dp, take, pat, cand)
            for c in range(dpcap + 1):
                assert dp[c] == max([value(p) for p in every if size(p) <= c] + [0])
            assert best == dp[cap]
            assert (pat <= d).all() and int(pat @ s) <= cap and int(pat @ val) == best
            heads = [i for i in range(s.size) if val[i] > 0 and int(s[i]) <= cap]
            for i in heads:  # the best pattern whose longest length is i
                under = [p for p in every if p[i] == 1 and not any(p[:i]) and size(p) <= cap]
                assert cand[i] == max(value(p) for p in under)


def test_lp_value_equals_highs_on_all_patterns() -> None:
    """Run to the LP optimum (as many nodes as jobs, so nothing is refuted, no early exit),
    the value equals the LP over every pattern solved by HiGHS (the dual-optimal-inequality
    columns do not change it)."""
    rng = np.random.default_rng(2)
    for _ in range(40):
        p = [int(x) for x in rng.integers(5, 40, size=int(rng.integers(3, 9)))]
        cap = int(rng.integers(max(p), 2 * max(p) + 10))
        s, d = counts_of(p)
        lp = LPBound(s, len(p), cap, counts=d)
        while (st := lp.solve(10**6, early_exit=False)) == PAUSED:
            pass
        assert st == NOT_REFUTED
        assert lp.value == pytest.approx(lp_value(s, d, cap), rel=1e-7, abs=1e-7)


def brute_opt(p: list[int], m: int) -> int:
    return round(brute_force_makespan([float(x) for x in p], m))


@pytest.mark.parametrize("how", ["solve", "run"])
def test_never_refutes_a_feasible_capacity(how: str) -> None:
    """Property: whatever the rounding, the LP never refutes the optimum (brute force), and
    every certificate it gives re-checks in plain integers, but not at the optimum."""
    rng = np.random.default_rng(3 if how == "solve" else 4)
    refuted = []
    for _ in range(80):
        m = int(rng.integers(2, 5))
        p = [int(x) for x in rng.integers(1, 60, size=int(rng.integers(m + 1, 10)))]
        opt = brute_opt(p, m)
        low = max(max(p), -(-sum(p) // m))
        lp = LPBound(np.array(sorted(p, reverse=True)), m, low, dpcap=opt + 3)
        finish(lp, how)
        assert lp.refuted_up_to < opt
        refuted += [(lp, m, opt)] if lp.refuted_up_to >= low else []
    assert len(refuted) >= 3
    for lp, m, opt in refuted:
        cert = lp.certificate()
        assert cert["rule"] == "lp_farley"
        assert check_certificate(cert, m, lp.refuted_up_to)
        assert not check_certificate(cert, m, opt)


def test_never_refutes_the_optimum_of_larger_instances() -> None:
    """The same against scipy.optimize.milp (HiGHS) optima, few jobs per node."""
    rng = np.random.default_rng(5)
    for n, m in [(10, 4), (12, 5)]:
        p = [int(x) for x in rng.normal(100, 25, size=n).clip(20, 200)]
        opt = round(milp_makespan([float(x) for x in p], m))
        lp = LPBound(np.array(sorted(p, reverse=True)), m, max(p), dpcap=opt + 5)
        finish(lp)
        assert lp.refuted_up_to < opt
        # and it proves exactly opt - 1 on such batches more often than not
        assert lp.refuted_up_to < 0 or check_certificate(lp.certificate(), m, lp.refuted_up_to)


def planted(rng: np.random.Generator, m: int, u: int, pieces: int) -> list[int]:
    """m segments of length u cut into ``pieces`` parts each: the optimum is u."""
    out: list[int] = []
    for _ in range(m):
        cuts = np.sort(rng.choice(np.arange(1, u), size=pieces - 1, replace=False))
        out.extend(np.diff(np.concatenate(([0], cuts, [u]))).tolist())
    return out


def test_dive_packs_planted_instances_validly() -> None:
    """Dives at the planted optimum return valid packings (every job once, loads <= u);
    the LP is tight there, so most dives succeed."""
    rng = np.random.default_rng(6)
    packed = 0
    for trial in range(12):
        m = int(rng.integers(4, 12))
        u = int(rng.integers(200, 600))
        p = sorted(planted(rng, m, u, 3), reverse=True)
        q = np.array(p, dtype=np.int64)
        lp = LPBound(q, m, u)
        st = lp.dive(10**6)
        assert st in (PACKED, DIVE_FAILED)
        plans = [lp.packing(q)] if st == PACKED else []
        for node_of in plans:
            assert node_of.min() >= 0 and node_of.max() < m
            loads = np.bincount(node_of, weights=q, minlength=m)
            assert loads.max() <= u and loads.sum() == q.sum()
        packed += len(plans)
        assert trial >= 0
    assert packed >= 8


def random_batches(
    seed: int, count: int, lengths: tuple[int, int], *, more: int
) -> Iterator[tuple[int, list[int], int, npt.NDArray[np.int64]]]:
    """``count`` random batches: m of 2 or 3 nodes, m + ``more`` to 8 whole lengths drawn
    from ``lengths`` (half open); each with its optimum (brute force) and its lengths
    longest first."""
    rng = np.random.default_rng(seed)
    for _ in range(count):
        m = int(rng.integers(2, 4))
        p = [int(x) for x in rng.integers(*lengths, size=int(rng.integers(m + more, 9)))]
        yield m, p, brute_opt(p, m), np.array(sorted(p, reverse=True), dtype=np.int64)


def test_dive_never_claims_an_infeasible_capacity() -> None:
    """Below the optimum (brute force) a dive fails or is refuted, never packs."""
    for m, _, opt, q in random_batches(7, 40, (1, 40), more=1):
        lp = LPBound(q, m, opt - 1)
        assert lp.dive(10**6) in (DIVE_FAILED, REFUTED)


def test_pure_python_twin_agrees_with_compiled() -> None:
    """``cg_run.py_func`` (pure Python) gives the same statuses, refutations and dives."""
    rng = np.random.default_rng(8)
    for _ in range(10):
        m = int(rng.integers(2, 6))
        p = sorted(
            (int(x) for x in rng.integers(5, 60, size=int(rng.integers(m + 2, 14)))), reverse=True
        )
        q = np.array(p, dtype=np.int64)
        low = max(max(p), -(-sum(p) // m))
        a = LPBound(q, m, low, dpcap=low + 30)
        b = LPBound(q, m, low, dpcap=low + 30, compiled=False)
        assert finish(a, "run") == finish(b, "run")
        assert a.refuted_up_to == b.refuted_up_to and a.cap == b.cap
        assert a.iterations == b.iterations
        c = LPBound(q, m, a.cap)
        e = LPBound(q, m, a.cap, compiled=False)
        assert c.dive(10**6) == e.dive(10**6)
        for x, y in zip(c.fixed_bins(), e.fixed_bins(), strict=True):
            assert (x == y).all()


def test_paused_runs_resume_to_the_same_answer() -> None:
    """Slicing the column generation one pricing round at a time changes nothing."""
    rng = np.random.default_rng(9)
    for _ in range(8):
        m = int(rng.integers(3, 8))
        q = np.sort(rng.integers(20, 100, size=3 * m))[::-1].astype(np.int64)
        low = max(int(q[0]), -(-int(q.sum()) // m))
        whole = LPBound(q, m, low, dpcap=low + 40)
        sliced = LPBound(q, m, low, dpcap=low + 40)
        assert finish(whole, "run") == finish(sliced, "run", step=1)
        assert whole.refuted_up_to == sliced.refuted_up_to


def test_refutes_what_the_simple_bounds_cannot() -> None:
    """Jobs of nearly equal length (the Frangioni NU family): the LP refutes the capacity
    just below the optimum (brute force) where mean load cannot."""
    rng = np.random.default_rng(10)
    p = [int(x) for x in rng.integers(90, 101, size=10)] + [10]
    m = 3
    opt = brute_opt(p, m)
    assert -(-sum(p) // m) < opt
    lp = LPBound(np.array(sorted(p, reverse=True)), m, -(-sum(p) // m), dpcap=opt - 1)
    assert finish(lp, "run") == REFUTED
    assert lp.refuted_up_to == opt - 1
    assert check_certificate(lp.certificate(), m, opt - 1)


def test_not_refuted_reports_the_capacity_where_the_lp_fits() -> None:
    """NOT_REFUTED stops at a capacity whose LP is at most m: the LP over all patterns
    (HiGHS) agrees, and one below it is refuted."""
    rng = np.random.default_rng(11)
    for _ in range(10):
        m = int(rng.integers(2, 4))
        p = [int(x) for x in rng.integers(10, 40, size=int(rng.integers(m + 2, 8)))]
        s, d = counts_of(p)
        low = max(max(p), -(-sum(p) // m))
        lp = LPBound(s, m, low, dpcap=sum(p), counts=d)
        if finish(lp, "run") != NOT_REFUTED:
            continue
        assert lp_value(s, d, lp.cap) <= m + 1e-7
        # a capacity above the start was reached by refuting the one below it
        assert lp.cap <= low or (
            lp.refuted_up_to == lp.cap - 1 and lp_value(s, d, lp.cap - 1) > m - 1e-7
        )


def test_a_copy_moved_up_agrees_with_a_fresh_start() -> None:
    """The driver's secant probes copy a refuted probe and move it to a larger capacity:
    the verdict there matches a fresh column generation, never beyond the optimum."""
    for m, p, opt, q in random_batches(12, 12, (10, 60), more=2):
        low = max(max(p), -(-sum(p) // m))
        base = LPBound(q, m, low, dpcap=opt + 2)
        finish(base)
        if base.status == PAUSED or base.cap >= opt + 2 or base.trivial:
            continue
        target = max(base.cap + 1, opt - 1)
        moved = base.copy()
        moved.raise_cap(target)
        fresh = LPBound(q, m, target, dpcap=opt + 2)
        a, b = finish(moved), finish(fresh)
        assert (a == NOT_REFUTED) == (b == NOT_REFUTED)
        assert moved.refuted_up_to < opt and fresh.refuted_up_to < opt
        with pytest.raises(ValueError):
            moved.copy().raise_cap(target - 1)


def test_fully_pure_python_run_agrees_with_compiled() -> None:
    """With SPANWRIGHT_NO_JIT=1 every kernel (the helpers too) runs as plain Python; a
    subprocess computes bounds and dives that must equal the compiled ones here."""
    import json
    import os
    import subprocess
    import sys
    from pathlib import Path

    cases = [([9, 8, 7, 7, 6, 5, 5, 4, 3, 3, 2], 3), ([31, 29, 23, 19, 17, 13, 11, 7, 5], 2)]
    rng = np.random.default_rng(13)
    cases.append(([int(x) for x in rng.integers(20, 80, size=12)], 5))
    script = """
import json, sys
import numpy as np
from workers.planning.exact.lpbound import LPBound, PAUSED
out = []
for p, m in json.loads(sys.argv[1]):
    q = np.array(sorted(p, reverse=True), dtype=np.int64)
    low = max(max(p), -(-sum(p) // m))
    a = LPBound(q, m, low, dpcap=low + 20)
    while a.run(10**6) == PAUSED:
        pass
    b = LPBound(q, m, a.cap)
    st = b.dive(10**6)
    lens, bins = b.fixed_bins()
    out.append([a.status, a.cap, a.refuted_up_to, st, lens.tolist(), bins.tolist()])
print(json.dumps(out))
"""
    root = Path(__file__).resolve().parents[2]
    env = dict(os.environ, SPANWRIGHT_NO_JIT="1", PYTHONPATH=str(root))
    proc = subprocess.run(
        [sys.executable, "-c", script, json.dumps(cases)],
        capture_output=True,
        text=True,
        env=env,
        cwd=root,
        timeout=120,
        check=True,
    )
    slow = json.loads(proc.stdout)
    for (p, m), want in zip(cases, slow, strict=True):
        q = np.array(sorted(p, reverse=True), dtype=np.int64)
        low = max(max(p), -(-sum(p) // m))
        a = LPBound(q, m, low, dpcap=low + 20)
        finish(a, "run")
        b = LPBound(q, m, a.cap)
        st = b.dive(10**6)
        lens, bins = b.fixed_bins()
        assert [a.status, a.cap, a.refuted_up_to, st, lens.tolist(), bins.tolist()] == want
