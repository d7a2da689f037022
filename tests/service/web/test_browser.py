"""The pages in a real browser: Debian's headless Chromium driven through chromedriver.

Checks from issue 8: the plan page of a 200-job plan shows one bar per job and one row
per node, the deadline line sits where the time axis puts the deadline, the list page
links to the plan, a solving plan's page charts the incumbent and the bound and turns to
done by itself, and a sizing's page plots one point per curve row with the answer marked
and the cost shown. Screenshots are written to tests/artifacts/ as test artifacts; with
``SPANWRIGHT_UPDATE_SCREENSHOTS=1`` the four the README shows are also written to
service/web/screenshots/ (the one source of them).
"""

from __future__ import annotations

import json
import os
import shutil
import tempfile
import time
import urllib.error
import urllib.request
from collections.abc import Iterator
from contextlib import contextmanager
from dataclasses import replace
from pathlib import Path
from typing import Any

import pytest
from live import fine_grained, serve

from service.demo import demo_files
from service.settings import Settings

pytestmark = pytest.mark.slow

ROOT = Path(__file__).resolve().parents[3]
ARTIFACTS = ROOT / "tests" / "artifacts"
#: the README's screenshots, rewritten from these tests with SPANWRIGHT_UPDATE_SCREENSHOTS=1
SCREENSHOTS = ROOT / "service" / "web" / "screenshots"
README_SHOTS = frozenset(
    {"plan-page.png", "solving-page.png", "list-page.png", "sizing-page.png", "stage-page.png"}
)
CHROMIUM, DRIVER = shutil.which("chromium"), shutil.which("chromedriver")
WIDTH = 1180
#: the solving-page test needs a search that is still running seconds after it starts
SOLVING_BUDGET = 6.0


def _need_browser() -> None:
    try:
        import selenium  # noqa: F401
    except ImportError:
        missing = "selenium"
    else:
        missing = "" if CHROMIUM and DRIVER else "chromium/chromedriver"
    if missing:
        if os.environ.get("SPANWRIGHT_REQUIRE_SERVERS") == "1":
            pytest.fail(f"{missing} is required here (SPANWRIGHT_REQUIRE_SERVERS=1)")
        pytest.skip(f"{missing} not installed")


@pytest.fixture
def settings(settings: Settings) -> Settings:
    """The service tests' settings with room for a multi-second exact search and for the
    demo batches (the largest has 72 nodes)."""
    return replace(settings, max_time_budget=SOLVING_BUDGET, max_nodes=100)


@contextmanager
def chromium(javascript: bool = True) -> Iterator[Any]:
    """Headless Chromium through chromedriver (skips when either is missing); with
    ``javascript=False`` it runs no script, as a reader who turned JavaScript off."""
    _need_browser()
    from selenium import webdriver
    from selenium.webdriver.chrome.service import Service

    opts = webdriver.ChromeOptions()
    profile = tempfile.mkdtemp(prefix="sw-chromium-")
    for arg in (
        "--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic", "--no-first-run",
        "--disable-background-networking", "--disable-component-update", "--disable-sync",
        "--disable-dev-shm-usage", f"--user-data-dir={profile}", f"--window-size={WIDTH},1400",
        "--hide-scrollbars", "--force-device-scale-factor=1",
    ):  # fmt: skip
        opts.add_argument(arg)
    if not javascript:
        opts.add_experimental_option(
            "prefs", {"profile.managed_default_content_settings.javascript": 2}
        )
    opts.binary_location = CHROMIUM or ""
    driver = webdriver.Chrome(service=Service(DRIVER or ""), options=opts)
    driver.set_page_load_timeout(30)
    try:
        yield driver
    finally:
        driver.quit()
        shutil.rmtree(profile, ignore_errors=True)


@pytest.fixture
def browser() -> Iterator[Any]:
    with chromium() as driver:
        yield driver


@pytest.fixture
def url(app: Any) -> Iterator[str]:
    with serve(app) as base:
        yield base


