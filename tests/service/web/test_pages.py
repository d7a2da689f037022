"""The pages through the Flask test client: list links to plans, plan pages draw them,
a solving plan's page charts its progress, a sizing's page its curve, answer and cost."""

from __future__ import annotations

import re
import time
import xml.etree.ElementTree as ET
from html import unescape
from typing import Any

from scipy import stats

NS = {"s": "http://www.w3.org/2000/svg"}


def finished(client: Any, body: dict[str, Any]) -> dict[str, Any]:
    loc = client.post("/v1/plans", json=body, headers={"Prefer": "wait=10"}).headers["Location"]
    for _ in range(500):
        doc = client.get(loc).get_json()
        if doc["status"] == "done":
            return doc
        time.sleep(0.02)
    raise AssertionError("not done")


def body(n: int = 200, m: int = 16) -> dict[str, Any]:
    return {
        "jobs": [
            {"id": f"lh_sq{i // 40:02d}_f{i:04d}", "duration": 200 + (53 * i) % 700,
             "group": f"lh_sq{i // 40:02d}"}
            for i in range(n)
        ],
        "node_count": m,
        "deadline": 7200,
    }  # fmt: skip


def test_list_page_links_to_plan(client: Any) -> None:
    """GET / lists the caller's plans with a link to each plan page."""
    doc = finished(client, body(20, 3))
    html = client.get("/").get_data(as_text=True)
    assert f'href="/plans/{doc["id"]}"' in html


def test_list_page_names_plans_and_reads_times_in_utc(client: Any) -> None:
    """A listed plan shows the name and method it was submitted with, and its submission
    time as date, hours and minutes in UTC, the exact time from the JSON API kept in the
    <time> element's datetime attribute."""
    doc = finished(client, {**body(20, 3), "name": "Quillfern Vale sq040 layout"})
    html = client.get("/").get_data(as_text=True)
    assert "Quillfern Vale sq040 layout · longest_first" in html
    iso = doc["submitted_at"]
    assert iso.endswith("Z")
    assert f'<time datetime="{iso}">{iso[:10]} {iso[11:16]} UTC</time>' in html


def test_plan_page_has_every_job_and_node(client: Any) -> None:
    """The plan page's timeline has one bar per job (all 200 ids) and one row per node."""
    doc = finished(client, body())
    resp = client.get(f"/plans/{doc['id']}")
    assert resp.status_code == 200 and resp.mimetype == "text/html"
    html = resp.get_data(as_text=True)
    svg = html[html.index("<svg") : html.index("</svg>") + 6]
    root = ET.fromstring(svg)
    assert len(root.findall(".//s:rect[@class='job']", NS)) == 200
    assert len(root.findall(".//s:g[@class='node-row']", NS)) == 16
    assert "lower bound" in html and "deadline" in html
    assert "lh_sq00" in html  # legend text, not colour alone


def test_unknown_plan_page_is_404(client: Any) -> None:
    """An unknown id is a 404 problem, as in the API."""
    assert client.get("/plans/0123456789abcdef01234").status_code == 404


def svgs(html: str) -> dict[str, ET.Element]:
    """Every inline chart of a page, by its class."""
    out = {}
    for m in re.finditer(r"<svg .*?</svg>", html, re.S):
        root = ET.fromstring(m.group(0))
        out[root.get("class")] = root
    return out


def test_solving_plan_page_charts_its_stored_progress(idle_app: Any) -> None:
    """A plan a worker has claimed and written three progress points for (this test plays
    the worker through the store, with values written by hand): its page refreshes itself,
    charts one best-makespan and one lower-bound point per stored point, says where the
    search stands in words, and shows no timeline yet; all without a line of JavaScript."""
    c = idle_app.test_client()
    loc = c.post("/v1/plans", json={**body(20, 3), "time_budget": 2.0}).headers["Location"]
    rid = loc.rsplit("/", 1)[1]
    store = idle_app.extensions["spanwright"].store
    assert store.claim("plan", rid) is not None
    points = [(0.4, 5200.0, 4700.0), (0.8, 5000.0, 4700.0), (1.2, 4900.0, 4800.0)]
    for elapsed, ms, lb in points:
        point = {"elapsed": elapsed, "time_budget": 2.0, "best_makespan": ms,
                 "best_lower_bound": lb}  # fmt: skip
        store.publish_progress("plan", rid, point)
        store.append_progress_history("plan", rid, point)
    html = c.get(f"/plans/{rid}").get_data(as_text=True)
    assert '<meta http-equiv="refresh"' in html
    chart = svgs(html)["chart progress"]
    for series in ("best makespan", "lower bound"):
        drawn = chart.findall(f".//s:circle[@data-series='{series}']", NS)
        assert len(drawn) == len(points)
    assert "After 1.2 s of a 2 s budget, the best plan found finishes in 1h 21m 40s" in html
    assert "timeline" not in svgs(html)
    # no inline code: one static script follows the stream, and without JavaScript the
    # page still refreshes itself (HTML Living Standard: noscript, meta refresh)
    inline = [x for x in re.findall(r"<script\b[^>]*>(.*?)</script>", html, re.S) if x.strip()]
    assert inline == []
    assert '<noscript><meta http-equiv="refresh" content="2"></noscript>' in html


