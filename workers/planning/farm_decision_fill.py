"""Plans for "does every node end by ``C``?" on farms: pairwise rebalancing by subset sums.

The decision view of :mod:`.farm_exact` gives node ``k`` a capacity: it ends by ``C``
(whole ticks) exactly when the jobs it runs have total scaled length at most
``cap_k = floor((C - g_k) / w_k)``. Speeds and busy time only change capacities, so the
question is a packing of jobs into bins of different sizes with eligibility. This module
looks for such a packing; it proves nothing (a plan it returns is checked like any
other: its finish times are whole numbers, computed again by the caller).

Start from a plan and measure its *overflow*, the sum over nodes of ``load_k - cap_k``
where positive. A move takes two nodes ``a`` (overflowing) and ``b``, pools the jobs both
may run, and splits them again: the jobs that stay on ``a`` are a subset whose sum lands
in the interval that makes both fit, found exactly among all subset sums of the pool (a
bitset of reachable sums, Python ints, then read back). When no split makes both fit, the
split leaving the least overflow of the two is taken, with the overflow put on ``b``
when that costs nothing more (it moves on: ``b`` then looks for its own partner). The
search takes the first partner that lowers the overflow; failing that, it tries a few
random pairs of nodes that fit with ``a`` for a packing of the three nodes' jobs into the
three (an exhaustive search with a step limit: with two or three jobs a node, a job often
has to go one way and another job the other), then a random partner that keeps the
overflow, and a random split of two nodes that fit (both moves change the landscape
without making it worse). A search that has not lowered its least overflow for a while
restarts from a best-fit packing at ``C`` (longest job first onto the fullest node it
fits). It stops when the overflow is zero (a plan ending by ``C``), or the budget or the
move allowance runs out. A move between a slow and a fast node is where speeds pay: the
fast node's capacity takes the longer jobs.

Subset sums are of lengths divided by their gcd (loads are multiples of it, so the
capacities can be rounded down by it without changing any answer). When the capacities
are still too large for bitsets (lengths such as 123.456 s are whole only at a scale of
2**40 or so), the unit is a multiple of the gcd and every length is rounded *up* to it,
every capacity down: a packing of the rounded lengths then fits the true capacities
(``sum p <= sum r ceil(p / r) <= r floor(cap / r) <= cap``), so a plan returned always
ends by ``C``; only some plans are missed.
"""

from __future__ import annotations

import math
import random

from .budget import Budget

#: moves between two looks at the clock (a move may split a pool with every other node)
CHECK_EVERY = 4
#: the largest capacity, in units, that subset sums are taken at (else a coarser unit)
MAX_UNITS = 1 << 16
#: plateau moves (the overflow stays, part of it moves) a random one is drawn from
MAX_PLATEAU = 8
#: moves without a new least overflow (times the node count) before a restart from a
#: best-fit packing, and how much the restarts after the first perturb the job order
STALL = 8
NOISE = 0.2
#: three-node packings tried when no two-node split helps, and the steps of each
TRIPLES = 4
PACK_STEPS = 2000
#: a pool larger than this many jobs is split on its longest jobs only (the rest stay)
MAX_POOL = 48


