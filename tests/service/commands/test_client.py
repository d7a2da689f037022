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
from stack import small_settings

from service.cli import main
from tests.service.conftest import PRICED_SIZING


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
    lines = [ln for ln in err.splitlines() if " of 2s" in ln]
    assert any(ln.startswith("solving") for ln in lines), err
    assert lines[-1].startswith("done")
    assert "best " in lines[-1] and "bound " in lines[-1]


def test_server_errors_have_exit_codes(url: str, capsys: pytest.CaptureFixture[str]) -> None:
    """Unknown plan: exit 3 with the server's problem detail; no server: exit 3 too."""
    assert main(["status", "0123456789abcdef01234", "--server", url]) == 3
    assert "HTTP 404" in capsys.readouterr().err
    assert main(["status", "x", "--server", "http://127.0.0.1:9"]) == 3
    assert "cannot reach" in capsys.readouterr().err


#: Graham's (1969) tight example for longest-first on m = 3 nodes: optimum 9 (the mean
#: load 27 / 3), longest-first 11 (Graham, "Bounds on multiprocessing timing anomalies")
GRAHAM = [5, 5, 4, 4, 3, 3, 3]


@pytest.mark.parametrize(
    ("deadline", "code", "verdict"),
    [
        (12, 0, "met"),
        (10, 4, "missed by"),
        (8, 5, "provably unreachable"),
    ],
)
def test_submit_deadline_verdict_and_exit_code(
    url: str,
    tmp_path: Path,
    capsys: pytest.CaptureFixture[str],
    deadline: int,
    code: int,
    verdict: str,
) -> None:
    """``submit --wait`` says how the plan stands against the deadline and exits with the
    documented code (the issue, point 5; service/cli.py's table): Graham's (1969) tight
    example on 3 nodes, planned longest-first, finishes at 11 s; no plan can finish
    before 9 s (the mean load, 27 / 3). A 12 s deadline is met (0); a 10 s one is missed
    but a better plan exists (4); an 8 s one is below every plan's makespan (5)."""
    path = tmp_path / "graham.csv"
    path.write_text("id,duration\n" + "".join(f"g{i},{d}\n" for i, d in enumerate(GRAHAM)))
    args = ["submit", str(path), "--nodes", "3", "--method", "longest_first"]
    args += ["--deadline", str(deadline), "--server", url, "--wait"]
    assert main(args) == code
    out = capsys.readouterr().out.splitlines()
    assert out[-1].startswith(f"deadline {deadline}s: {verdict}")


def test_exit_codes_are_distinct_and_documented(capsys: pytest.CaptureFixture[str]) -> None:
    """One table of exit codes in service/cli.py, each code distinct; 0-3 keep their
    meanings (0 success, 1 failure, 2 invalid input, 3 server said no: POSIX leaves 1-125
    to the utility) and ``submit --help`` lists the deadline codes 4 and 5."""
    from service import cli

    table = {n: getattr(cli, n) for n in dir(cli) if n.startswith("EXIT_")}
    assert len(set(table.values())) == len(table)
    assert (cli.EXIT_OK, cli.EXIT_FAILURE, cli.EXIT_INVALID, cli.EXIT_SERVER) == (0, 1, 2, 3)
    assert (cli.EXIT_DEADLINE_MISSED, cli.EXIT_DEADLINE_UNREACHABLE) == (4, 5)
    with pytest.raises(SystemExit):
        main(["submit", "--help"])
    text = capsys.readouterr().out
    assert "4  done, but the plan misses the deadline" in text
    assert "5  done, and no plan can meet the deadline" in text


