"""Renting to a deadline through the API (issue 18): the contract's names, a plan that
meets the deadline exactly with rented nodes named after their kind, the caution beside
the cost, and refusals by pointer. The cheapest cost itself is checked against a HiGHS
MILP and brute force in tests/workers/test_rental.py."""

from __future__ import annotations

from fractions import Fraction
from typing import Any

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
