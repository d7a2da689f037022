"""One plan under spread: the sampled makespans, and what they say about the deadline.

:func:`simulate` draws ``samples`` makespans of a plan under one execution policy
(``static`` or ``dynamic``, see :mod:`.kernels`), the job durations spread as the
:mod:`.spread` model says and the random numbers made as :mod:`.streams` says; the
samples are cut into chunks of :data:`CHUNK_DRAWS` draws, each with its own stream, so the
numbers never depend on the thread count. :func:`confidence_block` is the ``confidence``
block of a plan result.

The deadline probability carries its Monte-Carlo error: the standard error
``sqrt(p (1-p) / N)`` and the Wilson score interval (Wilson, J. Amer. Statist. Assoc.
22:209-212, 1927), which stays inside [0, 1] and is honest near 0 and 1.
"""

from __future__ import annotations

import math
import os
from concurrent.futures import ThreadPoolExecutor
from dataclasses import dataclass
from typing import Any, Literal, TypedDict, Unpack

import numpy as np
import numpy.typing as npt

from ..errors import InvalidInstance, Issue
from ..model import FloatArray
from ..result import Schedule
from .kernels import Dispatch, Draws, dynamic_rows, static_rows
from .spread import SpreadModel
from .streams import U64Array, ziggurat_tables

Policy = Literal["static", "dynamic"]
POLICIES: tuple[str, ...] = ("static", "dynamic")

#: two-sided 95% normal quantile, Phi^-1(0.975)
Z95 = 1.959963984540054
#: draws per chunk of samples (one random stream each; fixed, so results never depend on
#: the thread count)
CHUNK_DRAWS = 1 << 21


# -- results ------------------------------------------------------------------------------
def wilson_interval(successes: int, trials: int, z: float = Z95) -> tuple[float, float]:
    """Wilson (1927) score interval for a binomial proportion."""
    if trials <= 0:
        return 0.0, 1.0
    p = successes / trials
    z2 = z * z
    denom = 1.0 + z2 / trials
    centre = (p + z2 / (2 * trials)) / denom
    half = z * math.sqrt(p * (1 - p) / trials + z2 / (4 * trials * trials)) / denom
    # at p = 0 (or 1) the lower (upper) limit is 0 (1) exactly; keep round-off out of it
    lo = 0.0 if successes == 0 else max(0.0, centre - half)
    hi = 1.0 if successes == trials else min(1.0, centre + half)
    return lo, hi


@dataclass(frozen=True, eq=False)
class ConfidenceResult:
    """The sampled makespans of one plan under one policy, and what they say."""

    policy: str
    samples: int
    seed: int
    deadline: float | None
    planned_makespan: float
    makespans: FloatArray
    critical: npt.NDArray[np.int32]
    node_ids: tuple[str, ...]
    model: SpreadModel

    @property
    def deterministic(self) -> bool:
        return self.model.deterministic

    @property
    def successes(self) -> int:
        """Samples that met the deadline (0 when there is none)."""
        if self.deadline is None:
            return 0
        return int(np.count_nonzero(self.makespans <= self.deadline))

    @property
    def deadline_probability(self) -> float | None:
        """P(makespan <= deadline), estimated; exact (1 or 0) when nothing spreads."""
        if self.deadline is None:
            return None
        return self.successes / self.samples

    @property
    def standard_error(self) -> float | None:
        """Plug-in Monte-Carlo standard error sqrt(p (1 - p) / N) of the probability.

        It is 0 when deterministic, and also at an estimated p of 0 or 1, where it says
        nothing: the Wilson :attr:`interval` is the honest error statement there.
        """
        p = self.deadline_probability
        if p is None:
            return None
        return 0.0 if self.deterministic else math.sqrt(p * (1 - p) / self.samples)

    @property
    def interval(self) -> tuple[float, float] | None:
        """95% Wilson interval of the probability (a point when deterministic)."""
        p = self.deadline_probability
        if p is None:
            return None
        if self.deterministic:
            return p, p
        return wilson_interval(self.successes, self.samples)

    @property
    def makespan_sd(self) -> float:
        """Sample standard deviation of the makespan (n - 1 divisor; 0 for one sample)."""
        if self.samples < 2 or self.deterministic:
            return 0.0
        return float(self.makespans.std(ddof=1))

    def quantile(self, q: float) -> float:
        """Sample quantile of the makespan (numpy's default, Hyndman-Fan type 7)."""
        return float(np.quantile(self.makespans, q))

    def quantile_interval(self, q: float, z: float = Z95) -> tuple[float, float]:
        """Distribution-free 95% interval of the q-quantile from order statistics.

        The number of samples below the true quantile is Binomial(N, q), so the order
        statistics of ranks ``N q -+ z sqrt(N q (1 - q))`` bracket it with about 95%
        confidence (normal approximation to the binomial; e.g. Conover, *Practical
        Nonparametric Statistics*, 3rd ed. 1999, sec. 3.2, from memory). A point when
        nothing spreads.
        """
        if self.deterministic:
            v = self.quantile(q)
            return v, v
        n = self.samples
        half = z * math.sqrt(n * q * (1 - q))
        lo = max(0, math.floor(n * q - half) - 1)
        hi = min(n - 1, math.ceil(n * q + half))
        srt = np.sort(self.makespans)
        return float(srt[lo]), float(srt[hi])

    def critical_nodes(self, top: int = 5) -> list[dict[str, Any]]:
        """The nodes that finished last most often, with their share of the samples."""
        counts = np.bincount(self.critical, minlength=len(self.node_ids))
        order = np.argsort(-counts, kind="stable")[:top]
        return [
            {"node": self.node_ids[i], "share": counts[i] / self.samples}
            for i in order
            if counts[i] > 0
        ]

    def to_dict(self) -> dict[str, Any]:
        """The contract's ``confidence`` block (plus fields a reader can check it by)."""
        iv = self.interval
        return {
            "deadline_probability": self.deadline_probability,
            "makespan_p50": self.quantile(0.5),
            "makespan_p90": self.quantile(0.9),
            "makespan_p99": self.quantile(0.99),
            "samples": self.samples,
            "model": self.model.describe(),
            "policy": self.policy,
            "seed": self.seed,
            "deadline": self.deadline,
            "planned_makespan": self.planned_makespan,
            "makespan_mean": float(self.makespans.mean()),
            "makespan_sd": self.makespan_sd,
            "standard_error": self.standard_error,
            "interval": None if iv is None else list(iv),
            "interval_method": "wilson_95" if not self.deterministic else "exact",
            "quantile_intervals": {
                f"p{round(100 * q)}": list(self.quantile_interval(q)) for q in (0.5, 0.9, 0.99)
            },
            "critical_nodes": self.critical_nodes(),
        }