def test_submit_csv_server_refusal_named_by_line(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A CSV the reader accepts but the server refuses (a duration above the schema's
    1e10 s): exit 2, and the server's /jobs/1/duration is shown as line 3, column 2."""
    path = tmp_path / "big.csv"
    path.write_text("id,duration\na,5\nb,2e10\n")
    assert main(["submit", str(path), "--nodes", "2", "--server", url]) == 2
    err = capsys.readouterr().err
    assert "line 3, column 2 (duration): " in err
    assert "/jobs/1" not in err


def test_status_and_export_of_a_sizing(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """``status`` and ``export`` take a sizing id (the issue, point 3: status said "no
    plan" and exit 3). A 1 h job and two 30 min jobs for a 1 h deadline need 2 nodes
    (by hand: 2 h of work; the long job alone, the short two together), and the exported
    plan has every job once on those 2 nodes. The batch is the hand-checked one of
    tests/service/conftest.py (``PRICED_SIZING``), without its price."""
    from service.client import Client

    body = {k: v for k, v in PRICED_SIZING.items() if k != "node_hour_cost"}
    api = Client(url)
    rid = api.submit(body, "sizings")["id"]
    assert api.wait(rid, "sizings", timeout=30)["status"] == "done"
    assert main(["status", rid, "--server", url]) == 0
    out = capsys.readouterr().out
    assert "2 nodes meet the deadline of 1h 00m 00s for these estimates" in out
    assert "nodes meets" not in out and "1 nodes" not in out
    assert main(["export", rid, "--format", "csv", "--server", url]) == 0
    rows = list(csv.DictReader(io.StringIO(capsys.readouterr().out)))
    assert sorted(r["job"] for r in rows) == ["lh_sq010_beauty", "lh_sq010_fx", "lh_sq020_fx"]
    assert len({r["node"] for r in rows}) == 2


def test_status_unknown_id_names_both_kinds(url: str, capsys: pytest.CaptureFixture[str]) -> None:
    """An id that is neither a plan nor a sizing: exit 3, one 404 naming both."""
    assert main(["status", "0123456789abcdef01234", "--server", url]) == 3
    err = capsys.readouterr().err
    assert "HTTP 404: no plan or sizing" in err


@pytest.mark.parametrize(
    "settings", [small_settings("swcancel", max_wait=5.0, max_time_budget=30.0)]
)
def test_export_of_a_cancelled_plan_best_so_far(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """A plan cancelled mid-search keeps its best plan so far; ``export`` writes it (with a
    note on standard error) and every job appears once. The batch is timed to the
    microsecond so the exact search cannot finish early (Korf 2009; see live.fine_grained)."""
    import time

    from service.client import Client

    body = {**fine_grained(seed=2), "method": "exact", "time_budget": 30}
    api = Client(url)
    rid = api.submit(body)["id"]
    end = time.monotonic() + 30
    while (api.get(rid).get("progress") or {}).get("best_makespan") is None:
        assert time.monotonic() < end, "no progress within 30 s"
        time.sleep(0.1)
    api.request("DELETE", f"/v1/plans/{rid}")
    doc = api.wait(rid, timeout=30)
    assert doc["status"] == "cancelled" and doc["result"]["stop_reason"] == "cancelled"
    assert main(["export", rid, "--format", "csv", "--server", url]) == 0
    captured = capsys.readouterr()
    assert "was cancelled; exporting its best plan so far" in captured.err
    rows = list(csv.DictReader(io.StringIO(captured.out)))
    assert sorted(r["job"] for r in rows) == sorted(j["id"] for j in body["jobs"])


def test_submit_wait_follows_the_event_stream(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """``submit --wait`` follows the record through ``GET /v1/plans/{id}/events`` (the
    WHATWG event-stream format: ``progress`` events, then one ``end`` with the final status
    document), not by polling: with polling made to fail, it still ends done, and the
    last progress line is the final document's."""
    import json

    from service.client import Client

    def no_polling(*args: Any, **kw: Any) -> Any:
        raise AssertionError("polled instead of following the event stream")

    monkeypatch.setattr(Client, "wait", no_polling)
    f = tmp_path / "batch.json"
    f.write_text(json.dumps({"jobs": [{"id": "a", "duration": 7}, {"id": "b", "duration": 5}]}))
    assert main(["submit", str(f), "--nodes", "2", "--server", url, "--wait"]) == 0
    captured = capsys.readouterr()
    assert captured.out.split()[1:3] == ["makespan", "7s,"]
    assert captured.err.splitlines()[-1].startswith("done")


def test_event_stream_parsed_as_the_standard_says(url: str) -> None:
    """The events of a finished plan's stream: the reconnection delay is no event, then one
    ``end`` whose data is the status document of ``GET /v1/plans/{id}``, as one JSON line."""
    import json

    from service.client import Client
    from service.commands import _remote

    api = Client(url)
    rid = api.submit({"jobs": [{"id": "a", "duration": 3}], "node_count": 1})["id"]
    final = api.wait(rid, timeout=30)
    seen = list(_remote.events(api, rid))
    assert [name for name, _ in seen] == ["end"]
    assert json.loads(seen[0][1]) == final


def test_submit_wait_polls_a_server_without_the_stream(
    url: str, tmp_path: Path, capsys: pytest.CaptureFixture[str], monkeypatch: pytest.MonkeyPatch
) -> None:
    """A server that answers the stream with a 404 (an older one) is polled instead, with
    the same outcome."""
    import json

    from service.client import ClientError
    from service.commands import _remote

    def no_stream(*args: Any, **kw: Any) -> Any:
        raise ClientError(404, {"detail": "no event stream (404)"})

    monkeypatch.setattr(_remote, "events", no_stream)
    f = tmp_path / "batch.json"
    f.write_text(json.dumps({"jobs": [{"id": "a", "duration": 7}, {"id": "b", "duration": 5}]}))
    assert main(["submit", str(f), "--nodes", "2", "--server", url, "--wait"]) == 0
    assert capsys.readouterr().err.splitlines()[-1].startswith("done")
