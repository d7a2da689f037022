"""Clock-time deadlines: ``start_at``, ``deadline_at`` and a node's ``free_at_time`` (RFC
3339) beside the seconds, read in one place (``service/reading/clock.py``), echoed in a
result's ``clock`` and shown in pages and the command line.

References: RFC 3339 section 5.6 (the ``date-time`` grammar); Python's standard library
(``datetime.fromisoformat``, which accepts RFC 3339 offsets from 3.11, and ``timedelta``
arithmetic) for the instants; seconds of worked examples computed by hand in the
docstrings.
"""

from __future__ import annotations

import json
import math
import time
from datetime import UTC, datetime, timedelta
from fractions import Fraction
from pathlib import Path
from typing import Any

import pytest

from service.cli import main
from service.commands.status import sizing_sentence
from service.commands.submit import deadline_verdict
from service.reading import read_instance, read_sizing_request
from service.reading.clock import in_seconds, parse_time
from service.store import Store
from service.web.pages import certificate_sentence, fmt_clock
from workers.planning.errors import InvalidInstance

EPOCH = datetime(1970, 1, 1, tzinfo=UTC)


def stdlib_seconds(text: str) -> Fraction:
    """Seconds since the epoch by the standard library alone (at most 6 fraction digits)."""
    return Fraction((datetime.fromisoformat(text) - EPOCH) // timedelta(microseconds=1), 10**6)


def wait_done(client: Any, loc: str) -> dict[str, Any]:
    for _ in range(500):
        doc: dict[str, Any] = client.get(loc).get_json()
        if doc["status"] in ("done", "failed", "cancelled"):
            return doc
        time.sleep(0.02)
    raise AssertionError(f"{loc} did not finish")


def pointers(resp: Any) -> list[str]:
    return [e["pointer"] for e in resp.get_json()["errors"]]


JOBS = [{"id": "qv_sq010_beauty", "duration": 3600}, {"id": "qv_sq010_fx", "duration": 1800}]


# -- parsing -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    "text",
    [
        "2026-12-04T06:00:00+01:00",
        "2026-12-04T05:00:00Z",
        "2026-12-04T05:00:00z",
        "2026-12-03T23:30:00-05:30",
        "2026-12-04T06:00:00.25+01:00",
        "2026-12-04T06:00:00.123456+14:00",
        "2026-12-04 06:00:00+01:00",
        "2024-02-29T00:00:00-00:00",
    ],
)
def test_rfc3339_instants_agree_with_the_standard_library(text: str) -> None:
    """Every RFC 3339 form (``T``, ``t`` or a space; ``Z``, ``z`` or an offset; fractions)
    is the instant ``datetime.fromisoformat`` reads (Python 3.11 accepts them all, once a
    lower-case ``t`` or ``z`` is upper-cased: RFC 3339 section 5.6 makes them equal)."""
    assert parse_time(text).exact() == stdlib_seconds(text.upper())


def test_fractions_of_a_second_are_kept_to_every_digit() -> None:
    """RFC 3339 puts no limit on fraction digits; ``fromisoformat`` keeps six, the reader
    all of them: 0.1234567 s after a whole second is 1234567/10^7 s exactly."""
    a = parse_time("2026-12-04T06:00:00+01:00").exact()
    b = parse_time("2026-12-04T06:00:00.1234567+01:00").exact()
    assert b - a == Fraction(1234567, 10**7)


@pytest.mark.parametrize(
    "text",
    [
        "2026-12-04T06:00:00",  # no offset: which clock?
        "2026-12-04",  # a date alone
        "20261204T060000Z",  # ISO 8601 basic format, not RFC 3339
        "2026-W49-5T06:00:00Z",  # ISO week date
        "2026-12-04T06:00Z",  # no seconds
        "2026-02-30T06:00:00Z",  # no such day
        "2026-12-04T06:00:00+0100",  # offset without its colon
    ],
)
def test_what_is_not_rfc3339_is_refused(text: str) -> None:
    """ISO 8601 forms outside RFC 3339 (some of which ``fromisoformat`` takes) are refused."""
    with pytest.raises(ValueError):
        parse_time(text)


# -- seconds -------------------------------------------------------------------------------