# -- simulation ---------------------------------------------------------------------------
def _check_args(samples: int, policy: str, deadline: float | None) -> None:
    if isinstance(samples, bool) or not isinstance(samples, int | np.integer) or samples < 1:
        raise InvalidInstance(
            "bad sample count", [Issue(("confidence_samples",), "must be a whole number >= 1")]
        )
    if policy not in POLICIES:
        raise InvalidInstance(
            f"unknown policy {policy!r}", [Issue(("policy",), f"must be one of {POLICIES}")]
        )
    if deadline is not None and not (math.isfinite(deadline) and deadline > 0):
        raise InvalidInstance("bad deadline", [Issue(("deadline",), "must be a finite number > 0")])


def plan_order(schedule: Schedule) -> npt.NDArray[np.int64]:
    """Rank of every job in the plan order: by planned start, ties by node then job index."""
    order = np.lexsort((np.arange(schedule.instance.n), schedule.node_of, schedule.start))
    rank = np.empty(schedule.instance.n, dtype=np.int64)
    rank[order] = np.arange(schedule.instance.n)
    return rank


def dispatch_tables(schedule: Schedule) -> Dispatch:
    """The plan order; per job type (distinct ``requires``) its jobs in plan order; per node
    its types."""
    inst = schedule.instance
    rank = plan_order(schedule)
    order = np.argsort(rank)
    reqs = inst.requires if inst.requires is not None else (frozenset(),) * inst.n
    kinds: dict[frozenset[str], int] = {}
    job_type = np.fromiter((kinds.setdefault(r, len(kinds)) for r in reqs), np.int64, inst.n)
    by_type = order[np.argsort(job_type[order], kind="stable")]
    type_start = np.searchsorted(job_type[by_type], np.arange(len(kinds) + 1)).astype(np.int64)
    kind_list = sorted(kinds, key=kinds.__getitem__)
    node_types: list[int] = []
    node_types_start = [0]
    for nd in inst.nodes:
        node_types.extend(t for t, r in enumerate(kind_list) if r <= nd.provides)
        node_types_start.append(len(node_types))
    return Dispatch(
        rank,
        type_start,
        by_type.astype(np.int64),
        np.asarray(node_types_start, dtype=np.int64),
        np.asarray(node_types, dtype=np.int64),
    )


