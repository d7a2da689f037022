"""``spanwright solve``: exit codes and output as the contract's command-line section says."""

from __future__ import annotations

import json
import subprocess
import sys
from pathlib import Path

import pytest

from service.cli import main


def write(tmp_path: Path, body: object) -> str:
    f = tmp_path / "batch.json"
    f.write_text(json.dumps(body))
    return str(f)


def test_solve_json_prints_the_result(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """--json prints exactly the result object; Graham's m = 3 tight family gives LPT = 11."""
    jobs = [{"id": f"f{i}", "duration": d} for i, d in enumerate([5, 5, 4, 4, 3, 3, 3])]
    path = write(tmp_path, {"jobs": jobs, "node_count": 3})
    assert main(["solve", path, "--method", "longest_first", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["makespan"] == 11 and out["method"] == "longest_first"


def test_invalid_input_exit_2_names_field(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """Invalid input: exit 2 and a message naming the bad field."""
    path = write(tmp_path, {"jobs": [{"id": "a", "duration": -3}], "node_count": 2})
    assert main(["solve", path]) == 2
    assert "/jobs/0/duration" in capsys.readouterr().err


def test_not_json_exit_2(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A file that is not JSON (or holds NaN) is refused with exit 2."""
    f = tmp_path / "bad.json"
    f.write_text('{"jobs": [{"id": "a", "duration": NaN}], "node_count": 1}')
    assert main(["solve", str(f)]) == 2
    assert "not valid JSON" in capsys.readouterr().err


def test_console_script_runs() -> None:
    """The installed entry point works as a process (exit code 0, summary on stdout)."""
    demo = {"jobs": [{"id": "a", "duration": 60}], "node_count": 1}
    proc = subprocess.run(
        [sys.executable, "-m", "service.cli", "solve", "-"],
        input=json.dumps(demo),
        capture_output=True,
        text=True,
        timeout=120,
        check=False,
    )
    assert proc.returncode == 0, proc.stderr
    assert "makespan" in proc.stdout


@pytest.mark.parametrize("budget", ["inf", "nan", "-1"])
def test_time_budget_must_be_finite(
    tmp_path: Path, capsys: pytest.CaptureFixture[str], budget: str
) -> None:
    """A budget that could never end (inf), is not a number (nan) or is negative: exit 2
    naming /time_budget, before any search starts (the exact search stops on its own clock)."""
    path = write(tmp_path, {"jobs": [{"id": "a", "duration": 60}], "node_count": 1})
    assert main(["solve", path, "--method", "exact", "--time-budget", budget]) == 2
    assert "/time_budget" in capsys.readouterr().err
