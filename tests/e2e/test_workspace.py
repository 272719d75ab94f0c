"""The workspace page at / end to end, in headless Chromium from Debian's packages.

The service runs on loopback in a thread (``live_url``); Selenium drives /usr/bin/chromium
through /usr/bin/chromedriver (nothing is downloaded), with every host name but 127.0.0.1 mapped
to "not found" and the network log read back. Each view is opened at a laptop's viewport
(1366x900) and a phone's (390x844): it loads the service's own demo or example, computes, and
must show the numbers the JSON API answers to the same request; a bad cell gives a message naming
its row and column and the rule; the page is never wider than the screen; nothing is fetched from
another host. Full-page screenshots of every view are kept in test-artifacts/workspace/ (the path
is printed).

The reference numbers are the service's own JSON answers: this test checks the page against the
API, not the economics (tests/core and tests/api do that against published sources).
"""

from __future__ import annotations

import base64
import json
import time
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

import httpx
import pytest

from tests.conftest import ROOT, load_example
from tests.e2e.test_api_docs import (
    CHROMEDRIVER,
    CHROMIUM,
    OFFLINE,
    assert_nothing_left_the_machine,
    console_errors,
    requests_made,
)

webdriver = pytest.importorskip("selenium.webdriver")
from selenium.common.exceptions import StaleElementReferenceException  # noqa: E402
from selenium.webdriver.chrome.service import Service  # noqa: E402
from selenium.webdriver.common.by import By  # noqa: E402
from selenium.webdriver.common.keys import Keys  # noqa: E402
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402

ARTIFACTS = ROOT / "test-artifacts" / "workspace"
SIZES = {"laptop": (1366, 900), "phone": (390, 844)}


@dataclass(frozen=True)
class ViewCase:
    """One view: the request it starts from, where it sends it, the figures it shows (element
    id, how to read the same figure from the JSON answer, decimals) and a cell to spoil (grid
    number, column number, the column's title as the page names it)."""

    view: str
    path: str
    example: str
    figures: tuple[tuple[str, Any, int], ...]
    grid: int
    column: int
    column_title: str


def _formula(answer: dict[str, Any], name: str) -> dict[str, Any]:
    return next(f for f in answer["formulas"] if f["formula"] == name)


def _konus_summary(answer: dict[str, Any]) -> dict[str, Any]:
    return next(i for i in answer["summary"][0]["indices"] if i["index"] == "konus")


def _applied(answer: dict[str, Any], index: str) -> float:
    """The first clause's last uprating, as applied under `index`."""
    last = answer["clauses"][0]["upratings"][-1]
    return float(next(b["applied_percent"] for b in last["by_index"] if b["index"] == index))


def _paid_minus_konus(answer: dict[str, Any], index: str) -> float:
    """The first clause's money paid under `index` minus under the Konüs index, in all."""
    return float(next(m for m in answer["clauses"][0]["money"]
                      if m["index"] == index)["difference_vs_konus_total"])


def _range(ranges: list[dict[str, Any]], measure: str) -> dict[str, Any]:
    return next(r for r in ranges if r["measure"] == measure)


def _annual(answer: dict[str, Any]) -> float:
    return next(s["bias_pp_per_year"] for s in answer["annual_bias"]["by_series"]
                if s["series"] == "laspeyres" and s["kind"] == "fixed_base")


CASES = [
    ViewCase("comparison", "/v1/comparisons", "compare.wrenmouth_nested_ces.json", (
        ("konus-base", lambda a: a["konus"]["base"], 4),
        ("konus-current", lambda a: a["konus"]["current"], 4),
        ("laspeyres", lambda a: _formula(a, "laspeyres")["value"], 4),
        ("bias", lambda a: a["laspeyres_gap_points"], 3),
        ("cv", lambda a: a["compensation"]["compensating_variation"], 2),
        ("ev", lambda a: a["compensation"]["equivalent_variation"], 2)), 0, 1, "current price"),
    ViewCase("series", "/v1/index-series", "indexSeries.wrenmouth_monthly_ces.json", (
        ("series-konus-last", lambda a: a["konus"]["fixed_base"]["base"][-1], 3),
        ("series-laspeyres-last", lambda a: _formula(a, "laspeyres")["fixed_base"][-1], 3),
        ("series-annual-bias", _annual, 3)), 0, 0, "Rye loaf, 800 g"),
    ViewCase("households", "/v1/household-indices", "householdIndices.wrenmouth_deciles_ces.json", (
        ("hh-konus-democratic", lambda a: _konus_summary(a)["democratic"], 4),
        ("hh-konus-plutocratic", lambda a: _konus_summary(a)["plutocratic"], 4),
        ("hh-cv-percent", lambda a: a["summary"][0]["cv_percent_of_income"], 2)), 0, 1,
        "current price"),
    ViewCase("fits", "/v1/fits", "fitModel.wrenmouth_monthly_nested_ces.json", (
        ("fit-observations", lambda a: a["fit"]["observations"], 0),
        ("fit-iterations", lambda a: a["fit"]["iterations"], 0)), 0, 0, "Rye loaf, 800 g"),
    ViewCase("fitted", "/v1/fitted-comparisons", "fitAndCompare.wrenmouth_monthly_nested_ces.json", (
        ("fitted-konus", lambda a: a["comparison"]["konus"]["base"], 4),
        ("fitted-konus-low", lambda a: a["intervals"]["konus"]["base"]["low"], 4),
        ("fitted-konus-high", lambda a: a["intervals"]["konus"]["base"]["high"], 4),
        ("fitted-laspeyres-bias", lambda a: a["intervals"]["formulas"][0]["bias_points"]["estimate"],
         3)), 0, 1, "current price"),
    ViewCase("audits", "/v1/audits", "auditPublishedSeries.wrenmouth_monthly_bulletin.json", (
        ("audit-checked", lambda a: a["checked"], 0),
        ("audit-failed", lambda a: a["failed"], 0)), 1, 0, "Rye loaf, 800 g"),
    ViewCase("uprating", "/v1/uprating", "uprating.wrenmouth_pensions_april.json", (
        ("up-konus-applied", lambda a: _applied(a, "konus"), 2),
        ("up-index-applied", lambda a: _applied(a, "laspeyres"), 2),
        ("up-index-difference", lambda a: _paid_minus_konus(a, "laspeyres"), 2)), 1, 0,
        "Rye loaf, 800 g"),
    ViewCase("tree-uprating", "/v1/uprating/index-tree",
             "upratingFromIndexTree.wrenmouth_pension_from_the_tree.json", (
                 ("up-konus-applied", lambda a: _applied(a, "konus"), 2),
                 ("up-index-applied", lambda a: _applied(a, "lowe"), 2),
                 ("up-index-difference", lambda a: _paid_minus_konus(a, "lowe"), 2)), 2, 0, "2024-01"),
    ViewCase("index-tree", "/v1/index-tree", "indexTree.wrenmouth_coicop.json", (
        ("tree-index-last", lambda a: a["nodes"][0]["index"][-1], 3),
        ("tree-konus-last", lambda a: a["nodes"][0]["konus"][-1], 3),
        ("tree-bias-last", lambda a: a["nodes"][0]["bias_points"][-1], 3)), 1, 0, "2024-01"),
    ViewCase("fitted-families", "/v1/fitted-sensitivity",
             "fittedSensitivity.wrenmouth_quarterly_three_families.json", (
                 ("ff-konus-low", lambda a: _range(a["band"], "konus_base")["low"], 4),
                 ("ff-konus-high", lambda a: _range(a["band"], "konus_base")["high"], 4),
                 ("ff-laspeyres-low", lambda a: _range(a["band"], "laspeyres_bias_points")["low"], 3),
                 ("ff-laspeyres-high", lambda a: _range(a["band"], "laspeyres_bias_points")["high"], 3)),
             0, 1, "current price"),
    ViewCase("revealed", "/v1/revealed-preference", "revealedPreference.wrenmouth_household_diary.json", (
        ("rp-efficiency", lambda a: a["consistency"]["efficiency_index"], 4),
        ("rp-level", lambda a: a["bounds"]["efficiency_level"], 4)), 0, 0, "rye_loaf"),
    ViewCase("sensitivity", "/v1/sensitivity", "sensitivity.stone_geary_pensioner_frisch.json", (
        ("sens-band-low", lambda a: _range(a["band"], "konus_base")["low"], 4),
        ("sens-band-high", lambda a: _range(a["band"], "konus_base")["high"], 4),
        ("sens-grid-low", lambda a: _range(a["grid"]["range"], "konus_base")["low"], 4),
        ("sens-grid-high", lambda a: _range(a["grid"]["range"], "konus_base")["high"], 4)), 0, 1,
        "current price"),
]
IDS = [c.view for c in CASES]
#: The views added for uprating, the index tree, revealed preference and sensitivity.
NEW_VIEWS = ("uprating", "index-tree", "tree-uprating", "fitted-families", "revealed", "sensitivity")


