"""``dualcost check`` as a pipeline runs it: a subprocess, its exit code and its JUnit file.

The published values are the fixed-base Laspeyres, Paasche, Fisher and Törnqvist indices of the
artificial six-commodity data set, printed to four decimals: ILO/IMF/OECD/UNECE/Eurostat/World
Bank (2004), Consumer Price Index Manual, ch. 19, Tables 19.1-19.3 (recalled from memory).
"""

from __future__ import annotations

import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path

import pytest

from tests.reference_data import SIX_COMMODITY_PRICES as PRICES
from tests.reference_data import SIX_COMMODITY_PRINTED
from tests.reference_data import SIX_COMMODITY_QUANTITIES as QUANTITIES

# The printed table as a pipeline's published file holds it: four decimals as text.
PUBLISHED = {formula: [f"{value:.4f}" for value in values]
             for formula, values in SIX_COMMODITY_PRINTED.items()}


def write_inputs(folder: Path, *, wrong: bool = False) -> tuple[Path, Path]:
    panel = folder / "panel.csv"
    lines = ["period,item,price,quantity"]
    for t, (prices, quantities) in enumerate(zip(PRICES, QUANTITIES, strict=True), start=1):
        for i, (p, q) in enumerate(zip(prices, quantities, strict=True), start=1):
            lines.append(f"{t},c{i},{p},{q}")
    panel.write_text("\n".join(lines) + "\n", encoding="utf-8")
    published = folder / "published.csv"
    rows = ["formula,period,value"]
    for formula, values in PUBLISHED.items():
        for t, value in enumerate(values, start=1):
            if wrong and formula == "fisher" and t == 3:
                value = "1.2731"  # one digit off, as a typo in a pipeline would be
            rows.append(f"{formula},{t},{value}")
    published.write_text("\n".join(rows) + "\n", encoding="utf-8")
    return published, panel


def run_check(*args: str) -> subprocess.CompletedProcess[str]:
    return subprocess.run([sys.executable, "-m", "dualcost.cli", "check", *args],
                          capture_output=True, text=True, timeout=120)


def test_the_published_table_passes(tmp_path) -> None:
    published, panel = write_inputs(tmp_path)
    report = tmp_path / "report.xml"
    done = run_check(str(published), str(panel), "--reference-value", "1", "--junit", str(report))
    assert done.returncode == 0, done.stdout + done.stderr
    assert "20 published values checked: all agree" in done.stdout
    root = ET.parse(report).getroot()
    assert root.get("tests") == "20" and root.get("failures") == "0"


def test_a_wrong_value_fails_the_pipeline(tmp_path) -> None:
    published, panel = write_inputs(tmp_path, wrong=True)
    report = tmp_path / "report.xml"
    done = run_check(str(published), str(panel), "--reference-value", "1", "--junit", str(report))
    assert done.returncode == 1, done.stdout + done.stderr
    assert "DIFFERS" in done.stdout and "1 differ" in done.stdout
    root = ET.parse(report).getroot()
    assert root.get("failures") == "1"
    failed = [c for c in root.iter("testcase") if c.find("failure") is not None]
    assert [c.get("name") for c in failed] == ["fisher fixed_base 3"]


def test_unreadable_input_exits_two(tmp_path) -> None:
    published, panel = write_inputs(tmp_path)
    panel.write_text("period,item,price\n1,c1,abc\n", encoding="utf-8")
    done = run_check(str(published), str(panel))
    assert done.returncode == 2
    assert "#cell=2,3" in done.stderr


@pytest.mark.parametrize("wrong,code", [(False, 0), (True, 1)])
def test_against_a_running_service(tmp_path, live_url, wrong, code) -> None:
    published, panel = write_inputs(tmp_path, wrong=wrong)
    done = run_check(str(published), str(panel), "--reference-value", "1", "--url", live_url)
    assert done.returncode == code, done.stdout + done.stderr


def test_the_audit_operation_over_http(client) -> None:
    """The same audit as an HTTP operation, with JSON values and an explicit tolerance."""
    body = {
        "periods": [1, 2, 3, 4, 5], "items": [f"c{i}" for i in range(1, 7)],
        "prices": PRICES, "quantities": QUANTITIES, "reference_value": 1,
        "published": [{"formula": "laspeyres", "period": 2, "value": 1.42},
                      {"formula": "paasche", "period": 5, "value": 0.7968, "decimals": 4},
                      {"formula": "fisher", "period": 4, "value": 1.2, "series": "chained"}],
        "tolerance": 1e-4,
    }
    answer = client.post("/v1/audits", json=body).json()
    assert answer["checked"] == 3
    assert [r["passed"] for r in answer["rows"]][:2] == [True, True]
    body.pop("tolerance")
    r = client.post("/v1/audits", json=body)
    assert r.status_code == 422 and r.json()["errors"][0]["pointer"] == "/published"
