"""marshmallow schemas of the request bodies: the *shape* check before the core's semantics.

They reject unknown fields, wrong types (a string where a number goes, a boolean where an
integer goes), non-finite numbers and out-of-range values. Semantic checks (duplicate ids,
a job no node can run) are the readers' of ``service/reading``; limits of this deployment (jobs
per batch, nodes, time budget ceiling) are checked by :func:`check_plan_limits` first so a
huge batch is refused before it is walked.

Integers: JSON does not distinguish ``29`` from ``29.0``, and OpenAPI generators send the
latter for ``type: integer``; :class:`WholeNumber` accepts both and refuses ``29.5``,
``"29"`` and ``true`` (marshmallow's own ``Integer`` either truncates or refuses ``29.0``).
"""

from __future__ import annotations

import math
from collections.abc import Mapping
from dataclasses import dataclass
from operator import itemgetter
from typing import Any

import numpy as np
import numpy.typing as npt
from marshmallow import RAISE, Schema, ValidationError, fields, validate, validates_schema

from workers.planning.errors import InvalidInstance, Issue, Path
from workers.planning.model import CONTROL, CONTROL_WORDS, MAX_ID_LENGTH
from workers.planning.solve import METHODS

from .problems import LimitExceeded
from .reading.clock import parse_time
from .settings import Settings

#: largest coefficient of variation accepted for estimate spread
MAX_SPREAD = 10.0
#: most Monte-Carlo samples one request may ask for
MAX_SAMPLES = 100_000
#: most random draws (samples x jobs) one confidence simulation may cost
MAX_DRAWS = 200_000_000
#: most deadlines of one rental frontier (``deadlines``)
MAX_DEADLINES = 24


class FiniteNumber(fields.Field):  # type: ignore[type-arg]
    """A JSON number (int or float, never a bool or a string) that is finite."""

    default_error_messages = {  # noqa: RUF012 - marshmallow's own convention
        "invalid": "Not a number.",
        "finite": "Must be a finite number.",
    }

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> float:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.make_error("invalid")
        try:
            out = float(value)  # a huge int overflows here rather than becoming inf
        except OverflowError:
            raise self.make_error("finite") from None
        if not math.isfinite(out):
            raise self.make_error("finite")
        return out


class WholeNumber(fields.Field):  # type: ignore[type-arg]
    """An integer, also written as an integral float (``29.0``); never a bool or a string."""

    default_error_messages = {"invalid": "Not a whole number."}  # noqa: RUF012

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> int:
        if isinstance(value, bool) or not isinstance(value, int | float):
            raise self.make_error("invalid")
        if isinstance(value, float) and not (math.isfinite(value) and value.is_integer()):
            raise self.make_error("invalid")
        return int(value)


from .ranges import MAX_SECONDS, MIN_DEADLINE, RESOLUTIONS, SPEEDS  # noqa: E402


def _seconds(lowest: float = 0.0) -> validate.Range:
    return validate.Range(min=lowest, max=MAX_SECONDS)


def plain_text(value: str) -> None:
    """Refuse control characters, unpaired surrogates and bidirectional controls in text
    we store and show (ids, tags, groups, names): see ``model.CONTROL``."""
    if CONTROL.search(value):
        raise ValidationError(f"Contains {CONTROL_WORDS}.")


def _text(low: int, high: int) -> list[Any]:
    return [validate.Length(min=low, max=high), plain_text]


def _ident() -> fields.String:
    return fields.String(required=True, validate=_text(1, MAX_ID_LENGTH))


def _tags() -> fields.List:  # type: ignore[type-arg]
    return fields.List(fields.String(validate=_text(1, MAX_ID_LENGTH)))


def _rfc3339(value: str) -> None:
    """An RFC 3339 timestamp with an offset (``service/reading/clock.py`` reads it)."""
    try:
        parse_time(value)
    except ValueError as exc:
        raise ValidationError(f"{str(exc)[0].upper()}{str(exc)[1:]}.") from None


def _clock_time() -> fields.String:
    """A time on a clock: ``start_at``, ``deadline_at``, a node's ``free_at_time``."""
    return fields.String(validate=[validate.Length(max=64), _rfc3339])


class StrictSchema(Schema):
    class Meta:
        unknown = RAISE


