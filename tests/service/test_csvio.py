"""CSV batches and assignments: round trips, and errors that name line and column."""

from __future__ import annotations

import csv
import io

import pytest

from service.csvio import CsvError, read_jobs_csv, read_nodes_csv, write_assignment_csv
from service.reading import read_instance
from workers.planning import solve


def test_batch_csv_reads_all_columns() -> None:
    """Every documented column lands in the request body (README, "CSV columns")."""
    text = (
        "id,duration,group,requires,duration_p90\n"
        "sh010_0001,1840,sh010,gpu;bigmem,2300\n"
        "sh010_0002,1795.5,sh010,,\n"
    )
    jobs = read_jobs_csv(text)
    assert jobs[0] == {
        "id": "sh010_0001", "duration": 1840.0, "group": "sh010",
        "requires": ["gpu", "bigmem"], "duration_p90": 2300.0,
    }  # fmt: skip
    assert jobs[1] == {"id": "sh010_0002", "duration": 1795.5, "group": "sh010"}


@pytest.mark.parametrize(
    ("text", "where"),
    [
        ("id,duration\na,12\nb,twelve\n", "line 3, column 2"),
        ("id,duration\na,-4\n", "line 2, column 2"),
        ("duration,id\n5,a\nnan,b\n", "line 3, column 1"),
        ("id,duration,colour\na,1,red\n", "line 1, column 3"),
        ("id\na\n", "line 1"),
        ("id,duration\na,1,extra\n", "line 2"),
        ("id,duration\n,5\n", "line 2, column 1"),
    ],
)
def test_bad_csv_names_line_and_column(text: str, where: str) -> None:
    """A malformed CSV is refused with a message naming the line and column (issue 8)."""
    with pytest.raises(CsvError) as err:
        read_jobs_csv(text)
    assert where in err.value.detail


def test_farm_csv() -> None:
    """Farm CSV: id, speed, provides, free_at."""
    nodes = read_nodes_csv("id,speed,provides,free_at\nblade-01,1.5,gpu,600\nblade-02,,,\n")
    assert nodes == [
        {"id": "blade-01", "speed": 1.5, "provides": ["gpu"], "free_at": 600.0},
        {"id": "blade-02"},
    ]


def test_assignment_csv_round_trip() -> None:
    """Plan a CSV batch and export it: every job appears exactly once with its times."""
    rows = "\n".join(f"f{i:03d},{60 + 7 * (i % 13)}" for i in range(120))
    jobs = read_jobs_csv("id,duration\n" + rows + "\n")
    inst = read_instance({"jobs": jobs, "node_count": 7})
    res = solve(inst, "longest_first").to_dict()
    out = list(csv.DictReader(io.StringIO(write_assignment_csv(res["assignment"]))))
    assert sorted(r["job"] for r in out) == sorted(j["id"] for j in jobs)
    durations = {j["id"]: j["duration"] for j in jobs}
    for r in out:
        assert float(r["end"]) - float(r["start"]) == pytest.approx(durations[r["job"]])


def test_export_neutralises_formula_cells_and_reads_them_back() -> None:
    """OWASP's CSV Injection guidance: a cell beginning with =, +, -, @ is a formula to a
    spreadsheet; the export writes it with a leading apostrophe, and our own reader takes
    it off again (round trip)."""
    from service.csvio import read_jobs_csv

    assignment = [
        {
            "node": "@rack",
            "load": 3.0,
            "jobs": [
                {"id": "=HYPERLINK(1)", "start": 0.0, "end": 1.0},
                {"id": "-lh_x", "start": 1.0, "end": 3.0},
            ],
        }
    ]
    rows = list(csv.reader(io.StringIO(write_assignment_csv(assignment))))
    assert rows[1][:2] == ["'@rack", "'=HYPERLINK(1)"]
    assert rows[2][:2] == ["'@rack", "'-lh_x"]
    back = read_jobs_csv("id,duration\n'=HYPERLINK(1),5\n'-lh_x,2\nplain,1\n")
    assert [j["id"] for j in back] == ["=HYPERLINK(1)", "-lh_x", "plain"]