def test_worked_example_four_hours() -> None:
    """Start 2026-12-04 02:00 +01:00, deadline 06:00 +01:00: 4 h = 4 x 3600 = 14,400 s. A
    node free at 02:30 +01:00 is free after 30 x 60 = 1,800 s; one free at 01:00 +01:00,
    before the start, is free at 0; 05:00Z is 06:00 +01:00, the same 14,400 s."""
    body = {
        "jobs": JOBS,
        "nodes": [
            {"id": "node-01", "free_at_time": "2026-12-04T02:30:00+01:00"},
            {"id": "node-02", "free_at_time": "2026-12-04T01:00:00+01:00"},
            {"id": "node-03"},
        ],
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
    }
    inst = read_instance(body)
    assert inst.deadline == 14_400.0
    assert [nd.free_at for nd in inst.nodes] == [1_800.0, 0.0, 0.0]
    utc = read_instance({**body, "deadline_at": "2026-12-04T05:00:00Z"})
    assert utc.deadline == 14_400.0


def test_seconds_that_are_no_double_round_to_the_safe_side() -> None:
    """A deadline 14,400.1 s after the start (0.1 is no double) becomes the largest double
    not above 144001/10, so a plan meeting it in seconds meets the time; a node free
    0.1 s after the start the smallest double not below 1/10 (exact ``Fraction``s)."""
    body = {
        "jobs": JOBS,
        "nodes": [{"id": "node-01", "free_at_time": "2026-12-04T02:00:00.1+01:00"}],
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00.1+01:00",
    }
    inst = read_instance(body)
    assert inst.deadline is not None
    d, f = inst.deadline, inst.nodes[0].free_at
    assert Fraction(d) <= Fraction(144001, 10) < Fraction(math.nextafter(d, math.inf))
    assert Fraction(math.nextafter(f, -math.inf)) < Fraction(1, 10) <= Fraction(f)


def test_without_start_at_the_start_is_now() -> None:
    """No ``start_at``: the start is the ``now`` given (the API's acceptance time, or the
    command line's time of the run); 06:00Z is 6 x 3600 = 21,600 s after 00:00Z."""
    body = {"jobs": JOBS, "node_count": 2, "deadline_at": "2026-12-04T06:00:00Z"}
    assert in_seconds(body, now="2026-12-04T00:00:00Z")["deadline"] == 21_600.0
    assert "deadline_at" not in in_seconds(body, now="2026-12-04T00:00:00Z")


def test_a_body_in_seconds_is_read_as_it_is() -> None:
    """A body with no clock field comes back itself (no copy of a large body)."""
    body = {"jobs": JOBS, "node_count": 2, "deadline": 7200}
    assert in_seconds(body) is body


@pytest.mark.parametrize(
    ("extra", "pointer"),
    [
        ({"deadline": 100}, "/deadline_at"),
        ({"deadline_at": "2026-12-04T02:00:00+01:00"}, "/deadline_at"),
        ({"deadline_at": "2026-12-04T00:59:59Z"}, "/deadline_at"),
        ({"start_at": "tomorrow"}, "/start_at"),
        ({"nodes": [{"id": "n", "free_at": 5, "free_at_time": "2026-12-04T03:00:00Z"}]}, None),
    ],
)
def test_reader_refusals_name_the_field(extra: dict[str, Any], pointer: str | None) -> None:
    """Both ``deadline`` and ``deadline_at``, a ``deadline_at`` at or before the start
    (00:59:59Z is before 02:00 +01:00 = 01:00Z), a start that is no time, both
    ``free_at`` and ``free_at_time``: each an issue at its own field."""
    body = {
        "jobs": JOBS,
        "nodes": [{"id": "n"}],
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
        **extra,
    }
    with pytest.raises(InvalidInstance) as err:
        read_instance(body)
    paths = ["/" + "/".join(map(str, i.path)) for i in err.value.issues]
    assert paths == [pointer or "/nodes/0/free_at_time"]