@pytest.fixture(scope="module", params=list(SIZES))
def browser(request: pytest.FixtureRequest, tmp_path_factory: pytest.TempPathFactory) -> Iterator[Any]:
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    width, height = SIZES[request.param]
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--disable-extensions",
                 f"--window-size={width},{height}", OFFLINE):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"performance": "ALL", "browser": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    driver.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {
        "width": width, "height": height, "deviceScaleFactor": 1,
        "mobile": request.param == "phone"})
    downloads = tmp_path_factory.mktemp(f"downloads-{request.param}")
    driver.execute_cdp_cmd("Browser.setDownloadBehavior",
                           {"behavior": "allow", "downloadPath": str(downloads)})
    driver.size_name = request.param
    driver.downloads = downloads
    try:
        yield driver
    finally:
        driver.quit()


def wait(browser: Any, seconds: float) -> Any:
    """A wait that reads again an element the page has just redrawn."""
    return WebDriverWait(browser, seconds, ignored_exceptions=(StaleElementReferenceException,))


def open_view(browser: Any, live_url: str, view: str) -> None:
    browser.get("about:blank")
    browser.get_log("performance")
    browser.get_log("browser")
    browser.get(f"{live_url}/#{view}")
    wait(browser, 20).until(lambda d: d.find_elements(By.ID, "compute")
                                     and d.find_elements(By.CSS_SELECTOR, ".grid input"))


def compute(browser: Any) -> Any:
    browser.find_element(By.ID, "compute").click()
    return wait(browser, 60).until(
        lambda d: d.find_element(By.ID, "result") if d.find_element(By.ID, "result").is_displayed()
        else (d.find_element(By.ID, "error").is_displayed() and pytest.fail(
            d.find_element(By.ID, "error").text)))


def page_width(browser: Any) -> tuple[int, int]:
    return browser.execute_script(
        "return [document.documentElement.scrollWidth, window.innerWidth]")


def assert_fits_the_screen(browser: Any) -> None:
    """No sideways scrolling: the page is no wider than the screen. Under a phone's emulation a
    page wider than the screen widens the layout viewport itself (innerWidth grew to 707 px on
    a 390 px screen), so the page is held to the screen's width, and the viewport too."""
    width, viewport = page_width(browser)
    screen = SIZES[browser.size_name][0]
    assert width <= screen and viewport == screen, (
        f"the page is {width}px wide in a {viewport}px viewport on a {screen}px screen")


def in_view(browser: Any, element_id: str) -> bool:
    return bool(browser.execute_script("""
        const r = document.getElementById(arguments[0]).getBoundingClientRect();
        return r.top < window.innerHeight && r.bottom > 0;""", element_id))


def screenshot(browser: Any, name: str) -> Path:
    """The whole page, not just the viewport, as a PNG in test-artifacts/workspace/: the
    viewport is made as tall as the page for the picture (charts redraw at the new size), then
    put back."""
    width, height = SIZES[browser.size_name]
    full = int(browser.execute_cdp_cmd("Page.getLayoutMetrics", {})["cssContentSize"]["height"])
    metrics = {"width": width, "deviceScaleFactor": 1, "mobile": browser.size_name == "phone"}
    browser.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {**metrics, "height": full})
    time.sleep(0.5)
    shot = browser.execute_cdp_cmd("Page.captureScreenshot", {"format": "png"})
    browser.execute_cdp_cmd("Emulation.setDeviceMetricsOverride", {**metrics, "height": height})
    ARTIFACTS.mkdir(parents=True, exist_ok=True)
    path = ARTIFACTS / f"{name}-{browser.size_name}.png"
    path.write_bytes(base64.b64decode(shot["data"]))
    print(f"screenshot: {path}")
    return path


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_each_view_computes_its_example_and_shows_the_apis_numbers(
        live_url: str, browser: Any, case: ViewCase) -> None:
    open_view(browser, live_url, case.view)
    compute(browser)
    assert in_view(browser, "result"), "the result was not scrolled into view"
    sent = browser.execute_script("return window.dualcost.state.sent")
    # The form gives back the example as the service ships it: nothing added, nothing lost.
    expected = load_example(case.example)
    assert sent == expected
    answer = httpx.post(live_url + case.path, json=expected, timeout=60).json()
    for element_id, read, digits in case.figures:
        shown = browser.find_element(By.ID, element_id).text
        assert shown == f"{read(answer):.{digits}f}", element_id
    charts = browser.execute_script(
        "return [...document.querySelectorAll('#result canvas')].filter("
        "c => window.Chart.getChart(c)).length")
    assert charts >= 1
    assert_fits_the_screen(browser)
    assert_nothing_left_the_machine(requests_made(browser), live_url)
    entries = browser.execute_script(
        "return performance.getEntries().map(e => e.name).filter(n => /^https?:/.test(n))")
    host = urlsplit(live_url).netloc
    assert entries and all(urlsplit(n).netloc == host for n in entries), entries
    assert not console_errors(browser)  # a refusal under the page's policy would show here
    policy = httpx.get(live_url + "/").headers["content-security-policy"]
    assert "default-src 'self'" in policy and "connect-src 'self'" in policy
    screenshot(browser, case.view)


