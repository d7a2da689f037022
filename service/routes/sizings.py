"""``/v1/sizings``: the fewest nodes of one kind meeting a deadline; shared job machinery.

Semantic checks (a job longer than the deadline is a 422 naming it, tags no node
provides, more nodes than ``max_nodes`` by the lower bound, a confidence target out of
reach, ...) are ``reading.read_sizing_request`` and the core's ``SizingArgs.check`` and
``SpreadRequest.check``: they read and check the request without
sizing it; the search runs on the worker. (A batch whose lower bound fits ``max_nodes``
but no plan found does ends ``failed`` with that reason.)
"""

from __future__ import annotations

from typing import Any

from workers.planning.rental import RentalArgs
from workers.planning.stage_sizing import StageSizingArgs
from workers.planning.usecases import FrontierArgs, refuse_spread

from ..reading import clock, read_sizing_request, read_spread, refuse_stages
from ..schemas import load_sizing_request
from ..settings import Settings
from ..workform import Work, resolution_of
from .events import add_events
from .jobs import Resource, Validated, make_blueprint


def validate_sizing(body: Any, settings: Settings) -> dict[str, Any]:
    """Limits and shape (marshmallow), then the core's checks (422 either way)."""
    return read_sizing(body, settings).data


def read_sizing(body: Any, settings: Settings) -> Validated:
    """:func:`validate_sizing` for the job machinery, with what the checks made (the
    arguments and what to simulate), which the worker solves (``service/workform.py``)."""
    data = load_sizing_request(body, settings)
    args = read_sizing_request(data)
    args.check()
    asked = read_spread(data)
    if asked is not None:
        if isinstance(args, RentalArgs | FrontierArgs):
            refuse_spread(args)
        elif isinstance(args, StageSizingArgs):
            refuse_stages(data, "the confidence simulation")
        else:
            asked.check(args.base, args.node.speed)
    return Validated(data, Work(args, asked, clock.echo(body), resolution_of(body)))


RESOURCE = Resource(kind="sizing", path="/v1/sizings", validate=read_sizing)
blueprint = add_events(make_blueprint(RESOURCE), RESOURCE)
