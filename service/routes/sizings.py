"""``/v1/sizings``: the fewest nodes of one kind meeting a deadline; shared job machinery.

Semantic checks (a job longer than the deadline is a 422 naming it, tags no node
provides, ...) live in the core's ``size_from_request``. To answer them synchronously the
API runs it once with a zero time budget and an immediate stop: that builds and checks
the instance and runs only the quick first-fit construction (tens of milliseconds for a
thousand jobs); the budgeted search runs on the worker.
"""

from __future__ import annotations

from typing import Any

from ..schemas import load_sizing_request
from ..settings import Settings
from .jobs import Resource, Validated, make_blueprint


def validate_sizing(body: Any, settings: Settings) -> dict[str, Any]:
    """Limits and shape (marshmallow), then the core's checks (422 either way)."""
    from workers.planning.sizing import size_from_request

    data = load_sizing_request(body, settings)
    size_from_request(data, time_budget=0.0, should_stop=lambda: True)
    return data


def read_sizing(body: Any, settings: Settings) -> Validated:
    """:func:`validate_sizing` for the job machinery (the worker reads the raw body)."""
    return Validated(validate_sizing(body, settings))


RESOURCE = Resource(kind="sizing", path="/v1/sizings", validate=read_sizing)
blueprint = make_blueprint(RESOURCE)
