"""schemathesis over every operation of openapi/openapi.yaml, in positive and in negative
mode, against the app with a keys file (so authentication is on the path), at least 1,000
generated requests in total.

Checked on every response: no 5xx (schemathesis ``not_a_server_error``), the response
conforms to the spec (status, headers, media type, body schema), invalid input is rejected
in negative mode (``negative_data_rejection``), and every 4xx/5xx is an RFC 9457 document served as
``application/problem+json`` (our own check, below). Refusal without a key is checked in
test_auth.py (schemathesis ``ignored_auth`` sends its probes over the network, so it is
left out here). ``positive_data_acceptance`` is left
out for the reason given in tests/service/test_openapi.py (semantic 422s the schema cannot
express).

Operations that declare no parameter and no request body (the probes, ``/metrics``, the
spec and the list page) have nothing to make invalid: the negative run leaves them out by
name (:data:`NO_INPUT`), so schemathesis skips nothing.

The count of requests is checked by :func:`test_at_least_a_thousand_requests`, which does
not depend on the order or selection of tests: when this session has not fuzzed every
operation in both modes (the test run alone, with ``-k``, or first), it runs the fuzz tests
in a child pytest and reads their count.
"""

from __future__ import annotations

import os
import re
import subprocess
import sys
from collections.abc import Iterator
from pathlib import Path
from typing import Any

import pytest
import schemathesis
import yaml
from hypothesis import HealthCheck, settings
from schemathesis import checks
from stack import UNTHROTTLED, embedded_app

from service.metrics import init_metrics
from service.settings import Settings
from tests.trust.conftest import KEYS, write_keys

ROOT = Path(__file__).resolve().parents[2]
SPEC = ROOT / "openapi" / "openapi.yaml"
RAW: dict[str, Any] = yaml.safe_load(SPEC.read_text(encoding="utf-8"))


def _operations() -> tuple[dict[str, str], list[str]]:
    """Every operation, ``{label: operationId}`` (schemathesis labels: ``GET /v1/plans``),
    and the operationIds of those with no parameter (their own or their path's) and no
    request body."""
    every: dict[str, str] = {}
    no_input: list[str] = []
    for path, ops in RAW["paths"].items():
        for method, op in ops.items():
            if method == "parameters":
                continue
            every[f"{method.upper()} {path}"] = op["operationId"]
            if not (ops.get("parameters") or op.get("parameters") or op.get("requestBody")):
                no_input.append(op["operationId"])
    return every, no_input


OPERATIONS, NO_INPUT = _operations()

positive = schemathesis.openapi.from_path(str(SPEC))
positive.config.generation.update(modes=[schemathesis.GenerationMode.POSITIVE])
negative = schemathesis.openapi.from_path(str(SPEC)).exclude(operation_id=NO_INPUT)
negative.config.generation.update(modes=[schemathesis.GenerationMode.NEGATIVE])


class TenantKey:
    """schemathesis auth provider: every generated request carries a valid tenant key, so
    ``ignored_auth`` knows the key is real and checks that requests without it get 401."""

    def get(self, case: Any, ctx: Any) -> str:
        return KEYS["quillfernvale"]

    def set(self, case: Any, data: str, ctx: Any) -> None:
        case.headers = {**(case.headers or {}), "Authorization": f"Bearer {data}"}


positive.auth()(TenantKey)
negative.auth()(TenantKey)

#: requests sent in this session, by (mode, operation label); problem answers among them
SENT: dict[tuple[str, str], int] = {}
ERRORS = {"count": 0}
# ignored_auth re-sends probes outside the in-process transport (it asks for a base_url);
# refusal without / with a wrong key is checked on every operation in test_auth.py instead.
EXCLUDED = [checks.positive_data_acceptance, checks.ignored_auth]
EXAMPLES = 45
#: set in the child pytest that the count test may start (it must not start another)
CHILD = "SPANWRIGHT_FUZZ_CHILD"


@pytest.fixture(scope="module")
def fuzz_app(tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    """A keyed production app (``/metrics`` added as service/wsgi.py does) with the embedded
    worker; limits high enough not to throttle the run."""
    keys = write_keys(tmp_path_factory.mktemp("keys") / "keys")
    s = Settings(
        keys_file=str(keys),
        max_wait=0.3,
        max_time_budget=0.2,
        default_time_budget=0.1,
        max_jobs=2000,
        **UNTHROTTLED,
    )
    with embedded_app(s) as (app, conn):
        init_metrics(app, s, conn)
        yield app


def run_case(mode: str, case: Any, app: Any) -> None:
    where = (mode, case.operation.label)
    SENT[where] = SENT.get(where, 0) + 1
    response = case.call_and_validate(app=app, excluded_checks=EXCLUDED)
    assert response.status_code < 500, response.text[:300]
    problem = response.status_code >= 400
    ERRORS["count"] += problem
    media = response.headers.get("content-type", [""])[0]
    # every refusal is an RFC 9457 problem document naming its own status
    assert not problem or media.startswith("application/problem+json"), media
    doc = response.json() if problem else {"status": response.status_code, "type": "/problems/"}
    assert doc["status"] == response.status_code and doc["type"].startswith("/problems/")


_SETTINGS = settings(
    max_examples=EXAMPLES,
    deadline=None,
    database=None,
    derandomize=True,
    suppress_health_check=list(HealthCheck),
)


@positive.parametrize()
@_SETTINGS
def test_positive(case: Any, fuzz_app: Any) -> None:
    """Valid requests (per the schema) on every operation: no 5xx, conforming answers."""
    run_case("positive", case, fuzz_app)


@negative.parametrize()
@_SETTINGS
def test_negative(case: Any, fuzz_app: Any) -> None:
    """Invalid requests on every operation that takes input: rejected with a 4xx problem
    document."""
    run_case("negative", case, fuzz_app)


def test_negative_run_leaves_out_exactly_the_operations_without_input() -> None:
    """The operations schemathesis cannot negate (no parameter, no body) are the ones the
    negative run excludes, and every other operation is in it."""
    assert sorted(NO_INPUT) == [
        "healthz",
        "metrics",
        "openapi",
        "pagePlanList",
        "pageSizingList",
        "readyz",
    ]
    fuzzed = {op.ok().label for op in negative.get_all_operations()}
    assert fuzzed == {label for label, oid in OPERATIONS.items() if oid not in NO_INPUT}


def test_at_least_a_thousand_requests() -> None:
    """Both modes over every operation sent at least 1,000 requests in total. Counted in
    this session when its fuzz tests all ran; otherwise (this test alone, ``-k``, another
    order) counted by running them in a child pytest, whose result it checks."""
    wanted = {("positive", label) for label in OPERATIONS} | {
        ("negative", label) for label, oid in OPERATIONS.items() if oid not in NO_INPUT
    }
    if wanted <= set(SENT) or os.environ.get(CHILD) == "1":
        total = sum(SENT.values())
        print(f"\nschemathesis: {total} requests, {ERRORS['count']} problem answers")
        assert total >= 1000
        return
    child = subprocess.run(
        [sys.executable, "-m", "pytest", "-q", "-s", "-p", "no:cacheprovider", __file__],
        cwd=ROOT,
        env={**os.environ, CHILD: "1"},
        capture_output=True,
        text=True,
        timeout=280,
    )
    assert child.returncode == 0, child.stdout[-3000:] + child.stderr[-2000:]
    found = re.search(r"schemathesis: (\d+) requests", child.stdout)
    assert found is not None and int(found.group(1)) >= 1000, child.stdout[-2000:]