@pytest.mark.parametrize("case", CASES, ids=IDS)
def test_each_view_names_the_row_and_column_of_a_bad_cell(
        live_url: str, browser: Any, case: ViewCase) -> None:
    open_view(browser, live_url, case.view)
    grid = browser.find_elements(By.CSS_SELECTOR, ".grid")[case.grid]
    cell = grid.find_elements(By.CSS_SELECTOR, "tbody tr")[0].find_elements(
        By.CSS_SELECTOR, "input")[case.column]
    # A decimal comma, caught in the page with a plain message.
    cell.clear()
    cell.send_keys("2,5")
    browser.find_element(By.ID, "compute").click()
    error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                             if d.find_element(By.ID, "error").is_displayed() else None)
    assert "row 1" in error.text and f"'{case.column_title}'" in error.text
    assert "decimal comma" in error.text and "2.5" in error.text
    assert cell.get_attribute("aria-invalid") == "true"
    assert in_view(browser, "error")
    # A negative price, refused by the service, shown at the cell the person typed it in.
    cell.clear()
    cell.send_keys("-2.5")
    browser.find_element(By.ID, "compute").click()
    wait(browser, 30).until(lambda d: "-2,5" not in d.find_element(By.ID, "error").text
                                     and "decimal comma" not in d.find_element(By.ID, "error").text
                                     and d.find_element(By.ID, "error").is_displayed())
    text = browser.find_element(By.ID, "error").text
    assert "row 1" in text and f"'{case.column_title}'" in text, text
    assert "greater than" in text or "positive" in text, text
    assert cell.get_attribute("aria-invalid") == "true"
    assert not browser.find_element(By.ID, "result").is_displayed()
    assert_fits_the_screen(browser)
    screenshot(browser, f"{case.view}-error")


def test_the_demo_is_the_same_as_get_v1_demo(live_url: str, browser: Any) -> None:
    """'Wrenmouth demo' sends exactly GET /v1/demo's request and shows its answer's figures."""
    open_view(browser, live_url, "comparison")
    compute(browser)
    demo = httpx.get(live_url + "/v1/demo").json()
    assert browser.execute_script("return window.dualcost.state.sent") == demo["request"]
    assert browser.find_element(By.ID, "konus-base").text == f"{demo['result']['konus']['base']:.4f}"


def test_the_sensitivity_comes_from_the_service(live_url: str, browser: Any) -> None:
    """Each point of the σ control is the service's comparison at that point: the tree's σ
    scaled by 1 is the demo itself."""
    open_view(browser, live_url, "comparison")
    compute(browser)
    browser.find_element(By.ID, "sweep").click()
    rows = wait(browser, 120).until(
        lambda d: d.find_elements(By.CSS_SELECTOR, "#sweep-values tbody tr"))
    by_point = {r.find_elements(By.TAG_NAME, "td")[0].text: r for r in rows}
    assert "×1" in by_point and len(rows) == 6
    demo = httpx.get(live_url + "/v1/demo").json()["result"]
    cells = by_point["×1"].find_elements(By.TAG_NAME, "td")
    assert cells[1].text == f"{demo['konus']['base']:.4f}"
    assert cells[2].text == f"{demo['laspeyres_gap_points']:.3f}"
    assert_fits_the_screen(browser)
    screenshot(browser, "comparison-sensitivity")


def test_the_page_is_usable_from_the_keyboard(live_url: str, browser: Any) -> None:
    """Every control has a label; Enter on the focused button computes."""
    open_view(browser, live_url, "series")
    unlabelled = browser.execute_script("""
        return [...document.querySelectorAll('input, select, textarea')].filter(i =>
          !(i.labels && i.labels.length) && !i.getAttribute('aria-label')).map(i => i.outerHTML)""")
    assert unlabelled == []
    browser.execute_script("document.getElementById('compute').focus()")
    browser.switch_to.active_element.send_keys(Keys.ENTER)
    wait(browser, 60).until(lambda d: d.find_element(By.ID, "result").is_displayed())
    # Enter in a field computes too (the form's submit).
    browser.execute_script("window.dualcost.state.answer = null; "
                           "document.getElementById('result').hidden = true")
    browser.find_element(By.CSS_SELECTOR, ".grid input").send_keys(Keys.ENTER)
    wait(browser, 60).until(lambda d: d.find_element(By.ID, "result").is_displayed())


def test_a_model_outside_its_regular_region_is_flagged_beside_its_figures(
        live_url: str, browser: Any) -> None:
    """Translog with σ 3 far from its base point (the transit price more than quadrupled): a
    blocking warning names the item and the model's figures read "not a result"; Laspeyres,
    computed by hand from the shares, stays."""
    body = {"items": [{"id": "bread", "label": "Rye loaf"}, {"id": "transit", "label": "Transit pass"},
                      {"id": "heating", "label": "Heating"}],
            "base": {"prices": {"bread": 2.40, "transit": 9, "heating": 38},
                     "shares": {"bread": 0.3, "transit": 0.3, "heating": 0.4}, "expenditure": 100},
            "current": {"prices": {"bread": 2.52, "transit": 40, "heating": 41}},
            "model": {"family": "translog", "sigma": 3}}
    open_view(browser, live_url, "comparison")
    browser.execute_script("document.getElementById('request-json').value = arguments[0]",
                           json.dumps(body))
    browser.execute_script("document.querySelector('details.advanced').open = true")
    browser.find_element(By.XPATH, "//button[text()='Use this JSON']").click()
    browser.find_element(By.ID, "compute").click()
    warning = wait(browser, 30).until(lambda d: d.find_elements(By.ID, "validity"))[0]
    assert "not results" in warning.text and "Transit pass (transit)" in warning.text
    for key in ("konus-base", "bias", "cv"):
        assert browser.find_element(By.ID, key).text == "not a result"
    lasp = 0.3 * 2.52 / 2.40 + 0.3 * 40 / 9 + 0.4 * 41 / 38
    assert browser.find_element(By.ID, "laspeyres").text == f"{lasp:.4f}"


def test_results_download_as_json_and_csv(live_url: str, browser: Any) -> None:
    """The JSON download is the answer; the CSV download is the service's CSV answer."""
    open_view(browser, live_url, "series")
    compute(browser)
    for kind in ("json", "csv"):
        target = browser.downloads / f"series.{kind}"
        target.unlink(missing_ok=True)
        browser.find_element(By.ID, f"download-{kind}").click()
        deadline = time.monotonic() + 20
        while not target.exists():
            assert time.monotonic() < deadline, f"no {kind} download"
            time.sleep(0.1)
        time.sleep(0.2)
    expected = httpx.post(live_url + "/v1/index-series", timeout=60,
                          json=load_example("indexSeries.wrenmouth_monthly_ces.json")).json()
    got = json.loads((browser.downloads / "series.json").read_text(encoding="utf-8"))
    assert got["formulas"] == expected["formulas"]
    header = (browser.downloads / "series.csv").read_text(encoding="utf-8").splitlines()[0]
    assert header.startswith("period")


