"""The RQ task: a thin adapter between the queue, the store and the planning core.

``run_job`` claims the record and loads its stored request (one script): the core objects
the API's checks made (``service/workform.py``: nothing is read or checked again), or, for
a record an older API stored, its copy in columns or its raw body, read here. It solves it
with the core, publishes progress (elapsed, best makespan, best bound) while the core runs
longer than the progress interval, honours a cancel flag through the core's
``should_stop`` hook, and stores the result under our keys with their retention, the
metrics counted in the same script (``Store.finish``).
Input errors of the core (:class:`SpanwrightError`) end the record as ``failed`` with a
problem document; anything else propagates so RQ's single retry and then ``on_failure``
deal with it (the search loop is never wrapped in ``except Exception``: RQ's timeout
exception derives from it).
"""

from __future__ import annotations

import dataclasses
import json
import time
from collections.abc import Callable, Mapping
from dataclasses import dataclass
from fractions import Fraction
from typing import Any

from rq import get_current_job

from service import payload, workform
from service.metrics import failed_counters, finish_counters
from service.problems import InternalError, problem_dict
from service.store import Claim, Store
from service.worker import take_claim
from service.workform import Work
from workers.planning import rounding
from workers.planning.errors import SpanwrightError
from workers.planning.progress import Report
from workers.planning.result import PlanResult


@dataclass(frozen=True, slots=True)
class Outcome:
    """What a runner hands back: the result object and a few summary fields for lists.

    ``result_json``, when given, is the whole result as JSON text, and ``result`` may then
    leave out the bulky part (a plan's assignment); otherwise ``result`` is written out.
    """

    result: dict[str, Any]
    summary: dict[str, Any]
    cancelled: bool
    result_json: str | None = None
    #: the plan's makespan in exact arithmetic, which the written makespan is rounded up from
    exact_makespan: Fraction | None = None
    #: ``result_json`` and the summary are already on the grid of the request's resolution
    on_grid: bool = False


Runner = Callable[..., Outcome]


def solve_plan(
    body: Work | Mapping[str, Any] | payload.Columns,
    *,
    method: str,
    time_budget: float,
    progress: Callable[[Any], None],
    should_stop: Callable[[], bool],
) -> Outcome:
    """``POST /v1/plans`` through the use-case the command line calls too.

    ``body`` is what the API's checks made of the request (``service/workform.py``),
    solved as it is; or, for a record an older API stored, the request body or its copy
    with the jobs in columns, read here.
    """
    from service import reading
    from workers.planning import usecases

    if isinstance(body, Work) and body.events is not None:
        return _replan_stages(body, method=method, time_budget=time_budget, should_stop=should_stop)
    if not isinstance(body, Work | payload.Columns) and "stage_replan" in body:
        return _replan_stages(
            _read_stage_replan(body),
            method=method,
            time_budget=time_budget,
            should_stop=should_stop,
        )
    inst: reading.Problem
    if isinstance(body, Work):
        inst, spread = body.core, body.spread
    elif isinstance(body, payload.Columns):
        plain = reading.read_columns(body.envelope, body.ids, body.durations, body.groups)
        inst = reading.with_stages(plain, body.envelope)  # limits or slots, if any
        spread = reading.read_spread(body.envelope)  # plain jobs carry no duration_p90
    else:
        inst, spread = reading.read_plan_body(body)
    answer = usecases.plan(
        inst,
        spread=spread,
        method=method,
        time_budget=time_budget,
        progress=progress,
        should_stop=should_stop,
    )
    res = answer.result
    result = answer.to_dict(with_assignment=False)
    if isinstance(res, PlanResult):  # written on the grid straight from the arrays
        grid = rounding.grid_decimals(inst.resolution)
        head = res.grid_head(grid)
        text = res.to_json(answer.extra, grid, head)
        out = plan_outcome(res, result, text, inst.n, inst.m)
        summary = {**out.summary, "makespan": head["makespan"], "lower_bound": head["lower_bound"]}
        return dataclasses.replace(out, summary=summary, on_grid=True)
    return plan_outcome(res, result, answer.to_json(), inst.n, inst.m)


