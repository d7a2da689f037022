"""The warm-started LP bound of deadline sizing, its seeding with a packing, and the
packing at the bound rounded from the LP's fractional solution (sizing_lp, sizing_round,
LPBound.raise_nodes / add_patterns).

References, none of them spanwright code: the LP over every pattern solved by
scipy.optimize.linprog (HiGHS; ``lp_value`` of test_lpbound enumerates the patterns),
the fewest bins by brute force over set partitions (n <= 8; test_sizing_exact), and
planted batches whose optimum is known by construction (``m`` deadlines cut into pieces:
the total work proves ``m`` nodes and the cutting packs them). The rounding is the
residual rounding heuristic of cutting stock (Waescher and Gau 1996, "Heuristics for the
integer one-dimensional cutting stock problem: a computational study", OR Spektrum 18;
cited from memory): it may fail, but whatever it returns must be a packing.
"""

from __future__ import annotations

import math

import numpy as np
import pytest

from tests.workers.test_lpbound import counts_of, lp_value
from tests.workers.test_sizing_lp import fewest_bins
from workers.planning.exact import lpbound
from workers.planning.exact.lpbound import NOT_REFUTED, PAUSED, REFUTED, LPBound
from workers.planning.sizing import size
from workers.planning.sizing_lp import lp_lower, lp_step
from workers.planning.sizing_round import round_packing


def ffd(q: list[int], cap: int) -> np.ndarray:
    """First fit decreasing, written out here: the node of every job."""
    order = sorted(range(len(q)), key=lambda j: -q[j])
    loads: list[int] = []
    node = np.zeros(len(q), dtype=np.int32)
    for j in order:
        k = next((i for i, v in enumerate(loads) if v + q[j] <= cap), len(loads))
        if k == len(loads):
            loads.append(0)
        loads[k] += q[j]
        node[j] = k
    return node


def planted(rng: np.random.Generator, m: int, cap: int, lo: int) -> list[int]:
    """``m`` capacities cut into 2 or 3 pieces of at least ``lo``: the optimum is m."""
    out: list[int] = []
    for _ in range(m):
        if rng.random() < 0.5:
            a = int(rng.integers(lo, cap - lo + 1))
            out += [a, cap - a]
        else:
            a = int(rng.integers(lo, cap - 2 * lo + 1))
            b = int(rng.integers(lo, cap - a - lo + 1))
            out += [a, b, cap - a - b]
    return out


def loads_fit(q: list[int], node_of: np.ndarray, bins: int, cap: int) -> bool:
    loads = [0] * bins
    for v, k in zip(q, node_of.tolist(), strict=True):
        loads[k] += v  # an index past ``bins`` raises
    return max(loads) <= cap