def sent_and_answer(browser: Any, live_url: str, path: str) -> tuple[dict[str, Any], dict[str, Any]]:
    sent = browser.execute_script("return window.dualcost.state.sent")
    return sent, httpx.post(live_url + path, json=sent, timeout=60).json()


def upload(browser: Any, tmp_path: Path, name: str, text: str) -> None:
    path = tmp_path / name
    path.write_text(text, encoding="utf-8")
    browser.find_element(By.ID, "upload").send_keys(str(path))


def test_a_comparison_csv_fills_the_grid_and_computes(
        live_url: str, browser: Any, tmp_path: Path) -> None:
    open_view(browser, live_url, "comparison")
    upload(browser, tmp_path, "basket.csv", "item,label,base_price,current_price,base_quantity\n"
           "rye_loaf,Rye loaf,2.40,2.52,12\nferry_pass,Ferry pass,38,41,1\n"
           "flat_rent,Flat rent,610,634,1\n")
    wait(browser, 10).until(
        lambda d: len(d.find_elements(By.CSS_SELECTOR, ".grid tbody tr")) == 3)
    # The demo's tree names other items: the page says what it put in its place.
    assert "CES with σ 0.7" in browser.find_element(By.ID, "status").text
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/comparisons")
    assert sent["current"]["prices"] == {"rye_loaf": 2.52, "ferry_pass": 41, "flat_rent": 634}
    assert browser.find_element(By.ID, "konus-base").text == f"{answer['konus']['base']:.4f}"


@pytest.mark.parametrize(("text", "expected"), [
    ("item,base_price,current_price,base_quantity\nrye_loaf,2,40,2.52,12\n",
     ["row 2", "5 cells", "decimal comma"]),
    ("item;base_price;current_price;base_quantity\nrye_loaf;2.40;2,52;12\n",
     ["row 2", "column 'current_price'", "decimal comma", "2.52"]),
    ("item,base_price,current_price,base_quantity\nrye_loaf,2.40,cheap,12\n",
     ["row 2", "column 'current_price'", "'cheap' is not a number"]),
], ids=["comma-splits-a-cell", "semicolons-and-decimal-commas", "not-a-number"])
def test_a_bad_csv_is_refused_by_row_and_column(
        live_url: str, browser: Any, tmp_path: Path, text: str, expected: list[str]) -> None:
    open_view(browser, live_url, "comparison")
    upload(browser, tmp_path, "bad.csv", text)
    error = wait(browser, 10).until(lambda d: d.find_element(By.ID, "error")
                                             if d.find_element(By.ID, "error").is_displayed() else None)
    for part in expected:
        assert part in error.text, error.text
    assert "bad.csv" in error.text


def test_the_shipped_panel_csv_fills_the_series_grids_and_computes(
        live_url: str, browser: Any) -> None:
    """docs/examples/wrenmouth_panel.csv is the series example in long form."""
    upload_panel_and_compare(live_url, browser, ROOT / "docs/examples/wrenmouth_panel.csv")


def upload_panel_and_compare(live_url: str, browser: Any, path: Path) -> None:
    """Upload ``path`` (the series example's panel) into the series view, compute, and check
    the page sent the example's prices and quantities and shows the JSON API's last figure."""
    example = load_example("indexSeries.wrenmouth_monthly_ces.json")
    open_view(browser, live_url, "series")
    browser.find_element(By.ID, "upload").send_keys(str(path))
    wait(browser, 10).until(lambda d: d.execute_script(
        "return window.dualcost.state.scenario") == "")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-series")
    assert sent["prices"] == example["prices"] and sent["quantities"] == example["quantities"]
    last = answer["konus"]["fixed_base"]["base"][-1]
    assert browser.find_element(By.ID, "series-konus-last").text == f"{last:.3f}"


def test_the_shipped_bulletin_csv_fills_the_audit(live_url: str, browser: Any) -> None:
    """docs/examples/wrenmouth_published.csv is the audit example's bulletin and its base month."""
    open_view(browser, live_url, "audits")
    browser.find_element(By.ID, "upload").send_keys(
        str(ROOT / "docs/examples/wrenmouth_published.csv"))
    wait(browser, 10).until(lambda d: d.execute_script(
        "return window.dualcost.state.scenario") == "")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/audits")
    assert len(sent["published"]) == 11 and sent["published"][1]["decimals"] == 1
    assert browser.find_element(By.ID, "audit-checked").text == str(answer["checked"])
    assert len(browser.find_elements(By.CSS_SELECTOR, "#audit-table tbody tr")) == 11


def test_a_household_csv_fills_the_household_grid(
        live_url: str, browser: Any, tmp_path: Path) -> None:
    example = load_example("householdIndices.wrenmouth_deciles_ces.json")
    ids = [item["id"] for item in example["items"]]
    lines = [",".join(["household", "expenditure", "weight", *ids])]
    for h in example["households"][:4]:
        lines.append(",".join([h["id"], str(h["expenditure"]), str(h["weight"]),
                               *(str(h["shares"][i]) for i in ids)]))
    open_view(browser, live_url, "households")
    upload(browser, tmp_path, "households.csv", "\n".join(lines))
    wait(browser, 10).until(
        lambda d: len(d.find_elements(By.CSS_SELECTOR, ".grid")[1].find_elements(
            By.CSS_SELECTOR, "tbody tr")) == 4)
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/household-indices")
    assert sent["households"] == example["households"][:4]
    konus = next(i for i in answer["summary"][0]["indices"] if i["index"] == "konus")
    assert browser.find_element(By.ID, "hh-konus-democratic").text == f"{konus['democratic']:.4f}"


def test_a_fit_csv_in_long_form_fills_the_grids(
        live_url: str, browser: Any, tmp_path: Path) -> None:
    example = load_example("fitModel.wrenmouth_monthly_nested_ces.json")
    ids = [item["id"] if isinstance(item, dict) else item for item in example["items"]]
    lines = ["observation,item,price,expenditure"]
    for t, obs in enumerate(example["observations"]):
        for i, item in enumerate(ids):
            lines.append(f"{obs},{item},{example['prices'][t][i]},{example['expenditures'][t][i]}")
    open_view(browser, live_url, "fits")
    upload(browser, tmp_path, "budgets.csv", "\n".join(lines))
    wait(browser, 10).until(lambda d: d.execute_script(
        "return window.dualcost.state.scenario") == "")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/fits")
    assert sent["prices"] == example["prices"] and sent["expenditures"] == example["expenditures"]
    first = browser.find_element(By.CSS_SELECTOR, "#parameters-table tbody tr td:nth-child(2)")
    assert first.text == f"{answer['parameters'][0]['estimate']:.4f}"


def tree_sigma(browser: Any, group: str) -> Any:
    return browser.find_element(By.CSS_SELECTOR, f"input[aria-label='σ of {group}']")


def test_the_tree_editor_changes_a_groups_sigma(live_url: str, browser: Any) -> None:
    open_view(browser, live_url, "comparison")
    sigma = tree_sigma(browser, "food and drink")
    sigma.clear()
    sigma.send_keys("0.5")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/comparisons")
    assert sent["model"]["tree"]["children"][0] == {**load_example(
        "compare.wrenmouth_nested_ces.json")["model"]["tree"]["children"][0], "sigma": 0.5}
    assert browser.find_element(By.ID, "konus-base").text == f"{answer['konus']['base']:.4f}"


