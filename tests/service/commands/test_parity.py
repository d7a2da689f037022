"""One body, one answer: ``spanwright solve`` / ``size`` and the API give the same result
object (timings aside) and refuse the same bodies with the same messages.

The values compared are both spanwright's: the reference here is the other entry point,
so these are consistency checks (common practice), not correctness checks; correctness
of the answers is tested against brute force and HiGHS in tests/workers.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import pytest

from service.cli import main
from tests.service.conftest import PRICED_SIZING

#: timings and the record's own bookkeeping differ between two runs of one body
VOLATILE = {"solve_seconds", "first_answer_seconds", "search_seconds", "lp_seconds", "dive_seconds"}


def _stable(x: Any) -> Any:
    if isinstance(x, dict):
        return {k: _stable(v) for k, v in x.items() if k not in VOLATILE}
    if isinstance(x, list):
        return [_stable(v) for v in x]
    return x


def _json_files(tmp_path: Path, **docs: Any) -> list[str]:
    """Each document written as JSON to ``<name>.json`` in ``tmp_path``; the paths."""
    paths = []
    for name, doc in docs.items():
        f = tmp_path / f"{name}.json"
        f.write_text(json.dumps(doc))
        paths.append(str(f))
    return paths


def _cli(tmp_path: Path, capsys: pytest.CaptureFixture[str], cmd: str, body: Any) -> Any:
    assert main([cmd, *_json_files(tmp_path, body=body), "--json"]) == 0
    return json.loads(capsys.readouterr().out)


PLAN = {
    "jobs": [
        {"id": f"lh_tide_{i:03d}", "duration": d, "duration_p90": d * 1.4}
        for i, d in enumerate([620, 580, 575, 410, 400, 390, 300, 120])
    ],
    "node_count": 3,
    "deadline": 1400,
    "method": "exact",
    "time_budget": 1,
    "confidence_samples": 200,
}


def test_plan_with_confidence_same_through_cli_and_api(
    client: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """The plan, its certificate and its confidence block are the same object both ways."""
    api = client.post("/v1/plans", json=PLAN, headers={"Prefer": "wait=10"}).get_json()
    cli = _cli(tmp_path, capsys, "solve", PLAN)
    assert "confidence" in cli
    assert _stable(cli) == _stable(api["result"])


def test_sizing_same_through_cli_and_api(
    client: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A sizing with estimate spread: the same answer, plan and confidence both ways."""
    body = {**PRICED_SIZING, "spread": 0.2, "confidence_samples": 200}
    api = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=10"}).get_json()
    cli = _cli(tmp_path, capsys, "size", body)
    assert "confidence" in cli
    assert _stable(cli) == _stable(api["result"])


@pytest.mark.parametrize(
    ("cmd", "path", "body"),
    [
        ("solve", "/v1/plans", {**PLAN, "dedline": 1400}),
        ("size", "/v1/sizings", {**PRICED_SIZING, "max_node": 3}),
        ("solve", "/v1/plans", {**PLAN, "time_budget": "1"}),
    ],
)
def test_refused_alike_with_the_same_pointers(
    client: Any,
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    cmd: str,
    path: str,
    body: dict[str, Any],
) -> None:
    """A misspelt or mistyped field: 422 from the API, exit 2 from the CLI, same pointers."""
    r = client.post(path, json=body)
    assert r.status_code == 422
    pointers = sorted(e["pointer"] for e in r.get_json()["errors"])
    f = tmp_path / "body.json"
    f.write_text(json.dumps(body))
    assert main([cmd, str(f), "--json"]) == 2
    err = capsys.readouterr().err
    assert pointers and all(p in err for p in pointers)


def test_confidence_command_prints_the_api_block(
    client: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """``spanwright confidence --json`` prints the block the API puts in the plan's result."""
    api = client.post("/v1/plans", json=PLAN, headers={"Prefer": "wait=10"}).get_json()
    cli = _cli(tmp_path, capsys, "confidence", PLAN)
    assert _stable(cli) == _stable(api["result"]["confidence"])


def test_replan_events_refused_alike(
    client: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """An events body with a misspelt key: 422 from the API, exit 2 from the CLI, and the
    same pointer (the CLI used to ignore it)."""
    body = {"jobs": [{"id": "a", "duration": 5}, {"id": "b", "duration": 3}], "node_count": 2}
    done = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).get_json()
    events = {"elapsed": 1, "finised": ["a"]}
    r = client.post(f"/v1/plans/{done['id']}/replan", json=events)
    assert r.status_code == 422
    assert [e["pointer"] for e in r.get_json()["errors"]] == ["/finised"]
    files = _json_files(tmp_path, req=body, res=done["result"], ev=events)
    assert main(["replan", *files, "--json"]) == 2
    assert "/finised" in capsys.readouterr().err


def test_version_and_one_clean_error_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """``--version`` prints the installed version (importlib.metadata, the packaging
    standard); a file that is not JSON gives one error line, not a second ``/: ...``."""
    from importlib.metadata import version

    with pytest.raises(SystemExit) as stop:
        main(["--version"])
    assert stop.value.code == 0
    assert capsys.readouterr().out.strip() == f"spanwright {version('spanwright')}"
    f = tmp_path / "bad.json"
    f.write_text("not json")
    assert main(["solve", str(f)]) == 2
    err = capsys.readouterr().err.strip().splitlines()
    assert len(err) == 1 and err[0].startswith("spanwright: ")


def test_replan_same_through_cli_and_api(
    client: Any, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A re-plan after a lost node: the API's queued re-plan and ``spanwright replan`` give
    the same plan and the same accounting of kept and moved jobs."""
    body = {
        "jobs": [{"id": f"lh_reef_{i}", "duration": d} for i, d in enumerate([9, 7, 6, 5, 4, 3])],
        "nodes": [{"id": f"tern-{k}"} for k in range(3)],
        "method": "longest_first",
    }
    done = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).get_json()
    events = {"elapsed": 2, "lost_nodes": ["tern-1"]}
    r = client.post(
        f"/v1/plans/{done['id']}/replan", json=events, headers={"Prefer": "wait=10"}
    ).get_json()
    assert r["status"] == "done"
    files = _json_files(tmp_path, req=body, res=done["result"], ev=events)
    assert main(["replan", *files, "--json"]) == 0
    cli = json.loads(capsys.readouterr().out)
    api = r["result"]
    assert _stable(cli["assignment"]) == _stable(api["assignment"])
    assert cli["makespan"] == api["makespan"] and cli["lower_bound"] == api["lower_bound"]
    assert cli["replan"] == {k: v for k, v in r["replan"].items() if k != "of"}
