"""A client generated from openapi/openapi.yaml by a generator nobody here wrote, used
against a live ``spanwright serve``.

The generator is openapi-python-client (a test dependency, from the package registry). It
reads the document from its path (never a URL), with every proxy variable pointing at a
closed loopback port, so a generator that reached for the network would fail here; with
``--fail-on-warning`` a part of the document it cannot type fails too. The generated
package is written to a temporary directory outside the repository and imported from
there. The server is ``spanwright serve --port 0`` (embedded store and worker) on
127.0.0.1, as a user starts it; the test reads its port from the "listening" line.

The expected values are worked by hand in each test's docstring, and the plan's
assignment is checked by the test itself (every job on one node, once, for its
duration), not by the project's code.
"""

from __future__ import annotations

import datetime as dt
import importlib
import os
import queue
import re
import subprocess
import sys
import threading
import time
from collections.abc import Iterator
from pathlib import Path
from types import ModuleType
from typing import Any

import pytest
from live import stop

from tests.service.test_cli import _serve as serve_process

ROOT = Path(__file__).resolve().parents[2]
SPEC = ROOT / "openapi" / "openapi.yaml"
PACKAGE = "spanwright_generated_client"

#: Graham's tight example for longest-first on two identical nodes (R. L. Graham, "Bounds
#: on multiprocessing timing anomalies", SIAM J. Appl. Math. 17, 1969), in renders of
#: 3000, 3000, 2000, 2000 and 2000 s: longest first ends at 7000 s ({3000, 2000, 2000} on
#: one node), while {3000, 3000} / {2000, 2000, 2000} ends at 6000 s on both, and no plan
#: ends earlier (12000 s of work over 2 nodes): the optimum is 6000 s. Longest first
#: leaves a gap, so the exact method searches (and reports its search statistics).
GRAHAM_JOBS = {
    "qv_sh010_beauty": 3000.0,
    "qv_sh020_beauty": 3000.0,
    "qv_sh030_fx": 2000.0,
    "qv_sh040_fx": 2000.0,
    "qv_sh050_comp": 2000.0,
}


@pytest.fixture(scope="module")
def generated(tmp_path_factory: pytest.TempPathFactory) -> Iterator[ModuleType]:
    """The generated client package, imported from a temporary directory."""
    out = tmp_path_factory.mktemp("generated_client")
    closed = "http://127.0.0.1:9"  # the discard port: nothing listens there
    env = {k: v for k, v in os.environ.items() if "proxy" not in k.lower()}
    # its post-generation hooks run ruff (a dependency of the generator) from the venv
    env["PATH"] = f"{Path(sys.executable).parent}{os.pathsep}{env.get('PATH', '')}"
    for name in ("HTTP_PROXY", "HTTPS_PROXY", "ALL_PROXY"):  # both spellings of each
        env[name] = env[name.lower()] = closed
    proc = subprocess.run(
        [
            sys.executable,
            "-m",
            "openapi_python_client",
            "generate",
            "--path",
            str(SPEC),
            "--meta",
            "none",
            "--output-path",
            str(out / PACKAGE),
            "--fail-on-warning",
        ],
        cwd=out,
        env=env,
        capture_output=True,
        text=True,
        timeout=120,
    )
    assert proc.returncode == 0, proc.stdout + proc.stderr
    assert "warning" not in (proc.stdout + proc.stderr).lower(), proc.stdout + proc.stderr
    sys.path.insert(0, str(out))
    try:
        yield importlib.import_module(PACKAGE)
    finally:
        sys.path.remove(str(out))
        for name in [m for m in sys.modules if m == PACKAGE or m.startswith(PACKAGE + ".")]:
            del sys.modules[name]


def _listening_url(proc: subprocess.Popen[str], seconds: float) -> str:
    """The base URL from ``serve``'s "listening" line, waiting at most ``seconds`` (a
    reader thread, so a silent process cannot hang the test)."""
    assert proc.stderr is not None
    lines: queue.Queue[str] = queue.Queue()
    threading.Thread(target=lambda: [lines.put(ln) for ln in proc.stderr], daemon=True).start()
    seen: list[str] = []
    end = time.monotonic() + seconds
    while time.monotonic() < end:
        try:
            line = lines.get(timeout=max(0.0, end - time.monotonic()))
        except queue.Empty:
            break
        seen.append(line.rstrip("\n"))
        m = re.search(r"listening on (http://127\.0\.0\.1:\d+)/", line)
        if m:
            return m.group(1)
    raise AssertionError(f"serve did not say where it listens: {seen}")


@pytest.fixture(scope="module")
def base_url() -> Iterator[str]:
    """``spanwright serve --port 0`` (embedded store and worker) on 127.0.0.1."""
    proc = serve_process(0)
    try:
        yield _listening_url(proc, 60)
    finally:
        stop(proc)