def test_a_bad_sigma_in_the_tree_is_named_by_its_group(live_url: str, browser: Any) -> None:
    open_view(browser, live_url, "comparison")
    sigma = tree_sigma(browser, "transport")
    sigma.clear()
    sigma.send_keys("-1")
    browser.find_element(By.ID, "compute").click()
    error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                             if d.find_element(By.ID, "error").is_displayed() else None)
    assert "Tree group 'transport', σ" in error.text, error.text
    assert sigma.get_attribute("aria-invalid") == "true"


def test_changing_the_family_starts_it_from_plain_values(live_url: str, browser: Any) -> None:
    from selenium.webdriver.support.ui import Select

    open_view(browser, live_url, "comparison")
    Select(browser.find_element(By.ID, "family")).select_by_value("stone_geary")
    wait(browser, 10).until(lambda d: not d.find_elements(By.CSS_SELECTOR, ".tree input"))
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/comparisons")
    assert sent["model"] == {"family": "stone_geary", "frisch": -2}
    assert browser.find_element(By.ID, "konus-current").text == f"{answer['konus']['current']:.4f}"


def test_the_family_sensitivity_compares_the_simple_families(live_url: str, browser: Any) -> None:
    """Varying the family: one comparison per simple family on the same basket, CES at σ 0.7
    (the demo's tree has no single σ)."""
    from selenium.webdriver.support.ui import Select

    open_view(browser, live_url, "comparison")
    compute(browser)
    Select(browser.find_element(By.ID, "sweep-kind")).select_by_value("family")
    browser.find_element(By.ID, "sweep").click()
    rows = wait(browser, 120).until(
        lambda d: d.find_elements(By.CSS_SELECTOR, "#sweep-values tbody tr"))
    by_point = {r.find_elements(By.TAG_NAME, "td")[0].text: r for r in rows}
    assert set(by_point) == {"cobb_douglas", "ces", "translog", "quadratic", "stone_geary"}
    body = {**load_example("compare.wrenmouth_nested_ces.json"),
            "model": {"family": "ces", "sigma": 0.7}}
    answer = httpx.post(live_url + "/v1/comparisons", json=body, timeout=60).json()
    assert by_point["ces"].find_elements(By.TAG_NAME, "td")[1].text == f"{answer['konus']['base']:.4f}"


def test_an_audit_flags_a_published_value_that_differs(live_url: str, browser: Any) -> None:
    """A published value two points off is flagged in the table and the chart's labels."""
    open_view(browser, live_url, "audits")
    value = browser.find_element(By.CSS_SELECTOR, "input[aria-label='Published values: 1, value']")
    value.clear()
    value.send_keys("103.2")
    compute(browser)
    flagged = browser.find_elements(By.CSS_SELECTOR, "#audit-table tr.flagged")
    assert len(flagged) == 1 and "DIFFERS" in flagged[0].text and "103.2" in flagged[0].text
    assert browser.find_element(By.ID, "audit-failed").text == "1"
    screenshot(browser, "audits-flagged")


def test_with_api_keys_the_page_sends_the_key_typed(browser: Any) -> None:
    """Where the service asks for a key, the page says so until one is typed, then works."""
    from dualcost.config import Settings
    from tests.conftest import EXAMPLES, running_service

    with running_service(Settings(examples_dir=EXAMPLES, api_keys=("wrenmouth-office",))) as url:
        browser.get("about:blank")
        browser.get(url + "/#comparison")
        error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                        if d.find_element(By.ID, "error").is_displayed() else None)
        assert "401" in error.text and "API key" in error.text
        key = browser.find_element(By.ID, "api-key")
        key.send_keys("wrenmouth-office", Keys.TAB)
        wait(browser, 20).until(lambda d: d.find_elements(By.CSS_SELECTOR, ".grid input"))
        compute(browser)
        assert browser.find_element(By.ID, "konus-base").text
        browser.execute_script("sessionStorage.clear()")


def test_a_rule_about_a_whole_row_names_the_row(live_url: str, browser: Any) -> None:
    """Shares that do not add up are a rule about a household's row: the row is named and its
    cells marked."""
    open_view(browser, live_url, "households")
    cell = browser.find_element(
        By.CSS_SELECTOR, "input[aria-label='Households: budget shares: decile_2, Rye loaf and other bread']")
    cell.clear()
    cell.send_keys("0.5")
    browser.find_element(By.ID, "compute").click()
    error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                    if d.find_element(By.ID, "error").is_displayed() else None)
    assert "Households: budget shares, row 2 (decile_2): " in error.text, error.text
    assert "sum to 1" in error.text
    row = cell.find_element(By.XPATH, "./ancestor::tr")
    marked = row.find_elements(By.CSS_SELECTOR, "input[aria-invalid='true']")
    assert len(marked) == len(load_example("householdIndices.wrenmouth_deciles_ces.json")["items"])


#: The view of each operation whose examples the page lists.
VIEW_OF = {"compare": ("comparison", "/v1/comparisons"), "indexSeries": ("series", "/v1/index-series"),
           "householdIndices": ("households", "/v1/household-indices"),
           "fitModel": ("fits", "/v1/fits"), "auditPublishedSeries": ("audits", "/v1/audits"),
           "fitAndCompare": ("fitted", "/v1/fitted-comparisons"),
           "uprating": ("uprating", "/v1/uprating"), "indexTree": ("index-tree", "/v1/index-tree"),
           "revealedPreference": ("revealed", "/v1/revealed-preference"),
           "sensitivity": ("sensitivity", "/v1/sensitivity"),
           "upratingFromIndexTree": ("tree-uprating", "/v1/uprating/index-tree"),
           "fittedSensitivity": ("fitted-families", "/v1/fitted-sensitivity")}
EXAMPLES = sorted(p.name for p in (ROOT / "openapi_examples").glob("*.json")
                  if p.name.split(".")[0] in VIEW_OF)


@pytest.mark.parametrize("example", EXAMPLES)
def test_every_example_round_trips_through_the_form(
        live_url: str, browser: Any, example: str) -> None:
    """Every example of every view (demand systems, utility formulas, AIDS, observed
    quantities, shares in percent, Stone-Geary series, household types by quarter, AIDS and LES
    fits...) goes through the form unchanged and is answered; a comparison shows the API's
    figures."""
    from selenium.webdriver.support.ui import Select

    operation, name = example.removesuffix(".json").split(".", 1)
    view, path = VIEW_OF[operation]
    open_view(browser, live_url, view)
    Select(browser.find_element(By.ID, "scenario")).select_by_value(f"example:{name}")
    browser.find_element(By.ID, "load").click()
    wait(browser, 10).until(lambda d: d.execute_script(
        "return window.dualcost.state.scenario") == f"example:{name}")
    # The grids show the example's numbers whether it keys vectors by item or lists them.
    empty = browser.execute_script(
        "return [...document.querySelectorAll('.grid')].filter(g => ![...g.querySelectorAll("
        "'input')].some(i => i.value !== '')).map(g => g.querySelector('h3').textContent)")
    assert empty in ([], ["Quantities by period"]), empty
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, path)
    assert sent == load_example(example)
    if view != "comparison":
        return
    lasp = next(f["value"] for f in answer["formulas"] if f["formula"] == "laspeyres")
    assert browser.find_element(By.ID, "laspeyres").text == f"{lasp:.4f}"
    konus = answer["konus"]["base"]
    shown = browser.find_element(By.ID, "konus-base").text
    assert shown == ("not a result" if konus is None else f"{konus:.4f}")