def plan_outcome(res: Any, result: dict[str, Any], text: str, jobs: int, nodes: int) -> Outcome:
    """A plan's outcome: the result, its JSON, and the summary the lists show."""
    dl = result.get("deadline")
    summary = {
        "makespan": res.makespan,
        "lower_bound": res.lower_bound,
        "gap": res.gap if res.gap != float("inf") else None,
        "proven_optimal": res.proven_optimal,
        "jobs": jobs,
        "nodes": nodes,
        "stop_reason": res.stop_reason,
        "deadline_met": None if dl is None else dl["met"],
    }
    return Outcome(result, summary, res.stop_reason == "cancelled", text, res.exact_value)


def _read_stage_replan(body: Mapping[str, Any]) -> Work:
    """A stage graph's re-plan stored by an older API as a body (the original request, the
    original plan's nodes and the events), read."""
    from service import reading

    spec = body["stage_replan"]
    problem = reading.read_problem(spec["request"])
    events = reading.read_events(spec["events"])
    return Work(problem, planned_on=spec["planned_on"], events=events)


def _replan_stages(
    work: Work,
    *,
    method: str,
    time_budget: float,
    should_stop: Callable[[], bool],
) -> Outcome:
    """A stage graph's re-plan queued by ``POST /v1/plans/{id}/replan``: the original
    graph, the original plan's nodes and the events."""
    from workers.planning.budget import Budget
    from workers.planning.stages.replan import replan_stages

    assert work.planned_on is not None and work.events is not None
    res = replan_stages(
        work.core,
        work.planned_on,
        work.events,
        method=method,
        budget=Budget(time_budget, should_stop),
    )
    result = res.to_dict(with_assignment=False)
    return plan_outcome(res, result, res.to_json(), res.problem.n, res.problem.m)


def size_farm(
    body: Work | Mapping[str, Any],
    *,
    method: str,
    time_budget: float,
    progress: Callable[[Any], None],
    should_stop: Callable[[], bool],
) -> Outcome:
    """``POST /v1/sizings`` through the use-case the command line calls too: what the
    API's checks made of the request (or, stored by an older API, its body, read here)."""
    from service import reading
    from workers.planning import usecases

    if not isinstance(body, Work):
        body = Work(reading.read_sizing_request(body), reading.read_spread(body))
    answer = usecases.size(
        body.core,
        spread=body.spread,
        time_budget=time_budget,
        progress=progress,
        should_stop=should_stop,
    )
    d = answer.to_dict()
    cancelled = answer.result.stop_reason == "cancelled"
    keys = ("nodes_needed", "nodes_lower_bound", "proven_optimal", "estimated_cost")
    exact = rounding.exact_makespan_of(answer.result)
    return Outcome(d, {k: d.get(k) for k in keys}, cancelled, None, exact)


RUNNERS: dict[str, Runner] = {"plan": solve_plan, "sizing": size_farm}


def run_job(
    kind: str, record_id: str, prefix: str, retention: int, progress_interval: float = 0.25
) -> str:
    """The RQ entry point (arguments are JSON): run one stored record."""
    job = get_current_job()
    if job is None:  # pragma: no cover - only RQ calls this
        raise RuntimeError("run_job must run inside an RQ job")
    store = Store(job.connection, prefix=prefix, retention=retention)
    claimed = take_claim(job.id)  # made when LeanWorker started the job, if it did
    return run_record(store, kind, record_id, progress_interval=progress_interval, claimed=claimed)


#: most seconds between two progress writes of a running solve, improved or not (while
#: the search asks its cancel check, which the core's Budget does every 0.25 s)
HEARTBEAT = 0.5


