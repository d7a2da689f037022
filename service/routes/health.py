"""``/healthz`` (the process answers), ``/readyz`` (Redis answers and a worker listens),
``/openapi.json`` and ``/problems/{kind}`` (what each problem ``type`` means)."""

from __future__ import annotations

import json
from importlib import resources
from importlib.resources.abc import Traversable
from typing import Any

import yaml
from flask import Blueprint, Response

from ..problems import NotFound, describe
from ..services import services

blueprint = Blueprint("health", __name__)

#: the spec ships inside the package: ``service/openapi.yaml`` is a link to the one source,
#: ``openapi/openapi.yaml``, and package data (pyproject.toml) copies its content into
#: every wheel, so a non-editable install serves it too
SPEC_RESOURCE = ("service", "openapi.yaml")


def spec_file() -> Traversable:
    """The OpenAPI document as package data (``importlib.resources``)."""
    package, name = SPEC_RESOURCE
    return resources.files(package).joinpath(name)


def _json(doc: Any, status: int = 200) -> Response:
    return Response(json.dumps(doc), status, mimetype="application/json")


@blueprint.get("/healthz")
def healthz() -> Response:
    return _json({"status": "pass"})


@blueprint.get("/readyz")
def readyz() -> Response:
    svc = services()
    checks: dict[str, Any] = {}
    ok = True
    try:
        svc.store.conn.ping()
        checks["redis"] = "pass"
        workers = svc.queue.workers()
        checks["workers"] = workers
        checks["queued"] = svc.queue.depth()
        ok = workers > 0
    except Exception as exc:  # any failure to reach Redis means not ready
        checks["redis"] = f"fail: {type(exc).__name__}"
        ok = False
    return _json({"status": "pass" if ok else "fail", "checks": checks}, 200 if ok else 503)


_spec_cache: dict[str, str] = {}


@blueprint.get("/openapi.json")
def openapi() -> Response:
    if "doc" not in _spec_cache:
        _spec_cache["doc"] = json.dumps(yaml.safe_load(spec_file().read_text(encoding="utf-8")))
    return Response(_spec_cache["doc"], 200, mimetype="application/json")


@blueprint.get("/problems/<kind>")
def problem_type(kind: str) -> Response:
    text = describe(kind)
    if text is None:
        raise NotFound(f"no problem type {kind!r}")
    return Response(text, 200, mimetype="text/plain")
