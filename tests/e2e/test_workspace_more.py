"""The page's further views end to end (service/dualcost/web/views_more.js): saved runs, household
jobs for large files, fitted sensitivity across families and uprating on a tree's node.

Same set-up as tests/e2e/test_workspace.py (its browser fixture, at 1366x900 and 390x844, and its
checks, reused): each view starts from the service's own example, computes, and shows the numbers
the JSON API answers to the same request; a bad cell is named by its row and column; the page is
never wider than the screen; nothing is fetched from another host; screenshots go to
test-artifacts/workspace/. The reference numbers are the service's own JSON answers: this checks
the page against the API, not the economics (tests/api and tests/core do that).
"""

from __future__ import annotations

import time
from typing import Any
from urllib.parse import urlsplit

import httpx
import numpy as np
import pytest

from tests.conftest import load_example
from tests.e2e import test_workspace as tw
from tests.e2e.test_api_docs import assert_nothing_left_the_machine, console_errors, requests_made
from tests.e2e.test_workspace import ViewCase, browser  # noqa: F401  (the fixture, reused)

webdriver = pytest.importorskip("selenium.webdriver")
from selenium.webdriver.common.by import By  # noqa: E402


def _band(answer: dict[str, Any], measure: str) -> dict[str, Any]:
    return next(b for b in answer["band"] if b["measure"] == measure)


def _uprating(answer: dict[str, Any], index: str) -> float:
    first = answer["clauses"][0]["upratings"][0]
    return float(next(b["factor"] for b in first["by_index"] if b["index"] == index))




def _screen_width_kept(browser: Any) -> None:  # noqa: F811
    """The layout is as wide as the screen: under a phone's emulation a page wider than the
    screen widens the layout viewport itself (innerWidth), so scrollWidth <= innerWidth alone
    would not see it."""
    tw.assert_fits_the_screen(browser)


def _no_foreign_fetches_and_fits(browser: Any, live_url: str) -> None:  # noqa: F811
    _screen_width_kept(browser)
    assert_nothing_left_the_machine(requests_made(browser), live_url)
    host = urlsplit(live_url).netloc
    entries = browser.execute_script(
        "return performance.getEntries().map(e => e.name).filter(n => /^https?:/.test(n))")
    assert entries and all(urlsplit(n).netloc == host for n in entries), entries
    assert not console_errors(browser)


def _job_csv(example: dict[str, Any], extra: str = "") -> str:
    ids = [i["id"] for i in example["items"]]
    lines = [",".join(["household", "expenditure", "weight", *ids])]
    for h in example["households"]:
        lines.append(",".join([h["id"], str(h["expenditure"]), str(h["weight"]),
                               *(str(h["shares"][i]) for i in ids)]))
    return "\n".join(lines + ([extra] if extra else []))


def _job_by_api(live_url: str, spec: dict[str, Any], csv: str) -> dict[str, Any]:
    job = httpx.post(live_url + "/v1/household-jobs", json=spec, timeout=60).json()
    httpx.post(live_url + job["links"]["households"], content=csv, timeout=60,
               headers={"content-type": "text/csv", "accept": "text/csv"})
    return httpx.get(live_url + job["links"]["self"], timeout=60).json()