def post(url: str, body: dict[str, Any], wait: int = 0, path: str = "/v1/plans") -> dict[str, Any]:
    req = urllib.request.Request(
        url + path,
        data=json.dumps(body).encode(),
        headers={
            "Content-Type": "application/json",
            **({"Prefer": f"wait={wait}"} if wait else {}),
        },
    )
    with urllib.request.urlopen(req, timeout=30) as resp:
        return dict(json.loads(resp.read()))


def get(url: str, path: str) -> dict[str, Any]:
    with urllib.request.urlopen(url + path, timeout=30) as resp:
        return dict(json.loads(resp.read()))


def cancel(url: str, path: str) -> None:
    """Ask the worker to stop (so a long search does not outlive its test); a plan that
    has finished meanwhile answers 409, which is fine here."""
    req = urllib.request.Request(url + path, method="DELETE")
    try:
        with urllib.request.urlopen(req, timeout=30) as resp:
            resp.read()
    except urllib.error.HTTPError as exc:
        if exc.code != 409:
            raise


def quillfern_vale(n: int = 200, m: int = 18) -> dict[str, Any]:
    """An invented 200-frame lighting batch of three sequences with a 3 h deadline."""
    jobs = [
        {"id": f"lh_sq{(i % 3 + 1) * 10:03d}_f{i:04d}", "duration": 300 + (71 * i) % 900,
         "group": f"sq{(i % 3 + 1) * 10:03d}"}
        for i in range(n)
    ]  # fmt: skip
    return {"jobs": jobs, "node_count": m, "deadline": 10_800, "name": "Quillfern Vale sq010-030"}


def shot(driver: Any, name: str, still: str = "true") -> Path:
    """Screenshot the whole page into the artifacts (and the README's folder when asked).

    The window is sized to the page so nothing is cut off. A page that refreshes itself
    may reload during the capture: a marker set on the document before and read after
    (with the JavaScript condition ``still``) tells, and the capture is taken again.
    """
    ARTIFACTS.mkdir(exist_ok=True)
    path = ARTIFACTS / name
    for _ in range(10):
        driver.set_window_size(WIDTH, 600)
        chrome = int(driver.execute_script("return window.outerHeight - window.innerHeight"))
        height = int(driver.execute_script("return document.documentElement.scrollHeight"))
        driver.set_window_size(WIDTH, min(height + chrome, 4000))
        driver.execute_script("window.swShot = 1")
        driver.save_screenshot(str(path))
        if driver.execute_script(
            f"return window.swShot === 1 && document.readyState === 'complete' && ({still})"
        ):
            break
    else:  # pragma: no cover - the page reloaded during every capture
        pytest.fail(f"no steady page to capture for {name}")
    if os.environ.get("SPANWRIGHT_UPDATE_SCREENSHOTS") == "1" and name in README_SHOTS:
        shutil.copyfile(path, SCREENSHOTS / name)
    return path


#: one chart's own axis (from its <svg> attributes), points, marks and the page status,
#: read in one script so a live or self-refreshing page cannot change between the reads
READ_CHART = """
const svg = document.querySelector(arguments[0]);
const status = document.querySelector('p.status');
const sentence = document.querySelector('.progress-sentence');
const out = {status: status ? status.textContent.trim() : null, found: !!svg,
             sentence: sentence ? sentence.textContent.trim() : null,
             points: [], xMarks: [], marks: [], legend: []};
if (!svg) return out;
const num = (el, name) => parseFloat(el.getAttribute(name));
for (const k of ['x0', 'x1', 'y0', 'y1', 'left', 'top', 'plot-width', 'plot-height'])
  out[k] = num(svg, 'data-' + k);
out.points = Array.from(svg.querySelectorAll('circle.point')).map(c => (
  {series: c.getAttribute('data-series'), cx: num(c, 'cx'), cy: num(c, 'cy')}));
out.xMarks = Array.from(svg.querySelectorAll('line.x-mark')).map(l => (
  {at: num(l, 'data-at'), x: num(l, 'x1'), label: l.nextElementSibling.textContent}));
out.marks = Array.from(svg.querySelectorAll('line.mark')).map(l => (
  {at: num(l, 'data-at'), y: num(l, 'y1'), label: l.nextElementSibling.textContent}));
out.legend = Array.from(svg.querySelectorAll('.legend-item text')).map(t => t.textContent);
return out;
"""


