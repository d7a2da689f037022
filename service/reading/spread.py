"""Reading the spread inputs of a body into the core's :class:`SpreadRequest`."""

from __future__ import annotations

import math
from collections.abc import Mapping
from typing import Any

from workers.planning.confidence.request import (
    DEFAULT_SAMPLES,
    MAX_SEED,
    SIMULATION_KEYS,
    SpreadRequest,
)
from workers.planning.errors import InvalidInstance, Issue


def _finite_number(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _whole_number(x: object) -> bool:
    return _finite_number(x) and float(x).is_integer()  # type: ignore[arg-type]


def read_spread(body: Mapping[str, Any]) -> SpreadRequest | None:
    """Read ``spread``, ``confidence_samples``, ``confidence_seed`` and ``confidence``.

    None when the body asks for no simulation: no job has ``duration_p90`` and none of
    ``spread``, ``confidence_samples`` or ``confidence`` is given (as for plans, plus
    the target). Types and ranges are checked here, so that a body that skipped the
    API's schema (the command line) gets the same pointers.
    """
    jobs = body.get("jobs")
    with_p90 = isinstance(jobs, list) and any(
        isinstance(job, Mapping) and job.get("duration_p90") is not None for job in jobs
    )
    if not with_p90 and not any(key in body for key in SIMULATION_KEYS):
        return None
    issues: list[Issue] = []
    spread = body.get("spread")
    if spread is not None and not (_finite_number(spread) and spread >= 0):
        issues.append(Issue(("spread",), "must be a finite number >= 0"))
    samples = body.get("confidence_samples", DEFAULT_SAMPLES)
    if not (_whole_number(samples) and samples >= 1):
        issues.append(Issue(("confidence_samples",), "must be a whole number >= 1"))
    seed = body.get("confidence_seed", 0)
    if not (_whole_number(seed) and 0 <= seed <= MAX_SEED):
        issues.append(Issue(("confidence_seed",), f"must be a whole number in 0..{MAX_SEED}"))
    target = body.get("confidence")
    if target is not None and not (_finite_number(target) and 0 < target < 1):
        issues.append(Issue(("confidence",), "must be a number strictly between 0 and 1"))
    max_nodes = body.get("max_nodes")
    if max_nodes is not None and not (_whole_number(max_nodes) and max_nodes >= 1):
        issues.append(Issue(("max_nodes",), "must be a whole number >= 1"))
    policy = body.get("confidence_policy", "static")
    if policy not in ("static", "dynamic"):
        issues.append(Issue(("confidence_policy",), "must be static or dynamic"))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) with the spread inputs", issues)
    return SpreadRequest(
        spread=None if spread is None else float(spread),
        samples=int(samples),
        seed=int(seed),
        target=None if target is None else float(target),
        max_nodes=None if max_nodes is None else int(max_nodes),
        policy=str(policy),
    )