def test_a_household_job_runs_a_file_and_shows_the_apis_summaries(
        live_url: str, browser: Any, tmp_path: Any) -> None:  # noqa: F811
    """The example's deciles as a file with one bad row: the job skips it and lists its file line
    and column; the summaries are the job's as the API answers the same spec and file; the
    results download is the job's CSV."""
    example = load_example("householdIndices.wrenmouth_deciles_ces.json")
    csv = _job_csv(example, "bad_row,abc,1," + ",".join(["0.1"] * len(example["items"])))
    tw.open_view(browser, live_url, "household-jobs")
    path = tmp_path / "deciles.csv"
    path.write_text(csv, encoding="utf-8")
    browser.find_element(By.ID, "households-file").send_keys(str(path))
    tw.compute(browser)
    sent = browser.execute_script("return window.dualcost.state.sent")
    spec = {k: v for k, v in example.items() if k not in ("households", "band_models")}
    assert sent == spec
    job = _job_by_api(live_url, spec, csv)
    konus = next(i for i in job["summary"][0]["indices"] if i["index"] == "konus")
    assert browser.find_element(By.ID, "job-konus-democratic").text == f"{konus['democratic']:.4f}"
    assert browser.find_element(By.ID, "job-konus-plutocratic").text == f"{konus['plutocratic']:.4f}"
    assert browser.find_element(By.ID, "job-households").text == str(len(example["households"]))
    assert browser.find_element(By.ID, "job-skipped").text == "1"
    skipped = browser.find_element(By.CSS_SELECTOR, "#job-skipped-rows tbody tr").text
    assert "12" in skipped and "expenditure" in skipped and "not_a_number" in skipped, skipped
    assert "done" in browser.find_element(By.ID, "job-progress").text
    _no_foreign_fetches_and_fits(browser, live_url)
    tw.screenshot(browser, "household-jobs")
    target = browser.downloads / "household-jobs.csv"
    target.unlink(missing_ok=True)
    browser.find_element(By.ID, "download-csv").click()
    deadline = time.monotonic() + 20
    while not target.exists() or not target.read_text(encoding="utf-8"):
        assert time.monotonic() < deadline, "no CSV download"
        time.sleep(0.1)
    rows = target.read_text(encoding="utf-8").splitlines()
    assert rows[0].startswith("household,row,record") and len(rows) == 1 + len(example["households"])


def test_a_household_job_names_a_bad_price_by_its_row_and_column(
        live_url: str, browser: Any) -> None:  # noqa: F811
    tw.test_each_view_names_the_row_and_column_of_a_bad_cell(live_url, browser, ViewCase(
        "household-jobs", "/v1/household-jobs", "", (), 0, 1, "current price"))


def test_a_saved_comparison_is_listed_opened_and_rerun_with_no_differences(
        live_url: str, browser: Any) -> None:  # noqa: F811
    """'Keep this run' saves the comparison (save=true); Saved runs lists it, opens its input and
    answer, and re-running it on this version reproduces every figure."""
    tw.open_view(browser, live_url, "comparison")
    keep = browser.find_element(By.ID, "save-run")
    if not keep.is_selected():
        keep.click()
    tw.compute(browser)
    run_id = browser.find_element(By.ID, "run-link").text
    saved = httpx.get(f"{live_url}/v1/runs/{run_id}", timeout=30).json()
    assert saved["operation"] == "compare"
    assert saved["input"] == httpx.get(live_url + "/v1/demo").json()["request"]
    browser.find_element(By.ID, "save-run").click()  # off again for the other tests
    browser.find_element(By.ID, "open-run").click()
    tw.wait(browser, 30).until(lambda d: d.find_elements(By.CSS_SELECTOR, f"tr[data-run='{run_id}']"))
    tw.wait(browser, 30).until(lambda d: d.find_element(By.ID, "run-detail").is_displayed())
    facts = browser.find_element(By.ID, "run-facts").text
    assert "compare" in facts and saved["version"] in facts and saved["input_digest"] in facts
    browser.find_element(By.ID, "rerun").click()
    tw.wait(browser, 60).until(lambda d: d.find_elements(By.ID, "rerun-identical"))
    rerun = httpx.post(f"{live_url}/v1/runs/{run_id}/rerun", timeout=60).json()
    assert browser.find_element(By.ID, "rerun-identical").text == "yes"
    assert browser.find_element(By.ID, "rerun-differing").text == "0"
    assert browser.find_element(By.ID, "rerun-compared").text == str(rerun["figures_compared"])
    _no_foreign_fetches_and_fits(browser, live_url)
    tw.screenshot(browser, "saved-runs")


