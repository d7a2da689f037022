"""Re-planning mid-run: every job accounted for once, running jobs kept, lost nodes emptied.

The invariants are those of the re-planning rules (workers/planning/replan.py, issue 6):
a job is finished, kept running on its node, or planned again, exactly one of them.
"""

from __future__ import annotations

import json
from pathlib import Path
from typing import Any

import numpy as np
import pytest

from service.cli import main
from service.problems import json_pointer
from service.reading import read_events, read_instance
from tests.bodies import remaining_of, replan_bodies, replan_request
from workers.planning import Infeasible, InvalidInstance, solve


def studio_request(seed: int, n: int = 40) -> dict[str, Any]:
    """An episode of our own invention: shots on blades of three speeds, two with a GPU."""
    rng = np.random.default_rng(seed)
    nodes = [
        {
            "id": f"blade-{k:02d}",
            "speed": [1.0, 1.5, 2.0][k % 3],
            "provides": ["gpu"] if k < 2 else [],
            "free_at": 120.0 if k % 4 == 3 else 0.0,
        }
        for k in range(8)
    ]
    jobs = []
    for j in range(n):
        job: dict[str, Any] = {"id": f"ep4_sh{j:03d}", "duration": float(rng.integers(60, 1800))}
        if rng.random() < 0.2:
            job["requires"] = ["gpu"]
        jobs.append(job)
    return {"jobs": jobs, "nodes": nodes, "method": "longest_first", "deadline": 20000}


def events_at(
    request: dict[str, Any], result: dict[str, Any], elapsed: float, lost: list[str]
) -> dict[str, Any]:
    """What a farm would report at ``elapsed`` if the original plan ran as planned."""
    finished: list[str] = []
    running: list[dict[str, Any]] = []
    for row in result["assignment"]:
        for job in row["jobs"]:
            if job["end"] <= elapsed:
                finished.append(job["id"])
            elif job["start"] <= elapsed:
                running.append({"job": job["id"], "node": row["node"], "started_at": job["start"]})
    return {"elapsed": elapsed, "finished": finished, "running": running, "lost_nodes": lost}


@pytest.mark.parametrize("seed", range(8))
def test_lost_node_jobs_replanned_none_lost_or_duplicated(seed: int) -> None:
    """Every job planned on a lost node (running or queued) is planned again; finished,
    kept-running and re-planned jobs partition the original batch (none lost or twice)."""
    req = studio_request(seed)
    res = solve(read_instance(req), "longest_first").to_dict()
    lost = f"blade-{2 + seed % 6:02d}"
    ev = events_at(req, res, elapsed=0.35 * res["makespan"], lost=[lost])
    out = replan_bodies(req, res, ev)
    out.schedule.check()
    new_jobs = [j["id"] for row in out.to_dict()["assignment"] for j in row["jobs"]]
    kept = [r["job"] for r in out.extras["replan"]["running"]]
    everything = new_jobs + kept + ev["finished"]
    assert sorted(everything) == sorted(j["id"] for j in req["jobs"])  # none lost, none twice
    on_lost = {j["id"] for row in res["assignment"] if row["node"] == lost for j in row["jobs"]}
    left_on_lost = on_lost - set(ev["finished"])
    assert left_on_lost <= set(new_jobs)
    assert set(out.extras["replan"]["replanned_from_lost_nodes"]) == left_on_lost
    assert lost not in [nd.id for nd in out.schedule.instance.nodes]


def test_running_jobs_keep_their_node() -> None:
    """A running job is not planned again; its node is busy until started_at +
    duration/speed (shifted to the re-planning moment) and nothing else runs there before."""
    req = studio_request(1)
    res = solve(read_instance(req), "longest_first").to_dict()
    ev = events_at(req, res, elapsed=0.5 * res["makespan"], lost=[])
    assert ev["running"]
    out = replan_bodies(req, res, ev)
    inst = out.schedule.instance
    speed = {nd["id"]: nd["speed"] for nd in req["nodes"]}
    dur = {j["id"]: j["duration"] for j in req["jobs"]}
    kept = {r["job"]: r for r in out.extras["replan"]["running"]}
    assert set(kept) == {r["job"] for r in ev["running"]}
    for r in ev["running"]:
        row = kept[r["job"]]
        assert row["node"] == r["node"]
        end = r["started_at"] + dur[r["job"]] / speed[r["node"]] - ev["elapsed"]
        assert row["end"] == pytest.approx(end)
        k = [nd.id for nd in inst.nodes].index(r["node"])
        assert inst.nodes[k].free_at == pytest.approx(end)
        on_node = out.schedule.node_of == k
        assert (out.schedule.start[on_node] >= end - 1e-9).all()
        assert out.makespan >= end - 1e-9
    assert not set(kept) & set(inst.job_ids)


