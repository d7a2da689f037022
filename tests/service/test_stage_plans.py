"""Stage graphs through the API (issue 17): accepted and planned with waits, limits and
slots honoured, refused at submit (422 by pointer) when the graph is not one. Each plan
is checked by the independent checker of tests/reference_stages.py and against its
brute-force optimum (bound <= optimum <= makespan)."""

from __future__ import annotations

import dataclasses
import math
from fractions import Fraction
from typing import Any

from reference_stages import Tiny, brute_force_optimum, check_rows
from stage_bodies import issue_graph

#: the issue's example graph in short durations, planned exactly
SHOT: dict[str, Any] = {
    **issue_graph({"bg": 6, "fg": 9, "fx": 4, "comp": 3, "encode": 2}, licence="lic"),
    "method": "exact",
    "time_budget": 1,
}


def test_stage_plan_is_feasible_and_its_bounds_hold(client: Any) -> None:
    """The shot plans through the API; the reference checker finds no broken wait, limit,
    slot or speed, and bound <= brute-force optimum <= makespan."""
    doc = client.post("/v1/plans", json=SHOT, headers={"Prefer": "wait=10"}).get_json()
    assert doc["status"] == "done", doc
    res = doc["result"]
    ids = [j["id"] for j in SHOT["jobs"]]
    g = Tiny(
        p=[float(j["duration"]) for j in SHOT["jobs"]],
        speeds=[1.0, 1.0, 2.0],
        after=[[ids.index(a) for a in j.get("after", [])] for j in SHOT["jobs"]],
        slots=[2, 1, 1],
        uses=[[0] if j.get("uses") else [] for j in SHOT["jobs"]],
        caps=[2],
    )
    rows = []
    node_index = {row["node"]: k for k, row in enumerate(res["assignment"])}
    for row in res["assignment"]:
        for job in row["jobs"]:
            j, k = ids.index(job["id"]), node_index[row["node"]]
            start = Fraction(job["start"])
            # each job runs its stated duration at its node's speed, from a whole tick; its
            # end is written rounded up to the 1 s grid of resolution 1 (the contract's
            # PlanResult rounding); the reference checks the plan in its whole ticks
            # (durations rounded up)
            exact_end = start + Fraction(g.p[j]) / Fraction(g.speeds[k])
            assert Fraction(job["end"]) == math.ceil(exact_end)
            ticks = math.ceil(Fraction(g.p[j]) / Fraction(g.speeds[k]))
            rows.append((j, (k, job["slot"], int(start), int(start) + ticks)))
    rows.sort()
    assert check_rows(g, [r for _, r in rows]) == []
    # every time here is a whole number of half seconds: at 0.5 s ticks the brute force
    # solves the stated problem exactly
    opt = brute_force_optimum(dataclasses.replace(g, resolution=0.5)) * Fraction(1, 2)
    assert res["lower_bound"] <= opt <= res["makespan"]
    assert res["stages"]["arcs"] == 4 and res["stages"]["limits"] == {"lic": 2}


def test_a_cycle_is_refused_at_submit_by_pointer(client: Any) -> None:
    """A graph that waits in a circle is a 422 at submit (never a failed plan later),
    pointing at each job of the cycle."""
    jobs = [
        {"id": "a", "duration": 1, "after": ["b"]},
        {"id": "b", "duration": 1, "after": ["a"]},
    ]
    r = client.post("/v1/plans", json={"jobs": jobs, "node_count": 2})
    assert r.status_code == 422
    pointers = sorted(e["pointer"] for e in r.get_json()["errors"])
    assert pointers == ["/jobs/0/after", "/jobs/1/after"]


def test_limits_on_plain_jobs_are_not_dropped(client: Any) -> None:
    """Plain jobs with a limit given but used by none, and a two-slot node: still planned
    (as a stage graph), the slot honoured: two 5 s jobs on one two-slot node end at 5 s."""
    body = {
        "jobs": [{"id": "x", "duration": 5}, {"id": "y", "duration": 5}],
        "nodes": [{"id": "node-01", "slots": 2}],
        "limits": {"lic": 1},
    }
    doc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).get_json()
    assert doc["status"] == "done", doc
    assert doc["result"]["makespan"] == 5.0


def test_a_graph_is_replanned_with_its_waits_not_flattened(client: Any) -> None:
    """Re-planning a finished stage-graph plan after a node is lost: queued and done; every
    job not finished or running is planned again, and no job starts before what it waits
    for has ended (the running ones end at start + duration / speed, worked here from the
    original plan); the plan page of the re-plan renders."""
    doc = client.post("/v1/plans", json=SHOT, headers={"Prefer": "wait=10"}).get_json()
    rows = doc["result"]["assignment"]
    at = 1.0  # one second in: whatever started at 0 is running
    running = [
        {"job": j["id"], "node": row["node"], "started_at": j["start"]}
        for row in rows
        for j in row["jobs"]
        if j["start"] <= at < j["end"]
    ]
    events = {"elapsed": at, "running": running}
    r = client.post(
        f"/v1/plans/{doc['id']}/replan", json=events, headers={"Prefer": "wait=10"}
    ).get_json()
    assert r["status"] == "done", r
    ends = {x["job"]: x["end"] for x in r["replan"]["running"]}  # time 0 = now
    starts = {}
    for row in r["result"]["assignment"]:
        for j in row["jobs"]:
            starts[j["id"]] = j["start"]
            ends[j["id"]] = j["end"]
    ids = {j["id"] for j in SHOT["jobs"]}
    assert set(starts) | {x["job"] for x in running} == ids
    waits = [  # each job planned again, against each job it waits for
        (starts[job["id"]], ends[before])
        for job in SHOT["jobs"]
        if job["id"] in starts
        for before in job.get("after", [])
    ]
    assert waits and all(start >= end for start, end in waits)
    assert client.get(f"/plans/{r['id']}").status_code == 200
