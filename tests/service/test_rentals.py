"""Renting to a deadline through the API (issue 18): the contract's names, a plan that
meets the deadline exactly with rented nodes named after their kind, the caution beside
the cost, and refusals by pointer. The cheapest cost itself is checked against a HiGHS
MILP and brute force in tests/workers/test_rental.py; the frontier over ``deadlines``
(point 3) here, point by point, against that MILP (scipy.optimize.milp, HiGHS). Renting
under estimate spread (point 5): the answer's ``confidence`` block and
``confidence_rental`` are typed, the chosen plan meets its search deadline exactly, and a
q out of reach is a 422 by pointer (the probabilities themselves against closed forms and
brute force: tests/workers/test_rental_confidence.py)."""

from __future__ import annotations

import json
from collections.abc import Callable
from fractions import Fraction
from pathlib import Path
from typing import Any

import pytest

from service.cli import main
from service.reading import read_sizing_request
from tests.service.test_openapi_typed import check
from tests.workers.test_rental import milp_cost
from workers.planning.model import Node
from workers.planning.rental import CAUTION, Kind, RentalArgs, rental_instance
from workers.planning.usecases import FrontierArgs

RENTAL: dict[str, Any] = {
    "deadline": 3600,
    "billing": "minute",
    "farm": [{"id": "node-01", "free_at": 600}, {"id": "node-02", "speed": 2}],
    "kinds": [
        {"name": "cpu-small", "hour_cost": 0.4, "boot": 120, "max_count": 10},
        {"name": "cpu-large", "speed": 2, "hour_cost": 0.9, "boot": 180, "max_count": 5},
    ],
    "jobs": [
        {"id": f"tide_f{i:03d}", "duration": d}
        for i, d in enumerate([3000, 2800, 2500, 2400, 2000, 1800, 1500, 900])
    ],
    "time_budget": 1,
}


def test_rental_answer_meets_the_deadline_and_names_its_parts(client: Any) -> None:
    """Every job ends by the deadline (start + duration / speed, exactly, with the farm's
    speeds and the kinds' speeds and boots); the answer carries rent, cost,
    cost_lower_bound <= cost, and the caution that it is not a purchasing decision."""
    doc = client.post("/v1/sizings", json=RENTAL, headers={"Prefer": "wait=10"}).get_json()
    assert doc["status"] == "done", doc
    res = doc["result"]
    for key in ("farm", "kinds", "billing", "min_billed", "rent", "cost", "cost_lower_bound"):
        assert key in res
    assert res["cost_lower_bound"] <= res["cost"]
    assert "not a purchasing decision" in res["caution"]
    speed = {"node-01": 1.0, "node-02": 2.0}
    boot = {}
    for k in RENTAL["kinds"]:
        speed[k["name"]] = float(k.get("speed", 1.0))
        boot[k["name"]] = k["boot"]
    duration = {j["id"]: j["duration"] for j in RENTAL["jobs"]}
    seen = set()
    for row in res["plan"]:
        kind = next((k for k in boot if row["node"].startswith(k)), None)
        node_speed = speed[kind] if kind else speed[row["node"]]
        for job in row["jobs"]:
            seen.add(job["id"])
            start = Fraction(job["start"])
            assert start >= (boot[kind] if kind else (600 if row["node"] == "node-01" else 0))
            assert start + Fraction(duration[job["id"]]) / Fraction(node_speed) <= 3600
    assert seen == set(duration)


def test_rental_refuses_node_beside_kinds_by_pointer(client: Any) -> None:
    """``node`` is the single-kind sizing's; beside ``kinds`` it is a 422 at /node."""
    r = client.post("/v1/sizings", json={**RENTAL, "node": {"speed": 1}})
    assert r.status_code == 422
    assert [e["pointer"] for e in r.get_json()["errors"]] == ["/node"]


# -- the frontier: the cheapest cost at each of several deadlines (issue 18 point 3) -------

#: RENTAL at 15 min (no node finishes tide_f000's 3000 s: node-02 at speed 2 takes 1500 s),
#: 30 min, 45 min, 1 h 30 min and 2 h; the answer's 1 h is added to the frontier
DEADLINES = [5400, 900, 1800, 7200, 2700]