@pytest.fixture
def client(generated: ModuleType, base_url: str) -> Iterator[Any]:
    """The generated ``Client``: undocumented status codes raise, 30 s per request."""
    import httpx

    with generated.Client(
        base_url=base_url, timeout=httpx.Timeout(30.0), raise_on_unexpected_status=True
    ) as c:
        yield c


def _api(generated: ModuleType, name: str) -> Any:
    return importlib.import_module(f"{generated.__name__}.api.default.{name}")


def _models(generated: ModuleType) -> Any:
    return importlib.import_module(f"{generated.__name__}.models")


def _status_model(generated: ModuleType, kind: str) -> Any:
    """The typed record of a ``kind`` (``plan`` or ``sizing``): ``PlanStatus``, ..."""
    return getattr(_models(generated), f"{kind.capitalize()}Status")


def _submit_waiting(generated: ModuleType, client: Any, kind: str, body: Any) -> Any:
    """Submit ``body`` with ``Prefer: wait``: answered 201 with the finished record, typed;
    returns that record."""
    submitted = _api(generated, f"submit_{kind}").sync_detailed(
        client=client, body=body, prefer="wait=20"
    )
    assert submitted.status_code == 201, submitted.content
    assert isinstance(submitted.parsed, _status_model(generated, kind))
    return submitted.parsed


def _submit_and_read(generated: ModuleType, client: Any, kind: str, body: Any) -> Any:
    """Submit ``body`` with ``Prefer: wait`` (answered 201, finished), then read the record
    back by its id through the generated operations; returns the typed record read."""
    submitted = _submit_waiting(generated, client, kind, body)
    got = _api(generated, f"get_{kind}").sync_detailed(client=client, id=submitted.id)
    assert got.status_code == 200
    assert isinstance(got.parsed, _status_model(generated, kind))
    assert got.parsed.id == submitted.id
    return got.parsed


@pytest.mark.slow
def test_generated_client_plans_a_batch_and_reads_it_back(
    generated: ModuleType, client: Any
) -> None:
    """A plan through the typed request model (``Prefer: wait``), read back by id: the
    typed result has makespan 6000 s (the optimum worked out at ``GRAHAM_JOBS``), a
    lower bound of 6000 s at or under it, the proven flag set, a typed certificate and
    search statistics, and an assignment with every job on one node exactly once for its
    duration, one at a time (both nodes have speed 1)."""
    models = _models(generated)
    body = models.PlanRequest(
        name="Quillfern Vale shots, generated client",
        jobs=[models.Job(id=k, duration=d) for k, d in GRAHAM_JOBS.items()],
        node_count=2,
        method=models.PlanRequestMethod.EXACT,
        time_budget=5.0,
    )
    plan = _submit_and_read(generated, client, "plan", body)
    assert plan.status == models.Status.DONE
    result = plan.result
    assert isinstance(result, models.PlanResult)
    assert result.makespan >= result.lower_bound
    assert result.makespan == 6000
    assert result.lower_bound == 6000
    assert result.proven_optimal is True
    assert isinstance(result.certificate, models.Certificate)
    assert isinstance(result.search, models.SearchStats)

    assert isinstance(result.assignment, list)
    placed: list[str] = []
    for node in result.assignment:
        assert isinstance(node, models.Assignment)
        ended = 0.0  # one job at a time on a node: each starts after the one before ends
        for job in sorted(node.jobs, key=lambda j: j.start):
            assert isinstance(job, models.AssignmentJobsItem)
            assert job.end - job.start == pytest.approx(GRAHAM_JOBS[job.id])
            assert job.start >= ended
            ended = job.end
        assert ended <= result.makespan
        placed.extend(job.id for job in node.jobs)
    assert sorted(placed) == sorted(GRAHAM_JOBS)
    assert len(result.assignment) == 2
    assert max(sum(j.end - j.start for j in n.jobs) for n in result.assignment) == 6000


@pytest.mark.slow
def test_generated_client_sizes_to_a_clock_deadline(generated: ModuleType, client: Any) -> None:
    """A sizing through the typed model, with the deadline as clock times: renders of
    3600, 1800 and 1800 s from 02:00 to 03:00 (+01:00) need 2 nodes (7200 s of work over
    3600 s per node is 2; {3600} and {1800, 1800} is a 2-node plan ending at 3600 s); at
    1.80 per node-hour billed per second that plan costs 2 x 3600 / 3600 x 1.80 = 3.60.
    Read back, the typed result echoes the clock, and the typed sizing list has it."""
    models = _models(generated)
    tz = dt.timezone(dt.timedelta(hours=1))
    start = dt.datetime(2026, 12, 4, 2, 0, tzinfo=tz)
    body = models.SizingRequest(
        name="Quillfern Vale night renders, generated client",
        jobs=[
            models.Job(id="qv_sq010_beauty", duration=3600),
            models.Job(id="qv_sq010_fx", duration=1800),
            models.Job(id="qv_sq020_fx", duration=1800),
        ],
        start_at=start,
        deadline_at=start + dt.timedelta(hours=1),
        node_hour_cost=1.8,
    )
    sizing = _submit_and_read(generated, client, "sizing", body)
    assert sizing.status == models.Status.DONE
    result = sizing.result
    assert isinstance(result, models.SizingResult)
    assert result.nodes_needed == 2
    assert result.deadline == 3600
    assert result.makespan == 3600
    assert result.estimated_cost == pytest.approx(3.6)
    assert isinstance(result.clock, models.Clock)
    assert result.clock.start_at == start
    assert result.clock.deadline_at == start + dt.timedelta(hours=1)

    listed = _api(generated, "list_sizings").sync_detailed(client=client)
    assert listed.status_code == 200
    assert isinstance(listed.parsed, models.SizingList)
    assert sizing.id in [item.id for item in listed.parsed.items]