def test_saved_runs_filter_by_operation_and_name_a_bad_time(
        live_url: str, browser: Any) -> None:  # noqa: F811
    httpx.post(live_url + "/v1/index-series?save=true", timeout=60,
               json=load_example("indexSeries.wrenmouth_monthly_ces.json"))
    browser.get("about:blank")
    browser.get(f"{live_url}/#runs")
    tw.wait(browser, 20).until(lambda d: d.find_elements(By.ID, "runs-count"))
    from selenium.webdriver.support.ui import Select

    Select(browser.find_element(By.ID, "runs-_operation")).select_by_value("indexSeries")
    tw.compute(browser)
    ops = {r.find_elements(By.TAG_NAME, "td")[1].text
           for r in browser.find_elements(By.CSS_SELECTOR, "#runs-table tbody tr")}
    assert ops == {"indexSeries"}
    since = browser.find_element(By.ID, "runs-_since")
    since.send_keys("yesterday")
    browser.find_element(By.ID, "compute").click()
    error = tw.wait(browser, 20).until(lambda d: d.find_element(By.ID, "error")
                                       if d.find_element(By.ID, "error").is_displayed() else None)
    assert "Saved since" in error.text and "ISO 8601" in error.text, error.text
    assert since.get_attribute("aria-invalid") == "true"
    _screen_width_kept(browser)
    tw.screenshot(browser, "saved-runs-error")


@pytest.mark.parametrize("view", ["runs", "household-jobs"])
def test_every_control_of_the_new_views_is_labelled(
        live_url: str, browser: Any, view: str) -> None:  # noqa: F811
    """Every input, menu and text box has a label (or an aria-label), the result's too, and the
    Compute button is reached and pressed from the keyboard."""
    from selenium.webdriver.common.keys import Keys

    browser.get("about:blank")
    browser.get(f"{live_url}/#{view}")
    tw.wait(browser, 20).until(lambda d: d.find_elements(By.ID, "compute"))
    browser.execute_script("document.getElementById('compute').focus()")
    browser.switch_to.active_element.send_keys(Keys.ENTER)
    tw.wait(browser, 90).until(lambda d: d.find_element(By.ID, "result").is_displayed())
    unlabelled = browser.execute_script("""
        return [...document.querySelectorAll('input, select, textarea, progress')].filter(i =>
          !(i.labels && i.labels.length) && !i.getAttribute('aria-label')).map(i => i.outerHTML)""")
    assert unlabelled == []


def test_the_households_view_draws_each_households_band_across_models(live_url: str, browser: Any) -> None:  # noqa: F811
    """band_models in the households view: each household's K(u0) and its band (lowest to highest
    K(u0) across the other models) charted per household, with the JSON answer's numbers in the
    chosen period's table and cards; the page stays within the screen at both sizes."""
    tw.open_view(browser, live_url, "households")
    tw.load_named_example(browser, "wrenmouth_household_types_band")
    field = browser.find_element(By.ID, "households-_band_models")
    assert "cobb_douglas" in field.get_attribute("value")
    tw.compute(browser)
    sent, answer = tw.sent_and_answer(browser, live_url, "/v1/household-indices")
    assert sent == load_example("householdIndices.wrenmouth_household_types_band.json")
    last = len(answer["summary"]) - 1
    rows = [h for h in answer["households"] if h["periods"][last]["band"]]
    assert len(rows) == len(answer["households"]) > 1
    cells = tw.table_cells(browser, "hh-band-chart-table")
    assert [c[:4] for c in cells] == [[
        h["household"], f"{h['periods'][last]['band']['konus_low']:.4f}",
        f"{h['periods'][last]['band']['konus_high']:.4f}", f"{h['periods'][last]['konus']:.4f}"]
        for h in rows]
    outside = sum(h["periods"][last]["band"]["konus_inside"] is False for h in rows)
    assert browser.find_element(By.ID, "hh-band-outside").text == str(outside)
    assert browser.find_element(By.ID, "hh-band-models").text == str(len(sent["band_models"]))
    # The chart: one floating bar per household (base 100) and the batch model's K(u0) beside it.
    drawn = browser.execute_script("""
        const c = window.Chart.getChart(document.querySelector('[data-chart="hh-band-chart"] canvas'));
        return {labels: c.data.labels, bars: c.data.datasets[0].data, dots: c.data.datasets[1].data,
                axis: c.options.scales.x.title.text, legend: c.options.plugins.legend.position,
                colour: c.data.datasets[0].backgroundColor};""")
    assert drawn["labels"] == [h["household"] for h in rows]
    for (low, high), dot, h in zip(drawn["bars"], drawn["dots"], rows, strict=True):
        band = h["periods"][last]["band"]
        assert low == pytest.approx(100 * band["konus_low"], rel=1e-12)
        assert high == pytest.approx(100 * band["konus_high"], rel=1e-12)
        assert dot == pytest.approx(100 * h["periods"][last]["konus"], rel=1e-12)
    assert drawn["axis"] == "Konüs index K(u0), base = 100" and drawn["legend"] == "bottom"
    assert drawn["colour"] == "#0072B2"  # Okabe-Ito blue
    # Another period chosen: the table follows it.
    tw.choose(browser, "hh-band-chart-choice", answer["summary"][0]["period"])
    first = tw.table_cells(browser, "hh-band-chart-table")[0]
    assert first[1] == f"{rows[0]['periods'][0]['band']['konus_low']:.4f}"
    _no_foreign_fetches_and_fits(browser, live_url)
    tw.screenshot(browser, "households-band")


