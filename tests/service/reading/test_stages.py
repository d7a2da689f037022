"""Reading the stage-graph fields of a plan body (issue 17, point 1): ``after``, ``uses``,
``limits`` and ``slots`` keep those names; unknown ids, self-waits, cycles and unknown
limits are refused by field path, and no reader drops a graph silently. The expected
paths and cycles are worked out by hand from each small body."""

from __future__ import annotations

from typing import Any

import pytest

from service.csvio import read_jobs_csv, read_nodes_csv
from service.reading import read_plan_body, read_problem, read_sizing_request
from workers.planning import Instance, InvalidInstance
from workers.planning.stage_sizing import StageSizingArgs
from workers.planning.stages.problem import StageProblem


def body(jobs: list[dict[str, Any]], **extra: Any) -> dict[str, Any]:
    return {"jobs": jobs, "node_count": 2, **extra}


def unit_jobs(**fields: dict[str, Any]) -> list[dict[str, Any]]:
    """Jobs of 1 s named by the keywords, each with its graph ``fields`` (``after``,
    ``uses``), in the keywords' order."""
    return [{"id": name, "duration": 1, **more} for name, more in fields.items()]


def paths(exc: pytest.ExceptionInfo[InvalidInstance]) -> list[tuple[str | int, ...]]:
    return [i.path for i in exc.value.issues]


def test_plain_body_stays_a_batch_and_graph_fields_make_a_stage_problem() -> None:
    """No graph field: an ordinary Instance; a wait, a limit or a second slot: a graph."""
    plain = read_problem(body([{"id": "a", "duration": 3}]))
    assert isinstance(plain, Instance)
    graph = read_problem(
        {
            "jobs": [{"id": "a", "duration": 3}, {"id": "b", "duration": 2, "after": ["a"]}],
            "nodes": [{"id": "n1", "slots": 2}],
        }
    )
    assert isinstance(graph, StageProblem)
    assert (graph.arcs, graph.slots.tolist()) == (1, [2])


def test_cycle_is_refused_naming_its_jobs_in_order() -> None:
    """a waits for c, b for a, c for b: the cycle a -> b -> c -> a (in some rotation)."""
    jobs = unit_jobs(a={"after": ["c"]}, b={"after": ["a"]}, c={"after": ["b"]})
    with pytest.raises(InvalidInstance) as exc:
        read_problem(body(jobs))
    rotations = ("a -> b -> c -> a", "b -> c -> a -> b", "c -> a -> b -> c")
    assert any(r in exc.value.detail for r in rotations)
    assert sorted(paths(exc)) == [("jobs", 0, "after"), ("jobs", 1, "after"), ("jobs", 2, "after")]


def test_unknown_id_self_wait_and_unknown_limit_are_refused_by_path() -> None:
    """Each problem at its own field: the unknown id, the self-wait, the unknown limit."""
    jobs = unit_jobs(a={"after": ["nobody"]}, b={"after": ["b"]}, c={"uses": ["licence"]})
    with pytest.raises(InvalidInstance) as exc:
        read_problem(body(jobs))
    assert paths(exc) == [("jobs", 0, "after", 0), ("jobs", 1, "after", 0), ("jobs", 2, "uses", 0)]


def test_sizing_and_simulation_keep_the_graph() -> None:
    """A sizing body that uses a wait is sized as a graph, and a plan with spread inputs
    and a wait is read as a graph with its spread: never as independent jobs."""
    jobs = [{"id": "a", "duration": 5}, {"id": "b", "duration": 5, "after": ["a"]}]
    args = read_sizing_request({"jobs": jobs, "deadline": 100})
    assert isinstance(args, StageSizingArgs) and args.template.arcs == 1
    problem, spread = read_plan_body(body(jobs, spread=0.2))
    assert isinstance(problem, StageProblem) and problem.arcs == 1
    assert spread is not None and spread.spread == 0.2


def test_csv_reads_after_uses_and_slots() -> None:
    """CSV columns ``after`` and ``uses`` (ids or names separated by spaces or semicolons)
    and a farm's ``slots``."""
    jobs = read_jobs_csv("id,duration,after,uses\na,3,,\nb,2,a,lic\nc,1,a;b,lic gpu_pool\n")
    assert jobs[2] == {"id": "c", "duration": 1.0, "after": ["a", "b"], "uses": ["lic", "gpu_pool"]}
    assert "after" not in jobs[0]
    nodes = read_nodes_csv("id,slots\nn1,4\nn2,\n")
    assert nodes == [{"id": "n1", "slots": 4}, {"id": "n2"}]
