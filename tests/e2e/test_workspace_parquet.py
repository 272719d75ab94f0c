"""A Parquet file uploaded into the page's series view (tests/e2e/test_workspace.py's browser
fixture, at 1366x900 and 390x844): the page cannot read the file as text, so the service reads
it (POST /v1/tables) into the same grids, and the figures shown are the JSON API's for the
request the page sends. pyarrow, the format's reference library, writes the file."""

from __future__ import annotations

import csv
import io
from pathlib import Path
from typing import Any

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from tests.conftest import ROOT
from tests.e2e import test_workspace as tw
from tests.e2e.test_workspace import open_view, upload_panel_and_compare, wait

browser = tw.browser  # the fixture, reused

webdriver = pytest.importorskip("selenium.webdriver")
from selenium.webdriver.common.by import By  # noqa: E402


def panel_parquet(path: Path) -> Path:
    """docs/examples/wrenmouth_panel.csv (the series example in long form) as a Parquet file."""
    text = (ROOT / "docs/examples/wrenmouth_panel.csv").read_text(encoding="utf-8")
    records = list(csv.DictReader(io.StringIO(text)))
    table = pa.table({"period": [r["period"] for r in records],
                      "item": [r["item"] for r in records],
                      "price": pa.array([float(r["price"]) for r in records]),
                      "quantity": pa.array([float(r["quantity"]) for r in records])})
    pq.write_table(table, path)
    return path


def test_a_parquet_panel_fills_the_series_grids_and_computes(
        live_url: str, browser: Any, tmp_path: Path) -> None:
    upload_panel_and_compare(live_url, browser, panel_parquet(tmp_path / "panel.parquet"))


def test_a_bad_parquet_cell_is_named_by_its_row_and_column(
        live_url: str, browser: Any, tmp_path: Path) -> None:
    open_view(browser, live_url, "series")
    path = tmp_path / "bad.parquet"
    pq.write_table(pa.table({"period": ["2024-12", "2024-12"], "item": ["rye_loaf", "ferry"],
                             "price": [2.4, float("nan")]}), path)
    browser.find_element(By.ID, "upload").send_keys(str(path))
    error = wait(browser, 10).until(lambda d: d.find_element(By.ID, "error")
                                    if d.find_element(By.ID, "error").is_displayed() else None)
    assert "bad.parquet, row 2, column 'price'" in error.text, error.text