def read_chart(driver: Any, selector: str) -> dict[str, Any]:
    from selenium.common.exceptions import WebDriverException

    for _ in range(20):
        try:
            return dict(driver.execute_script(READ_CHART, selector))
        except WebDriverException:  # the page was reloading itself; read the new one
            time.sleep(0.1)
    raise AssertionError(f"could not read {selector}")


def at_x(chart: dict[str, Any], v: float) -> float:
    """Where the chart's own x axis puts value ``v``."""
    return float(
        chart["left"] + chart["plot-width"] * (v - chart["x0"]) / (chart["x1"] - chart["x0"])
    )


def at_y(chart: dict[str, Any], v: float) -> float:
    """Where the chart's own y axis puts value ``v`` (up is larger)."""
    frac = (v - chart["y0"]) / (chart["y1"] - chart["y0"])
    return float(chart["top"] + chart["plot-height"] * (1 - frac))


def series(chart: dict[str, Any], name: str) -> list[tuple[float, float]]:
    return [(p["cx"], p["cy"]) for p in chart["points"] if p["series"] == name]


def assert_placed(chart: dict[str, Any], name: str, values: list[tuple[float, float]]) -> None:
    """Series ``name`` has one point per value pair, each where the chart's axes put it."""
    drawn = series(chart, name)
    assert len(drawn) == len(values), name
    for (cx, cy), (x, y) in zip(drawn, values, strict=True):
        assert cx == pytest.approx(at_x(chart, x), abs=0.05)
        assert cy == pytest.approx(at_y(chart, y), abs=0.05)


def test_plan_page_bars_rows_and_deadline(browser: Any, url: str) -> None:
    """200 jobs on 18 nodes: 200 bars, 18 rows, every job id in the SVG; the deadline line
    at left + width * deadline / span (the chart's own axis, read from its attributes)."""
    doc = post(url, quillfern_vale(), wait=10)
    assert doc["status"] == "done"
    browser.get(f"{url}/plans/{doc['id']}")
    bars = browser.find_elements("css selector", "svg.timeline rect.job")
    rows = browser.find_elements("css selector", "svg.timeline g.node-row")
    assert len(bars) == 200 and len(rows) == 18
    ids = {b.get_attribute("data-job") for b in bars}
    assert ids == {j["id"] for j in quillfern_vale()["jobs"]}
    svg = browser.find_element("css selector", "svg.timeline")
    span = float(svg.get_attribute("data-span"))
    left = float(svg.get_attribute("data-left"))
    width = float(svg.get_attribute("data-plot-width"))
    line = browser.find_element("css selector", "svg.timeline line.deadline")
    assert float(line.get_attribute("x1")) == pytest.approx(left + width * 10_800 / span, abs=0.05)
    # and where the browser actually drew it, relative to the SVG's own box
    drawn = browser.execute_script(
        "const s = arguments[0].getBoundingClientRect(), l = arguments[1].getBoundingClientRect();"
        "return (l.left + l.width / 2) - s.left;",
        svg,
        line,
    )
    assert drawn == pytest.approx(left + width * 10_800 / span, abs=1.5)
    assert "certificate" in browser.find_element("css selector", ".certificate").get_attribute(
        "class"
    )
    assert shot(browser, "plan-page.png").stat().st_size > 10_000