def _names() -> fields.List:  # type: ignore[type-arg]
    """A list of ids or limit names (what a job waits for, what it uses)."""
    return fields.List(fields.String(validate=_text(1, MAX_ID_LENGTH)))


#: most jobs of one limit that may run at once, and most slots of one node (sanity caps)
MAX_CAPACITY = 1_000_000
MAX_SLOTS = 1_024


class JobSchema(StrictSchema):
    id = _ident()
    duration = FiniteNumber(required=True, validate=_seconds())
    duration_p90 = FiniteNumber(validate=_seconds())
    requires = _tags()
    group = fields.String(allow_none=True, validate=_text(0, MAX_ID_LENGTH))
    #: the ids of the jobs this one waits for (finish-to-start)
    after = _names()
    #: the names of the shared limits this job uses while it runs
    uses = _names()


_JOB_KEYS = frozenset(JobSchema().fields)
_NUM = (int, float)


class JobList(fields.Field):  # type: ignore[type-arg]
    """A non-empty list of jobs, checked exactly as :class:`JobSchema` would check each one.

    ``fields.List(fields.Nested(JobSchema))`` costs about 23 microseconds a job (2.3 s for a
    100,000-job batch); this loop gives the same verdicts (a test compares the two) for a
    fraction of that. The loaded jobs are the input dicts themselves.
    """

    default_error_messages = {  # noqa: RUF012
        "invalid": "Not a valid list.",
        "empty": "Shorter than minimum length 1.",
    }

    def _deserialize(self, value: Any, attr: str | None, data: Any, **kwargs: Any) -> list[Any]:
        if not isinstance(value, list):
            raise self.make_error("invalid")
        if not value:
            raise self.make_error("empty")
        errors: dict[int, Any] = {}
        keys, num, control = _JOB_KEYS, _NUM, CONTROL.search
        for i, job in enumerate(value):
            if (
                type(job) is dict
                and keys.issuperset(job)
                and type(job.get("id")) is str
                and 0 < len(job["id"]) <= MAX_ID_LENGTH
                and not control(job["id"])
                and type(job.get("duration")) in num
                and 0 <= job["duration"] <= MAX_SECONDS
                and len(job) == 2
            ):
                continue  # the common case: exactly {id, duration}, both fine
            err = _job_errors(job)
            if err:
                errors[i] = err
                if len(errors) >= 50:
                    break
        if errors:
            raise ValidationError(errors)
        return value


_JOB_SCHEMA = JobSchema()


def _job_errors(job: Any) -> Any:
    """The errors :class:`JobSchema` finds in one job (the slow, exact path)."""
    if job is None:
        return ["Field may not be null."]  # what fields.Nested says about a null element
    try:
        _JOB_SCHEMA.load(job)
    except ValidationError as exc:
        return exc.messages
    return None


class NodeSchema(StrictSchema):
    id = _ident()
    speed = FiniteNumber(validate=validate.Range(*SPEEDS))
    provides = _tags()
    free_at = FiniteNumber(validate=_seconds())
    #: when the node is free, on a clock (instead of ``free_at``; ``reading/clock.py``)
    free_at_time = _clock_time()
    #: how many jobs the node runs at once, each at its speed
    slots = WholeNumber(validate=validate.Range(min=1, max=MAX_SLOTS))


def _limits() -> fields.Dict:
    """Limit name -> how many jobs using it may run at once."""
    return fields.Dict(
        keys=fields.String(validate=_text(1, MAX_ID_LENGTH)),
        values=WholeNumber(validate=validate.Range(min=1, max=MAX_CAPACITY)),
    )


class PlanRequestSchema(StrictSchema):
    """The body of ``POST /v1/plans``."""

    name = fields.String(validate=_text(0, 200))
    jobs = JobList(required=True)
    nodes = fields.List(fields.Nested(NodeSchema), validate=validate.Length(min=1))
    node_count = WholeNumber(validate=validate.Range(min=1))
    method = fields.String(load_default="longest_first", validate=validate.OneOf(METHODS))
    time_budget = FiniteNumber(validate=validate.Range(min=0))
    deadline = FiniteNumber(allow_none=True, validate=_seconds(MIN_DEADLINE))
    #: time 0 and the deadline on a clock (``service/reading/clock.py``)
    start_at = _clock_time()
    deadline_at = _clock_time()
    resolution = FiniteNumber(validate=validate.Range(*RESOLUTIONS))
    spread = FiniteNumber(validate=validate.Range(0, MAX_SPREAD))
    confidence_samples = WholeNumber(validate=validate.Range(min=10, max=MAX_SAMPLES))
    confidence_seed = WholeNumber(validate=validate.Range(min=0, max=2**32 - 1))
    limits = _limits()

    @validates_schema
    def _nodes_xor_count(self, data: Mapping[str, Any], **kwargs: Any) -> None:
        if ("nodes" in data) == ("node_count" in data):
            raise ValidationError(
                "give either 'nodes' (a list) or 'node_count', not both", "node_count"
            )


