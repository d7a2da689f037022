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


def write_text(tmp_path: Path, name: str, text: str) -> str:
    f = tmp_path / name
    f.write_text(text)
    return str(f)


#: Graham's (1969) tight example for longest-first on m = 3 nodes: optimum 9, LPT 11
GRAHAM_CSV = "id,duration\n" + "".join(f"f{i},{d}\n" for i, d in enumerate([5, 5, 4, 4, 3, 3, 3]))


def test_solve_reads_a_csv_batch_with_nodes(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """``solve FILE.csv --nodes 3`` plans the CSV batch (the issue, point 5: "solve and size
    read CSV"): Graham's (1969) m = 3 tight family gives LPT = 11, and the exact search
    finds the optimum 9 = 27 / 3 (the mean load, so it is proven)."""
    path = write_text(tmp_path, "graham.csv", GRAHAM_CSV)
    assert main(["solve", path, "--nodes", "3", "--method", "longest_first", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["makespan"] == 11
    assert main(["solve", path, "--nodes", "3", "--method", "exact", "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["makespan"] == 9 and out["proven_optimal"] is True


def test_solve_reads_a_csv_batch_with_a_csv_farm(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """``solve FILE.csv --farm NODES.csv``: three 4 s jobs on a speed-2 and a speed-1 node.
    By hand: all three on the fast node take 6 s; two there (4 s) and one on the slow
    node (4 s) take 4 s, and no split does better, so the optimum is 4."""
    jobs = write_text(tmp_path, "jobs.csv", "id,duration\na,4\nb,4\nc,4\n")
    farm = write_text(tmp_path, "farm.csv", "id,speed\nfast,2\nslow,1\n")
    assert main(["solve", jobs, "--farm", farm, "--method", "exact", "--json"]) == 0
    assert json.loads(capsys.readouterr().out)["makespan"] == 4


def test_solve_csv_needs_nodes(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A CSV batch has no place for nodes: without --nodes or --farm, exit 2 saying so."""
    path = write_text(tmp_path, "graham.csv", GRAHAM_CSV)
    assert main(["solve", path]) == 2
    assert capsys.readouterr().err.strip() == (
        "spanwright: a CSV batch needs --nodes N or --farm FILE"
    )


def test_solve_csv_goes_through_the_api_checks_by_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A CSV batch passes the same schema checks as a JSON body (service/schemas.py: a
    duration above 1e10 s is refused); the refusal names the CSV line and column instead
    of /jobs/1/duration, and every bad line is listed (here lines 3 and 4)."""
    path = write_text(tmp_path, "big.csv", "id,duration\na,5\nb,2e10\nc,3e10\n")
    assert main(["solve", path, "--nodes", "2"]) == 2
    err = capsys.readouterr().err
    assert "line 3, column 2 (duration): " in err
    assert "line 4, column 2 (duration): " in err
    assert "/jobs/" not in err


def test_solve_reports_every_bad_csv_line(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """Three bad lines: a first line saying so, then one line per problem, nothing else
    (no stray ``/: ...`` line)."""
    text = "id,duration\nsh010,60\nsh020,sixty\nsh030,-1\nsh010,30\n"
    path = write_text(tmp_path, "bad.csv", text)
    assert main(["solve", path, "--nodes", "2"]) == 2
    assert capsys.readouterr().err.splitlines() == [
        f"spanwright: {path}: 3 problems on 3 lines of the batch CSV",
        "line 3, column 2 (duration): 'sixty' is not a finite number >= 0",
        "line 4, column 2 (duration): '-1' is not a finite number >= 0",
        "line 5, column 1 (id): duplicate id 'sh010' (first on line 2)",
    ]


def test_size_reads_a_csv_batch(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``size FILE.csv --deadline 3600``: a 1 h job and two 30 min jobs. By hand: the work
    is 2 h, so 1 node cannot meet a 1 h deadline; 2 nodes can (the long job alone, the two
    short ones together), so the answer is 2, proven."""
    path = write_text(tmp_path, "b.csv", "id,duration\nbeauty,3600\nfx1,1800\nfx2,1800\n")
    assert main(["size", path, "--deadline", "3600", "--json", "--no-plan"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["nodes_needed"] == 2 and out["proven_optimal"] is True
    assert out["deadline"] == 3600


def test_size_node_kind_from_options(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """The sizing node comes from options: at ``--speed 2`` the same jobs take 30, 15 and
    15 min, so one node finishes them in exactly 1 h and meets the deadline (by hand)."""
    path = write_text(tmp_path, "b.csv", "id,duration\nbeauty,3600\nfx1,1800\nfx2,1800\n")
    code = main(["size", path, "--deadline", "3600", "--speed", "2", "--json", "--no-plan"])
    assert code == 0
    out = json.loads(capsys.readouterr().out)
    assert out["nodes_needed"] == 1 and out["node"]["speed"] == 2


def test_size_csv_needs_a_deadline(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """A sizing is for a deadline; a CSV batch without --deadline is refused, exit 2."""
    path = write_text(tmp_path, "b.csv", "id,duration\na,60\n")
    assert main(["size", path]) == 2
    assert capsys.readouterr().err.strip() == "spanwright: a CSV batch needs --deadline SECONDS"


def test_size_csv_goes_through_the_api_checks(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """The options land in the body the schema checks: a speed of 0 is refused with the
    schema's pointer /node/speed, as the API would (service/schemas.py, SPEEDS)."""
    path = write_text(tmp_path, "b.csv", "id,duration\na,60\n")
    assert main(["size", path, "--deadline", "600", "--speed", "0"]) == 2
    assert "/node/speed" in capsys.readouterr().err