GPU = frozenset({"gpu"})
#: a second small case: tags, a priced farm node, min_billed, three kinds, 11 jobs
TAGGED: dict[str, Any] = {
    "deadline": 2400,
    "billing": "minute",
    "min_billed": 600,
    "farm": [{"id": "own-gpu", "provides": ["gpu"], "free_at": 300, "hour_cost": 0.5}],
    "kinds": [
        {"name": "cpu", "hour_cost": 0.3, "boot": 60, "max_count": 6},
        {"name": "cpu-fast", "speed": 2, "hour_cost": 0.7, "boot": 90, "max_count": 3},
        {"name": "gpu", "speed": 1.5, "provides": ["gpu"], "hour_cost": 1.2, "boot": 120,
         "max_count": 4},
    ],
    "jobs": [
        {"id": f"shot{i:02d}", "duration": d, **({"requires": ["gpu"]} if i % 4 == 0 else {})}
        for i, d in enumerate([1500, 1320, 1200, 1080, 960, 900, 840, 720, 600, 480, 300])
    ],
    "deadlines": [1200, 3600, 1800, 4800],
    "time_budget": 2,
}  # fmt: skip


def _by_hand(body: dict[str, Any], deadline: float) -> RentalArgs:
    """The request at ``deadline`` as core objects, built here from the body (not by the
    service's reader), for the MILP."""
    farm = [
        Node(n["id"], float(n.get("speed", 1)), frozenset(n.get("provides", [])),
             float(n.get("free_at", 0)))
        for n in body["farm"]
    ]  # fmt: skip
    kinds = tuple(
        Kind(k["name"], float(k.get("speed", 1)), frozenset(k.get("provides", [])),
             float(k["hour_cost"]), float(k.get("boot", 0)), int(k.get("max_count", 1000)))
        for k in body["kinds"]
    )  # fmt: skip
    inst = rental_instance(
        [float(j["duration"]) for j in body["jobs"]],
        farm,
        deadline,
        requires=[frozenset(j.get("requires", [])) for j in body["jobs"]],
    )
    prices = [n.get("hour_cost") for n in body["farm"]]
    return RentalArgs(
        inst,
        kinds,
        body["billing"],
        float(body.get("min_billed", 0)),
        tuple(prices) if any(p is not None for p in prices) else None,
    )


@pytest.mark.parametrize(
    "body", [{**RENTAL, "deadlines": DEADLINES}, TAGGED], ids=["rental", "tagged"]
)
def test_frontier_against_highs_per_deadline(client: Any, body: dict[str, Any]) -> None:
    """Each point of the frontier against the cheapest cost at its deadline by the
    assignment MILP of tests/workers/test_rental.py (scipy.optimize.milp, HiGHS):
    cost_lower_bound <= optimum <= cost, equal when proven; a deadline the MILP finds
    infeasible is a point without a plan. The optimum never rises with the deadline (a
    plan that meets one deadline meets every later one at the same bill); our own numbers
    are held to it only through the certificates: a later deadline's proven floor never
    passes an earlier deadline's cost. The answer's deadline is one point, with the
    answer's own values."""
    doc = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=20"}).get_json()
    assert doc["status"] == "done", doc
    res = doc["result"]
    points = res["frontier"]
    asked = sorted({*body["deadlines"], body["deadline"]})
    assert [pt["deadline"] for pt in points] == asked
    optimum = {d: milp_cost(_by_hand(body, d)) for d in asked}
    assert {pt["deadline"] for pt in points if pt["feasible"]} == {
        d for d, opt in optimum.items() if opt is not None
    }
    assert all(isinstance(pt["reason"], str) for pt in points if not pt["feasible"])
    feasible = [pt for pt in points if pt["feasible"]]
    for pt in feasible:
        opt = optimum[pt["deadline"]]
        assert opt is not None
        tol = 1e-6 * max(1.0, opt)
        assert pt["cost_lower_bound"] <= opt + tol <= pt["cost"] + 2 * tol, (pt, opt)
        assert not pt["proven_optimal"] or abs(pt["cost"] - opt) <= tol, (pt, opt)
    optima = [opt for _, opt in sorted(optimum.items()) if opt is not None]
    assert optima == sorted(optima, reverse=True)
    for early in feasible:
        for late in feasible:
            assert late["deadline"] <= early["deadline"] or (
                late["cost_lower_bound"] <= early["cost"] + 1e-9
            )
    (answer,) = [pt for pt in points if pt["answer"]]
    assert answer["deadline"] == body["deadline"]
    assert {k: answer[k] for k in ("rent", "cost", "cost_lower_bound", "proven_optimal")} == {
        "rent": res["rent"],
        "cost": res["cost"],
        "cost_lower_bound": res["cost_lower_bound"],
        "proven_optimal": res["proven_optimal"],
    }


