"""The interactive API documentation renders with the network closed, in headless Chromium from
Debian's packages.

The service runs on loopback in a thread (the ``live_url`` fixture). Chromium is started with
every host name mapped to "not found" except 127.0.0.1 (``--host-resolver-rules``), and its
network log is read back: every request the pages made must have gone to the service. Swagger UI
must have drawn the operations (one ``.opblock`` per operation of /openapi.json) and ReDoc its
menu and operation headings. Screenshots are kept in test-artifacts/.
"""

from __future__ import annotations

import json
import os
import shutil
from collections.abc import Iterator
from dataclasses import dataclass
from pathlib import Path
from typing import Any
from urllib.parse import urlsplit

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
from selenium.webdriver.support.ui import WebDriverWait  # noqa: E402

#: Every host name resolves to nothing, except the loopback address the service listens on.
OFFLINE = '--host-resolver-rules=MAP * ~NOTFOUND , EXCLUDE 127.0.0.1'
#: URL schemes that never touch the network.
LOCAL_SCHEMES = {"data", "blob", "about", "chrome", "chrome-extension"}


@pytest.fixture(scope="module")
def browser() -> Iterator[Any]:
    options = webdriver.ChromeOptions()
    options.binary_location = CHROMIUM
    for flag in ("--headless=new", "--no-sandbox", "--disable-gpu", "--disable-quic",
                 "--no-first-run", "--disable-background-networking",
                 "--disable-component-update", "--disable-sync", "--disable-extensions",
                 "--window-size=1400,2000", OFFLINE):
        options.add_argument(flag)
    options.set_capability("goog:loggingPrefs", {"performance": "ALL", "browser": "ALL"})
    driver = webdriver.Chrome(service=Service(executable_path=CHROMEDRIVER), options=options)
    try:
        yield driver
    finally:
        driver.quit()


@dataclass
class Request:
    url: str
    blocked: str | None = None  # why the browser refused to send it (the page's policy)


def requests_made(browser: Any) -> list[Request]:
    """Every request the pages asked for since the log was last read, with the browser's reason
    where it refused to send one."""
    made: dict[str, Request] = {}
    for entry in browser.get_log("performance"):
        message = json.loads(entry["message"])["message"]
        params = message.get("params", {})
        if message["method"] == "Network.requestWillBeSent":
            made[params["requestId"]] = Request(params["request"]["url"])
        elif message["method"] == "Network.loadingFailed" and params.get("blockedReason"):
            if params["requestId"] in made:
                made[params["requestId"]].blocked = params["blockedReason"]
    return list(made.values())


def assert_nothing_left_the_machine(made: list[Request], live_url: str) -> None:
    """Every request went to the service, or was refused by the browser before it was sent."""
    service = urlsplit(live_url).netloc
    outside = [r.url for r in made if urlsplit(r.url).scheme not in LOCAL_SCHEMES
               and urlsplit(r.url).netloc != service and r.blocked is None]
    assert not outside, f"requests that left the service: {outside}"


def console_errors(browser: Any) -> list[str]:
    return [e["message"] for e in browser.get_log("browser") if e["level"] == "SEVERE"]


def test_the_network_is_really_closed(live_url, browser) -> None:
    """The flag works: the CDN FastAPI's own pages would load their assets from cannot be
    reached, the service can."""
    browser.get(live_url + "/health")
    assert "ok" in browser.page_source
    outcome = browser.execute_async_script("""
        const done = arguments[arguments.length - 1];
        fetch(arguments[0], {mode: "no-cors"}).then(() => done("reached"),
                                                    e => done("failed: " + e));
    """, "https://cdn.jsdelivr.net/npm/swagger-ui-dist@5/swagger-ui.css")
    assert outcome.startswith("failed"), outcome


def test_swagger_ui_renders_every_operation_offline(live_url, browser) -> None:
    operations = [op for path in httpx.get(live_url + "/openapi.json").json()["paths"].values()
                  for op in path.values()]
    browser.get_log("performance")  # forget earlier pages
    browser.get_log("browser")
    browser.get(live_url + "/docs")
    WebDriverWait(browser, 30).until(
        lambda d: len(d.find_elements(By.CSS_SELECTOR, ".opblock")) >= len(operations))
    blocks = browser.find_elements(By.CSS_SELECTOR, ".opblock")
    assert len(blocks) == len(operations)
    summaries = " ".join(b.text for b in blocks)
    assert "/v1/comparisons" in summaries and "/v1/index-series/csv" in summaries
    assert browser.find_element(By.CSS_SELECTOR, ".info .title").text.startswith("dualcost")
    # The style sheet applied: the operation blocks are laid out as Swagger UI draws them.
    border = browser.execute_script(
        "return getComputedStyle(document.querySelector('.opblock')).borderStyle")
    assert border == "solid"
    made = requests_made(browser)
    assert {"/docs/assets/swagger-ui-bundle.js", "/docs/assets/swagger-ui.css",
            "/openapi.json"} <= {urlsplit(r.url).path for r in made}
    assert_nothing_left_the_machine(made, live_url)
    assert not console_errors(browser)
    ARTIFACTS.mkdir(exist_ok=True)
    assert browser.save_screenshot(str(ARTIFACTS / "docs-swagger-ui.png"))


def test_redoc_renders_offline(live_url, browser) -> None:
    browser.get_log("performance")
    browser.get_log("browser")
    browser.get(live_url + "/redoc")
    WebDriverWait(browser, 60).until(
        lambda d: d.find_elements(By.CSS_SELECTOR, "h2") and d.find_elements(
            By.CSS_SELECTOR, ".menu-content"))
    headings = " ".join(h.text for h in browser.find_elements(By.CSS_SELECTOR, "h1, h2"))
    assert "dualcost" in headings
    menu = browser.find_element(By.CSS_SELECTOR, ".menu-content").text
    assert "comparisons" in menu.lower()
    # ReDoc's error page says "Something went wrong"; the document must have loaded.
    assert "Something went wrong" not in browser.page_source
    made = requests_made(browser)
    assert {"/docs/assets/redoc.standalone.js", "/openapi.json"} <= {
        urlsplit(r.url).path for r in made}
    assert_nothing_left_the_machine(made, live_url)
    # The one thing refused: the bundle's logo of its maker, from their CDN, in the side menu.
    assert all("Content Security Policy" in e and "cdn.redoc.ly" in e
               for e in console_errors(browser)), console_errors(browser)
    ARTIFACTS.mkdir(exist_ok=True)
    assert browser.save_screenshot(str(ARTIFACTS / "docs-redoc.png"))
