"""The spread model: how far each job's actual duration may stray from its estimate.

Each job's actual duration is ``D_j = d_j * exp(sigma_j * Z_j - shift_j)`` with ``d_j`` its
estimate and the ``Z_j`` independent standard normals: a lognormal, the usual model of
positive, right-skewed task times (common practice). The moments used in the tests are the
textbook lognormal ones (Johnson, Kotz and Balakrishnan, *Continuous Univariate
Distributions*, vol. 1, 2nd ed., 1994, ch. 14): for ``ln D ~ N(mu, sigma^2)``,
``E[D] = exp(mu + sigma^2/2)`` and ``Var[D] = (exp(sigma^2) - 1) exp(2 mu + sigma^2)``.

Where a job's sigma comes from, and what its estimate means:

* a job with ``duration_p90`` (its 90th percentile): the **estimate is the median**,
  ``mu = ln d``, and ``sigma = ln(p90 / d) / z_0.9`` with ``z_0.9 = 1.2815515655446004``
  (``shift = 0``). Reading the estimate as the median is the only reading that works for
  every ``p90 >= d``: with the estimate as the mean, ``sigma`` solves
  ``sigma^2/2 - z sigma + ln(p90/d) = 0``, which has no root once ``p90 > 2.27 d``, and
  render times spread that much routinely. A test-frame estimate is also a typical value,
  which is what a median is.
* every other job, when the batch carries ``spread`` = c (a coefficient of variation): the
  **estimate is the mean**, ``sigma = sqrt(ln(1 + c^2))`` and ``shift = sigma^2/2``, so that
  ``E[D] = d`` and ``sd(D) = c d`` hold exactly, which is what a coefficient of variation
  says (it is defined relative to the mean).
* with neither, the job is taken as certain (``sigma = 0``).

Zero spread gives the deterministic answer exactly, not approximately: ``exp(0) - 1`` is
``0.0`` in floating point, so every sampled quantity equals the plan's own numbers bit for
bit and the deadline probability is exactly 1 or 0.
"""

from __future__ import annotations

import math
from collections.abc import Sequence
from dataclasses import dataclass, replace
from typing import Any

import numpy as np

from ..errors import InvalidInstance, Issue
from ..model import FloatArray, Instance

#: the standard normal's 90th percentile, Phi^-1(0.9)
Z90 = 1.2815515655446004
#: log-sd above which exp(sigma z) could overflow a float32 (|z| < 11 always in practice):
#: a p90 above 28,000 times its estimate
MAX_SIGMA = 8.0


@dataclass(frozen=True, eq=False)
class SpreadModel:
    """Per job: ``D_j = d_j * exp(sigma_j Z_j - shift_j)``; see the module docstring."""

    sigma: FloatArray
    shift: FloatArray
    spread: float | None
    jobs_with_p90: int

    @classmethod
    def from_instance(cls, inst: Instance, spread: float | None = None) -> SpreadModel:
        """Sigma from each job's ``duration_p90``, else from the batch ``spread`` (a CV)."""
        if spread is not None and not (
            isinstance(spread, int | float) and math.isfinite(spread) and spread >= 0
        ):
            raise InvalidInstance(
                "bad spread", [Issue(("spread",), "must be a finite number >= 0")]
            )
        n = inst.n
        sigma = np.zeros(n, dtype=np.float64)
        shift = np.zeros(n, dtype=np.float64)
        has_p90 = np.zeros(n, dtype=bool)
        if inst.duration_p90 is not None:
            issues: list[Issue] = []
            for j, q in enumerate(inst.duration_p90):
                if q is None:
                    continue
                d = float(inst.durations[j])
                has_p90[j] = True
                if not (math.isfinite(q) and q >= d):
                    issues.append(Issue(("jobs", j, "duration_p90"), "must be >= duration"))
                elif d == 0.0:
                    if q > 0.0:
                        issues.append(
                            Issue(
                                ("jobs", j, "duration_p90"),
                                "a job estimated at 0 s cannot have a positive p90 "
                                "(the lognormal median would be 0)",
                            )
                        )
                else:
                    sigma[j] = math.log(q / d) / Z90
            if issues:
                raise InvalidInstance(f"{len(issues)} problem(s) with duration_p90", issues)
        if spread:
            s = math.sqrt(math.log1p(float(spread) ** 2))
            sigma[~has_p90] = s
            shift[~has_p90] = 0.5 * s * s
        if sigma.size and float(sigma.max()) > MAX_SIGMA:
            j = int(sigma.argmax())
            ptr = ("jobs", j, "duration_p90") if has_p90[j] else ("spread",)
            raise InvalidInstance(
                "spread too wide to simulate", [Issue(ptr, f"log-sd above {MAX_SIGMA}")]
            )
        return cls(sigma, shift, None if spread is None else float(spread), int(has_p90.sum()))

    @property
    def deterministic(self) -> bool:
        """True when no job has any spread: every draw is the estimate itself."""
        return not bool(self.sigma.any())

    def describe(self) -> dict[str, Any]:
        """The ``model`` field of the confidence block."""
        if self.deterministic:
            return {
                "distribution": "deterministic",
                "detail": "no job has a spread: every sample is the plan itself",
                "jobs_with_p90": self.jobs_with_p90,
                "spread": self.spread,
            }
        return {
            "distribution": "lognormal",
            "independent_jobs": True,
            "jobs_with_p90": self.jobs_with_p90,
            "spread": self.spread,
            "p90_rule": "estimate is the median; sigma = ln(p90/estimate)/z_0.9",
            "spread_rule": "estimate is the mean; sigma = sqrt(ln(1 + spread^2))",
            "sigma_max": float(self.sigma.max()),
            "random_numbers": "numpy SFC64 streams, ziggurat normals (Marsaglia-Tsang 2000)",
        }


def job_probabilities(model: SpreadModel, run_times: FloatArray, deadline: float) -> FloatArray:
    """P(D_j / speed <= deadline) per job, in closed form (the lognormal cdf).

    With every job alone on its own node the makespan is the longest job, so the product
    of these is an upper bound on P(meet) for any plan of any size: ``ln D = ln d +
    sigma Z - shift``, hence ``P = Phi((ln(deadline / d) + shift) / sigma)``.
    """
    out = np.ones(run_times.size)
    for j in range(run_times.size):
        d, s = float(run_times[j]), float(model.sigma[j])
        if d <= 0.0:
            continue
        if s == 0.0:
            out[j] = 1.0 if d <= deadline else 0.0
        else:
            arg = (math.log(deadline / d) + float(model.shift[j])) / s
            out[j] = 0.5 * math.erfc(-arg / math.sqrt(2.0))
    return out


def _with_p90(inst: Instance, p90: Sequence[float | None]) -> Instance:
    """``inst`` (built by ``Instance.build`` from durations alone) with per-job p90s."""
    if len(p90) != inst.n:
        raise InvalidInstance(
            "duration_p90 and durations differ in number", [Issue(("jobs",), "length mismatch")]
        )
    return replace(inst, duration_p90=tuple(None if v is None else float(v) for v in p90))