#: Families the comparison starts from generated values, and how close the Konüs index comes to
#: the Cobb-Douglas one (numerical optimisation for a utility formula, path integration for demands).
GENERATED = {"aids": 1e-9, "quaids": 1e-9, "utility_formula": 1e-6, "demand_system": 1e-8}


def _cobb_douglas_start(body: dict[str, Any]) -> tuple[list[str], list[float]]:
    """The items and the base budget shares p0 q0 / m0, rounded to 6 decimals, the largest
    taking the remainder (the page's rule)."""
    ids = [i["id"] if isinstance(i, dict) else i for i in body["items"]]
    spend = [body["base"]["prices"][i] * body["base"]["quantities"][i] for i in ids]
    w = [round(x / sum(spend), 6) for x in spend]
    top = w.index(max(w))
    w[top] = round(w[top] + 1 - sum(w), 6)
    return ids, w


@pytest.mark.parametrize("family", list(GENERATED))
def test_aids_quaids_and_the_formula_families_start_from_the_grids_items(
        live_url: str, browser: Any, family: str) -> None:  # noqa: F811
    """Choosing AIDS, QUAIDS, a utility formula or demand formulas in the comparison fills the
    model from the grid's items (α = the base shares, β = γ = 0 and λ = 0; the Cobb-Douglas
    utility and demands with those shares), says beside the model that these are starting values
    to edit, and computes the figures the JSON API gives for the same body. Outside check: with
    β = γ = 0 (λ = 0) AIDS and QUAIDS are Cobb-Douglas, whose Konüs index is the geometric mean
    of the price relatives weighted by the shares, prod (p1/p0)^w (Deaton and Muellbauer 1980;
    Banks, Blundell and Lewbel 1997; the Cobb-Douglas case is a textbook result)."""
    from selenium.webdriver.support.ui import Select

    tw.open_view(browser, live_url, "comparison")
    Select(browser.find_element(By.ID, "family")).select_by_value(family)
    note = tw.wait(browser, 10).until(lambda d: d.find_element(By.ID, "model-start-note"))
    assert note.text.startswith("Starting values, to be edited") and note.is_displayed()
    tw.compute(browser)
    sent, answer = tw.sent_and_answer(browser, live_url, "/v1/comparisons")
    ids, w = _cobb_douglas_start(sent)
    model = sent["model"]
    assert model["family"] == family
    if family in ("aids", "quaids"):
        assert model["alpha"] == pytest.approx(dict(zip(ids, w, strict=True)), abs=1e-12)
        assert model["beta"] == dict.fromkeys(ids, 0) and model["gamma"] == {} and model["alpha0"] == 0
        assert "translog" in note.text and "Deaton and Muellbauer 1980" in note.text
        assert family == "aids" or model["lambda"] == dict.fromkeys(ids, 0)
    elif family == "utility_formula":
        assert model["utility_formula"] == " + ".join(f"{x}*log({i})" for i, x in zip(ids, w, strict=True))
    else:
        assert model["demand_formulas"] == {i: f"{x}*income/{i}" for i, x in zip(ids, w, strict=True)}
    assert answer["validity"]["regular"] is True
    for card, value, digits in (("konus-base", answer["konus"]["base"], 4),
                                ("konus-current", answer["konus"]["current"], 4),
                                ("bias", answer["laspeyres_gap_points"], 3),
                                ("cv", answer["compensation"]["compensating_variation"], 2)):
        assert browser.find_element(By.ID, card).text == f"{value:.{digits}f}", card
    relatives = [sent["current"]["prices"][i] / sent["base"]["prices"][i] for i in ids]
    geometric = float(np.prod(np.power(relatives, w)))
    assert answer["konus"]["base"] == pytest.approx(geometric, rel=GENERATED[family])
    _no_foreign_fetches_and_fits(browser, live_url)
    if family == "aids":
        tw.screenshot(browser, "comparison-aids-start")