def run_record(
    store: Store,
    kind: str,
    rid: str,
    *,
    progress_interval: float = 0.25,
    claimed: tuple[Claim | None] | None = None,
) -> str:
    """Solve record ``rid`` and store the outcome; returns the final status (or 'skipped').

    ``claimed`` is ``(Store.claim(kind, rid),)`` when the worker made that claim already
    (in the transaction that started the job); None claims the record here.

    Progress (elapsed, best plan, best bound) is written when the search improves, at most
    every ``progress_interval``, and at least every :data:`HEARTBEAT` seconds while it
    runs, improved or not.

    Redis round trips: one to claim the record and read its body (none when ``claimed``),
    one to store the outcome (with the metrics); a solve longer than ``progress_interval``
    adds its progress writes and cancel checks.
    """
    claim = store.claim(kind, rid) if claimed is None else claimed[0]
    if claim is None:
        return "skipped"  # cancelled while queued, expired, or already finished
    time_budget, method = claim.time_budget, claim.method
    t0 = time.perf_counter()
    last = [t0]  # the first progress write waits one interval: quick solves write none
    best: dict[str, Any] = {}

    body = _stored(claim)
    grid = rounding.grid_decimals(_resolution(body))

    def progress(p: Report) -> None:  # a plan's best so far, or a sizing's interval
        best.update(rounding.round_progress(p.to_dict(), grid), time_budget=time_budget)
        now = time.perf_counter()
        if now - last[0] >= progress_interval:
            last[0] = now
            store.publish_progress(kind, rid, dict(best))
            if kind == "plan":
                store.append_progress_history(kind, rid, dict(best))

    def should_stop() -> bool:  # the core's Budget asks at most every 0.25 s
        now = time.perf_counter()
        if now - last[0] >= HEARTBEAT:  # no improvement for a while: the clock still moves
            last[0] = now
            best.update(elapsed=round(now - t0, 4), time_budget=time_budget)
            store.publish_progress(kind, rid, dict(best))
        return store.cancel_requested(kind, rid)

    try:
        out = RUNNERS[kind](
            body,
            method=method,
            time_budget=time_budget,
            progress=progress,
            should_stop=should_stop,
        )
    except SpanwrightError as exc:
        store.finish(
            kind,
            rid,
            "failed",
            error=problem_dict(exc),
            counters=failed_counters(store.prefix, kind),
        )
        return "failed"
    done = finished(kind, body, out, grid, time.perf_counter() - t0, time_budget)
    store.finish(
        kind,
        rid,
        done.status,
        result_json=done.result_json,
        summary=done.summary,
        progress=done.progress,
        counters=finish_counters(store.prefix, kind, done.result),
    )
    return done.status


@dataclass(frozen=True, slots=True)
class Finished:
    """What ``Store.finish`` stores for a solved record."""

    status: str  # "done" | "cancelled"
    result_json: str
    summary: dict[str, Any]
    progress: dict[str, Any]
    #: the contract's result object (the metrics read it)
    result: dict[str, Any]


def finished(
    kind: str, body: Any, out: Outcome, grid: int, elapsed: float, time_budget: float
) -> Finished:
    """The stored form of a runner's outcome: the result JSON on the grid with the
    request's clock, the lists' summary and the final progress."""
    # a cancel that arrives after the solver finished its work changes nothing: status done
    status = "cancelled" if out.cancelled else "done"
    out = _on_grid(kind, out, grid)
    final: dict[str, Any] = {"elapsed": round(elapsed, 4), "time_budget": time_budget}
    if kind == "plan":
        final.update(
            best_makespan=out.summary.get("makespan"),
            best_lower_bound=out.summary.get("lower_bound"),
        )
    else:
        final.update(
            nodes_needed=out.summary.get("nodes_needed"),
            nodes_lower_bound=out.summary.get("nodes_lower_bound"),
        )
    text = out.result_json
    if text is None:
        text = json.dumps(out.result, allow_nan=False, separators=(",", ":"))
    summary = out.summary
    clock = clock_block(body)
    if clock is not None:  # the request's clock, echoed beside the seconds
        text = text[: text.rindex("}")] + ',"clock":' + json.dumps(clock) + "}"
        summary = {**summary, "clock": clock}
    return Finished(status, text, summary, final, out.result)


