"""``/v1/sizings`` through the shared job machinery (fakeredis, embedded worker).

The worked example is checked by hand: jobs of 3600, 1800 and 1800 s with a 3600 s
deadline need 2 nodes (7200 s of work over 3600 s per node is 2, the total-work bound;
{3600} and {1800, 1800} is a plan with 2 nodes).
"""

from __future__ import annotations

import math
from typing import Any

from scipy import stats

from tests.service.conftest import PRICED_SIZING

EXAMPLE = PRICED_SIZING  # the hand-checked case (tests/service/conftest.py)


def test_sizing_answers_the_fewest_nodes(client: Any) -> None:
    """201 within ``Prefer: wait`` with nodes_needed == nodes_lower_bound == 2 (hand-checked)."""
    r = client.post("/v1/sizings", json=EXAMPLE, headers={"Prefer": "wait=5"})
    assert r.status_code == 201, r.get_json()
    assert r.headers["Location"].startswith("/v1/sizings/")
    res = r.get_json()["result"]
    assert (res["nodes_needed"], res["nodes_lower_bound"], res["proven_optimal"]) == (2, 2, True)
    assert any(row["nodes"] == 2 and row["meets_deadline"] for row in res["curve"])
    listed = client.get("/v1/sizings").get_json()["items"]
    assert listed[0]["summary"]["nodes_needed"] == 2
    assert client.get("/v1/plans").get_json()["items"] == []  # kinds are separate


def test_job_longer_than_the_deadline_is_a_422_naming_it(client: Any) -> None:
    """The contract: no node count can help, so the request is refused, naming the job."""
    body = {**EXAMPLE, "jobs": [*EXAMPLE["jobs"], {"id": "lh_sq030_sim", "duration": 5000}]}
    r = client.post("/v1/sizings", json=body)
    assert r.status_code == 422 and r.mimetype == "application/problem+json"
    doc = r.get_json()
    assert doc["jobs"] == ["lh_sq030_sim"]
    assert doc["errors"][0]["pointer"] == "/jobs/3/duration"


def test_sizing_shape_errors(client: Any) -> None:
    """Unknown fields (a plan's ``node_count``) and a missing deadline are pointed at."""
    r = client.post("/v1/sizings", json={"jobs": EXAMPLE["jobs"], "node_count": 4})
    pointers = {e["pointer"] for e in r.get_json()["errors"]}
    assert r.status_code == 422 and pointers == {"/node_count", "/deadline"}


def test_sizing_cancel_and_etag(idle_app: Any) -> None:
    """DELETE and If-None-Match work for sizings exactly as for plans."""
    c = idle_app.test_client()
    r = c.post("/v1/sizings", json=EXAMPLE)
    assert r.status_code == 202
    loc, tag = r.headers["Location"], r.headers["ETag"]
    assert c.get(loc, headers={"If-None-Match": tag}).status_code == 304
    assert c.delete(loc).get_json()["status"] == "cancelled"


# -- estimate spread and sizing to a confidence (issue 10) ----------------------------------
def wait_for(client: Any, body: dict[str, Any]) -> dict[str, Any]:
    """POST a sizing and return its finished status document."""
    r = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=5"})
    assert r.status_code == 201, r.get_json()
    doc: dict[str, Any] = r.get_json()
    assert doc["status"] == "done", doc["error"]
    return doc


def test_zero_spread_confidence_is_exact_and_two_nodes_reach_any_q(client: Any) -> None:
    """Zero spread (the contract): the answer's plan meets the deadline in every sample, P =
    1 exactly and p50 = p90 = p99 = its makespan; for q = 0.9 the confidence answer is 2
    nodes by hand (one node takes 7200 s > 3600 s, P = 0; two run {3600} and
    {1800, 1800}, 3600 s, P = 1)."""
    body = {**EXAMPLE, "spread": 0.0, "confidence": 0.9, "confidence_samples": 20}
    res = wait_for(client, body)["result"]
    conf = res["confidence"]
    assert conf["deadline_probability"] == 1.0 and conf["interval"] == [1.0, 1.0]
    assert conf["makespan_p50"] == conf["makespan_p90"] == conf["makespan_p99"] == res["makespan"]
    assert conf["dynamic"]["deadline_probability"] == 1.0 and conf["samples"] == 20
    target = res["confidence_sizing"]
    assert target["nodes_needed"] == 2 and target["confidence"] == 0.9
    assert target["chosen"]["deadline_probability"] == 1.0
    assert (target["fewer"]["nodes"], target["fewer"]["deadline_probability"]) == (1, 0.0)


def test_no_spread_inputs_no_confidence(client: Any) -> None:
    """Without duration_p90, spread, confidence_samples or confidence: no simulation."""
    res = wait_for(client, EXAMPLE)["result"]
    assert "confidence" not in res and "confidence_sizing" not in res


def test_seeded_sizing_confidence_repeats_through_http(client: Any) -> None:
    """Two sizings of one body with one seed give the same confidence fields exactly."""
    body = {**EXAMPLE, "deadline": 6000, "spread": 0.3, "confidence": 0.8}
    body.update(confidence_samples=400, confidence_seed=9)
    a, b = wait_for(client, body)["result"], wait_for(client, body)["result"]
    assert a["confidence"] == b["confidence"]
    assert a["confidence_sizing"] == b["confidence_sizing"]


BAD_SPREAD: list[tuple[dict[str, Any], set[str]]] = [
    ({"spread": -0.1}, {"/spread"}),
    ({"spread": 10.5}, {"/spread"}),
    ({"spread": "0.2"}, {"/spread"}),
    ({"confidence_samples": 5}, {"/confidence_samples"}),
    ({"confidence_samples": 100_001}, {"/confidence_samples"}),
    ({"confidence_samples": 20.5}, {"/confidence_samples"}),
    ({"confidence_seed": -1}, {"/confidence_seed"}),
    ({"confidence_seed": 2**32}, {"/confidence_seed"}),
]