def test_frontier_answer_is_typed(idle_app: Any, drain: Callable[[], None]) -> None:
    """A finished frontier (a deadline no plan meets among them) is a ``SizingStatus`` of
    openapi/openapi.yaml with every field declared (the strict copy of
    tests/service/test_openapi_typed.py)."""
    client = idle_app.test_client()
    queued = client.post("/v1/sizings", json={**RENTAL, "deadlines": DEADLINES})
    check("/v1/sizings", "post", queued)
    drain()
    doc = check("/v1/sizings/{id}", "get", client.get(queued.headers["Location"]))
    assert doc["status"] == "done"
    assert [pt["feasible"] for pt in doc["result"]["frontier"]] == [False] + [True] * 5


@pytest.mark.parametrize(
    ("change", "pointers"),
    [
        ({"deadlines": []}, ["/deadlines"]),
        ({"deadlines": None}, ["/deadlines"]),
        ({"deadlines": 3600}, ["/deadlines"]),
        ({"deadlines": [600.0 * (i + 1) for i in range(25)]}, ["/deadlines"]),
        ({"deadlines": [3600, -5]}, ["/deadlines/1"]),
        ({"deadlines": [3600, 0]}, ["/deadlines/1"]),
        ({"deadlines": [3600, "2h"]}, ["/deadlines/1"]),
        ({"deadlines": [3600, True]}, ["/deadlines/1"]),
        ({"deadlines": [1800, 2700, 1800]}, ["/deadlines/2"]),
        ({"deadlines": [1800], "spread": -1}, ["/spread"]),
    ],
)
def test_frontier_refusals_by_pointer(
    client: Any, change: dict[str, Any], pointers: list[str]
) -> None:
    """``deadlines``: 1 to 24 numbers of seconds (> 0), each once; anything else is a 422
    naming the place; a spread input out of range is refused as without a frontier."""
    r = client.post("/v1/sizings", json={**RENTAL, **change})
    assert r.status_code == 422, r.get_json()
    assert [e["pointer"] for e in r.get_json()["errors"]] == pointers


def test_frontier_is_for_rentals(client: Any) -> None:
    """A single-kind sizing (no ``farm``, no ``kinds``) with ``deadlines`` is a 422 at
    /deadlines: the frontier prices rentals."""
    body = {"jobs": RENTAL["jobs"], "deadline": 3600, "deadlines": [1800, 3600]}
    r = client.post("/v1/sizings", json=body)
    assert r.status_code == 422
    assert [e["pointer"] for e in r.get_json()["errors"]] == ["/deadlines"]


def test_frontier_on_a_clock_adds_the_answer_deadline() -> None:
    """``deadline_at`` 1 h after ``start_at`` is the answer's deadline, 3600 s; the
    frontier's points are the listed seconds with it added, in ascending order."""
    body = {k: v for k, v in RENTAL.items() if k != "deadline"}
    body |= {
        "start_at": "2026-12-04T05:00:00+01:00",
        "deadline_at": "2026-12-04T06:00:00+01:00",
        "deadlines": [7200, 1800],
    }
    args = read_sizing_request(body)
    assert isinstance(args, FrontierArgs)
    assert args.deadlines == (1800.0, 3600.0, 7200.0)
    assert args.rental.instance.deadline == 3600.0


def test_size_prints_the_frontier_as_a_table(
    tmp_path: Path, capsys: pytest.CaptureFixture[str]
) -> None:
    """``spanwright size FILE`` with ``deadlines``: one row per deadline in ascending
    order, the answer's (1 h) starred, the 15 min deadline without a plan and why; each
    other row's cost and floor are the HiGHS optimum at that deadline, proven (all five
    are small enough to prove within the file's 1 s); then the caution."""
    path = tmp_path / "rental.json"
    path.write_text(json.dumps({**RENTAL, "deadlines": DEADLINES}))
    assert main(["size", str(path)]) == 0
    lines = capsys.readouterr().out.splitlines()
    start = next(i for i, line in enumerate(lines) if line.startswith("frontier"))
    head, *rows = lines[start + 1 : start + 8]
    assert head.split() == ["deadline", "cost", "at", "least", "proven", "rent"]
    assert rows[0].split()[:5] == ["15m", "00s", "-", "-", "-"]
    assert "no plan: 5 job(s) are too long" in rows[0]
    expected = []
    for d in (1800, 2700, 3600, 5400, 7200):
        opt = milp_cost(_by_hand(RENTAL, d))
        assert opt is not None
        expected.append([f"{opt:,.2f}", f"{opt:,.2f}", "yes"])
    got = []
    for row in rows[1:]:
        words = row.split()
        at = words.index("yes") if "yes" in words else words.index("no")
        got.append(words[at - 2 : at + 1])
    assert got == expected
    assert [row.startswith("  *") for row in rows] == [False, False, False, True, False, False]
    assert lines[-1] == CAUTION


# -- renting under estimate spread (issue 18 point 5) -------------------------------------


