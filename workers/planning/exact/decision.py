"""The exact decision search: do all jobs fit on ``m`` nodes with capacity ``C`` (ticks)?

Bin completion (Korf, "A new algorithm for optimal bin packing", AAAI 2002, and "An
improved algorithm for optimal bin packing", IJCAI 2003) applied to the decision version of
P||Cmax, as the exact step of the bin-packing approach to makespan minimisation
(Dell'Amico and Martello 1995; Korf and Schreiber 2013 recommend a bin-packing method for
eight or more machines). Nodes are filled one at a time: a node opens with the longest
unused job (nodes are interchangeable, so this breaks their symmetry) and is completed by a
subset of the unused jobs, fullest first. The search is an explicit-stack loop in a numba
kernel (:func:`complete`) that stops after a number of search nodes and resumes where it
stopped, so the driver can check its wall-clock budget between slices.

Rules (each keeps at least one packing whenever one exists):

``maximal``     a completed node must be maximal: no excluded job fits in what is left.
``swap``        it must not be improvable by swapping a longer excluded job in for a shorter
                included one (Korf's dominance, the single-job case of Martello and Toth's
                criterion).
``equal jobs``  after excluding a length, later jobs of the same length are skipped for
                this node (identical jobs are interchangeable).
``waste``       the room left unused on all nodes together may not exceed m C - sum(q);
                checked when a node closes and, while filling, against the sum of the jobs
                still available (a Fenwick tree over the unused jobs).
``bounds``      when a node opens, the Martello-Toth bound L2 (Martello and Toth 1990) and
                the dual-feasible-function bounds u^(k) (Fekete and Schepers 2001) of the
                unused jobs must not exceed the nodes left.
``memo``        a failed opening depends only on the set of used jobs (equal jobs are always
                used in index order, so this set is canonical), so it is remembered in a
                fixed-size table (a transposition table, common practice) under two
                independent 62-bit Zobrist hashes; a false hit needs both to collide
                (probability about 2**-124 per lookup).

The kernel works on integer ticks; the caller converts (see ``driver.py``).
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..binpacking import first_at_most
from ..kernels import jit

I64 = npt.NDArray[np.int64]
I32 = npt.NDArray[np.int32]

#: kernel status codes
FEASIBLE, INFEASIBLE, PAUSED = 1, 0, -1

#: capacities (ticks) must stay below this so that m * C fits in 64 bits
MAX_TICKS = 1 << 40
#: dual feasible functions u^(k) tried at each bin opening, k = 2..DFF_MAX_K
DFF_MAX_K = 6
#: the swap dominance tests are skipped for nodes with more jobs than this
SINGLE_CHECK_MAX = 24
#: the one-for-two dominance test is skipped for nodes with more jobs than this
PAIR_CHECK_MAX = 8
#: default memo table size (entries, a power of two)
MEMO_BITS = 18


# -- bin completion ---------------------------------------------------------------------


@jit
def l2_bound(u: I64, nu: int, cap: int) -> int:
    """Martello-Toth L2 for the first ``nu`` lengths of ``u`` (longest first), bins ``cap``.

    L(a) = |J1| + |J2| + max(0, ceil((sum J3 - (|J2| cap - sum J2)) / cap)) with
    J1 = {p > cap - a}, J2 = {cap/2 < p <= cap - a}, J3 = {a <= p <= cap/2}, maximised over
    a in {0} and the lengths <= cap/2 (Martello and Toth 1990); O(nu) after sorting.
    """
    half = cap // 2
    nb = 0
    sbig = 0
    while nb < nu and u[nb] > half:
        sbig += u[nb]
        nb += 1
    s3 = 0
    for i in range(nb, nu):
        s3 += u[i]
    # a = 0: J1 empty, J2 = all big ones
    best = nb
    room = nb * cap - sbig
    if s3 > room:
        best = nb + (s3 - room + cap - 1) // cap
    j1 = 0  # big ones with p > cap - a: a prefix
    s1 = 0
    i = nu - 1  # the smallest small job still in J3
    while i >= nb:
        a = u[i]
        if a == 0:
            i -= 1
            continue
        while j1 < nb and u[j1] > cap - a:
            s1 += u[j1]
            j1 += 1
        room = (nb - j1) * cap - (sbig - s1)
        if s3 > room:
            val = nb + (s3 - room + cap - 1) // cap
            if val > best:
                best = val
        # drop every job of length a from J3
        while i >= nb and u[i] == a:
            s3 -= u[i]
            i -= 1
    # dual feasible functions u^(k) of Fekete and Schepers (2001), scaled by k to stay integer:
    # F(x) = k x if (k + 1) x is a multiple of cap, else floor((k + 1) x / cap) cap
    for kk in range(2, DFF_MAX_K + 1):
        tot = 0
        for t in range(nu):
            y = (kk + 1) * u[t]
            if y % cap == 0:
                tot += kk * u[t]
            else:
                tot += (y // cap) * cap
        val = (tot + kk * cap - 1) // (kk * cap)
        if val > best:
            best = val
    return best


@jit
def _smallest_unused_at_least(q: I64, used: npt.NDArray[np.uint8], v: int) -> int:
    """Length of the shortest unused job of length >= v, or -1 (``q`` longest first)."""
    lo = 0
    hi = q.shape[0]
    while lo < hi:  # first index with q < v
        mid = (lo + hi) // 2
        if q[mid] < v:
            hi = mid
        else:
            lo = mid + 1
    t = lo - 1
    while t >= 0 and used[t] == 1:
        t -= 1
    return q[t] if t >= 0 else -1


@jit
def dominated(q: I64, used: npt.NDArray[np.uint8], fr: I64, sp: int, room: int, buf: I64) -> bool:
    """Is the node being closed dominated by swapping in a job still unused?

    With the node's jobs (other than the one it opened with) and ``room`` left: an unused
    job x dominates if x <= room (the node is not maximal), if x > y and x <= y + room for an
    included y (one-for-one swap), or if y + z <= x <= y + z + room for included y, z
    (one-for-two swap); Korf's dominance criterion for bin completion, restricted to
    subsets of at most two jobs. The swapped-out jobs fit in x's place on x's node.
    """
    t = q.shape[0] - 1
    while t >= 0 and used[t] == 1:
        t -= 1
    if t >= 0 and q[t] <= room:
        return True
    ni = 0
    f = sp - 1
    while f >= 0 and fr[5 * f] == 1:
        buf[ni] = q[fr[5 * f + 1]]
        ni += 1
        f -= 1
    if ni > SINGLE_CHECK_MAX:
        return False
    for a in range(ni):
        y = buf[a]
        if a > 0 and buf[a - 1] == y:
            continue
        x = _smallest_unused_at_least(q, used, y + 1)
        if x != -1 and x <= y + room:
            return True
    if ni <= PAIR_CHECK_MAX:
        for a in range(ni):
            for c in range(a + 1, ni):
                v = buf[a] + buf[c]
                x = _smallest_unused_at_least(q, used, v)
                if x != -1 and x <= v + room:
                    return True
    return False


@jit
def _fenwick_add(fen: I64, n: int, j: int, delta: int) -> None:
    """Add ``delta`` to the length of job ``j`` in the Fenwick tree ``fen`` (n jobs)."""
    i = j + 1
    while i <= n:
        fen[i] += delta
        i += i & (-i)


@jit
def _fenwick_prefix(fen: I64, j: int) -> int:
    """The sum of the lengths of jobs 0 .. j - 1 in the Fenwick tree ``fen``."""
    total = fen[0] * 0
    i = j
    while i > 0:
        total += fen[i]
        i -= i & (-i)
    return int(total)


@jit
def _push(fr: I64, sp: int, kind: int, a: int, b: int, c: int, d: int) -> int:
    """Push a frame of ``kind`` with four values; returns the new stack size."""
    base = 5 * sp
    fr[base] = kind
    fr[base + 1] = a
    fr[base + 2] = b
    fr[base + 3] = c
    fr[base + 4] = d
    return sp + 1


@jit
def _use(j: int, b: int, q: I64, used: npt.NDArray[np.uint8], asg: I32, fen: I64) -> None:
    """Put job ``j`` on bin ``b``."""
    used[j] = 1
    asg[j] = b
    _fenwick_add(fen, q.shape[0], j, -q[j])


@jit
def _unuse(j: int, q: I64, used: npt.NDArray[np.uint8], fen: I64) -> None:
    """Take job ``j`` back off its bin."""
    used[j] = 0
    _fenwick_add(fen, q.shape[0], j, q[j])


@jit
def complete(
    q: I64,
    cap: int,
    m: int,
    used: npt.NDArray[np.uint8],
    fen: I64,
    asg: I32,
    next_smaller: I32,
    z1: I64,
    z2: I64,
    fr: I64,
    k1: I64,
    k2: I64,
    kj: I32,
    st: I64,
    ubuf: I64,
    node_limit: int,
) -> int:
    """Bin completion (Korf 2002, 2003) on the decision question, resumable.

    Bins are filled one at a time; each opens with the longest unused job and is completed
    by a subset of the unused jobs, tried fullest first (include before exclude, longest
    first). Rules: a completed bin must be maximal (no excluded job fits in what is left)
    and may not be improved by swapping a longer excluded job for a shorter included one
    (both dominance rules of bin completion); after excluding a length, later jobs of the
    same length are skipped for this bin; the total room left unused over all bins may not
    exceed ``m * cap - sum(q)`` (wasted space), checked while filling with the sum of the
    unused jobs that remain candidates (a Fenwick tree); failed bin openings are
    remembered by the set of used jobs (two Zobrist hashes).

    ``st`` = [mode, k, room, last_excl, min_diff, bin, waste, sp, h1, h2, nused, nodes].
    ``fr`` holds 5 values per frame. Returns 1 (``asg`` is a packing), 0 (none exists)
    or -1 (paused).
    """
    n = q.shape[0]
    mask = k1.shape[0] - 1
    total = 0
    for i in range(n):
        total += q[i]
    slack = m * cap - total
    none = np.int64(1) << 62
    mode = st[0]
    k = st[1]
    room = st[2]
    last_excl = st[3]
    min_diff = st[4]
    b = st[5]
    w = st[6]
    sp = st[7]
    h1 = st[8]
    h2 = st[9]
    nused = st[10]
    nodes = 0
    while True:
        if mode == 0:  # open bin b
            if nused == n:
                result = 1
                break
            if b == m:
                mode = 2
                continue
            if nodes >= node_limit:
                result = -1
                break
            nodes += 1
            idx = (h1 ^ (h2 >> 11) ^ (b * 2654435761)) & mask
            if kj[idx] == b + 1 and k1[idx] == h1 and k2[idx] == h2:
                mode = 2
                continue
            # Martello-Toth L2 on the unused jobs against the bins left
            nu = 0
            for i in range(n):
                if used[i] == 0:
                    ubuf[nu] = q[i]
                    nu += 1
            if l2_bound(ubuf, nu, cap) > m - b:
                mode = 2
                continue
            x = 0
            while used[x] == 1:
                x += 1
            sp = _push(fr, sp, 0, x, h1, h2, w)  # a bin frame
            _use(x, b, q, used, asg, fen)
            nused += 1
            h1 ^= z1[x]
            h2 ^= z2[x]
            room = cap - q[x]
            k = x + 1
            last_excl = none
            min_diff = none
            mode = 1
        elif mode == 1:  # fill the open bin from job k on
            # first job at or after k that fits
            k = first_at_most(q, k, room)
            while k < n and used[k] == 1:
                k += 1
            if k >= n:
                # close the bin
                if room > slack - w or last_excl <= room or min_diff <= room:
                    mode = 2
                    continue
                if dominated(q, used, fr, sp, room, ubuf):
                    mode = 2
                    continue
                sp = _push(fr, sp, 3, room, last_excl, min_diff, k)
                w += room
                b += 1
                mode = 0
                continue
            # the unused jobs from k on can add at most their sum
            if room - (_fenwick_prefix(fen, n) - _fenwick_prefix(fen, k)) > slack - w:
                mode = 2
                continue
            if nodes >= node_limit:
                result = -1
                break
            nodes += 1
            sp = _push(fr, sp, 1, k, room, last_excl, min_diff)
            _use(k, b, q, used, asg, fen)
            nused += 1
            h1 ^= z1[k]
            h2 ^= z2[k]
            if last_excl != none and last_excl > q[k] and last_excl - q[k] < min_diff:
                min_diff = last_excl - q[k]
            room -= q[k]
            k += 1
        else:  # backtrack
            if sp == 0:
                result = 0
                break
            sp -= 1
            base = 5 * sp
            t = fr[base]
            if t == 1:  # the include branch of job k failed: exclude it
                k = fr[base + 1]
                room = fr[base + 2]
                last_excl = fr[base + 3]
                min_diff = fr[base + 4]
                _unuse(k, q, used, fen)
                nused -= 1
                h1 ^= z1[k]
                h2 ^= z2[k]
                last_excl = q[k]
                k = next_smaller[k]
                mode = 1
            elif t == 3:
                w -= fr[base + 1]
                b -= 1
            else:  # a bin opening failed: remember it
                x = fr[base + 1]
                h1 = fr[base + 2]
                h2 = fr[base + 3]
                w = fr[base + 4]
                idx = (h1 ^ (h2 >> 11) ^ (b * 2654435761)) & mask
                k1[idx] = h1
                k2[idx] = h2
                kj[idx] = b + 1
                _unuse(x, q, used, fen)
                nused -= 1
    st[0] = mode
    st[1] = k
    st[2] = room
    st[3] = last_excl
    st[4] = min_diff
    st[5] = b
    st[6] = w
    st[7] = sp
    st[8] = h1
    st[9] = h2
    st[10] = nused
    st[11] += nodes
    return result


class CompletionSearch:
    """Resumable bin-completion search; same interface as :class:`CapacitySearch`."""

    def __init__(
        self,
        q: I64,
        m: int,
        cap: int,
        *,
        memo_bits: int = MEMO_BITS,
        compiled: bool = True,
        seed: int = 20261202,
    ) -> None:
        if q.size == 0 or int(q[-1]) <= 0:
            raise ValueError("the search needs at least one job, all longer than zero ticks")
        self.q = np.ascontiguousarray(q, dtype=np.int64)
        n = int(q.size)
        self.m = int(m)
        self.cap = int(cap)
        self.used = np.zeros(n, dtype=np.uint8)
        # Fenwick tree over the job lengths: entry i holds the sum of the (i & -i) lengths
        # ending at position i
        idx = np.arange(1, n + 1, dtype=np.int64)
        prefix = np.concatenate(([0], np.cumsum(self.q)))
        self.fen = np.zeros(n + 1, dtype=np.int64)
        self.fen[1:] = prefix[idx] - prefix[idx - (idx & -idx)]
        self.asg = np.full(n, -1, dtype=np.int32)
        # first index after k with a shorter job
        # (the start of the next run of equal lengths)
        starts = np.flatnonzero(np.diff(self.q) != 0) + 1
        self.next_smaller = np.append(starts, n)[
            np.searchsorted(starts, np.arange(n), side="right")
        ].astype(np.int32)
        rng = np.random.default_rng(seed)
        self.z1 = rng.integers(0, 1 << 62, size=n, dtype=np.int64)
        self.z2 = rng.integers(0, 1 << 62, size=n, dtype=np.int64)
        self.fr = np.zeros(5 * (n + m + 4), dtype=np.int64)
        size = 1 << memo_bits
        self.k1 = np.zeros(size, dtype=np.int64)
        self.k2 = np.zeros(size, dtype=np.int64)
        self.kj = np.zeros(size, dtype=np.int32)
        self.st = np.zeros(12, dtype=np.int64)
        self.ubuf = np.zeros(n, dtype=np.int64)
        self.status = PAUSED
        self.func = complete if compiled else complete.py_func  # type: ignore[attr-defined]
        if int(self.q[0]) > cap or int(self.q.sum()) > m * cap:
            self.status = INFEASIBLE

    @property
    def nodes(self) -> int:
        """Search nodes visited so far."""
        return int(self.st[11])

    def run(self, node_limit: int) -> int:
        """Search at most ``node_limit`` more nodes; returns FEASIBLE, INFEASIBLE or PAUSED."""
        if self.status != PAUSED:
            return self.status
        self.status = int(
            self.func(
                self.q,
                self.cap,
                self.m,
                self.used,
                self.fen,
                self.asg,
                self.next_smaller,
                self.z1,
                self.z2,
                self.fr,
                self.k1,
                self.k2,
                self.kj,
                self.st,
                self.ubuf,
                int(node_limit),
            )
        )
        return self.status

    def packing(self) -> I32:
        """The bin of every job (in the order of ``q``) once the search is FEASIBLE."""
        if self.status != FEASIBLE:
            raise RuntimeError("no packing found")
        return self.asg.copy()