def test_the_tree_editor_adds_and_removes_groups(live_url: str, browser: Any) -> None:
    """A new subgroup of 'transport' takes the ferry pass; removing 'recreation' hands its items
    to the top group. The service computes the edited tree."""
    open_view(browser, live_url, "comparison")
    row = browser.find_element(
        By.XPATH, "//input[@aria-label='σ of transport']/ancestor::div[@class='tree-row']")
    row.find_element(By.XPATH, ".//button[text()='+ subgroup']").click()
    leaves = wait(browser, 10).until(lambda d: d.find_element(
        By.CSS_SELECTOR, "input[aria-label='items directly in new group']"))
    leaves.send_keys("ferry_pass")
    transport = browser.find_element(By.CSS_SELECTOR, "input[aria-label='items directly in transport']")
    transport.clear()
    transport.send_keys("bicycle_repair")
    recreation = browser.find_element(
        By.XPATH, "//input[@aria-label='σ of recreation']/ancestor::div[@class='tree-row']")
    recreation.find_element(By.XPATH, ".//button[text()='remove']").click()
    wait(browser, 10).until(lambda d: not d.find_elements(
        By.CSS_SELECTOR, "input[aria-label='σ of recreation']"))
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/comparisons")
    tree = sent["model"]["tree"]
    transport_group = next(g for g in tree["children"] if isinstance(g, dict) and g["name"] == "transport")
    assert transport_group["children"] == [
        "bicycle_repair", {"name": "new group", "sigma": 1, "children": ["ferry_pass"]}]
    assert tree["children"][-2:] == ["harbour_cinema", "lantern_festival"]
    assert browser.find_element(By.ID, "konus-base").text == f"{answer['konus']['base']:.4f}"


def test_the_services_error_about_an_uploaded_value_names_the_files_row(
        live_url: str, browser: Any, tmp_path: Path) -> None:
    """A negative price read from a file: the service refuses it by its JSON pointer; the page
    names the grid cell and the file's row and column it came from."""
    open_view(browser, live_url, "series")
    lines = (ROOT / "docs/examples/wrenmouth_panel.csv").read_text(encoding="utf-8").splitlines()
    period, item, price, quantity = lines[9].split(",")
    lines[9] = ",".join([period, item, "-" + price, quantity])
    upload(browser, tmp_path, "panel.csv", "\n".join(lines))
    wait(browser, 10).until(lambda d: d.execute_script("return window.dualcost.state.scenario") == "")
    browser.find_element(By.ID, "compute").click()
    error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                    if d.find_element(By.ID, "error").is_displayed() else None)
    assert f"row 2 ({period})" in error.text, error.text
    assert "(from panel.csv, row 10, column 'price')" in error.text, error.text


def test_a_warning_that_changes_a_figure_sits_beside_it(live_url: str, browser: Any) -> None:
    """With no current quantities the formula indices use the model's demands: the notice saying
    so is inside the bias chart's block, not only in the list at the end."""
    open_view(browser, live_url, "comparison")
    compute(browser)
    block = browser.find_element(By.XPATH, "//section[@data-chart='bias-chart']")
    warnings = [w.text for w in block.find_elements(By.CSS_SELECTOR, ".warning")]
    demo = httpx.get(live_url + "/v1/demo").json()["result"]
    expected = next(n["message"] for n in demo["notices"]
                    if n["code"] == "current_quantities_from_model")
    assert any(expected in w for w in warnings), warnings


def choose(browser: Any, select_id: str, text: str) -> None:
    from selenium.webdriver.support.ui import Select

    Select(browser.find_element(By.ID, select_id)).select_by_visible_text(text)


def table_cells(browser: Any, table_id: str) -> list[list[str]]:
    return browser.execute_script(
        "return [...document.querySelectorAll('#' + arguments[0] + ' tbody tr')].map("
        "r => [...r.querySelectorAll('th, td')].map(c => c.textContent.trim()))", table_id)


def test_the_sensitivity_control_asks_the_sweep_operation_once(live_url: str, browser: Any) -> None:
    """The comparison's σ control sends one POST /v1/sensitivity for all its points (no
    comparison per point), and its point ×1 is the demo's own figures."""
    open_view(browser, live_url, "comparison")
    compute(browser)
    browser.execute_script("performance.clearResourceTimings()")
    browser.find_element(By.ID, "sweep").click()
    wait(browser, 120).until(lambda d: d.find_elements(By.CSS_SELECTOR, "#sweep-values tbody tr"))
    asked = browser.execute_script(
        "return performance.getEntriesByType('resource').map(e => new URL(e.name).pathname)")
    assert asked.count("/v1/sensitivity") == 1 and "/v1/comparisons" not in asked, asked


def test_the_series_change_measures_follow_the_chosen_measure(live_url: str, browser: Any) -> None:
    """The change-measure selector redraws the table from the answer's changes: 12-month
    first, then the annual average changes, each the JSON answer's number."""
    open_view(browser, live_url, "series")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-series")
    rows = {(r["series"], r["kind"], r["standard"]): r for r in answer["changes"]["by_series"]}
    lasp = rows[("laspeyres", "fixed_base", None)]
    cells = table_cells(browser, "changes-chart-table")
    header = browser.execute_script(
        "return [...document.querySelectorAll('#changes-chart-table thead th')].map(c => c.textContent)")
    col = header.index("Laspeyres")
    assert cells[-1][col] == f"{lasp['twelve_month_percent'][-1]:.3f}"
    assert header[-1] == "Konüs (base standard)"
    konus = rows[("konus", "fixed_base", "base")]
    assert cells[-1][-1] == f"{konus['twelve_month_percent'][-1]:.3f}"
    choose(browser, "changes-chart-choice", "annual average over the previous year's, %")
    wait(browser, 10).until(lambda d: table_cells(d, "changes-chart-table")[0][0].isdigit())
    years = table_cells(browser, "changes-chart-table")
    first = lasp["annual"][0]
    assert years[0][0] == str(first["year"])
    shown = years[0][col]
    assert shown == ("" if first["change_percent"] is None else f"{first['change_percent']:.3f}")
    assert_fits_the_screen(browser)
    screenshot(browser, "series-changes")