def plan_now(work: Work, method: str, time_budget: float) -> Finished | None:
    """Solve a plan as the API's checks made it, in this thread, as :func:`run_record`
    would (no progress, no cancel); None when the core refuses it (the queue's worker
    then fails it with its problem, as for any plan)."""
    t0 = time.perf_counter()
    grid = rounding.grid_decimals(work.resolution)
    try:
        out = solve_plan(
            work,
            method=method,
            time_budget=time_budget,
            progress=lambda p: None,
            should_stop=lambda: False,
        )
    except SpanwrightError:
        return None
    return finished("plan", work, out, grid, time.perf_counter() - t0, time_budget)


def _stored(claim: Claim) -> Any:
    """What the worker solves from a claimed record: the objects the API's checks made
    (``service/workform.py``), or for a record an older API stored, its copy in columns
    or its body."""
    if workform.is_work(claim.body):
        return workform.decode(claim.body)
    return payload.decode(claim.body) if claim.columns else json.loads(claim.body)


def _resolution(body: Any) -> float:
    """The request's ``resolution`` (default 1 s), the grid its answer is written on."""
    return body.resolution if isinstance(body, Work) else workform.resolution_of(body)


def _on_grid(kind: str, out: Outcome, grid: int) -> Outcome:
    """The outcome with its times on the grid ``10**-grid`` s (``rounding``: lower bounds
    down, plan times up), the lists' summary taken from the rounded result."""
    if out.on_grid:
        return out
    parsed = out.result_json is not None  # a document of its own: rounded in place
    doc = json.loads(out.result_json) if out.result_json is not None else out.result
    if kind == "plan":
        doc = rounding.round_plan(doc, grid, out.exact_makespan, copy=not parsed)
        keys = ("makespan", "lower_bound")
        summary = {**out.summary, **{k: doc[k] for k in keys if k in doc and k in out.summary}}
    else:
        doc = rounding.round_sizing(doc, grid, out.exact_makespan, copy=not parsed)
        summary = out.summary
    text = json.dumps(doc, allow_nan=False, separators=(",", ":"))
    return Outcome(out.result, summary, out.cancelled, text, out.exact_makespan)


def clock_block(body: Any) -> dict[str, Any] | None:
    """A result's ``clock`` (``{start_at, deadline_at}``) from the stored request, which
    holds the ``start_at`` the API filled in; None for a request in seconds only. The core
    works in seconds and never sees it (``service/reading/clock.py``)."""
    from service.reading import clock

    if isinstance(body, Work):
        return body.clock
    return clock.echo(body.envelope if isinstance(body, payload.Columns) else body)


def on_failure(job: Any, connection: Any, exc_type: Any, exc: Any, tb: Any) -> None:
    """RQ failure callback: requeue our record if RQ retries the job, else mark it failed."""
    kw = job.kwargs
    store = Store(connection, prefix=kw["prefix"], retention=kw["retention"])
    name = getattr(exc_type, "__name__", str(exc_type))
    said = str(exc).strip() if exc is not None else ""
    if name == "AbandonedJobError":  # RQ's word for a worker that died under the job
        detail = (
            "the worker running it stopped (killed, out of memory or lost) before it "
            "finished (AbandonedJobError)"
            + ("; it had already been retried once" if not job.retries_left else "")
        )
    elif said:
        detail = f"the worker failed: {name}: {said}"
    else:
        detail = f"the worker failed: {name}"
    if job.retries_left:
        store.requeue(kw["kind"], kw["record_id"], detail)
        return
    store.finish(
        kw["kind"],
        kw["record_id"],
        "failed",
        error=problem_dict(InternalError(detail)),
        allowed_from="queued,solving",
        counters=failed_counters(kw["prefix"], kw["kind"]),
    )
