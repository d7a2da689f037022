"""CSV batches and assignments: round trips, and errors that name line and column."""

from __future__ import annotations

import csv
import io

import pytest

from service.csvio import (
    CsvError,
    plural,
    read_jobs_csv,
    read_jobs_table,
    read_nodes_csv,
    write_assignment_csv,
)
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
    """A malformed CSV is refused with a message naming the line and column (RFC 4180
    records, counted from the header line 1)."""
    with pytest.raises(CsvError) as err:
        read_jobs_csv(text)
    assert where in err.value.detail


def test_every_bad_line_is_reported() -> None:
    """Three bad lines give three issues, each with its line and column, in file order
    (the issue's "a CSV with three bad lines reports only the first"); the expected lines
    and columns are counted by hand in the text below."""
    text = "id,duration\nsh010,60\nsh020,sixty\nsh030,-1\nsh040,30\n,12\n"
    with pytest.raises(CsvError) as err:
        read_jobs_csv(text)
    assert [i.detail.split(":")[0] for i in err.value.issues] == [
        "line 3, column 2 (duration)",
        "line 4, column 2 (duration)",
        "line 6, column 1 (id)",
    ]
    assert err.value.detail == "3 problems on 3 lines of the batch CSV"


def test_duplicate_ids_are_named_by_line_numbers() -> None:
    """A repeated id is reported at the line it repeats on, with the line it first
    appeared on, not as a JSON Pointer (the issue: "duplicate ids ... by line numbers")."""
    with pytest.raises(CsvError) as err:
        read_jobs_csv("id,duration\nsh010,60\nsh020,30\nsh010,45\n")
    assert [i.detail for i in err.value.issues] == [
        "line 4, column 1 (id): duplicate id 'sh010' (first on line 2)"
    ]
    assert all(i.path == () for i in err.value.issues)
    with pytest.raises(CsvError) as err:
        read_nodes_csv("speed,id\n1,n1\n2,n2\n1.5,n1\n")
    assert err.value.detail == "line 4, column 2 (id): duplicate id 'n1' (first on line 2)"


def test_header_problems_are_all_reported_with_the_rows() -> None:
    """An unknown column, a column given twice and a bad row: all three in one report."""
    with pytest.raises(CsvError) as err:
        read_jobs_csv("id,duration,colour,id\na,1,red,a\nb,x,red,b\n")
    assert [i.detail.split(":")[0] for i in err.value.issues] == [
        "line 1, column 3",
        "line 1, column 4",
        "line 3, column 2 (duration)",
    ]


def test_quoted_line_breaks_count_as_lines() -> None:
    """RFC 4180, section 2.6: a quoted field may hold a line break, so a record can span
    two lines; a problem is named by the line its record starts on (here line 4, after a
    record on lines 2-3)."""
    text = 'id,duration,group\na,5,"two\nlines"\nb,oops,x\n'
    with pytest.raises(CsvError) as err:
        read_jobs_csv(text)
    assert err.value.detail.startswith("line 4, column 2 (duration)")
    rows = read_jobs_table('id,duration,group\na,5,"two\nlines"\nb,6,x\n')
    assert rows.lines == [2, 4]
    assert rows.place(1, "duration") == "line 4, column 2 (duration)"


def test_singular_and_plural() -> None:
    """ "1 field" and "2 fields", "1 node" and "2 nodes": the noun agrees with its count."""
    assert plural(1, "node") == "1 node"
    assert plural(2, "node") == "2 nodes"
    assert plural(0, "problem") == "0 problems"
    with pytest.raises(CsvError) as err:
        read_jobs_csv("id,duration\na\n")
    assert err.value.detail == "line 2: 1 field, the header has 2"


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