def test_the_revealed_bounds_checkbox_shows_the_bracket_beside_the_model(
        live_url: str, browser: Any) -> None:
    """Ticked, the comparison asks for revealed_bounds and shows the model-free bracket and the
    model's K(u0) inside it; the series shows each period's bracket with the Konüs series."""
    open_view(browser, live_url, "comparison")
    choose(browser, "scenario", "Example: " + next(
        e["summary"] for n, e in httpx.get(live_url + "/openapi.json").json()["paths"][
            "/v1/comparisons"]["post"]["requestBody"]["content"]["application/json"][
            "examples"].items() if n == "wrenmouth_nested_ces_with_revealed_bounds"))
    browser.find_element(By.ID, "load").click()
    box = wait(browser, 10).until(lambda d: d.find_element(By.ID, "comparison-_revealed_bounds"))
    assert box.is_selected()
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/comparisons")
    assert sent["revealed_bounds"] is True
    bracket = answer["revealed_bounds"]
    assert browser.find_element(By.ID, "rb-lower").text == f"{bracket['lower']:.4f}"
    assert browser.find_element(By.ID, "rb-upper").text == f"{bracket['upper']:.4f}"
    assert browser.find_element(By.ID, "rb-konus").text == f"{bracket['konus_base']:.4f}"
    assert browser.find_element(By.ID, "rb-inside").text == ("yes" if bracket["konus_inside"] else "NO")
    assert browser.find_elements(By.XPATH, "//section[@data-chart='bracket-chart']")
    screenshot(browser, "comparison-revealed-bounds")

    open_view(browser, live_url, "series")
    browser.find_element(By.ID, "series-_revealed_bounds").click()
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-series")
    assert sent["revealed_bounds"] is True
    rows = table_cells(browser, "series-bounds-table")
    last = answer["revealed_bounds"]["rows"][-1]
    assert rows[-1][:3] == [last["period"], f"{last['lower']:.4f}", f"{last['upper']:.4f}"]
    assert rows[-1][5] == f"{last['konus_base']:.4f}"
    assert_fits_the_screen(browser)
    screenshot(browser, "series-revealed-bounds")


def test_a_clause_added_in_the_editor_is_computed_and_chosen(live_url: str, browser: Any) -> None:
    """'Add a clause' starts a twelve-month clause; the one typed (a cap of 2%) is sent and the
    clause chooser shows its upratings, capped, as the API answers them."""
    open_view(browser, live_url, "uprating")
    browser.find_element(By.XPATH, "//button[text()='Add a clause']").click()
    name = wait(browser, 10).until(lambda d: d.find_element(
        By.CSS_SELECTOR, "input[aria-label='Clauses: clause 3, name']"))
    name.send_keys("capped allowance")
    cap = browser.find_element(By.CSS_SELECTOR, "input[aria-label='Clauses: clause 3, cap %']")
    cap.send_keys("2")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/uprating")
    assert sent["clauses"][2] == {"name": "capped allowance", "measure": "twelve_month",
                                  "period_of_year": 9, "lag": 7, "cap": 2}
    choose(browser, "uprating-chart-choice", "capped allowance")
    wait(browser, 10).until(lambda d: len(table_cells(d, "uprating-chart-table")) == len(
        answer["clauses"][2]["upratings"]) * len(answer["indices"]))
    rows = table_cells(browser, "uprating-chart-table")
    first = answer["clauses"][2]["upratings"][0]["by_index"][0]
    assert rows[0][3] == f"{first['applied_percent']:.2f}" and first["applied_percent"] <= 2
    assert browser.find_element(By.ID, "uprating-caution").text.startswith("Caution.")
    # A bad lag is named by its clause row and column.
    lag = browser.find_element(By.CSS_SELECTOR, "input[aria-label='Clauses: clause 3, lag']")
    lag.clear()
    lag.send_keys("-1")
    browser.find_element(By.ID, "compute").click()
    error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                    if d.find_element(By.ID, "error").is_displayed() else None)
    assert "Clauses, row 3 (clause 3), column 'lag'" in error.text, error.text
    assert lag.get_attribute("aria-invalid") == "true"


def test_the_index_tree_folds_and_charts_a_chosen_node(live_url: str, browser: Any) -> None:
    """The tree table opens at the top groups and unfolds a group on request; the node chooser
    draws that node's index beside its Konüs index, as the API answers them."""
    open_view(browser, live_url, "index-tree")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-tree")
    visible = lambda d: [r.get_attribute("data-node") for r in d.find_elements(  # noqa: E731
        By.CSS_SELECTOR, "#tree-table tbody tr") if r.is_displayed()]
    top = [n["path"] for n in answer["nodes"] if n["depth"] <= 1]
    assert visible(browser) == top
    food = next(n for n in answer["nodes"] if n["depth"] == 1)
    button = browser.find_element(By.CSS_SELECTOR, f"button[aria-label='unfold {food['name']}']")
    button.send_keys(Keys.ENTER)
    children = [n["path"] for n in answer["nodes"] if n["parent"] == food["name"]]
    wait(browser, 5).until(lambda d: set(children) <= set(visible(d)))
    assert button.get_attribute("aria-expanded") == "true"
    choose(browser, "tree-node-chart-choice", f"· {food['name']}")
    wait(browser, 10).until(lambda d: table_cells(d, "tree-node-chart-table")[-1][1]
                            == f"{food['index'][-1]:.3f}")
    assert table_cells(browser, "tree-node-chart-table")[-1][2] == f"{food['konus'][-1]:.3f}"
    screenshot(browser, "index-tree-unfolded")


def test_the_revealed_view_lists_each_violation_with_its_cycle(live_url: str, browser: Any) -> None:
    """The household diary fails GARP: each violation's cycle of periods is listed, as the API
    gives it, and the verdict cards say FAILS."""
    open_view(browser, live_url, "revealed")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/revealed-preference")
    assert browser.find_element(By.ID, "rp-garp").text == "FAILS"
    rows = table_cells(browser, "rp-violations")
    assert [r[3] for r in rows] == [" → ".join(v["periods"]) for v in answer["consistency"]["violations"]]


@pytest.mark.parametrize("view", NEW_VIEWS)
def test_every_control_of_the_new_views_is_labelled(live_url: str, browser: Any, view: str) -> None:
    """The form's controls and the answer's choosers each carry a label."""
    open_view(browser, live_url, view)
    compute(browser)
    unlabelled = browser.execute_script("""
        return [...document.querySelectorAll('input, select, textarea, button')].filter(i =>
          !(i.labels && i.labels.length) && !i.getAttribute('aria-label')
          && !(i.tagName === 'BUTTON' && i.textContent.trim())).map(i => i.outerHTML)""")
    assert unlabelled == []


def _downloaded(browser: Any, name: str) -> str:
    target = browser.downloads / name
    target.unlink(missing_ok=True)
    browser.find_element(By.ID, f"download-{name.rsplit('.', 1)[1]}").click()
    deadline = time.monotonic() + 20
    while not target.exists() or not target.stat().st_size:
        assert time.monotonic() < deadline, f"no {name} download"
        time.sleep(0.1)
    time.sleep(0.2)
    return target.read_text(encoding="utf-8")