PLAN_SCHEMA = PlanRequestSchema()
#: the same schema for a body whose jobs were read as columns (:func:`job_columns`)
PLAN_ENVELOPE_SCHEMA = PlanRequestSchema(exclude=("jobs",))


class SizingNodeSchema(StrictSchema):
    id = fields.String(validate=_text(1, MAX_ID_LENGTH))
    speed = FiniteNumber(validate=validate.Range(*SPEEDS))
    provides = _tags()
    slots = NodeSchema._declared_fields["slots"]


class FarmNodeSchema(NodeSchema):
    """A node of the farm you have (a rental's ``farm``); free unless it has a price."""

    hour_cost = FiniteNumber(allow_none=True, validate=validate.Range(min=0, max=1e9))


class KindSchema(StrictSchema):
    """A kind of node you may rent (a rental's ``kinds``)."""

    name = _ident()
    speed = FiniteNumber(validate=validate.Range(*SPEEDS))
    provides = _tags()
    hour_cost = FiniteNumber(required=True, validate=validate.Range(min=0, max=1e9))
    boot = FiniteNumber(validate=_seconds())
    max_count = WholeNumber(validate=validate.Range(min=0, max=10**6))


class SizingRequestSchema(StrictSchema):
    """The body of ``POST /v1/sizings``."""

    name = fields.String(validate=_text(0, 200))
    jobs = JobList(required=True)
    deadline = FiniteNumber(validate=_seconds(MIN_DEADLINE))
    start_at = PlanRequestSchema._declared_fields["start_at"]
    deadline_at = PlanRequestSchema._declared_fields["deadline_at"]
    node = fields.Nested(SizingNodeSchema)
    #: renting to a deadline: the farm you have and the kinds you may rent
    farm = fields.List(fields.Nested(FarmNodeSchema))
    kinds = fields.List(fields.Nested(KindSchema), validate=validate.Length(min=1))
    min_billed = FiniteNumber(validate=_seconds())
    #: a rental's frontier: the cheapest cost at each of these deadlines (seconds)
    deadlines = fields.List(
        FiniteNumber(validate=_seconds(MIN_DEADLINE)),
        validate=validate.Length(min=1, max=MAX_DEADLINES),
    )
    limits = _limits()
    max_nodes = WholeNumber(validate=validate.Range(min=1))
    time_budget = FiniteNumber(validate=validate.Range(min=0))
    node_hour_cost = FiniteNumber(allow_none=True, validate=validate.Range(min=0, max=1e9))
    billing = fields.String(validate=validate.OneOf(("second", "minute", "hour")))
    curve_nodes = fields.List(WholeNumber(validate=validate.Range(min=1, max=10**6)))
    resolution = FiniteNumber(validate=validate.Range(*RESOLUTIONS))
    # estimate spread: the plan's own fields (same rules and limits; marshmallow copies
    # declared fields into every schema instance, so sharing them is safe)
    spread = PlanRequestSchema._declared_fields["spread"]
    confidence_samples = PlanRequestSchema._declared_fields["confidence_samples"]
    confidence_seed = PlanRequestSchema._declared_fields["confidence_seed"]
    #: how the sizing to ``confidence`` dispatches jobs in its simulation
    confidence_policy = fields.String(validate=validate.OneOf(("static", "dynamic")))
    #: size to this confidence q: the fewest nodes with P(meet deadline) >= q
    confidence = FiniteNumber(
        validate=validate.Range(0, 1, min_inclusive=False, max_inclusive=False)
    )

    @validates_schema(pass_original=True, skip_on_field_errors=False)
    def _a_deadline(self, data: Mapping[str, Any], original: Any, **kwargs: Any) -> None:
        """``deadline`` (seconds) or ``deadline_at`` (a time): one is required."""
        if not isinstance(original, Mapping):
            return
        if "deadline" not in original and "deadline_at" not in original:
            raise ValidationError("Missing data for required field.", "deadline")