def test_sizings_and_rental_farms_read_clock_times() -> None:
    """A sizing's ``deadline_at`` and a rental farm node's ``free_at_time`` become the same
    seconds as for a plan: 02:00 to 06:00 +01:00 is 14,400 s; the farm node free at 03:00
    +01:00 is free after 3,600 s."""
    clocked = {"start_at": "2026-12-04T02:00:00+01:00", "deadline_at": "2026-12-04T06:00:00+01:00"}
    sizing = read_sizing_request({"jobs": JOBS, **clocked})
    assert sizing.base.deadline == 14_400.0  # type: ignore[union-attr]
    rental = read_sizing_request(
        {
            "jobs": JOBS,
            **clocked,
            "farm": [{"id": "node-01", "free_at_time": "2026-12-04T03:00:00+01:00"}],
            "kinds": [{"name": "small", "hour_cost": 1.0}],
        }
    )
    inst = rental.instance  # type: ignore[union-attr]
    assert inst.deadline == 14_400.0
    assert inst.nodes[0].free_at == 3_600.0


# -- the API -------------------------------------------------------------------------------


@pytest.mark.parametrize(
    ("path", "body", "pointer"),
    [
        (
            "/v1/plans",
            {"node_count": 1, "deadline": 10, "deadline_at": "2099-01-01T00:00:00Z"},
            "/deadline_at",
        ),
        (
            "/v1/plans",
            {"nodes": [{"id": "n", "free_at": 1, "free_at_time": "2099-01-01T00:00:00Z"}]},
            "/nodes/0/free_at_time",
        ),
        (
            "/v1/plans",
            {
                "node_count": 1,
                "start_at": "2026-12-04T06:00:00Z",
                "deadline_at": "2026-12-04T06:00:00Z",
            },
            "/deadline_at",
        ),
        ("/v1/plans", {"node_count": 1, "deadline_at": "2000-01-01T00:00:00Z"}, "/deadline_at"),
        ("/v1/plans", {"node_count": 1, "start_at": "2026-12-04T06:00:00"}, "/start_at"),
        (
            "/v1/plans",
            {"node_count": 1, "start_at": "9999-12-31T23:00:00Z", "deadline": 7200},
            "/deadline",
        ),
        ("/v1/sizings", {}, "/deadline"),
        (
            "/v1/sizings",
            {"deadline": 9000, "deadline_at": "2099-01-01T00:00:00Z"},
            "/deadline_at",
        ),
        (
            "/v1/sizings",
            {
                "deadline": 9000,
                "farm": [{"id": "n", "free_at": 1, "free_at_time": "2099-01-01T00:00:00Z"}],
                "kinds": [{"name": "small", "hour_cost": 1.0}],
            },
            "/farm/0/free_at_time",
        ),
    ],
)
def test_api_refusals_are_422_by_pointer(
    idle_app: Any, path: str, body: dict[str, Any], pointer: str
) -> None:
    """Each refusal is a 422 naming the field (a deadline in the past is not after "now",
    the time the API accepted the request; 23:00Z on 9999-12-31 plus 7,200 s is past the
    last time RFC 3339 can write, 9999-12-31T23:59:59Z)."""
    resp = idle_app.test_client().post(path, json={"jobs": JOBS, **body})
    assert resp.status_code == 422, resp.get_json()
    assert pointers(resp) == [pointer]


def test_round_trip_with_deadline_at_only(client: Any, conn: Any, settings: Any) -> None:
    """``deadline_at`` alone starts at the time the API accepted the request: the stored
    request holds that ``start_at`` (UTC), the result's ``clock`` echoes it with the
    ``deadline_at`` as sent, and the deadline's seconds are the difference of the two
    instants by the standard library, rounded down to a double (compared as exact
    fractions). A retry with the
    same Idempotency-Key gets the same record: the key's fingerprint is of the body as
    sent, not of the body with its start filled in."""
    body = {"jobs": JOBS, "node_count": 2, "deadline_at": "2099-12-04T06:00:00+01:00"}
    before = datetime.now(UTC)
    first = client.post("/v1/plans", json=body, headers={"Idempotency-Key": "clock-1"})
    after = datetime.now(UTC)
    assert first.status_code == 202, first.get_json()
    doc = wait_done(client, first.headers["Location"])
    store = Store(conn, prefix=settings.key_prefix, retention=settings.retention)
    stored = json.loads(store.load_request("plan", doc["id"]) or b"null")
    start = stored["start_at"]
    assert start.endswith("Z")
    assert before - timedelta(milliseconds=1) <= datetime.fromisoformat(start) <= after
    assert doc["result"]["clock"] == {"start_at": start, "deadline_at": body["deadline_at"]}
    seconds = stdlib_seconds(body["deadline_at"]) - stdlib_seconds(start)
    got = doc["result"]["deadline"]["deadline"]
    assert Fraction(got) <= seconds < Fraction(math.nextafter(got, math.inf))
    again = client.post("/v1/plans", json=body, headers={"Idempotency-Key": "clock-1"})
    assert again.headers.get("Idempotent-Replayed") == "true"
    assert again.get_json()["id"] == doc["id"]


