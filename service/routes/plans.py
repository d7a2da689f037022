"""``/v1/plans``: validation of a plan request; the rest is the shared job machinery."""

from __future__ import annotations

from typing import Any

from workers.planning import Instance

from ..schemas import load_plan_request
from ..settings import Settings
from .jobs import Resource, make_blueprint


def validate_plan(body: Any, settings: Settings) -> dict[str, Any]:
    """Limits and shape (marshmallow), then the core's semantic checks (422 either way)."""
    data = load_plan_request(body, settings)
    Instance.from_request(data)
    return data


RESOURCE = Resource(kind="plan", path="/v1/plans", validate=validate_plan)
blueprint = make_blueprint(RESOURCE)