SIZING_SCHEMA = SizingRequestSchema()


def messages_to_issues(messages: Any, path: Path = ()) -> list[Issue]:
    """Flatten marshmallow's nested error messages into issues with field paths (list
    positions come back from marshmallow as ints)."""
    out: list[Issue] = []
    if isinstance(messages, Mapping):
        for key, sub in messages.items():
            child = path if key == "_schema" else (*path, key)
            out.extend(messages_to_issues(sub, child))
    elif isinstance(messages, list | tuple):
        for m in messages:
            out.extend(messages_to_issues(m, path))
    else:
        out.append(Issue(path, str(messages)))
    return out


def check_plan_limits(body: Any, settings: Settings) -> None:
    """Refuse a batch above this deployment's limits before walking it (422)."""
    if not isinstance(body, Mapping):
        return
    issues: list[Issue] = []
    jobs, nodes = body.get("jobs"), body.get("nodes")
    if isinstance(jobs, list) and len(jobs) > settings.max_jobs:
        issues.append(
            Issue(("jobs",), f"{len(jobs)} jobs; this service plans at most {settings.max_jobs}")
        )
    if isinstance(nodes, list) and len(nodes) > settings.max_nodes:
        issues.append(
            Issue(
                ("nodes",),
                f"{len(nodes)} nodes; this service plans for at most {settings.max_nodes}",
            )
        )
    for key in ("node_count", "max_nodes"):
        count: Any = body.get(key)
        if _number(count) and count > settings.max_nodes:
            issues.append(
                Issue((key,), f"{count} nodes; this service plans for at most {settings.max_nodes}")
            )
    samples: Any = body.get("confidence_samples")
    if _number(samples) and isinstance(jobs, list) and samples * len(jobs) > MAX_DRAWS:
        issues.append(
            Issue(
                ("confidence_samples",),
                f"{samples} samples of {len(jobs)} jobs is above {MAX_DRAWS:.0e} draws",
            )
        )
    tb: Any = body.get("time_budget")
    if _number(tb) and tb > settings.max_time_budget:
        issues.append(
            Issue(
                ("time_budget",),
                f"{tb} s is above this service's ceiling of {settings.max_time_budget} s",
            )
        )
    if issues:
        raise LimitExceeded("; ".join(i.detail for i in issues), issues)


def _number(x: Any) -> bool:
    return isinstance(x, int | float) and not isinstance(x, bool) and math.isfinite(x)


def load_plan_request(body: Any, settings: Settings) -> dict[str, Any]:
    """Limits, then shape; returns the loaded body with defaults filled in.

    Raises :class:`LimitExceeded` or :class:`InvalidInstance` (both 422) with pointers.
    """
    return _load(PLAN_SCHEMA, body, settings)


@dataclass(frozen=True, slots=True)
class JobColumns:
    """The jobs of a body as columns: ``ids[j]``, ``durations[j]``, ``groups[j]``."""

    ids: list[str]
    durations: npt.NDArray[np.float64]
    groups: list[str | None] | None


_get_id, _get_duration = itemgetter("id"), itemgetter("duration")
_NUMBER_TYPES = frozenset((int, float))


def job_columns(jobs: Any) -> JobColumns | None:
    """The jobs as columns if :class:`JobList` accepts every one of them as plain, else None.

    Plain means an object with exactly ``id`` and ``duration`` (and maybe a string
    ``group``), each of the right type and in range. The checks run over whole columns
    (``map``, ``set`` and numpy, no Python statement per job); anything else (another
    field, a null group, a wrong value) answers None, and the caller then takes the exact
    per-job path, which names every problem with its pointer. A None never means "invalid".
    """
    if type(jobs) is not list or not jobs:
        return None
    n = len(jobs)
    try:
        if set(map(type, jobs)) != {dict}:
            return None
        ids = list(map(_get_id, jobs))
        durs = list(map(_get_duration, jobs))
    except KeyError:
        return None
    size = sum(map(len, jobs))
    groups: list[Any] | None = None
    if size != 2 * n:  # some jobs carry a third field: only a string group is plain here
        groups = [job.get("group") for job in jobs]
        named = [g for g in groups if g is not None]
        if size != 2 * n + len(named) or set(map(type, named)) != {str}:
            return None
        if max(map(len, named)) > MAX_ID_LENGTH or CONTROL.search("".join(named)):
            return None
    if set(map(type, ids)) != {str} or not set(map(type, durs)) <= _NUMBER_TYPES:
        return None
    lengths = list(map(len, ids))
    if min(lengths) < 1 or max(lengths) > MAX_ID_LENGTH or CONTROL.search("".join(ids)):
        return None
    try:
        d = np.array(durs, dtype=np.float64)
    except (OverflowError, ValueError, TypeError):
        return None
    if not (np.isfinite(d).all() and (d >= 0).all() and (d <= MAX_SECONDS).all()):
        return None
    return JobColumns(ids, d, groups)