def test_warm_raise_reaches_the_rounded_up_highs_lp_value() -> None:
    """LPBound refuted at m and raised (raise_nodes) keeps its columns: it never refutes
    a node count at or above the LP value (HiGHS over every pattern) and stops at that
    value rounded up, as a fresh column generation per count would."""
    rng = np.random.default_rng(11)
    for _ in range(30):
        p = [int(x) for x in rng.integers(5, 40, size=int(rng.integers(4, 9)))]
        cap = int(rng.integers(max(p), 2 * max(p) + 10))
        s, d = counts_of(p)
        z = lp_value(s, d, cap)
        m = max(1, -(-sum(p) // cap))
        lp = LPBound(s, m, cap, counts=d)
        while True:
            st = lp.run(10**6)
            assert st != PAUSED
            if st != REFUTED:
                break
            assert m < z - 1e-9
            m += 1
            lp.raise_nodes(m)
        assert st == NOT_REFUTED
        assert math.ceil(z - 1e-6) <= m <= math.ceil(z + 1e-9)


def test_raise_nodes_refuses_to_go_down_or_to_move_while_diving() -> None:
    """The node count only grows (the certificates of a smaller one are not reused)."""
    s, d = counts_of([9, 8, 7, 6, 5, 5])
    lp = LPBound(s, 3, 14, counts=d)  # 40 ticks of work, 42 of room: not trivial
    assert not (lp.trivial or lp.too_large)
    with pytest.raises(ValueError):
        lp.raise_nodes(2)
    lp.dive(10)
    with pytest.raises(RuntimeError):
        lp.raise_nodes(4)


def test_add_patterns_keeps_only_the_rows_that_fit() -> None:
    """A row over the capacity or over a length's count is left out (arithmetic here)."""
    s, d = counts_of([9, 8, 7, 6, 5, 5])  # s = 9 8 7 6 5, d = 1 1 1 1 2
    lp = LPBound(s, 3, 14, counts=d)
    rows = np.array(
        [
            [0, 1, 0, 1, 0],  # 8 + 6 = 14: fits
            [1, 0, 0, 0, 1],  # 9 + 5 = 14: fits
            [1, 1, 0, 0, 0],  # 17 > 14
            [0, 0, 0, 0, 3],  # three 5s: only two jobs of that length
            [0, 0, 0, 0, 0],  # empty
        ],
        dtype=np.int64,
    )
    assert lp.add_patterns(rows) == 2


@pytest.mark.parametrize("max_lengths", [256, 3])
def test_lp_lower_seeded_never_exceeds_the_brute_force_optimum(
    max_lengths: int, monkeypatch: pytest.MonkeyPatch
) -> None:
    """With a packing as its first columns, and with the grouping forced (3 lengths, then
    the exact lengths from the bound reached), the bound stays at most the optimum."""
    monkeypatch.setattr(lpbound, "MAX_LENGTHS", max_lengths)
    rng = np.random.default_rng(12)
    for _ in range(40):
        cap = int(rng.integers(20, 100))
        q = [int(x) for x in rng.integers(1, cap + 1, int(rng.integers(2, 9)))]
        node_of = ffd(q, cap)
        opt = fewest_bins(q, cap)
        out = lp_lower(
            np.array(q, dtype=np.int64), cap, 1, int(node_of.max()) + 1, 5.0, packing=node_of
        )
        assert out.lower <= opt


def test_lp_lower_on_exact_lengths_proves_the_highs_lp_value() -> None:
    """Grouping forced to 4 lengths: the pass on the exact lengths still reaches the LP
    value rounded up (HiGHS over every pattern), or the packing's count if lower."""
    rng = np.random.default_rng(13)
    for _ in range(15):
        p = [int(x) for x in rng.integers(5, 40, size=int(rng.integers(6, 9)))]
        cap = int(rng.integers(max(p), 2 * max(p)))
        s, d = counts_of(p)
        z = lp_value(s, d, cap)
        node_of = ffd(p, cap)
        upper = int(node_of.max()) + 1
        saved = lpbound.MAX_LENGTHS
        lpbound.MAX_LENGTHS = 4
        try:
            out = lp_lower(np.array(p, dtype=np.int64), cap, 1, upper, 5.0, packing=node_of)
        finally:
            lpbound.MAX_LENGTHS = saved
        assert out.lower == min(upper, math.ceil(z - 1e-6))


def test_rounded_packings_are_packings_at_the_planted_optimum() -> None:
    """Planted batches (optimum m by construction, every node full to the tick): when the
    LP's fractional packing is rounded, the plan puts every job on one of m nodes within
    the capacity; and it does so on most of them."""
    rng = np.random.default_rng(14)
    rounded = 0
    for _ in range(12):
        m, cap = int(rng.integers(20, 60)), 600
        q = planted(rng, m, cap, 30)
        node_of = ffd(q, cap)
        qa = np.array(q, dtype=np.int64)
        out = lp_step(qa, qa, cap, m, int(node_of.max()) + 1, 5.0, None, round_packing, node_of)
        assert out.lower == m
        got = [out.packing] if out.evidence.get("rounded") else []
        for packing in got:
            assert out.bins == m
            assert loads_fit(q, packing, m, cap)
        rounded += len(got)
    assert rounded >= 6


def test_round_packing_refuses_other_lengths() -> None:
    """The LP's lengths must be the jobs' own: a batch of other lengths gets None."""
    s, d = counts_of([9, 8, 7, 6, 5, 5])
    lp = LPBound(s, 4, 14, counts=d)
    while lp.run(10**6) == PAUSED:
        pass
    assert round_packing(lp, np.array([9, 8, 7, 6, 5, 4], dtype=np.int64), 14, 1.0) is None


def test_sizing_a_planted_frames_batch_is_proven_at_the_planted_optimum() -> None:
    """About two jobs a node, 300 nodes cut into pieces of 30..570 s (over 256 distinct
    lengths, so the LP groups them first): the answer is the planted optimum, proven."""
    rng = np.random.default_rng(15)
    q = planted(rng, 300, 600, 30)
    assert len(set(q)) > 256
    r = size([float(x) for x in q], 600.0, time_budget=5.0)
    assert r.nodes_lower_bound <= 300 <= r.nodes_needed
    assert r.nodes_needed == 300 == r.nodes_lower_bound


def test_grouping_keeps_common_lengths_and_groups_the_rare_ones_finely() -> None:
    """Three quarters of the jobs share 15 lengths, the rest are all distinct: the
    grouping for the LP still uses (nearly) all its MAX_LENGTHS groups, keeps every common
    length exact, and rounds the right way (down for a bound, up for a packing;
    comparisons written out here)."""
    from workers.planning.sizing_lp import _group

    rng = np.random.default_rng(16)
    common = np.array([28, 29, 30, 31, 32, 43, 45, 47, 58, 60, 62, 88, 90, 118, 120])
    q = np.concatenate([rng.choice(common, 7500), 1200 + rng.permutation(4000)[:2500]])
    q = q.astype(np.int64)
    limit = lpbound.MAX_LENGTHS
    for up in (False, True):
        g = _group(q, up=up)
        assert np.unique(g).size <= limit
        assert np.unique(g).size >= limit - 20
        assert ((g >= q) if up else (g <= q)).all()
        assert (g[q < 200] == q[q < 200]).all()


def test_seeded_columns_are_the_fullest_nodes_of_the_packing_and_fit() -> None:
    """The LP's first columns (sizing_lp._seed) are nodes of the packing given, each within
    the capacity and the jobs there are, the fullest first (loads summed here)."""
    from workers.planning.sizing_lp import _seed

    rng = np.random.default_rng(17)
    cap = 600
    q = planted(rng, 80, cap, 30)
    node_of = ffd(q, cap)
    s, d = counts_of(q)
    lp = LPBound(s, 80, cap, counts=d, max_columns=5000)
    before = lp.r  # the columns it starts with: one single-length pattern per length
    added = _seed(lp, np.array(q, dtype=np.int64), node_of)
    loads = np.bincount(node_of, weights=np.array(q, dtype=np.float64))
    distinct = {
        tuple(sorted(v for v, k in zip(q, node_of.tolist(), strict=True) if k == b))
        for b in range(int(node_of.max()) + 1)
    }
    assert 0 < added <= len(distinct)
    cols = lp.cg.cols
    got = []
    for t in range(before, before + added):
        pat = {int(s[cols.idx[t, e]]): int(cols.cnt[t, e]) for e in range(int(cols.nnz[t]))}
        assert sum(v * c for v, c in pat.items()) <= cap
        assert all(c <= int(d[list(s).index(v)]) for v, c in pat.items())
        got.append(sum(v * c for v, c in pat.items()))
    assert got == sorted(got, reverse=True)
    assert got[0] == int(loads.max())
