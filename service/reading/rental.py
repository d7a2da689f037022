"""Reading a rental (``POST /v1/sizings`` with ``farm`` and ``kinds``) into the core's
:class:`RentalArgs`: the farm you have, the kinds you may rent, billing (issue 18); with
``deadlines``, a :class:`FrontierArgs` (the cheapest cost at each deadline, point 3)."""

from __future__ import annotations

import dataclasses
from collections.abc import Mapping
from typing import Any

from workers.planning.errors import InvalidInstance, Issue
from workers.planning.rental import Kind, RentalArgs, rental_instance
from workers.planning.usecases import FrontierArgs, check_spread

from .clock import in_seconds
from .plan import read_instance
from .spread import read_spread


def is_rental(body: Mapping[str, Any]) -> bool:
    """Whether a sizing body asks what to rent (it gives ``kinds`` or a ``farm``)."""
    return body.get("kinds") is not None or body.get("farm") is not None


def read_rental(body: Mapping[str, Any]) -> RentalArgs | FrontierArgs:
    """:func:`read_one_rental`; with ``deadlines``, that rental at each of them
    (:func:`frontier_of`). With spread inputs (issue 18 point 5), their checks that need
    no sampling against the farm and kinds (:func:`check_spread`: a q that no rental can
    reach, or that the sample count cannot show, is a 422 here, before any search)."""
    args = read_one_rental(body)
    asked = read_spread(body)
    if asked is not None:
        check_spread(args, asked)
    if body.get("deadlines") is None:
        return args
    return frontier_of(args, body["deadlines"])


def frontier_of(args: RentalArgs, deadlines: Any) -> FrontierArgs:
    """The frontier's points: each deadline of the request's list once (a repeat is refused
    at its place), plus the answer's own ``deadline`` (or ``deadline_at``) when the list
    lacks it, in ascending order. (Their shape, 1 to 24 numbers of seconds from the start
    like ``deadline``, is the schema's.)"""
    issues: list[Issue] = []
    if not isinstance(deadlines, list) or not deadlines:
        issues.append(Issue(("deadlines",), "must be a non-empty list of seconds"))
        deadlines = []
    seen: set[float] = set()
    for i, d in enumerate(deadlines):
        if isinstance(d, bool) or not isinstance(d, int | float):
            issues.append(Issue(("deadlines", i), "must be a number of seconds"))
        elif float(d) in seen:
            issues.append(Issue(("deadlines", i), f"{d:g} s is listed twice: give each once"))
        else:
            seen.add(float(d))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the deadlines", issues)
    answer = float(args.instance.deadline)  # type: ignore[arg-type]
    return FrontierArgs(rental=args, deadlines=tuple(sorted(seen | {answer})))


def read_one_rental(body: Mapping[str, Any]) -> RentalArgs:
    """The jobs, the farm (free nodes, or priced with ``hour_cost``), the kinds, the
    deadline and the billing; each problem by field path. ``node`` (one kind of the
    single-kind sizing) and graph fields are refused beside ``kinds`` and ``farm``."""
    body = in_seconds(body)  # deadline_at, the farm's free_at_time: seconds from here on
    issues: list[Issue] = []
    if not body.get("kinds"):
        issues.append(Issue(("kinds",), "required with farm: the kinds you may rent"))
    for key in ("node", "limits", "curve_nodes", "max_nodes", "node_hour_cost"):
        if key in body:
            issues.append(Issue((key,), "not used when renting kinds: give kinds instead"))
    if body.get("deadline") is None:
        issues.append(Issue(("deadline",), "required: the time by which every job must be done"))
    jobs = body.get("jobs") or []
    if any(isinstance(j, Mapping) and (j.get("after") or j.get("uses")) for j in jobs):
        issues.append(Issue(("jobs",), "renting does not handle stage graphs yet"))
    if issues:
        raise InvalidInstance(f"{len(issues)} problem(s) in the rental request", issues)
    farm = list(body.get("farm") or [])
    # the jobs and the farm read as a plan body (every check and message of plans); a
    # farm of no nodes gets one placeholder that is dropped again
    plan_body = {
        "jobs": jobs,
        "nodes": [{k: v for k, v in nd.items() if k != "hour_cost"} for nd in farm]
        or [{"id": "placeholder"}],
        "deadline": body.get("deadline"),
        "resolution": body.get("resolution"),
    }
    base = read_instance(plan_body)
    nodes = base.nodes if farm else ()
    inst = rental_instance(
        base.durations,
        nodes,
        float(body["deadline"]),
        job_ids=list(base.job_ids),
        requires=list(base.requires) if base.requires is not None else None,
        resolution=base.resolution,
    )
    # the jobs' duration_p90, for the confidence simulation (the search reads durations)
    inst = dataclasses.replace(inst, duration_p90=base.duration_p90)
    prices = [nd.get("hour_cost") for nd in farm]
    kinds = tuple(
        Kind(
            name=str(k["name"]),
            speed=float(k.get("speed", 1.0)),
            provides=frozenset(k.get("provides") or ()),
            hour_cost=float(k["hour_cost"]),
            boot=float(k.get("boot", 0.0)),
            max_count=int(k.get("max_count", 1000)),
        )
        for k in body.get("kinds") or []
    )
    return RentalArgs(
        instance=inst,
        kinds=kinds,
        billing=str(body.get("billing", "second")),
        min_billed=float(body.get("min_billed", 0.0)),
        farm_hour_cost=tuple(None if c is None else float(c) for c in prices)
        if any(c is not None for c in prices)
        else None,
    )
