"""openapi/openapi.yaml is a valid OpenAPI 3.1 document and the app keeps to it.

Checks: openapi-spec-validator; the spec's operations are exactly the app's routes; and
schemathesis (property-based, from the spec) drives every operation against the app
in-process: no 5xx, and every response (status, media type, headers, body) is one the spec
allows. ``positive_data_acceptance`` is left out on purpose: some bodies that JSON Schema
allows are refused by the core's semantic checks (duplicate ids, ``duration_p90`` below
``duration``) or by this deployment's limits, with a documented 422.
"""

from __future__ import annotations

import re
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import fakeredis
import pytest
import schemathesis
import schemathesis.specs.openapi.object_authorization
import yaml
from hypothesis import HealthCheck, settings
from openapi_spec_validator import validate
from schemathesis import checks

from service.app import create_app
from service.embedded import EmbeddedWorker
from service.problems import KINDS
from service.settings import Settings

SPEC = Path(__file__).resolve().parents[2] / "openapi" / "openapi.yaml"
schema = schemathesis.openapi.from_path(str(SPEC))
# valid and invalid inputs both; a fixed seed-free but bounded run (max_examples below)
schema.config.generation.update(modes=list(schemathesis.GenerationMode), deterministic=True)


def spec() -> dict[str, Any]:
    doc: dict[str, Any] = yaml.safe_load(SPEC.read_text(encoding="utf-8"))
    return doc


def test_spec_validates() -> None:
    """openapi-spec-validator accepts the document as OpenAPI 3.1."""
    doc = spec()
    assert doc["openapi"].startswith("3.1")
    validate(doc)


@pytest.fixture(scope="module")
def st_app() -> Iterator[Any]:
    """One app with the embedded worker for the whole schemathesis run."""
    s = Settings(max_wait=0.5, max_time_budget=0.2, default_time_budget=0.1, max_jobs=2000)
    server = fakeredis.FakeServer()
    worker = EmbeddedWorker(server, s).start()
    yield create_app(s, connection=fakeredis.FakeRedis(server=server))
    worker.stop(timeout=0)


def test_operations_are_the_routes(st_app: Any) -> None:
    """Every route of the app is in the spec with the same methods, and nothing else is."""
    routes = set()
    for rule in st_app.url_map.iter_rules():
        if rule.endpoint == "static":
            continue
        path = re.sub(r"<(?:\w+:)?(\w+)>", r"{\1}", rule.rule)
        path = path.replace("{rid}", "{id}")
        for m in rule.methods - {"HEAD", "OPTIONS"}:
            routes.add((path, m.lower()))
    documented = {
        (p, m) for p, ops in spec()["paths"].items() for m in ops if m not in ("parameters",)
    }
    assert routes == documented


def test_every_problem_kind_is_documented() -> None:
    """Each problem type the API can answer with is listed in the spec's description."""
    text = spec()["info"]["description"]
    for kind in KINDS:
        if kind != "bad-settings":  # refused at start-up, never an HTTP answer
            assert f"`{kind}`" in text, kind


@schema.parametrize()
@settings(
    max_examples=25,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)
def test_app_keeps_to_the_spec(case: Any, st_app: Any) -> None:
    """schemathesis: no server errors, responses conform to the documented ones."""
    case.call_and_validate(app=st_app, excluded_checks=[checks.positive_data_acceptance])