class Fill:
    """The data of one farm for :meth:`run`: job lengths (scaled, search order), their
    allowed nodes, every node's start ``g`` and tick weight ``w``, and the largest limit
    ``top`` (ticks) that will be asked about."""

    def __init__(
        self, p: list[int], allowed: list[frozenset[int]], g: list[int], w: list[int], top: int
    ) -> None:
        unit = 0
        for x in p:
            unit = math.gcd(unit, x)
        unit = max(unit, 1)
        # the largest capacity asked about (at ``top``) in units; coarser when too large
        most = max(((top - gk) // wk for gk, wk in zip(g, w, strict=True)), default=0)
        self.unit = unit * max(1, -(-most // (unit * MAX_UNITS)))
        self.q = [-(-x // self.unit) for x in p]  # rounded up (exact when unit divides)
        self.allowed = allowed
        self.g = g
        self.w = w
        self.m = len(g)
        self.moves = 0

    def caps(self, limit: int) -> list[int] | None:
        """Every node's capacity at ``limit`` in units of the gcd (``None``: a node ends
        after ``limit`` whatever it runs)."""
        out = []
        for gk, wk in zip(self.g, self.w, strict=True):
            room = limit - gk
            if room < 0:
                return None
            out.append(room // wk // self.unit)
        return out

    def run(
        self, choice: list[int], limit: int, budget: Budget, seed: int = 0, max_moves: int = 0
    ) -> list[int] | None:
        """A plan (node of every job, search order) ending by ``limit``, or ``None``.
        ``choice`` is the starting plan; ``max_moves`` (0: none) caps the moves."""
        cap = self.caps(limit)
        if cap is None:
            return None
        rng = random.Random(seed)
        q = self.q
        on: list[list[int]] = [[] for _ in range(self.m)]
        load = [0] * self.m
        self._load(choice, on, load)
        over = {k for k in range(self.m) if load[k] > cap[k]}
        if over and self.m < 2:
            return None  # one node: nothing to move
        nodes = list(range(self.m))
        count = 0
        least, since, restarts = self._overflow(load, cap), 0, 0
        while over:
            count += 1
            if max_moves and count > max_moves:
                return None
            if count % CHECK_EVERY == 0 and budget.expired():
                return None
            since += 1
            if since > STALL * self.m:  # stuck: start again from a best-fit packing
                self._load(self.best_fit(cap, rng, NOISE if restarts else 0.0), on, load)
                over = {k for k in range(self.m) if load[k] > cap[k]}
                least, since = self._overflow(load, cap), 0
                restarts += 1
                continue
            now = self._overflow(load, cap)
            if now < least:
                least, since = now, 0
            a = rng.choice(sorted(over))
            rng.shuffle(nodes)
            before = load[a] - cap[a]
            plateau: list[tuple[int, list[int], list[int]]] = []
            done = False
            for b in nodes:
                if b == a:
                    continue
                split = self._split(a, b, on[a], on[b], cap[a], cap[b], rng)
                if split is None:
                    continue
                keep, give = split
                la = sum(q[d] for d in keep)
                lb = sum(q[d] for d in give)
                after = max(0, la - cap[a]) + max(0, lb - cap[b])
                was = before + max(0, load[b] - cap[b])
                if after < was:
                    self._apply(on, load, over, cap, a, b, keep, give, la, lb)
                    done = True
                    break
                if after == was and la < load[a] and len(plateau) < MAX_PLATEAU:
                    plateau.append((b, keep, give))
            if done:
                continue
            if self._triples(a, on, load, over, cap, rng):
                continue
            if plateau:
                b, keep, give = rng.choice(plateau)
                la = sum(q[d] for d in keep)
                lb = sum(q[d] for d in give)
                self._apply(on, load, over, cap, a, b, keep, give, la, lb)
            # and a neutral move elsewhere: two nodes that fit, split again at random
            b, c = rng.sample(nodes, 2)
            if b in over or c in over:
                continue
            split = self._split(b, c, on[b], on[c], cap[b], cap[c], rng)
            if split is not None:
                keep, give = split
                lb = sum(q[d] for d in keep)
                lc = sum(q[d] for d in give)
                if lb <= cap[b] and lc <= cap[c]:
                    self._apply(on, load, over, cap, b, c, keep, give, lb, lc)
        self.moves += count
        out = [0] * len(q)
        for k in range(self.m):
            for d in on[k]:
                out[d] = k
        return out

    def _triples(
        self,
        a: int,
        on: list[list[int]],
        load: list[int],
        over: set[int],
        cap: list[int],
        rng: random.Random,
    ) -> bool:
        """Pack the jobs of ``a`` and of two other nodes that fit, at random, into the
        three by an exhaustive search (a few tries); apply the first packing where all
        three fit. True when one was applied (``a`` then fits)."""
        others = [k for k in range(self.m) if k != a and k not in over]
        if len(others) < 2:
            return False
        for _ in range(TRIPLES):
            b, c = rng.sample(others, 2)
            trio = (a, b, c)
            jobs = sorted(on[a] + on[b] + on[c], key=lambda d: -self.q[d])
            where = self.pack(jobs, trio, [cap[k] for k in trio])
            if where is None:
                continue
            for i, k in enumerate(trio):
                on[k] = [d for d, x in zip(jobs, where, strict=True) if x == i]
                load[k] = sum(self.q[d] for d in on[k])
            over.discard(a)
            return True
        return False

    def pack(self, jobs: list[int], trio: tuple[int, ...], room: list[int]) -> list[int] | None:
        """Jobs (longest first) onto the nodes of ``trio`` within ``room``: the index in
        ``trio`` of every job's node, or ``None`` (none found in PACK_STEPS steps)."""
        q, allowed = self.q, self.allowed
        n = len(jobs)
        left = [0] * (n + 1)  # the length of the jobs from i on
        for i in range(n - 1, -1, -1):
            left[i] = left[i + 1] + q[jobs[i]]
        where = [-1] * n
        steps = 0
        i = 0
        while 0 <= i < n:
            d = jobs[i]
            if where[i] >= 0:  # take it back, try the next node
                room[where[i]] += q[d]
            x = where[i] + 1
            while x < len(trio) and (room[x] < q[d] or trio[x] not in allowed[d]):
                x += 1
            steps += 1
            if x == len(trio) or steps > PACK_STEPS:
                where[i] = -1
                if steps > PACK_STEPS:
                    return None
                i -= 1
                continue
            where[i] = x
            room[x] -= q[d]
            if sum(room) < left[i + 1]:
                continue  # the rest cannot fit: try the next node for this job
            i += 1
        return where if i == n else None

    def _load(self, choice: list[int], on: list[list[int]], load: list[int]) -> None:
        """Put the plan ``choice`` into ``on`` (jobs of every node) and ``load``."""
        for k in range(self.m):
            on[k] = []
            load[k] = 0
        for d, k in enumerate(choice):
            on[k].append(d)
            load[k] += self.q[d]

    @staticmethod
    def _overflow(load: list[int], cap: list[int]) -> int:
        return sum(x - c for x, c in zip(load, cap, strict=True) if x > c)

    def best_fit(self, cap: list[int], rng: random.Random, noise: float) -> list[int]:
        """Jobs longest first (lengths perturbed by up to ``noise`` of themselves), each
        on the allowed node with the least room it fits in, else the one with the most."""
        q = self.q
        order = sorted(range(len(q)), key=lambda d: -q[d] * (1.0 + noise * rng.random()))
        room = list(cap)
        out = [0] * len(q)
        for d in order:
            fits = [k for k in self.allowed[d] if room[k] >= q[d]]
            if fits:
                k = min(fits, key=lambda x: (room[x], x))
            else:
                k = max(self.allowed[d], key=lambda x: (room[x], -x))
            room[k] -= q[d]
            out[d] = k
        return out

    @staticmethod
    def _apply(
        on: list[list[int]],
        load: list[int],
        over: set[int],
        cap: list[int],
        a: int,
        b: int,
        keep: list[int],
        give: list[int],
        la: int,
        lb: int,
    ) -> None:
        on[a], on[b] = keep, give
        load[a], load[b] = la, lb
        for k in (a, b):
            if load[k] > cap[k]:
                over.add(k)
            else:
                over.discard(k)

    def _split(
        self, a: int, b: int, ja: list[int], jb: list[int], ca: int, cb: int, rng: random.Random
    ) -> tuple[list[int], list[int]] | None:
        """The jobs of ``a`` and ``b`` split again as the module doc says: (jobs on a, jobs
        on b); ``None`` when no job may move between them."""
        q, allowed = self.q, self.allowed
        fixed_a: list[int] = []
        fixed_b: list[int] = []
        pool: list[int] = []
        for d in ja:
            (pool if b in allowed[d] else fixed_a).append(d)
        for d in jb:
            (pool if a in allowed[d] else fixed_b).append(d)
        if not pool:
            return None
        if len(pool) > MAX_POOL:
            pool.sort(key=lambda d: -q[d])
            rest = pool[MAX_POOL:]
            pool = pool[:MAX_POOL]
            on_a = set(ja)
            for d in rest:  # too many: the short ones stay where they are
                (fixed_a if d in on_a else fixed_b).append(d)
        fa = sum(q[d] for d in fixed_a)
        fb = sum(q[d] for d in fixed_b)
        total = sum(q[d] for d in pool)
        lo = max(0, total + fb - cb)  # the least the pool may leave on a
        hi = min(total, ca - fa)  # the most
        reach = [1]
        bits = 1
        for d in pool:
            bits |= bits << q[d]
            reach.append(bits)
        window = (bits >> lo) & ((1 << (hi - lo + 1)) - 1) if lo <= hi else 0
        if window:
            # a random reachable sum in the window (both fit)
            ones = [i for i in range(window.bit_length()) if window >> i & 1]
            target = lo + rng.choice(ones)
        else:
            # the least overflow: nearest reachable sum to [hi, lo] (or to lo..hi), with
            # the overflow put on b when it costs the same (a sum at most hi)
            a_hi = max(hi, -1)
            below = bits & ((1 << (a_hi + 1)) - 1) if a_hi >= 0 else 0
            cands = []
            if below:
                s = below.bit_length() - 1
                cands.append((max(0, fa + s - ca) + max(0, fb + total - s - cb), 0, s))
            above = bits >> max(a_hi + 1, 0)
            if above:
                s = max(a_hi + 1, 0) + ((above & -above).bit_length() - 1)
                cands.append((max(0, fa + s - ca) + max(0, fb + total - s - cb), 1, s))
            target = min(cands)[2]
        keep = list(fixed_a)
        give = list(fixed_b)
        for i in range(len(pool) - 1, -1, -1):
            d = pool[i]
            if target >= q[d] and (reach[i] >> (target - q[d])) & 1:
                keep.append(d)
                target -= q[d]
            else:
                give.append(d)
        return keep, give
