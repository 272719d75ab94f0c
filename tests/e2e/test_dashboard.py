"""The dashboard page end to end, in headless Chromium from Debian's packages.

The service runs on loopback in a thread; Selenium drives /usr/bin/chromium through
/usr/bin/chromedriver (nothing is downloaded). The test loads the page, fills in the invented
Wrenmouth scenario, computes, and reads the numbers shown, which must match the API's answer.
A screenshot is kept in test-artifacts/dashboard.png.
"""

from __future__ import annotations

import os
import shutil
from collections.abc import Iterator
from pathlib import Path

import httpx
import pytest

from tests.conftest import ROOT

CHROMIUM = shutil.which("chromium") or "/usr/bin/chromium"
CHROMEDRIVER = shutil.which("chromedriver") or "/usr/bin/chromedriver"
ARTIFACTS = ROOT / "test-artifacts"

if not (Path(CHROMIUM).exists() and Path(CHROMEDRIVER).exists()):
    if os.environ.get("CI"):
        raise RuntimeError("CI must install Debian's chromium and chromium-driver (see README)")
    pytest.skip("Debian's chromium and chromium-driver are not installed", allow_module_level=True)

webdriver = pytest.importorskip("selenium.webdriver")
from selenium.webdriver.chrome.service import Service  # noqa: E402
from selenium.webdriver.common.by import By  # noqa: E402
from selenium.webdriver.support import expected_conditions as ec  # noqa: E402
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402


@pytest.fixture(scope="module")
def browser() -> Iterator[object]:
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--window-size=1200,2200"):
        options.add_argument(flag)
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    try:
        yield driver
    finally:
        driver.quit()


def test_dashboard_shows_the_same_numbers_as_the_api(live_url, browser) -> None:
    browser.get(live_url + "/")
    assert "official statistics" in browser.find_element(By.ID, "caution").text
    browser.find_element(By.ID, "load-example").click()
    WebDriverWait(browser, 10).until(
        lambda d: "rye_loaf" in d.find_element(By.ID, "data").get_attribute("value"))
    browser.find_element(By.ID, "compute").click()
    WebDriverWait(browser, 10).until(ec.visibility_of_element_located((By.ID, "results")))

    shown = {key: browser.find_element(By.ID, key).text for key in ("konus-base", "laspeyres", "bias")}
    # The same request through the API: the page sends CES with sigma 0.7 on the demo basket.
    demo = httpx.get(live_url + "/v1/demo").json()["request"]
    demo["model"] = {"family": "ces", "sigma": 0.7}
    demo.pop("reference_income", None)
    answer = httpx.post(live_url + "/v1/comparisons", json=demo).json()
    lasp = next(f["value"] for f in answer["formulas"] if f["formula"] == "laspeyres")
    assert shown["konus-base"] == f"{answer['konus']['base']:.4f}"
    assert shown["laspeyres"] == f"{lasp:.4f}"
    assert shown["bias"] == f"{answer['laspeyres_gap_points']:.3f}"
    rows = browser.find_elements(By.CSS_SELECTOR, "#formula-table tbody tr")
    assert len(rows) == len(answer["formulas"])
    bars = browser.find_elements(By.CSS_SELECTOR, "#item-chart rect")
    assert len(bars) == len(answer["by_item"])

    ARTIFACTS.mkdir(exist_ok=True)
    assert browser.save_screenshot(str(ARTIFACTS / "dashboard.png"))


def test_dashboard_shows_the_problem_for_bad_input(live_url, browser) -> None:
    browser.get(live_url + "/")
    data = browser.find_element(By.ID, "data")
    data.clear()
    data.send_keys("item,label,base_price,current_price,base_share\n"
                   "rye_loaf,Rye loaf,2.40,-2.52,0.6\nferry_pass,Ferry pass,38,41,0.4")
    browser.find_element(By.ID, "compute").click()
    error = WebDriverWait(browser, 10).until(ec.visibility_of_element_located((By.ID, "error")))
    assert "/current/prices/rye_loaf" in error.text and "greater than zero" in error.text


def test_dashboard_blocks_figures_of_a_model_outside_its_regular_region(live_url, browser) -> None:
    """Translog with sigma 3 far from its base point (shares .3/.3/.4, the transit price more
    than quadrupled): the page shows a blocking warning naming the item, and "not a result" in
    place of the Konüs index, the bias and the compensating variation; Laspeyres stays."""
    from selenium.webdriver.support.ui import Select

    browser.get(live_url + "/")
    data = browser.find_element(By.ID, "data")
    data.clear()
    data.send_keys("item,label,base_price,current_price,base_share\n"
                   "bread,Rye loaf,2.40,2.52,0.3\ntransit,Transit pass,9,40,0.3\n"
                   "heating,Heating,38,41,0.4")
    expenditure = browser.find_element(By.ID, "expenditure")
    expenditure.clear()
    expenditure.send_keys("100")
    Select(browser.find_element(By.ID, "family")).select_by_value("translog")
    sigma = browser.find_element(By.ID, "sigma")
    sigma.clear()
    sigma.send_keys("3")
    browser.find_element(By.ID, "compute").click()
    warning = WebDriverWait(browser, 10).until(
        ec.visibility_of_element_located((By.ID, "validity")))
    assert "not results" in warning.text and "Transit pass (transit)" in warning.text
    for key in ("konus-base", "bias", "cv"):
        assert browser.find_element(By.ID, key).text == "not a result"
    # Laspeyres by hand from the shares: sum_i w0_i p1_i / p0_i.
    lasp = 0.3 * 2.52 / 2.40 + 0.3 * 40 / 9 + 0.4 * 41 / 38
    assert browser.find_element(By.ID, "laspeyres").text == f"{lasp:.4f}"
    # Back to a regular model: the warning goes away.
    Select(browser.find_element(By.ID, "family")).select_by_value("cobb_douglas")
    browser.find_element(By.ID, "compute").click()
    WebDriverWait(browser, 10).until(
        ec.invisibility_of_element_located((By.ID, "validity")))
    assert browser.find_element(By.ID, "konus-base").text != "not a result"