def simulate(
    schedule: Schedule,
    *,
    spread: float | None = None,
    samples: int = 1000,
    seed: int = 0,
    deadline: float | None = None,
    policy: Policy = "static",
    threads: int | None = None,
) -> ConfidenceResult:
    """Monte-Carlo makespans of ``schedule`` when durations spread (:mod:`.spread`).

    ``spread`` is the batch coefficient of variation for jobs without ``duration_p90``;
    ``deadline`` defaults to the instance's. Results depend only on (batch, spread, seed,
    samples, policy), never on ``threads`` (each chunk of samples has its own stream).
    """
    inst = schedule.instance
    if deadline is None:
        deadline = inst.deadline
    _check_args(samples, policy, deadline)
    model = SpreadModel.from_instance(inst, spread)
    return _simulate(schedule, model, samples, seed, deadline, policy, threads)


def _simulate(
    schedule: Schedule,
    model: SpreadModel,
    samples: int,
    seed: int,
    deadline: float | None,
    policy: str,
    threads: int | None,
) -> ConfidenceResult:
    inst = schedule.instance
    n = inst.n
    speed = np.array([nd.speed for nd in inst.nodes], dtype=np.float64)
    free_at = np.array([nd.free_at for nd in inst.nodes], dtype=np.float64)
    x, k, f = ziggurat_tables()

    def draws(state: U64Array) -> Draws:
        return Draws(state, model.sigma, model.shift, x, k, f)

    makespan = np.empty(samples, dtype=np.float64)
    critical = np.empty(samples, dtype=np.int32)
    rows_per_chunk = max(1, CHUNK_DRAWS // max(1, n))
    starts = list(range(0, samples, rows_per_chunk))
    streams = np.random.SeedSequence(seed).spawn(len(starts))

    if policy == "static":
        node_of = schedule.node_of.astype(np.int32)
        weight = inst.durations / speed[node_of]
        base = schedule.loads.astype(np.float64)

        def rows_kernel(state: U64Array, ms: FloatArray, cr: Any) -> None:
            static_rows(draws(state), node_of, weight, base, ms, cr)
    else:
        plan = dispatch_tables(schedule)

        def rows_kernel(state: U64Array, ms: FloatArray, cr: Any) -> None:
            dynamic_rows(draws(state), inst.durations, speed, free_at, plan, ms, cr)

    def run_chunk(c: int) -> None:
        lo = starts[c]
        hi = min(samples, lo + rows_per_chunk)
        state = np.array(np.random.SFC64(streams[c]).state["state"]["state"], dtype=np.uint64)
        rows_kernel(state, makespan[lo:hi], critical[lo:hi])

    workers = threads if threads is not None else min(len(starts), os.cpu_count() or 1)
    if workers <= 1 or len(starts) == 1:
        for c in range(len(starts)):
            run_chunk(c)
    else:
        with ThreadPoolExecutor(max_workers=workers) as pool:
            list(pool.map(run_chunk, range(len(starts))))
    return ConfidenceResult(
        policy=policy,
        samples=samples,
        seed=seed,
        deadline=deadline,
        planned_makespan=schedule.makespan,
        makespans=makespan,
        critical=critical,
        node_ids=tuple(nd.id for nd in inst.nodes),
        model=model,
    )


class SimulationOptions(TypedDict, total=False):
    """What a ``confidence`` block asks both simulations for (:func:`simulate`'s
    arguments of the same names, with its defaults)."""

    spread: float | None
    samples: int
    seed: int
    deadline: float | None


def confidence_block(
    schedule: Schedule, *, threads: int | None = None, **options: Unpack[SimulationOptions]
) -> dict[str, Any]:
    """The ``confidence`` block of a plan result: static policy, with ``dynamic`` inside.

    This is what the service adds to a plan result (``result["confidence"] = ...``) when the
    request carries ``duration_p90``, ``spread`` or ``confidence_samples``.
    """
    static = simulate(schedule, policy="static", threads=threads, **options)
    dynamic = simulate(schedule, policy="dynamic", threads=threads, **options)
    return block_of(static, dynamic)


def block_of(static: ConfidenceResult, dynamic: ConfidenceResult) -> dict[str, Any]:
    """The ``confidence`` block of one plan's two simulations (:func:`confidence_block`)."""
    out = static.to_dict()
    dyn = dynamic.to_dict()
    out["dynamic"] = {key: dyn[key] for key in _DYNAMIC_KEYS}
    return out


_DYNAMIC_KEYS = (
    "deadline_probability",
    "makespan_p50",
    "makespan_p90",
    "makespan_p99",
    "makespan_mean",
    "makespan_sd",
    "standard_error",
    "interval",
    "quantile_intervals",
    "critical_nodes",
    "planned_makespan",
)
