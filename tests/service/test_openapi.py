"""openapi/openapi.yaml is a valid OpenAPI 3.1 document and the app keeps to it.

Checks: openapi-spec-validator; the spec's operations are exactly the routes of the
production app (``create_app`` plus ``/metrics``, as ``service/wsgi.py`` builds it); the
spec ships as package data (``importlib.resources``), so a non-editable install serves it;
and schemathesis (property-based, from the spec) drives every operation against the app
in-process: no 5xx, and every response (status, media type, headers, body) is one the spec
allows. ``positive_data_acceptance`` is left out on purpose: some bodies that JSON Schema
allows are refused by the core's semantic checks (duplicate ids, ``duration_p90`` below
``duration``) or by this deployment's limits, with a documented 422.
"""

from __future__ import annotations

import re
import tomllib
from collections.abc import Iterator
from importlib import resources
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
from service.metrics import init_metrics
from service.problems import KINDS
from service.routes.health import SPEC_RESOURCE, spec_file
from service.settings import Settings

ROOT = Path(__file__).resolve().parents[2]
SPEC = ROOT / "openapi" / "openapi.yaml"
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
    conn = fakeredis.FakeRedis(server=server)
    app = create_app(s, connection=conn)
    init_metrics(app, s, conn)  # /metrics, as service/wsgi.py adds it under gunicorn
    yield app
    worker.stop(timeout=0)


def test_operations_are_the_routes(st_app: Any) -> None:
    """Every route of the production app (``/metrics`` included) is in the spec with the same
    methods, and nothing else is (Flask's automatic HEAD and OPTIONS aside)."""
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


def test_no_listed_operation_can_answer_405(st_app: Any) -> None:
    """werkzeug's router answers 405 only for a method a path does not route: every listed
    operation is routed (so none can answer 405), and an unlisted method gets an RFC 9457
    problem with ``Allow`` (RFC 9110 section 15.5.6) naming exactly the listed methods."""
    client = st_app.test_client()
    for path, ops in spec()["paths"].items():
        listed = {m.upper() for m in ops if m != "parameters"}
        url = path.replace("{id}", "0" * 21).replace("{kind}", "not-found")
        adapter = st_app.url_map.bind("localhost")
        for method in listed:
            adapter.match(url, method=method)  # raises MethodNotAllowed if it were not routed
        unlisted = next(m for m in ("PUT", "PATCH", "DELETE", "POST") if m not in listed)
        resp = client.open(url, method=unlisted)
        assert resp.status_code == 405, (path, unlisted, resp.status_code)
        assert resp.mimetype == "application/problem+json"
        allowed = {m.strip() for m in resp.headers["Allow"].split(",")}
        assert allowed - {"HEAD", "OPTIONS"} == listed, (path, allowed)


def test_every_401_and_429_declares_its_header() -> None:
    """RFC 6750 section 3: a 401 carries ``WWW-Authenticate``; RFC 6585 section 4 with RFC
    9110 section 10.2.3: our 429s carry ``Retry-After``. Every such response in the spec
    declares the header as required."""
    doc = spec()
    shared = doc["components"]["responses"]
    want = {"401": "WWW-Authenticate", "429": "Retry-After"}
    seen = 0
    for ops in doc["paths"].values():
        for method, op in ops.items():
            if method == "parameters":
                continue
            for code, header in want.items():
                if code not in op["responses"]:
                    continue
                resp = op["responses"][code]
                if "$ref" in resp:
                    resp = shared[resp["$ref"].rsplit("/", 1)[1]]
                assert resp["headers"][header]["required"] is True, (method, code)
                seen += 1
    assert seen >= 20


def test_spec_ships_as_package_data() -> None:
    """``GET /openapi.json`` reads the spec through ``importlib.resources`` from the
    ``service`` package, and pyproject's package data lists it, so setuptools copies it
    into every wheel (a non-editable ``pip install .``); the packaged file is the top-level
    ``openapi/openapi.yaml`` itself (one source)."""
    package, name = SPEC_RESOURCE
    data = tomllib.loads((ROOT / "pyproject.toml").read_text())["tool"]["setuptools"]
    assert name in data["package-data"][package]
    assert any(package.startswith(inc.rstrip("*")) for inc in data["packages"]["find"]["include"])
    found = spec_file()
    assert found == resources.files(package).joinpath(name)
    assert found.read_bytes() == SPEC.read_bytes()
    assert (ROOT / package / name).resolve() == SPEC.resolve()


def test_every_problem_kind_is_documented() -> None:
    """Each problem type the API can answer with is listed in the spec's description, and
    matches the pattern of ``GET /problems/{kind}``'s parameter."""
    doc = spec()
    text = doc["info"]["description"]
    (param,) = doc["paths"]["/problems/{kind}"]["get"]["parameters"]
    assert [k for k in KINDS if not re.fullmatch(param["schema"]["pattern"], k)] == []
    # bad-settings is refused at start-up, never an HTTP answer
    assert [k for k in KINDS if k != "bad-settings" and f"`{k}`" not in text] == []


@schema.parametrize()
@settings(
    max_examples=25,
    deadline=None,
    suppress_health_check=[HealthCheck.too_slow, HealthCheck.filter_too_much],
)
def test_app_keeps_to_the_spec(case: Any, st_app: Any) -> None:
    """schemathesis: no server errors, responses conform to the documented ones."""
    case.call_and_validate(app=st_app, excluded_checks=[checks.positive_data_acceptance])