def test_list_page_links_to_plan(browser: Any, url: str) -> None:
    """The three Quillfern Vale demo batches (service/demo/) each appear on the list page with
    the name they were submitted with, and a plan's link leads to that plan's page."""
    docs = [post(url, json.loads(p.read_text()), wait=10) for p in demo_files()]
    assert all(d["status"] == "done" for d in docs)
    browser.get(url + "/")
    rows = browser.find_elements("css selector", "table.plans tbody tr")
    assert len(rows) == len(docs)
    text = browser.find_element("css selector", "table.plans").text
    for p in demo_files():
        assert json.loads(p.read_text())["name"] in text
    browser.find_element("link text", docs[0]["id"]).click()
    assert browser.current_url.endswith(f"/plans/{docs[0]['id']}")
    assert browser.find_elements("css selector", "svg.timeline rect.job")
    browser.get(url + "/")
    shot(browser, "list-page.png")


def test_solving_page_turns_done_by_itself(browser: Any, url: str) -> None:
    """A plan opened while its exact search runs turns to done with no reload from the
    test (the page follows its event stream and loads the finished page at its end;
    without JavaScript its own refresh does it, test_live_pages.py)."""
    from selenium.common.exceptions import StaleElementReferenceException
    from selenium.webdriver.support.ui import WebDriverWait

    for seed in range(1, 5):
        doc = post(url, {**fine_grained(seed), "method": "exact", "time_budget": 2.0})
        for _ in range(200):
            if get(url, f"/v1/plans/{doc['id']}")["status"] != "queued":
                break
            time.sleep(0.02)
        browser.get(f"{url}/plans/{doc['id']}")
        status = browser.find_element("css selector", "p.status").text
        if status.startswith("solving"):
            break
    else:  # pragma: no cover - every seed proved optimal before the page opened
        pytest.fail("no plan was still solving when its page opened")
    # the page replaces itself every refresh: an element read mid-reload is read again
    WebDriverWait(
        browser, 30, poll_frequency=0.2, ignored_exceptions=[StaleElementReferenceException]
    ).until(lambda d: d.find_element("css selector", "p.status").text.startswith("done"))
    assert browser.find_elements("css selector", "svg.timeline rect.job")
    shot(browser, "solved-page.png")


def test_solving_page_charts_incumbent_and_bound(browser: Any, url: str, app: Any) -> None:
    """An exact search with a 6 s budget on a batch it cannot prove optimal in seconds,
    its page opened while it runs: once the page (which fetches its chart again while it
    follows the event stream) shows at least 6 progress points, each point of the
    best-makespan and the lower-bound lines sits where the chart's own axes put that
    point of the plan's stored progress history (the history the worker wrote; the
    page's points are its first entries, in order), the x axis runs from 0 to the time
    budget the JSON API reports, and the JSON API's latest progress is no worse than the
    page's last points (best makespan only falls, the bound only rises)."""
    from selenium.webdriver.support.ui import WebDriverWait

    store = app.extensions["spanwright"].store
    body = {"method": "exact", "time_budget": SOLVING_BUDGET}

    def enough(d: Any) -> dict[str, Any] | bool:
        chart = read_chart(d, "svg.chart.progress")
        if (chart["status"] or "").startswith(("done", "failed", "cancelled")):
            return {"over": True}  # proved optimal before the chart filled: next batch
        solving = (chart["status"] or "").startswith("solving")
        return chart if solving and len(series(chart, "lower bound")) >= 6 else False

    for seed in range(1, 5):
        doc = post(url, {**fine_grained(seed), **body})
        path = f"/v1/plans/{doc['id']}"
        browser.get(url + "/plans/" + doc["id"])
        chart = WebDriverWait(browser, 20, poll_frequency=0.1).until(enough)
        if "over" not in chart:
            break
    else:  # pragma: no cover - every seed was proved optimal within seconds
        pytest.fail("no exact search ran long enough to chart")
    try:
        history = store.progress_history("plan", doc["id"])
        latest = get(url, path)["progress"]
        shown = len(series(chart, "best makespan"))
        assert shown >= 6 and len(history) >= shown
        for name, key in (("best makespan", "best_makespan"), ("lower bound", "best_lower_bound")):
            assert_placed(chart, name, [(h["elapsed"], h[key]) for h in history[:shown]])
        assert (chart["x0"], chart["x1"]) == (0.0, latest["time_budget"]) == (0.0, SOLVING_BUDGET)
        last = history[shown - 1]
        assert latest["elapsed"] >= last["elapsed"]
        assert latest["best_makespan"] <= last["best_makespan"]
        assert latest["best_lower_bound"] >= last["best_lower_bound"]
        assert chart["legend"] == ["best makespan", "lower bound"]
        assert f"of a {SOLVING_BUDGET:g} s budget" in chart["sentence"]
        shot(browser, "solving-page.png", still="document.querySelector('p.status').textContent"
             ".startsWith('solving')")  # fmt: skip
    finally:
        cancel(url, path)