def test_spread_inputs_are_checked_as_for_plans(client: Any) -> None:
    """The same bad spread inputs are refused with the same pointers by /v1/plans and
    /v1/sizings (the plan's rules are the reference), including the samples x jobs cap
    (2,001 jobs x 100,000 samples is above 2e8 draws, and above this test's job limit)."""
    many = [{"id": f"lh_f{i:04d}", "duration": 60} for i in range(2001)]
    cases = [*BAD_SPREAD, ({"jobs": many, "confidence_samples": 100_000}, set())]
    for extra, pointers in cases:
        plan = client.post("/v1/plans", json={"jobs": EXAMPLE["jobs"], "node_count": 2, **extra})
        size = client.post("/v1/sizings", json={**EXAMPLE, **extra})
        assert plan.status_code == size.status_code == 422, extra
        got = {e["pointer"] for e in size.get_json()["errors"]}
        assert got == {e["pointer"] for e in plan.get_json()["errors"]}, extra
        assert pointers <= got, extra
    assert "/confidence_samples" in got and "/jobs" in got


def test_confidence_out_of_range_or_out_of_reach_is_a_422(client: Any) -> None:
    """q must lie strictly between 0 and 1; with spread, N samples cannot show a q above
    the Wilson limit N / (N + 1.96^2) (100 samples: 0.963), so 0.99 is refused at
    /confidence_samples; zero spread shows any q < 1."""
    for q in (0, 1, 1.5, True):
        r = client.post("/v1/sizings", json={**EXAMPLE, "confidence": q})
        assert r.status_code == 422 and r.mimetype == "application/problem+json"
        assert [e["pointer"] for e in r.get_json()["errors"]] == ["/confidence"], q
    body = {**EXAMPLE, "spread": 0.2, "confidence": 0.99, "confidence_samples": 100}
    r = client.post("/v1/sizings", json=body)
    assert r.status_code == 422
    assert [e["pointer"] for e in r.get_json()["errors"]] == ["/confidence_samples"]
    assert wait_for(client, {**body, "spread": 0.0})["result"]["confidence_sizing"]


def test_a_job_that_alone_misses_q_is_a_422_naming_it(client: Any) -> None:
    """A 3,600 s job (median) with p90 5,400 s and a 4,000 s deadline makes it alone with
    probability Phi(ln(4000/3600) z_0.9 / ln(1.5)) = 0.63 (lognormal cdf, by hand) < 0.9:
    no node count can reach q = 0.9, refused naming that job."""
    jobs = [dict(EXAMPLE["jobs"][0], duration_p90=5400), *EXAMPLE["jobs"][1:]]
    body = {**EXAMPLE, "jobs": jobs, "deadline": 4000, "confidence": 0.9}
    r = client.post("/v1/sizings", json=body)
    assert r.status_code == 422 and r.get_json()["type"] == "/problems/infeasible"
    doc = r.get_json()
    assert doc["jobs"] == ["lh_sq010_beauty"]
    errors = {e["pointer"]: e["detail"] for e in doc["errors"]}
    assert set(errors) == {"/confidence", "/jobs/0"}
    alone = stats.norm.cdf(math.log(4000 / 3600) * stats.norm.ppf(0.9) / math.log(1.5))
    assert errors["/jobs/0"].endswith(f"P = {alone:.4g}")


def test_confidence_needing_more_than_max_nodes_fails_with_a_pointer(client: Any) -> None:
    """When q needs C nodes, max_nodes = C - 1 (still enough for the deadline alone, even
    by first fit decreasing) lets the sizing run and then fails it with a problem pointing
    at /max_nodes."""
    jobs = [{"id": f"lh_sh{i:03d}", "duration": 600 + 37 * i} for i in range(60)]
    body = {"jobs": jobs, "deadline": 6000, "spread": 0.3, "confidence": 0.95}
    body["confidence_samples"] = 300
    res = wait_for(client, body)["result"]
    cap = res["confidence_sizing"]["nodes_needed"] - 1
    assert cap >= res["upper_bounds"]["ffd"]
    r = client.post("/v1/sizings", json={**body, "max_nodes": cap}, headers={"Prefer": "wait=5"})
    doc = r.get_json()
    assert doc["status"] == "failed" and doc["error"]["status"] == 422
    assert [e["pointer"] for e in doc["error"]["errors"]] == ["/max_nodes"]


def test_confidence_policy_is_the_requests_choice(client: Any) -> None:
    """Issue 19: the sizing to a confidence uses the dispatch policy the request names
    (``static`` by default, ``dynamic`` when asked) and says which it used; any other
    value is a 422 at /confidence_policy. Plumbing (the simulation itself is checked
    against independent recounts in tests/workers/test_confidence.py)."""
    body = {
        "jobs": [{"id": f"qv_sh{k:03d}", "duration": 600} for k in range(6)],
        "deadline": 1800,
        "spread": 0.1,
        "confidence": 0.8,
        "confidence_samples": 100,
    }
    for policy in ("static", "dynamic"):
        doc = client.post(
            "/v1/sizings",
            json={**body, "confidence_policy": policy},
            headers={"Prefer": "wait=20"},
        ).get_json()
        assert doc["status"] == "done", doc
        assert doc["result"]["confidence_sizing"]["policy"] == policy
    r = client.post("/v1/sizings", json={**body, "confidence_policy": "sometimes"})
    assert r.status_code == 422
    assert [e["pointer"] for e in r.get_json()["errors"]] == ["/confidence_policy"]