def test_a_large_batch_read_in_columns_keeps_its_start(client: Any) -> None:
    """A batch big enough to be read from its bytes in columns (``service/jobscan.py``)
    gets its start filled in the same way; 500 jobs of 60 s on 50 nodes need 10 x 60 =
    600 s, well before a deadline in 2099 (met)."""
    jobs = [{"id": f"qv_sq{i:03d}_" + "x" * 120, "duration": 60} for i in range(500)]
    body = {"jobs": jobs, "node_count": 50, "deadline_at": "2099-12-04T06:00:00+01:00"}
    resp = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"})
    doc = wait_done(client, resp.headers["Location"])
    assert doc["result"]["makespan"] == 600.0
    assert doc["result"]["deadline"]["met"] is True
    assert doc["result"]["clock"]["deadline_at"] == body["deadline_at"]
    assert doc["result"]["clock"]["start_at"].endswith("Z")


def test_a_given_start_is_kept_and_a_sizing_echoes_it(client: Any) -> None:
    """A sizing from 02:00 to 06:00 +01:00 (14,400 s) of jobs of 3,600 and 1,800 s needs
    1 node (5,400 s of work, one node's plan ends at 5,400 s); its result keeps the
    seconds and echoes the clock as given."""
    body = {
        "jobs": JOBS,
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
    }
    resp = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=10"})
    doc = wait_done(client, resp.headers["Location"])
    assert doc["result"]["deadline"] == 14_400.0
    assert doc["result"]["nodes_needed"] == 1
    assert doc["result"]["clock"] == {
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
    }


def test_seconds_with_a_start_echo_the_deadline_time(client: Any) -> None:
    """``start_at`` with ``deadline`` seconds: the clock's ``deadline_at`` is the start plus
    the seconds in the start's offset (02:00 +01:00 + 5,400 s = 03:30 +01:00)."""
    body = {
        "jobs": JOBS,
        "node_count": 1,
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline": 5400,
    }
    resp = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"})
    doc = wait_done(client, resp.headers["Location"])
    assert doc["result"]["clock"]["deadline_at"] == "2026-12-04T03:30:00+01:00"


def test_a_replan_moves_the_start_to_the_replanning_moment(client: Any) -> None:
    """A re-plan 600 s into a plan started at 02:00 +01:00 starts at 02:10 +01:00, with the
    deadline left in seconds: 06:00 less 02:10 is 3 h 50 min = 13,800 s, so the clock
    still says 06:00 +01:00."""
    body = {
        "jobs": JOBS,
        "nodes": [{"id": "node-01"}, {"id": "node-02"}],
        "start_at": "2026-12-04T02:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
    }
    first = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"})
    wait_done(client, first.headers["Location"])
    resp = client.post(f"{first.headers['Location']}/replan", json={"elapsed": 600})
    assert resp.status_code == 202, resp.get_json()
    doc = wait_done(client, resp.headers["Location"])
    assert doc["result"]["deadline"]["deadline"] == 13_800.0
    assert doc["result"]["clock"] == {
        "start_at": "2026-12-04T02:10:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
    }


def test_replan_events_refuse_a_clock_time(client: Any) -> None:
    """An added node's free time in events is in seconds from the re-planning moment: a
    ``free_at_time`` there is a 422 at its field."""
    first = client.post(
        "/v1/plans", json={"jobs": JOBS, "node_count": 1}, headers={"Prefer": "wait=10"}
    )
    wait_done(client, first.headers["Location"])
    events = {"elapsed": 1, "added_nodes": [{"id": "n", "free_at_time": "2099-01-01T00:00:00Z"}]}
    resp = client.post(f"{first.headers['Location']}/replan", json=events)
    assert resp.status_code == 422
    assert pointers(resp) == ["/added_nodes/0/free_at_time"]


# -- pages and the command line ------------------------------------------------------------