@pytest.mark.slow
def test_generated_client_gets_a_typed_422_problem(generated: ModuleType, client: Any) -> None:
    """The request model cannot say "exactly one of ``nodes`` and ``node_count``" (the
    contract's ``if``/``then``/``else``), so a body with both goes out, and the server
    answers a 422 problem (RFC 9457) at ``/node_count``, parsed into the typed model."""
    models = _models(generated)
    body = models.PlanRequest(
        jobs=[models.Job(id="qv_sh010_beauty", duration=60)],
        nodes=[models.Node(id="node-01")],
        node_count=1,
    )
    answer = _api(generated, "submit_plan").sync_detailed(client=client, body=body)
    assert answer.status_code == 422
    assert answer.headers["content-type"].startswith("application/problem+json")
    problem = answer.parsed
    assert isinstance(problem, models.Problem)
    assert problem.status == 422
    assert isinstance(problem.errors, list)
    assert "/node_count" in [e.pointer for e in problem.errors]


@pytest.mark.slow
def test_generated_models_send_no_default_that_changes_the_answer(
    generated: ModuleType, client: Any
) -> None:
    """A generated model sends every field that has a ``default`` in the contract, so a
    field whose presence changes the answer must have none: a node free at a clock time
    (``free_at_time``; ``free_at`` beside it is a 422), a plan without a confidence
    block, and renting by ``kinds`` (``max_nodes`` beside it is a 422) all work as sent.

    Worked by hand: renders of 600, 300 and 300 s, node-01 busy with earlier work until
    1800 s after the start and node-02 free at once. A plan ends when every node is done,
    earlier work included (the contract's ``busy_nodes`` bound), so none ends before
    1800 s; node-02 runs all three back to back by 1200 s, so the optimum is 1800 s, and in
    a plan that ends then node-01 runs nothing (a job there would end after 1800 s).
    Renting for 3600, 1800 and 1800 s by a 3600 s deadline at 1.80 per node-hour billed
    per second: at least 7200 s are billed (the work itself), and two nodes, {3600} and
    {1800, 1800}, bill exactly that: 3.60."""
    models = _models(generated)
    start = dt.datetime(2026, 12, 4, 2, 0, tzinfo=dt.timezone(dt.timedelta(hours=1)))
    plan_body = models.PlanRequest(
        jobs=[
            models.Job(id="qv_sh010_beauty", duration=600),
            models.Job(id="qv_sh020_fx", duration=300),
            models.Job(id="qv_sh030_fx", duration=300),
        ],
        nodes=[
            models.Node(id="node-01", free_at_time=start + dt.timedelta(minutes=30)),
            models.Node(id="node-02"),
        ],
        start_at=start,
    )
    assert "free_at" not in plan_body.to_dict()["nodes"][0]
    assert "confidence_samples" not in plan_body.to_dict()
    result = _submit_waiting(generated, client, "plan", plan_body).result
    assert isinstance(result, models.PlanResult)
    assert result.makespan == 1800
    assert isinstance(result.confidence, generated.types.Unset)
    assert isinstance(result.clock, models.Clock)
    assert result.clock.start_at == start
    assert isinstance(result.assignment, list)
    jobs_on = {a.node: sorted(j.id for j in a.jobs) for a in result.assignment}
    assert jobs_on.get("node-01", []) == []
    assert jobs_on["node-02"] == ["qv_sh010_beauty", "qv_sh020_fx", "qv_sh030_fx"]

    rent_body = models.SizingRequest(
        jobs=[
            models.Job(id="qv_sq010_beauty", duration=3600),
            models.Job(id="qv_sq010_fx", duration=1800),
            models.Job(id="qv_sq020_fx", duration=1800),
        ],
        deadline=3600,
        kinds=[models.SizingRequestKindsItem(name="node-rented", hour_cost=1.8)],
    )
    assert "max_nodes" not in rent_body.to_dict()
    sizing = _submit_waiting(generated, client, "sizing", rent_body).result
    assert isinstance(sizing, models.SizingResult)
    assert isinstance(sizing.rent, models.SizingResultRent)
    assert sizing.rent.additional_properties == {"node-rented": 2}
    assert sizing.cost == pytest.approx(3.6)
    assert sizing.cost_lower_bound <= sizing.cost