def test_sizing_page_curve_answer_and_cost(browser: Any, url: str) -> None:
    """A sizing of 120 Quillfern Vale frames for a 3 h deadline at 1.80 per node-hour: the
    makespan chart has one point per curve row of the JSON API's result, at that row's node
    count and plan makespan on the chart's own axes; the deadline line sits at the
    deadline; the answer (nodes_needed) is marked by a labelled line in both charts and by
    the table row tagged "answer"; the cost chart has one point per row at its cost, and
    the table shows every row's cost to the cent."""
    body = {
        "name": "Quillfern Vale sq010-030: how many nodes for 3 h",
        "jobs": quillfern_vale(120)["jobs"],
        "deadline": 10_800,
        "node_hour_cost": 1.8,
    }
    doc = post(url, body, wait=10, path="/v1/sizings")
    assert doc["status"] == "done"
    res = doc["result"]
    curve, need = res["curve"], res["nodes_needed"]
    assert len(curve) >= 3 and need in [c["nodes"] for c in curve]
    browser.get(f"{url}/sizings/{doc['id']}")
    chart = read_chart(browser, "svg.chart.curve")
    assert_placed(chart, "plan makespan", [(c["nodes"], c["makespan"]) for c in curve])
    assert_placed(chart, "lower bound", [(c["nodes"], c["lower_bound"]) for c in curve])
    (deadline,) = chart["marks"]
    assert deadline["y"] == pytest.approx(at_y(chart, 10_800), abs=0.05)
    cost = read_chart(browser, "svg.chart.cost")
    assert_placed(cost, "estimated cost", [(c["nodes"], c["cost"]) for c in curve])
    for c in (chart, cost):
        (mark,) = c["xMarks"]
        assert mark["x"] == pytest.approx(at_x(c, need), abs=0.05)
        assert mark["label"] == f"answer: {need} nodes"
    rows = browser.find_elements("css selector", "table.curve tbody tr")
    assert [r.get_attribute("data-nodes") for r in rows] == [str(c["nodes"]) for c in curve]
    answer = browser.find_elements("css selector", "table.curve tr.answer")
    assert [r.get_attribute("data-nodes") for r in answer] == [str(need)]
    assert "answer" in answer[0].text
    assert [r.find_elements("css selector", "td")[-1].text for r in rows] == [
        f"{c['cost']:,.2f}" for c in curve
    ]
    shot(browser, "sizing-page.png")


#: a stage plan's lanes, critical marks and limit panels as the browser laid them out
READ_STAGES = """
const box = el => el.getBoundingClientRect();
const rows = Array.from(document.querySelectorAll('svg.timeline g.node-row')).map(g => ({
  node: g.getAttribute('data-node'), lanes: g.querySelectorAll('rect.lane').length}));
const critical = Array.from(document.querySelectorAll('svg.timeline rect.critical')).map(
  r => r.getAttribute('data-job'));
const panels = Array.from(document.querySelectorAll('svg.limits g.limit')).map(g => ({
  limit: g.getAttribute('data-limit'), capacity: +g.getAttribute('data-capacity'),
  capTop: box(g.querySelector('line.capacity')).top,
  steps: Array.from(g.querySelectorAll('rect.usage')).map(r => ({
    count: +r.getAttribute('data-count'), top: box(r).top}))}));
return {rows, critical, panels};
"""