@pytest.mark.parametrize("case", [c for c in CASES if c.view in (*NEW_VIEWS, "fitted")],
                         ids=lambda c: c.view)
def test_the_new_views_download_json_and_the_services_csv(
        live_url: str, browser: Any, case: ViewCase) -> None:
    """JSON is the answer shown; CSV is the service's own CSV answer to the same request."""
    open_view(browser, live_url, case.view)
    compute(browser)
    body = load_example(case.example)
    shown = json.loads(_downloaded(browser, f"{case.view}.json"))
    assert shown == browser.execute_script("return window.dualcost.state.answer")
    csv = httpx.post(live_url + case.path, json=body, headers={"accept": "text/csv"}, timeout=60)
    assert _downloaded(browser, f"{case.view}.csv").splitlines() == csv.text.splitlines()


def test_a_quotes_csv_fills_the_index_tree(live_url: str, browser: Any, tmp_path: Path) -> None:
    """Quotes in long form (quote,aggregate,period,price; an empty price: not priced) rebuild
    the example's quotes; the tree, links and weights stay as they were."""
    example = load_example("indexTree.wrenmouth_coicop.json")
    lines = ["quote,aggregate,period,price"]
    for q in example["quotes"]:
        for t, p in enumerate(example["periods"]):
            price = q["prices"][t]
            lines.append(f"{q['id']},{q['aggregate']},{p},{'' if price is None else price}")
    open_view(browser, live_url, "index-tree")
    upload(browser, tmp_path, "quotes.csv", "\n".join(lines))
    wait(browser, 10).until(lambda d: d.execute_script("return window.dualcost.state.scenario") == "")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-tree")
    assert [(q["id"], q["aggregate"], q["prices"]) for q in sent["quotes"]] == [
        (q["id"], q["aggregate"], q["prices"]) for q in example["quotes"]]
    assert sent["tree"] == example["tree"] and sent["links"] == example["links"]
    assert browser.find_element(By.ID, "tree-index-last").text == f"{answer['nodes'][0]['index'][-1]:.3f}"


def test_a_panel_csv_fills_the_revealed_view(live_url: str, browser: Any, tmp_path: Path) -> None:
    """The monthly basket in long form (period,item,price,quantity) gives the example's panel;
    a decimal comma in it is named by the file's row."""
    example = load_example("revealedPreference.wrenmouth_monthly_basket.json")
    ids = [i["id"] for i in example["items"]]
    lines = ["period,item,price,quantity"]
    for t, p in enumerate(example["periods"]):
        lines += [f"{p},{i},{example['prices'][t][i]},{example['quantities'][t][i]}" for i in ids]
    open_view(browser, live_url, "revealed")
    upload(browser, tmp_path, "basket.csv", "\n".join(lines))
    wait(browser, 10).until(lambda d: d.execute_script("return window.dualcost.state.scenario") == "")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/revealed-preference")
    assert sent["prices"] == example["prices"] and sent["quantities"] == example["quantities"]
    assert browser.find_element(By.ID, "rp-garp").text == "passes"
    assert browser.find_element(By.ID, "rp-efficiency").text == (
        f"{answer['consistency']['efficiency_index']:.4f}")
    lines[3] = lines[3].rsplit(",", 1)[0] + ",41;5"
    upload(browser, tmp_path, "basket2.csv", "\n".join(lines))
    error = wait(browser, 10).until(lambda d: d.find_element(By.ID, "error")
                                    if d.find_element(By.ID, "error").is_displayed() else None)
    assert "basket2.csv, row 4, column 'quantity'" in error.text, error.text


def test_a_nodes_sigma_is_typed_in_the_classification_grid(live_url: str, browser: Any) -> None:
    """The classification grid writes a node's σ into the nested tree and the answer's node
    carries it; a negative σ is named by the node's row."""
    open_view(browser, live_url, "index-tree")
    food = load_example("indexTree.wrenmouth_coicop.json")["tree"]["children"][0]["name"]
    label = f"Classification: σ and elementary formula by node: · {food}, σ"
    cell = browser.find_element(By.CSS_SELECTOR, f"input[aria-label='{label}']")
    cell.clear()
    cell.send_keys("1.2")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-tree")
    assert sent["tree"]["children"][0]["sigma"] == 1.2
    node = next(n for n in answer["nodes"] if n["name"] == food)
    assert node["sigma"] == 1.2
    assert browser.find_element(By.ID, "tree-konus-last").text == f"{answer['nodes'][0]['konus'][-1]:.3f}"
    cell = browser.find_element(By.CSS_SELECTOR, f"input[aria-label='{label}']")
    cell.clear()
    cell.send_keys("-1")
    browser.find_element(By.ID, "compute").click()
    error = wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                    if d.find_element(By.ID, "error").is_displayed() else None)
    assert f"row 2 (· {food}), column 'σ'" in error.text, error.text
    assert cell.get_attribute("aria-invalid") == "true"


def load_named_example(browser: Any, name: str) -> None:
    choose(browser, "scenario", next(
        o.text for o in browser.find_elements(By.CSS_SELECTOR, "#scenario option")
        if o.get_attribute("value") == f"example:{name}"))
    browser.find_element(By.ID, "load").click()
    wait(browser, 10).until(lambda d: d.execute_script(
        "return window.dualcost.state.scenario") == f"example:{name}")


def test_the_band_across_models_and_fitted_sigmas_are_shown_as_answered(
        live_url: str, browser: Any) -> None:
    """The comparison's band across band_models beside its bracket, the series' band per
    period, and the index tree's fitted σ, each the JSON answer's numbers."""
    open_view(browser, live_url, "comparison")
    load_named_example(browser, "wrenmouth_nested_ces_inside_bracket_and_band")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/comparisons")
    assert sent == load_example("compare.wrenmouth_nested_ces_inside_bracket_and_band.json")
    k = _range(answer["band"]["ranges"], "konus_base")
    assert browser.find_element(By.ID, "band-low").text == f"{k['low']:.4f}"
    assert browser.find_element(By.ID, "band-high").text == f"{k['high']:.4f}"
    assert browser.find_element(By.ID, "rb-lower").text == f"{answer['revealed_bounds']['lower']:.4f}"
    screenshot(browser, "comparison-bracket-and-band")

    open_view(browser, live_url, "series")
    load_named_example(browser, "wrenmouth_monthly_ces_bracket_and_band")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-series")
    last = answer["band"]["rows"][-1]
    assert table_cells(browser, "series-band-chart-table")[-1][:3] == [
        last["period"], f"{last['konus_low']:.3f}", f"{last['konus_high']:.3f}"]

    open_view(browser, live_url, "index-tree")
    load_named_example(browser, "wrenmouth_fitted_sigma")
    compute(browser)
    sent, answer = sent_and_answer(browser, live_url, "/v1/index-tree")
    first = answer["sigma_fit"]["estimates"][0]
    assert table_cells(browser, "tree-sigma-chart-table")[0][:2] == [
        ", ".join(first["nodes"]), f"{first['sigma']:.3f}"]
    assert_fits_the_screen(browser)
    screenshot(browser, "index-tree-fitted-sigma")