def test_households_start_aids_with_alpha_calibrated_to_each_household(live_url: str, browser: Any) -> None:  # noqa: F811
    """In the households view (one base budget per household) AIDS starts with β = γ = 0 and α
    left to the service's calibration, and computes the JSON API's figures."""
    from selenium.webdriver.support.ui import Select

    tw.open_view(browser, live_url, "households")
    Select(browser.find_element(By.ID, "family")).select_by_value("aids")
    note = tw.wait(browser, 10).until(lambda d: d.find_element(By.ID, "model-start-note"))
    assert "α left out" in note.text
    tw.compute(browser)
    sent, answer = tw.sent_and_answer(browser, live_url, "/v1/household-indices")
    assert "alpha" not in sent["model"] and sent["model"]["gamma"] == {}
    konus = next(i for i in answer["summary"][-1]["indices"] if i["index"] == "konus")
    assert browser.find_element(By.ID, "hh-konus-democratic").text == f"{konus['democratic']:.4f}"


def test_the_series_starts_aids_from_its_base_periods_budget(live_url: str, browser: Any) -> None:  # noqa: F811
    """In the series view AIDS starts from the base period's budget shares over the items priced
    then (the items the series' model is over), and computes the JSON API's figures; with β = γ = 0
    its Konüs series is the share-weighted geometric mean of the price relatives (Deaton and
    Muellbauer 1980, the Cobb-Douglas case)."""
    from selenium.webdriver.support.ui import Select

    tw.open_view(browser, live_url, "series")
    Select(browser.find_element(By.ID, "family")).select_by_value("aids")
    tw.wait(browser, 10).until(lambda d: d.find_element(By.ID, "model-start-note"))
    tw.compute(browser)
    sent, answer = tw.sent_and_answer(browser, live_url, "/v1/index-series")
    t = sent["periods"].index(sent["base_period"])
    alpha = sent["model"]["alpha"]
    base = sent["prices"][t]
    assert set(alpha) == {i for i, p in base.items() if p is not None}
    spend = {i: base[i] * (sent["quantities"][t].get(i) or 0) for i in alpha}
    shares = {i: x / sum(spend.values()) for i, x in spend.items()}
    assert alpha == pytest.approx(shares, abs=len(alpha) * 1e-6)  # rounded to 6 decimals
    k = answer["konus"]["fixed_base"]["base"][-1]
    assert browser.find_element(By.ID, "series-konus-last").text == f"{k:.3f}"
    # The last period with every one of those items priced (an item gone later is imputed).
    s = max(s for s, row in enumerate(sent["prices"]) if all(row.get(i) is not None for i in alpha))
    assert s > t
    relatives = np.array([sent["prices"][s][i] / base[i] for i in alpha])
    geometric = 100 * float(np.prod(relatives ** np.array(list(alpha.values()))))
    assert answer["konus"]["fixed_base"]["base"][s] == pytest.approx(geometric, rel=1e-9)
