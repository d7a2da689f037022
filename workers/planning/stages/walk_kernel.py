"""The local search of :mod:`.search` as a compiled kernel: many list schedules a call.

:func:`walk` starts from a priority list and makes ``rounds`` moves, each followed by a
list schedule (:func:`.list_kernel.list_pass`); a move is kept when the plan's key
makespan) is no longer, so the walk also drifts over plans of equal length; the best
plan met is the one of least (makespan, critical jobs: those whose end plus tail
reaches the makespan). The moves:

* **swap**: two jobs at most ``width`` places apart in the priority list trade places;
* **class swap**: a job trades places with one of the next ``width`` jobs of its class
  (same type, same limits: the jobs that compete for the same slots and places);
* **class insert**: the same job moves to that place instead, the jobs between moving
  up by one;
* **blocker swap**: walk back from a job that ends last along jobs that ended exactly
  when the one after them started (a chain of waits, slots or limits), and let a job of
  that chain trade places with a job of its class (same type, same limits) that ended
  when it started and went before it: the job the chain waited for.

Random numbers come from Park and Miller's minimal standard generator (1988:
``x <- 48271 x mod (2^31 - 1)``), in integers, so the compiled kernel and its plain
Python twin (:func:`..kernels.pure`) draw the same numbers and make the same moves.
"""

from __future__ import annotations

import numpy as np
import numpy.typing as npt

from ..kernels import jit
from .list_kernel import list_pass

I64 = npt.NDArray[np.int64]

#: Park and Miller's modulus and multiplier
MODULUS = 2**31 - 1
MULTIPLIER = 48271


@jit
def _draw(state: I64, k: int) -> int:
    """A number in ``0 .. k - 1`` (``k >= 1``), advancing the generator ``state[0]``."""
    state[0] = (state[0] * MULTIPLIER) % MODULUS
    return int(state[0] % k)


@jit
def _key(
    slot: I64, start: I64, run: I64, gcol: I64, slot_group: I64, tail: I64, end: I64
) -> tuple[int, int]:
    """Fill ``end`` and return (makespan over the jobs, critical jobs)."""
    n = start.shape[0]
    span = 0
    for j in range(n):
        end[j] = start[j] + run[j, gcol[slot_group[slot[j]]]]
        if end[j] > span:
            span = end[j]
    crit = 0
    for j in range(n):
        if end[j] + tail[j] >= span:
            crit += 1
    return span, crit


@jit
def _blocker_swap(
    rank: I64, order: I64, start: I64, end: I64, span: int, cls: I64, state: I64, pick: I64
) -> None:
    """The blocker swap of the module docstring on ``rank``/``order``, in place (no
    change when no chain job has such a rival); ``pick`` is scratch of ``n`` entries."""
    n = rank.shape[0]
    cnt = 0
    for i in range(n):
        if end[i] == span:
            pick[cnt] = i
            cnt += 1
    if cnt == 0:
        return
    j = pick[_draw(state, cnt)]
    chain = np.empty(n, dtype=np.int64)
    length = 0
    for _ in range(n):
        chain[length] = j
        length += 1
        if start[j] == 0:
            break
        cnt = 0
        for i in range(n):
            if end[i] == start[j]:
                pick[cnt] = i
                cnt += 1
        if cnt == 0:
            break
        j = pick[_draw(state, cnt)]
    for a in range(length - 1, 0, -1):  # shuffle (Fisher and Yates)
        b = _draw(state, a + 1)
        chain[a], chain[b] = chain[b], chain[a]
    for a in range(length):
        j = chain[a]
        cnt = 0
        for i in range(n):
            if end[i] == start[j] and cls[i] == cls[j] and rank[i] < rank[j]:
                pick[cnt] = i
                cnt += 1
        if cnt:
            k = pick[_draw(state, cnt)]
            rj, rk = rank[j], rank[k]
            rank[j], rank[k] = rk, rj
            order[rk], order[rj] = j, k
            return