def test_stage_page_lanes_critical_path_and_limits(browser: Any, url: str) -> None:
    """Issue 17 point 6 in a real browser, on the demo's stage-graph batch: one lane per
    slot the request gave each node, a critical-path mark on each job of the result's
    critical path, and per limit a panel whose every drawn step sits no higher on screen
    than its capacity line, with counts never above the request's capacity."""
    (path,) = [p for p in demo_files() if "limits" in json.loads(p.read_text())]
    body = json.loads(path.read_text())
    doc = post(url, body, wait=10)
    assert doc["status"] == "done"
    browser.get(f"{url}/plans/{doc['id']}")
    seen = browser.execute_script(READ_STAGES)
    assert {r["node"]: r["lanes"] for r in seen["rows"]} == {
        n["id"]: n.get("slots", 1) for n in body["nodes"]
    }
    assert sorted(seen["critical"]) == sorted(doc["result"]["stages"]["critical_path"])
    assert {p["limit"]: p["capacity"] for p in seen["panels"]} == body["limits"]
    for panel in seen["panels"]:
        assert panel["steps"]
        for step in panel["steps"]:
            assert step["count"] <= panel["capacity"]
            assert step["top"] >= panel["capTop"] - 1.0
    shot(browser, "stage-page.png")


#: the layout facts of a page as the browser drew it, read in one script
READ_LAYOUT = """
const main = document.querySelector('main').getBoundingClientRect();
const boxes = sel => Array.from(document.querySelectorAll(sel)).map(e => {
  const b = e.getBoundingClientRect(); return {left: b.left, right: b.right}; });
const svg = document.querySelector('svg.timeline');
return {inner: window.innerWidth, scroll: document.documentElement.scrollWidth,
        main: main.width, rows: document.querySelectorAll('table tbody tr').length,
        svg: svg ? svg.getBoundingClientRect().left : null,
        labels: boxes('svg.timeline .node-label'),
        ticks: Array.from(document.querySelectorAll('svg .tick-label')).map(t => t.textContent),
        busy: document.querySelectorAll('svg.timeline rect.busy').length};
"""


def test_sizings_list_fluid_width_and_a_busy_farm(browser: Any, url: str) -> None:
    """Issue 19 points 3 and 7 in Chromium on a 1800 px window: the sizings list shows
    both sizings submitted; it and the plans list take the window's width (main as wide
    as the window, no sideways scroll); a busy farm's plan page draws its two busy
    blocks, every node label inside the chart (a long id cut, not clipped) and no tick
    label twice."""
    from tests.service.conftest import PRICED_SIZING
    from tests.service.test_rentals import RENTAL
    from tests.service.web.test_page_polish import BUSY_FARM

    for body in (PRICED_SIZING, RENTAL):
        assert post(url, body, wait=10, path="/v1/sizings")["status"] == "done"
    plan = post(url, BUSY_FARM, wait=10)
    browser.set_window_size(1800, 1000)
    for path, rows in (("/sizings", 2), ("/", 1)):
        browser.get(url + path)
        seen = browser.execute_script(READ_LAYOUT)
        assert seen["rows"] == rows
        assert seen["scroll"] <= seen["inner"]
        assert seen["main"] == pytest.approx(seen["inner"], abs=1)
    browser.get(url + "/sizings")
    shot_path = ARTIFACTS / "sizings-list.png"
    ARTIFACTS.mkdir(exist_ok=True)
    browser.save_screenshot(str(shot_path))
    browser.get(f"{url}/plans/{plan['id']}")
    seen = browser.execute_script(READ_LAYOUT)
    assert seen["busy"] == 2 and len(seen["labels"]) == 3
    assert all(box["left"] >= seen["svg"] for box in seen["labels"])
    assert seen["scroll"] <= seen["inner"]
    shot(browser, "busy-farm-page.png")
    ticks = [t for t in seen["ticks"] if t]
    assert len(set(ticks)) == len(ticks)
