"""What a request asks the simulation for, and the confidence fields of a sizing.

:class:`SpreadRequest` holds ``spread``, ``confidence_samples``, ``confidence_seed``,
``confidence`` and ``max_nodes`` (the service reads them from a body:
``service/reading/spread.py``); :func:`sizing_confidence` gives the ``confidence`` and
``confidence_sizing`` fields of a sizing result.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Any

from ..errors import InvalidInstance, Issue
from ..model import Instance
from ..result import Schedule
from .simulation import confidence_block
from .spread import SpreadModel
from .target import ConfidenceTarget, confidence_target

#: request keys that ask for a simulation (as does any job's ``duration_p90``)
SIMULATION_KEYS = ("spread", "confidence_samples", "confidence")
DEFAULT_SAMPLES = 1000
MAX_SEED = 2**32 - 1


def _finite_number(x: object) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def _whole_number(x: object) -> bool:
    return _finite_number(x) and float(x).is_integer()  # type: ignore[arg-type]


@dataclass(frozen=True, slots=True)
class SpreadRequest:
    """What a request asks the simulation for: spread, samples, seed, maybe a target q."""

    spread: float | None
    samples: int
    seed: int
    #: the confidence q of "the fewest nodes with P(meet deadline) >= q", if asked
    target: float | None = None
    #: most nodes the sizing to ``target`` may answer (None: the sizing's default)
    max_nodes: int | None = None
    #: how the sizing to ``target`` dispatches jobs in the simulation: ``static`` (each
    #: job on its planned node, in plan order) or ``dynamic`` (to whichever node frees
    #: first); the request's choice, ``static`` when not given
    policy: str = "static"

    def check(self, inst: Instance, speed: float) -> ConfidenceTarget | None:
        """The checks that need no sampling, for the jobs and deadline of ``inst``.

        The spread model (a p90 on a zero estimate, a spread too wide to simulate) and,
        with a target, :func:`confidence_target` on nodes of ``speed`` (q out of reach of
        the sample count, or of any node count). Cheap: closed forms, no sampling. With a
        target, returns what :func:`confidence_target` returns, ready for its search.
        """
        if self.target is None:
            SpreadModel.from_instance(inst, self.spread)
            return None
        if inst.deadline is None:
            raise InvalidInstance(
                "sizing to a confidence needs a deadline", [Issue(("deadline",), "required")]
            )
        return confidence_target(
            inst.durations,
            inst.deadline,
            self.target,
            speed=speed,
            duration_p90=inst.duration_p90,
            spread=self.spread,
            samples=self.samples,
            policy="dynamic" if self.policy == "dynamic" else "static",
            job_ids=inst.job_ids,
        )


def sizing_confidence(
    schedule: Schedule, asked: SpreadRequest, *, threads: int | None = None
) -> dict[str, Any]:
    """The ``confidence`` and ``confidence_sizing`` fields of a sizing result.

    ``schedule`` is the sizing's answer: its plan on ``nodes_needed`` nodes of the sized
    kind, with the sizing's deadline. ``confidence`` is :func:`confidence_block` of that
    plan (static, with dynamic inside), exactly as for a plan. With a target q,
    ``confidence_sizing`` is :meth:`ConfidenceTarget.fewest_nodes` for nodes of the same
    speed, at most ``asked.max_nodes`` (the sizing's own default when absent). The kind's
    ``provides`` need not be passed on: the sizing has already refused any job whose
    ``requires`` the kind lacks, so every node of the kind may run every job, which is
    what the identical nodes of that search assume. The checks that need no sampling run
    first, so a q out of reach fails before anything is simulated.
    """
    inst = schedule.instance
    speed = inst.nodes[0].speed
    checked = asked.check(inst, speed)
    out: dict[str, Any] = {
        "confidence": confidence_block(
            schedule,
            spread=asked.spread,
            samples=asked.samples,
            seed=asked.seed,
            deadline=inst.deadline,
            threads=threads,
        )
    }
    if checked is not None:  # a target q: check() returned it, checked
        from ..sizing import DEFAULT_MAX_NODES  # the sizing's own cap on the answer

        answer = checked.fewest_nodes(
            seed=asked.seed,
            threads=threads,
            max_nodes=DEFAULT_MAX_NODES if asked.max_nodes is None else asked.max_nodes,
        )
        out["confidence_sizing"] = answer.to_dict()
    return out