@jit
def _swap_at(rank: I64, order: I64, a: int, b: int) -> None:
    """Jobs at places ``a`` and ``b`` of the priority list trade places."""
    ja, jb = order[a], order[b]
    order[a], order[b] = jb, ja
    rank[ja], rank[jb] = b, a


@jit
def _class_move(rank: I64, order: I64, cls: I64, state: I64, width: int, insert: bool) -> None:
    """A random job trades places with the ``k``-th job of its class after it in the
    list (``k`` in ``1 .. width``; the last one found when fewer follow), or before it
    when none follows; with ``insert`` the job moves to that place instead and the jobs
    between shift by one."""
    n = rank.shape[0]
    j = _draw(state, n)
    k = 1 + _draw(state, 1 + _draw(state, width))
    c = cls[j]
    for step in (1, -1):
        found = -1
        seen = 0
        p = rank[j] + step
        while 0 <= p < n and seen < k:
            if cls[order[p]] == c:
                found = p
                seen += 1
            p += step
        if found < 0:
            continue
        if not insert:
            _swap_at(rank, order, rank[j], found)
            return
        p = rank[j]
        while p != found:
            order[p] = order[p + step]
            rank[order[p]] = p
            p += step
        order[found] = j
        rank[j] = found
        return


@jit
def walk(
    rank0: I64,
    rounds: int,
    seed: int,
    width: int,
    tail: I64,
    fwd: tuple,  # type: ignore[type-arg]
) -> tuple[I64, int, I64]:
    """``rounds`` moves from the priority ``rank0`` (module doc): the best priority met
    and its makespan over the jobs, and the priority the walk ended on. ``seed`` in
    ``1 .. 2^31 - 2``; ``fwd``: :func:`.list_kernel.list_pass`'s arguments after
    ``rank`` and ``order`` (the first, how many jobs each waits for, is copied before
    each pass)."""
    n = rank0.shape[0]
    rank = rank0.copy()
    order = np.empty(n, dtype=np.int64)
    for j in range(n):
        order[rank[j]] = j
    state = np.full(1, seed % MODULUS if seed % MODULUS else 1, dtype=np.int64)
    run, gcol, slot_group = fwd[12], fwd[9], fwd[10]
    cls = fwd[3]
    end = np.zeros(n, dtype=np.int64)
    pick = np.zeros(max(n, 1), dtype=np.int64)
    slot, start, _ = list_pass(rank, order, fwd[0].copy(), *fwd[1:])
    span, crit = _key(slot, start, run, gcol, slot_group, tail, end)
    best = rank.copy()
    best_span, best_crit = span, crit
    if n < 2:
        return best, best_span, rank
    cand = rank.copy()
    cand_order = order.copy()
    for r in range(rounds):
        cand[:] = rank
        cand_order[:] = order
        move = r % 4
        if move == 0:
            a = _draw(state, n)
            w = 1 + _draw(state, max(1, width))
            b = a + 1 + _draw(state, w)
            if b >= n:
                b = a - 1 - _draw(state, max(1, min(w, a))) if a > 0 else 1
            _swap_at(cand, cand_order, a, b)
        elif move == 1 or move == 2:
            _class_move(cand, cand_order, cls, state, max(1, width), move == 2)
        else:
            _blocker_swap(cand, cand_order, start, end, span, cls, state, pick)
        s2, st2, _ = list_pass(cand, cand_order, fwd[0].copy(), *fwd[1:])
        e2 = np.zeros(n, dtype=np.int64)
        span2, crit2 = _key(s2, st2, run, gcol, slot_group, tail, e2)
        if span2 < span or (span2 == span and crit2 <= crit):
            rank[:] = cand
            order[:] = cand_order
            start = st2
            end = e2
            span, crit = span2, crit2
            if span < best_span or (span == best_span and crit < best_crit):
                best[:] = rank
                best_span, best_crit = span, crit
    return best, best_span, rank