def test_sizing_page_has_every_curve_row_the_answer_and_the_cost(
    client: Any, priced_sizing: dict[str, Any]
) -> None:
    """The hand-checked sizing (conftest.py: 3600 + 1800 + 1800 s of jobs, 3600 s
    deadline: 2 nodes) at 1.80 per node-hour: the page has one table row and
    one point in each chart per curve row of the JSON API's result, the 2-node row tagged
    as the answer with its cost 3.60 (2 nodes x 1 h x 1.80), and both charts mark 2 nodes;
    server-rendered, with no JavaScript."""
    r = client.post("/v1/sizings", json=priced_sizing, headers={"Prefer": "wait=5"})
    assert r.status_code == 201, r.get_json()
    doc = r.get_json()
    curve = doc["result"]["curve"]
    resp = client.get(f"/sizings/{doc['id']}")
    assert resp.status_code == 200 and resp.mimetype == "text/html"
    html = resp.get_data(as_text=True)
    rows = re.findall(r'<tr(?: class="(answer)")? data-nodes="(\d+)">', html)
    assert [int(n) for _, n in rows] == [c["nodes"] for c in curve]
    assert [int(n) for a, n in rows if a] == [2]
    answer_row = html[
        html.index('class="answer"') : html.index("</tr>", html.index('class="answer"'))
    ]
    assert '<span class="tag">answer</span>' in answer_row and ">3.60<" in answer_row
    charts = svgs(html)
    for css, series in (("chart curve", "plan makespan"), ("chart cost", "estimated cost")):
        drawn = charts[css].findall(f".//s:circle[@data-series='{series}']", NS)
        assert len(drawn) == len(curve)
        labels = [t.text for t in charts[css].findall(".//s:text[@class='mark-label']", NS)]
        assert "answer: 2 nodes" in labels
    assert "estimated cost of 3.60" in html
    assert "<script" not in html


def confidence_card(html: str) -> str | None:
    """The text of the sizing page's confidence sentence, unescaped (None without one)."""
    m = re.search(r'<div class="card confidence">(.*?)</div>', html, re.S)
    return None if m is None else unescape(m.group(1))


def test_sizing_page_states_an_exact_confidence_and_the_nodes_for_q(
    client: Any, priced_sizing: dict[str, Any]
) -> None:
    """Zero spread on the hand-checked sizing: P(meet) is exactly 1 (the contract), and
    for q = 0.9 two nodes are needed, one node (7200 s > 3600 s) never making it; the
    page says so in one sentence. Without spread inputs there is no such sentence."""
    body = {**priced_sizing, "spread": 0.0, "confidence": 0.9, "confidence_samples": 20}
    doc = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=5"}).get_json()
    html = client.get(f"/sizings/{doc['id']}").get_data(as_text=True)
    assert confidence_card(html) == (
        "With no spread in the estimates, the 2-node plan meets the deadline in every run; "
        "to meet it with probability at least 90% (judged by the lower end of each node "
        "count's 95% interval) takes 2 nodes; with one node fewer it is only 0.00%."
    )
    assert "<script" not in html
    plain = client.post("/v1/sizings", json=priced_sizing, headers={"Prefer": "wait=5"})
    assert (
        confidence_card(client.get(f"/sizings/{plain.get_json()['id']}").get_data(as_text=True))
        is None
    )


def test_sizing_page_states_the_simulated_probability_with_its_interval(
    client: Any, priced_sizing: dict[str, Any]
) -> None:
    """With spread, the sentence gives the JSON result's P(meet deadline) and its 95%
    Wilson interval (recomputed here with scipy's binomtest) as percentages."""
    body = {**priced_sizing, "deadline": 4200, "spread": 0.3, "confidence_samples": 400}
    doc = client.post("/v1/sizings", json=body, headers={"Prefer": "wait=5"}).get_json()
    p = doc["result"]["confidence"]["deadline_probability"]
    ci = stats.binomtest(round(400 * p), 400).proportion_ci(0.95, method="wilson")
    text = confidence_card(client.get(f"/sizings/{doc['id']}").get_data(as_text=True))
    assert text == (
        f"With the estimates' spread, the {doc['result']['nodes_needed']}-node plan meets the "
        f"deadline in {100 * p:.2f}% of 400 simulated runs (95% interval "
        f"{100 * ci.low:.2f}% to {100 * ci.high:.2f}%)."
    )


def test_certificate_sentence_names_an_lp_refutation() -> None:
    """Nearly equal lengths, five per node (the Frangioni NU family): the optimum is proved
    by the LP bound of bin packing (Gilmore-Gomory 1961, made rigorous by Farley 1990), and
    the sentence says so instead of claiming a complete search."""
    import numpy as np

    from service.web.pages import certificate_sentence
    from workers.planning import Instance, solve

    rng = np.random.default_rng(33)
    p = [int(x) for x in rng.integers(90, 101, size=49)] + [10]
    result = solve(Instance.build(p, 10), "exact", time_budget=5).to_dict()
    assert result["proven_optimal"] and result["bound_source"] == "search"
    assert result["certificate"]["search"]["refuted_by"]["rule"] == "lp_farley"
    text = certificate_sentence(result)
    assert "linear-programming bound" in text and "complete search" not in text
    assert text.endswith("it is optimal.")