CLOCKED_PLAN = {
    "jobs": JOBS,
    "node_count": 1,
    "start_at": "2026-12-04T02:00:00+01:00",
    "deadline_at": "2026-12-04T06:00:00+01:00",
}


def test_clock_times_are_shown_in_their_own_offset() -> None:
    """06:00 +01:00 stays 06:00 +01:00 (not 05:00 UTC); ``Z`` reads UTC; seconds only
    when not zero."""
    assert fmt_clock("2026-12-04T06:00:00+01:00") == "2026-12-04 06:00 +01:00"
    assert fmt_clock("2026-12-04T05:00:00Z") == "2026-12-04 05:00 UTC"
    assert fmt_clock("2026-12-03T23:30:15-05:30") == "2026-12-03 23:30:15 -05:30"


def test_plan_page_shows_the_deadline_time(client: Any) -> None:
    """The plan page's sentence and the timeline's deadline label give 06:00 +01:00; the
    plan (3,600 + 1,800 = 5,400 s on one node) meets it with 14,400 - 5,400 = 9,000 s =
    2 h 30 min to spare."""
    resp = client.post("/v1/plans", json=CLOCKED_PLAN, headers={"Prefer": "wait=10"})
    doc = wait_done(client, resp.headers["Location"])
    html = client.get(f"/plans/{doc['id']}").get_data(as_text=True)
    assert (
        "It meets the deadline of 2026-12-04 06:00 +01:00 (4h 00m 00s after the start at "
        "2026-12-04 02:00 +01:00) with 2h 30m 00s to spare." in html
    )
    assert ">deadline 4h 00m 00s · 2026-12-04 06:00 +01:00</text>" in html


def test_list_page_shows_the_deadline_time(client: Any) -> None:
    """The list's deadline column gives the verdict and, with a clock, the time; a plan
    in seconds only shows no time."""
    client.post("/v1/plans", json=CLOCKED_PLAN, headers={"Prefer": "wait=10"})
    plain = {"jobs": JOBS, "node_count": 1, "deadline": 7200}
    client.post("/v1/plans", json=plain, headers={"Prefer": "wait=10"})
    html = client.get("/").get_data(as_text=True)
    assert html.count('<span class="muted deadline-at">2026-12-04 06:00 +01:00</span>') == 1
    assert html.count("deadline-at") == 1


def test_command_line_sentences_give_the_time() -> None:
    """``submit``'s verdict and ``status``'s sentences name the clock time; without a
    clock they stay in seconds (9,000 s = 2 h 30 min)."""
    clock = {"start_at": "2026-12-04T02:00:00+01:00", "deadline_at": "2026-12-04T06:00:00+01:00"}
    plan = {
        "makespan": 5400.0,
        "lower_bound": 5400.0,
        "bound_source": "mean_load",
        "proven_optimal": True,
        "gap": 0.0,
        "deadline": {"deadline": 14400.0, "met": True, "slack": 9000.0},
    }
    verdict = deadline_verdict({**plan, "clock": clock})
    assert verdict is not None
    assert verdict[0].startswith("deadline 2026-12-04 06:00 +01:00 (4h 00m 00s after the start")
    plain = deadline_verdict(plan)
    assert plain is not None
    assert plain[0] == "deadline 4h 00m 00s: met, 2h 30m 00s to spare"
    assert "2026-12-04 06:00 +01:00" in certificate_sentence({**plan, "clock": clock})
    sizing = {"nodes_needed": 1, "nodes_lower_bound": 1, "deadline": 14400.0, "makespan": 5400}
    assert "deadline of 2026-12-04 06:00 +01:00" in sizing_sentence({**sizing, "clock": clock})


def test_local_solve_reads_clock_times(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``spanwright solve`` takes the fields too: 02:00 to 06:00 +01:00 is 14,400 s, and one
    node runs 3,600 + 1,800 = 5,400 s of work, meeting it; both ``deadline`` and
    ``deadline_at`` is exit 2 naming ``/deadline_at``."""
    path = tmp_path / "batch.json"
    path.write_text(json.dumps(CLOCKED_PLAN))
    assert main(["solve", str(path), "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["deadline"]["deadline"] == 14_400.0
    assert out["deadline"]["met"] is True
    path.write_text(json.dumps({**CLOCKED_PLAN, "deadline": 100}))
    assert main(["solve", str(path)]) == 2
    assert "/deadline_at" in capsys.readouterr().err