def _ends_by(plan: list[dict[str, Any]], deadline: float, body: dict[str, Any]) -> set[str]:
    """The jobs of ``plan``, each checked to end by ``deadline`` exactly (start plus
    duration / speed, the farm's and the kinds' speeds and boots from ``body``)."""
    farm = {n["id"]: n for n in body["farm"]}
    kinds = {k["name"]: k for k in body["kinds"]}
    duration = {j["id"]: j["duration"] for j in body["jobs"]}
    seen = set()
    for row in plan:
        nd = farm.get(row["node"]) or kinds[row["node"].rsplit("-", 1)[0]]
        ready = nd.get("free_at", nd.get("boot", 0))
        for job in row["jobs"]:
            seen.add(job["id"])
            start = Fraction(job["start"])
            assert start >= ready
            end = start + Fraction(duration[job["id"]]) / Fraction(nd.get("speed", 1))
            assert end <= Fraction(deadline)
    return seen


@pytest.mark.parametrize("policy", ["static", "dynamic"])
def test_rental_to_a_confidence_is_typed(
    policy: str, idle_app: Any, drain: Callable[[], None]
) -> None:
    """A rental with ``spread`` and ``confidence: 0.9``: a ``SizingStatus`` with every field
    declared (the strict copy of tests/service/test_openapi_typed.py); the answer's plan
    has its ``confidence`` block (static, dynamic inside); ``confidence_rental`` is for
    the asked policy, its rule stated, its caution beside it, and its chosen plan runs
    every job and ends each by the chosen candidate's search deadline, which is at or
    before the deadline (exactly, by the speeds and boots of the body)."""
    client = idle_app.test_client()
    body = {
        **RENTAL,
        "spread": 0.1,
        "confidence": 0.9,
        "confidence_samples": 500,
        "confidence_policy": policy,
        "time_budget": 2,
    }
    queued = client.post("/v1/sizings", json=body)
    check("/v1/sizings", "post", queued)
    drain()
    doc = check("/v1/sizings/{id}", "get", client.get(queued.headers["Location"]))
    assert doc["status"] == "done", doc
    res = doc["result"]
    assert res["confidence"]["policy"] == "static"
    assert res["confidence"]["samples"] == 500
    assert "dynamic" in res["confidence"]
    cr = res["confidence_rental"]
    assert cr["policy"] == policy and cr["confidence"] == 0.9 and cr["met"] is True
    assert "Wilson" in cr["rule"] and "wall clock" in cr["caution"]
    chosen = cr["chosen"]
    assert chosen["passes"] is True and chosen["interval"][0] >= 0.9
    assert chosen["search_deadline"] <= RENTAL["deadline"]
    seen = _ends_by(cr["plan"], chosen["search_deadline"], RENTAL)
    assert seen == {j["id"] for j in RENTAL["jobs"]}
    assert cr["rent"] == chosen["rent"] and cr["cost"] == chosen["cost"]


def test_frontier_with_spread_simulates_the_answer(client: Any) -> None:
    """With ``deadlines`` and a spread, the answer's plan gets its ``confidence`` block
    beside the frontier; without a target there is no ``confidence_rental``."""
    body = {**RENTAL, "deadlines": [2700, 5400], "spread": 0.1, "confidence_samples": 200}
    doc = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=20"}).get_json()
    assert doc["status"] == "done", doc
    res = doc["result"]
    assert [pt["deadline"] for pt in res["frontier"]] == [2700, 3600, 5400]
    assert res["confidence"]["samples"] == 200
    assert "confidence_rental" not in res


@pytest.mark.parametrize(
    ("change", "pointers"),
    [
        # 8 jobs with a 200% spread: even alone on a speed-2 node the 3000 s job ends by
        # 3600 s with P of about 0.9, and together far below 0.99
        ({"spread": 2.0, "confidence": 0.99}, ["/confidence", "/jobs/0"]),
        ({"spread": 0.1, "confidence": 0.999, "confidence_samples": 100},
         ["/confidence_samples"]),
        ({"spread": 0.1, "confidence_policy": "queue"}, ["/confidence_policy"]),
    ],
)  # fmt: skip
def test_rental_confidence_refusals_by_pointer(
    client: Any, change: dict[str, Any], pointers: list[str]
) -> None:
    """A q no rental can reach (the closed-form product bound), a q the sample count
    cannot show, and an unknown policy are 422s naming the place, before any search."""
    r = client.post("/v1/sizings", json={**RENTAL, **change})
    assert r.status_code == 422, r.get_json()
    assert [e["pointer"] for e in r.get_json()["errors"]][: len(pointers)] == pointers
