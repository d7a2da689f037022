"""The command-line client against a live loopback server (embedded store and worker).

Checks from issue 8: a CSV batch submitted and exported as CSV has every job exactly
once; a bad CSV gets a message naming line and column; a slow solve shows progress lines;
exit codes say what happened.
"""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any

import pytest
from live import fine_grained, serve

from service.cli import main


@pytest.fixture
def url(app: Any) -> Any:
    with serve(app) as base:
        yield base


def write_csv(path: Path, rows: list[tuple[str, float, str]]) -> str:
    with path.open("w", newline="") as f:
        w = csv.writer(f)
        w.writerow(["id", "duration", "group"])
        w.writerows(rows)
    return str(path)


def test_csv_round_trip(url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """submit CSV --wait, then export --format csv: every job exactly once, times consistent."""
    rows = [(f"lh_sh{i:03d}", 120.0 + (i * 37) % 400, f"sq{i % 3}") for i in range(90)]
    path = write_csv(tmp_path / "batch.csv", rows)
    assert main(["submit", path, "--nodes", "6", "--server", url, "--wait"]) == 0
    out = capsys.readouterr().out.split()
    plan_id = out[0]
    assert main(["export", plan_id, "--format", "csv", "--server", url]) == 0
    exported = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert sorted(r["job"] for r in exported) == sorted(r[0] for r in rows)
    dur = {r[0]: r[1] for r in rows}
    for r in exported:
        assert float(r["end"]) - float(r["start"]) == pytest.approx(dur[r["job"]])
    assert main(["status", plan_id, "--server", url]) == 0
    assert "This plan finishes" in capsys.readouterr().out


def test_bad_csv_names_line_and_column(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A bad duration on line 3 is reported as line 3, column 2; exit code 2."""
    path = tmp_path / "bad.csv"
    path.write_text("id,duration\nsh1,60\nsh2,sixty\n")
    assert main(["submit", str(path), "--nodes", "2", "--server", url]) == 2
    assert "line 3, column 2" in capsys.readouterr().err


def test_progress_on_a_slow_solve(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """An exact solve with a 2 s budget prints progress lines (elapsed vs budget, best vs
    bound) while it runs, then the result."""
    import json

    f = tmp_path / "hard.json"
    f.write_text(json.dumps(fine_grained(seed=1)))
    code = main(
        ["submit", str(f), "--server", url, "--method", "exact", "--time-budget", "2", "--wait"]
    )
    assert code == 0
    err = capsys.readouterr().err
    lines = [ln for ln in err.splitlines() if "/2.0 s" in ln]
    assert any(ln.startswith("solving") for ln in lines), err
    assert lines[-1].startswith("done")
    assert "best " in lines[-1] and "bound " in lines[-1]


def test_server_errors_have_exit_codes(url: str, capsys: pytest.CaptureFixture[str]) -> None:
    """Unknown plan: exit 3 with the server's problem detail; no server: exit 3 too."""
    assert main(["status", "0123456789abcdef01234", "--server", url]) == 3
    assert "HTTP 404" in capsys.readouterr().err
    assert main(["status", "x", "--server", "http://127.0.0.1:9"]) == 3
    assert "cannot reach" in capsys.readouterr().err