def load_plan_columns(body: Any, settings: Settings) -> tuple[dict[str, Any], JobColumns] | None:
    """:func:`load_plan_request` for a body whose jobs are all plain, read in columns.

    Returns the loaded body (its ``jobs`` the input list itself) and the job columns; or
    None when a job is not plain or the rest of the body has a problem: the caller then
    runs :func:`load_plan_request`, which finds and names every problem. Limits are
    checked first, as there (a batch above them raises :class:`LimitExceeded` here too).
    """
    if not isinstance(body, Mapping):
        return None
    check_plan_limits(body, settings)
    cols = job_columns(body.get("jobs"))
    if cols is None:
        return None
    try:
        data: dict[str, Any] = PLAN_ENVELOPE_SCHEMA.load(
            {k: v for k, v in body.items() if k != "jobs"}
        )
    except ValidationError:
        return None
    data["jobs"] = body["jobs"]
    data.setdefault("time_budget", settings.default_time_budget)
    return data, cols


def load_sizing_request(body: Any, settings: Settings) -> dict[str, Any]:
    """As :func:`load_plan_request`, for ``POST /v1/sizings``.

    With spread inputs, also the core's checks of them that need no sampling
    (``service/reading``: a target ``confidence`` the sample count cannot show, or no node
    count can reach, is a 422 here rather than a failed sizing later) are run by the route.
    """
    return _load(SIZING_SCHEMA, body, settings)


def _load(schema: Schema, body: Any, settings: Settings) -> dict[str, Any]:
    if not isinstance(body, Mapping):
        raise InvalidInstance(
            "the request body must be a JSON object", [Issue((), "not an object")]
        )
    check_plan_limits(body, settings)
    try:
        data: dict[str, Any] = schema.load(body)
    except ValidationError as exc:
        issues = messages_to_issues(exc.messages)
        raise InvalidInstance(f"{len(issues)} problem(s) in the request", issues) from None
    data.setdefault("time_budget", settings.default_time_budget)
    return data


# -- ReplanRequest: the events body of POST /v1/plans/{id}/replan ------------------------


class RunningJobSchema(StrictSchema):
    """A job running now: its id, its node and when it started (original plan time)."""

    job = _ident()
    node = _ident()
    started_at = FiniteNumber(required=True, validate=_seconds())


class ReplanRequestSchema(StrictSchema):
    """The body of ``POST /v1/plans/{id}/replan`` (the core's ``read_events`` then checks
    what needs the plan: ``started_at`` not after ``elapsed``, ids listed once)."""

    elapsed = FiniteNumber(required=True, validate=_seconds())
    finished = fields.List(_ident())
    running = fields.List(fields.Nested(RunningJobSchema))
    lost_nodes = fields.List(_ident())
    added_nodes = fields.List(fields.Nested(NodeSchema))
    method = fields.String(validate=validate.OneOf(METHODS))
    time_budget = FiniteNumber(validate=validate.Range(min=0))


REPLAN_SCHEMA = ReplanRequestSchema()


def load_replan_request(body: Any) -> dict[str, Any]:
    """The shape of an events body: unknown fields, wrong types and out-of-range values are
    refused with :class:`InvalidInstance` (422), one JSON Pointer per problem."""
    if not isinstance(body, Mapping):
        raise InvalidInstance("the events body must be a JSON object", [Issue((), "not an object")])
    try:
        data: dict[str, Any] = REPLAN_SCHEMA.load(body)
    except ValidationError as exc:
        issues = messages_to_issues(exc.messages)
        raise InvalidInstance(f"{len(issues)} problem(s) in the events", issues) from None
    return data
