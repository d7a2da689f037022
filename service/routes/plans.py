"""``/v1/plans``: validation of a plan request; the rest is the shared job machinery."""

from __future__ import annotations

from typing import Any

from marshmallow import ValidationError

from workers.planning.farm_bounds import eligibility
from workers.planning.model import Instance

from .. import jobscan, payload
from ..reading import clock, read_columns, read_plan_body, read_spread, with_stages
from ..schemas import (
    PLAN_ENVELOPE_SCHEMA,
    check_plan_limits,
    load_plan_columns,
    load_plan_request,
)
from ..settings import Settings
from ..workform import Work, plain_work
from .events import add_events
from .jobs import Resource, Validated, make_blueprint


def read_plan(body: Any, settings: Settings) -> Validated:
    """Limits and shape (marshmallow), then the core's semantic checks (422 either way).

    A body whose jobs are all plain ``{id, duration[, group]}`` objects is read once, in
    columns (``load_plan_columns`` then ``reading.read_columns``), and the worker gets
    those columns with the rest of what the checks made (``service/workform.py``); any
    other body, and every body with a problem, takes the per-job path (``load_plan_request`` then
    ``reading.read_plan_body``), whose verdicts and messages both paths share. A body the
    route read in columns from its bytes (``payload.Columns``, ``service/jobscan.py``)
    takes :func:`_read_scanned`, with the same verdicts and messages.
    """
    if isinstance(body, payload.Columns):
        return _read_scanned(body, settings)
    fast = load_plan_columns(body, settings)
    if fast is None:
        data = load_plan_request(body, settings)
        problem, spread = read_plan_body(data)  # a stage graph's cycles and references too
        inst = problem if isinstance(problem, Instance) else problem.instance
        if inst.requires is not None:
            eligibility(inst)  # a job no node can run: 422 naming it, not a failed plan
        return Validated(data, Work(problem, spread, clock.echo(body), inst.resolution))
    data, cols = fast
    envelope = {k: v for k, v in body.items() if k != "jobs"}
    return _checked(
        data,
        payload.Columns(envelope, cols.ids, cols.durations, cols.groups),
        settings,
        checked=True,  # job_columns ran every per-job check of read_columns
    )


def _read_scanned(cols: payload.Columns, settings: Settings) -> Validated:
    """:func:`read_plan` of a body whose jobs, all plain, were read in columns: the same
    limits, shape and semantic checks and messages, and no Python object per job. The
    loaded body (``Validated.data``) holds every field but ``jobs``."""
    envelope = cols.envelope
    check_plan_limits(jobscan.counted(cols), settings)
    try:
        data: dict[str, Any] = PLAN_ENVELOPE_SCHEMA.load(envelope)
    except ValidationError:
        # the per-job path's verdict: with every job plain, the problems are all in these
        # fields, and one job stands for the rest (the limits passed with all of them)
        job = {"id": cols.ids[0], "duration": float(cols.durations[0])}
        load_plan_request({**envelope, "jobs": [job]}, settings)
        raise  # not reached: the same schema refuses the same fields
    data.setdefault("time_budget", settings.default_time_budget)
    return _checked(
        data, payload.Columns(envelope, cols.ids, cols.durations, cols.groups), settings
    )


def _checked(
    data: dict[str, Any], cols: payload.Columns, settings: Settings, *, checked: bool = False
) -> Validated:
    """The core's semantic checks of a body of plain jobs in columns (no tags in columns;
    limits and slots in the envelope make it a stage graph), and what they made."""
    env = cols.envelope
    plain = read_columns(env, cols.ids, cols.durations, cols.groups, checked=checked)
    problem = with_stages(plain, env)
    work = plain_work(problem, read_spread(env), clock.echo(env))  # all but the jobs
    if len(cols.ids) > settings.solve_here_max_jobs:
        problem = None  # only a small plan may be solved here: not held while encoding
    return Validated(data, work, columns=cols, problem=problem)  # stored only if queued


def validate_plan(body: Any, settings: Settings) -> dict[str, Any]:
    """:func:`read_plan`, the loaded body only."""
    return read_plan(body, settings).data


RESOURCE = Resource(kind="plan", path="/v1/plans", validate=read_plan, columns=True)
blueprint = add_events(make_blueprint(RESOURCE), RESOURCE)