def test_running_job_on_lost_node_is_planned_again_and_added_node_used() -> None:
    """A job running on a node that is lost is planned again; added nodes join the farm
    with their free_at shifted to the re-planning moment; the deadline shifts too."""
    req = studio_request(2, n=12)
    res = solve(read_instance(req), "longest_first").to_dict()
    row = next(r for r in res["assignment"] if r["jobs"])
    job = row["jobs"][0]
    ev = {
        "elapsed": job["start"] + 1.0,
        "running": [{"job": job["id"], "node": row["node"], "started_at": job["start"]}],
        "lost_nodes": [row["node"]],
        "added_nodes": [{"id": "blade-new", "speed": 2.0, "provides": ["gpu"], "free_at": 5000}],
    }
    body = replan_request(req, res, ev)
    assert job["id"] in [j["id"] for j in body["jobs"]]
    new = {nd["id"]: nd for nd in body["nodes"]}
    assert row["node"] not in new
    assert new["blade-new"]["free_at"] == pytest.approx(5000 - ev["elapsed"])
    assert body["deadline"] == pytest.approx(20000 - ev["elapsed"])
    read_instance(body)  # a valid POST /v1/plans body


def test_no_events_at_time_zero_gives_the_original_problem() -> None:
    """Property: re-planning at elapsed 0 with nothing reported plans the same batch on the
    same farm, so the plan equals the original one."""
    req = studio_request(3)
    orig = solve(read_instance(req), "longest_first")
    out = replan_bodies(req, orig.to_dict(), {"elapsed": 0})
    assert out.makespan == orig.makespan
    assert np.array_equal(out.schedule.node_of, orig.schedule.node_of)


def test_bad_events_are_named_by_pointer() -> None:
    """Unknown jobs, a job running twice, two jobs on one node and a finished job also
    running are refused with JSON Pointers into the events body."""
    req = studio_request(4, n=6)
    res = solve(read_instance(req), "longest_first").to_dict()
    ev = {
        "elapsed": 100,
        "finished": ["nope", "ep4_sh000"],
        "running": [
            {"job": "ep4_sh000", "node": "blade-00", "started_at": 0},
            {"job": "ep4_sh001", "node": "blade-01", "started_at": 0},
            {"job": "ep4_sh002", "node": "blade-01", "started_at": 10},
            {"job": "ep4_sh001", "node": "blade-02", "started_at": 0},
            {"job": "ep4_sh003", "node": "blade-99", "started_at": 0},
        ],
    }
    with pytest.raises(InvalidInstance) as err:
        replan_request(req, res, ev)
    pointers = {json_pointer(i.path) for i in err.value.issues}
    assert pointers == {
        "/finished/0",
        "/running/0/job",
        "/running/2/node",
        "/running/3/job",
        "/running/4/node",
    }
    with pytest.raises(InvalidInstance) as err:
        read_events({"elapsed": -1, "running": [{"job": "a", "node": "b", "started_at": 5}]})
    assert {json_pointer(i.path) for i in err.value.issues} == {"/elapsed", "/running/0/started_at"}


def test_losing_every_gpu_node_names_the_gpu_jobs() -> None:
    """When the lost nodes were the only ones providing a tag, the jobs left that need it
    are named (Infeasible, 422) at re-planning time."""
    req = studio_request(7, n=20)
    res = solve(read_instance(req), "longest_first").to_dict()
    gpu_jobs = sorted(j["id"] for j in req["jobs"] if j.get("requires"))
    assert gpu_jobs
    with pytest.raises(Infeasible) as err:
        replan_request(req, res, {"elapsed": 0, "lost_nodes": ["blade-00", "blade-01"]})
    assert sorted(err.value.jobs) == gpu_jobs
    assert json_pointer(err.value.issues[0].path) == "/lost_nodes"


def test_nothing_left_is_a_clear_error() -> None:
    """When every job is finished the request is refused (there is nothing to plan)."""
    req = studio_request(5, n=4)
    ev = {"elapsed": 10, "finished": [j["id"] for j in req["jobs"]]}
    with pytest.raises(InvalidInstance, match="nothing is left"):
        remaining_of(req, None, ev)


def test_cli_replan(tmp_path: Path, capsys: pytest.CaptureFixture[str]) -> None:
    """``spanwright replan`` prints the result object with --json (exit 0) and exits 2
    naming the field on bad events."""
    req = studio_request(6)
    res = solve(read_instance(req), "longest_first").to_dict()
    ev = events_at(req, res, 0.3 * res["makespan"], ["blade-05"])
    paths = []
    for name, obj in (("req", req), ("res", {"result": res}), ("ev", ev)):
        p = tmp_path / f"{name}.json"
        p.write_text(json.dumps(obj))
        paths.append(str(p))
    assert main(["replan", *paths, "--json"]) == 0
    out = json.loads(capsys.readouterr().out)
    assert out["replan"]["lost_nodes"] == ["blade-05"]
    assert out["lower_bound"] <= out["makespan"]
    (tmp_path / "ev.json").write_text(json.dumps({"elapsed": "soon"}))
    assert main(["replan", *paths]) == 2
    assert "/elapsed" in capsys.readouterr().err
