"""``GET /v1/plans/{id}/events``: progress as Server-Sent Events (the WHATWG HTML
standard's text/event-stream: ``event:`` and ``data:`` lines, a blank line after each
event), ending with the final status document (issue 19, point 1)."""

from __future__ import annotations

import json
import time
from typing import Any

import pytest

from service.routes import events as events_mod
from workers import tasks
from workers.planning.solve import Progress

BODY = {"jobs": [{"id": f"j{i}", "duration": 100 + i} for i in range(30)], "node_count": 4}


def parse(text: str) -> list[tuple[str, str]]:
    """(event name, data) of each event, as the standard's parsing rules read them."""
    out = []
    for block in text.split("\n\n"):
        name, data = "message", []
        for line in block.split("\n"):
            field, _, value = line.partition(": ")
            if field == "event":
                name = value
            elif field == "data":
                data.append(value)
        if data:
            out.append((name, "\n".join(data)))
    return out


def test_stream_reports_progress_then_the_final_document(
    app: Any, monkeypatch: pytest.MonkeyPatch
) -> None:
    """A solve of about a second (a test double reporting three improving plans): the
    stream carries progress events while it solves and ends with an ``end`` event whose
    data is the finished status document, the same one ``GET`` returns."""

    def core(body: Any, *, progress: Any, should_stop: Any, **kw: Any) -> Any:
        for k in range(3):
            time.sleep(0.35)
            progress(
                Progress(elapsed=0.35 * (k + 1), best_makespan=500.0 - k, best_lower_bound=400.0)
            )
            should_stop()
        return tasks.Outcome({"makespan": 498.0}, {"makespan": 498.0}, cancelled=False)

    monkeypatch.setitem(tasks.RUNNERS, "plan", core)
    monkeypatch.setattr(events_mod, "POLL", 0.05)
    c = app.test_client()
    loc = c.post("/v1/plans", json={**BODY, "method": "exact", "time_budget": 2}).headers[
        "Location"
    ]
    r = c.get(loc + "/events")
    assert r.status_code == 200 and r.mimetype == "text/event-stream"
    got = parse(r.get_data(as_text=True))
    names = [name for name, _ in got]
    assert names[-1] == "end" and names.count("end") == 1
    assert "progress" in names
    final = json.loads(got[-1][1])
    assert final["status"] == "done" and final["result"] == {"makespan": 498.0}
    assert final == c.get(loc).get_json()


def test_stream_of_another_tenants_or_a_missing_plan_is_404(client: Any) -> None:
    """No stream for an id that is not the caller's (here: not there at all)."""
    assert client.get("/v1/plans/0123456789abcdef01234/events").status_code == 404
