"""``dualcost check`` as a pipeline runs it: its exit code (0 all agree, 1 a value differs, 2 the
check cannot run), its table, its hint and its JUnit file; as a subprocess, and in process
through ``main`` where the output is all that is looked at.

The published values are the fixed-base Laspeyres, Paasche, Fisher and Törnqvist indices of the
artificial six-commodity data set, printed to four decimals: ILO/IMF/OECD/UNECE/Eurostat/World
Bank (2004), Consumer Price Index Manual, ch. 19, Tables 19.1-19.3 (recalled from memory).
"""

from __future__ import annotations

import importlib.metadata
import json
import subprocess
import sys
import xml.etree.ElementTree as ET
from pathlib import Path
from typing import Any

import pytest

from dualcost.cli import main
from dualcost.pipeline_check import diagnose
from tests.cli.conftest import API_KEY
from tests.conftest import free_port
from tests.reference_data import SIX_COMMODITY_PRICES as PRICES
from tests.reference_data import SIX_COMMODITY_PRINTED
from tests.reference_data import SIX_COMMODITY_QUANTITIES as QUANTITIES

# The printed table as a pipeline's published file holds it: four decimals as text.
PUBLISHED = {formula: [f"{value:.4f}" for value in values]
             for formula, values in SIX_COMMODITY_PRINTED.items()}


def write_inputs(folder: Path, *, wrong: bool = False, earlier: bool = False,
                 periods: tuple[int, ...] = (1, 2, 3, 4, 5)) -> tuple[Path, Path]:
    """The panel and the printed table as files. ``earlier``: the panel starts one period
    before the table's base period, with a period 0 of invented prices (period 1's times 0.9)
    and period 1's quantities; ``periods``: the periods whose printed values are published."""
    panel = folder / "panel.csv"
    lines = ["period,item,price,quantity"]
    if earlier:
        lines += [f"0,c{i},{0.9 * p},{q}" for i, (p, q) in
                  enumerate(zip(PRICES[0], QUANTITIES[0], strict=True), start=1)]
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
            if t in periods:
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
    assert "hint" not in done.stdout  # a typo is not a mismatch of options
    root = ET.parse(report).getroot()
    assert root.get("failures") == "1"
    failed = [c for c in root.iter("testcase") if c.find("failure") is not None]
    assert [c.get("name") for c in failed] == ["fisher fixed_base 3"]


def test_unreadable_input_exits_two_with_the_cell(tmp_path) -> None:
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
    assert f"Recomputed by dualcost {importlib.metadata.version('dualcost')} from input sha256:" \
        in done.stdout


def test_the_report_states_the_version_and_the_input_digest(tmp_path, capsys) -> None:
    """In process and through a service alike: the version that recomputed the values and the
    digest of the audit request (recomputed here from the request the check builds), after
    the verdict, and as properties of the JUnit suite."""
    from dualcost.client import input_digest
    from dualcost.pipeline_check import audit_request, panel_from_file, published_from_file

    published, panel = write_inputs(tmp_path)
    body = audit_request(published_from_file(published), panel_from_file(panel),
                         options={"reference_value": 1}, tolerance=None)
    version, digest = importlib.metadata.version("dualcost"), input_digest(body)
    report = tmp_path / "report.xml"
    code, out, _ = check_in_process(capsys, str(published), str(panel), "--reference-value", "1",
                                    "--junit", str(report))
    assert code == 0
    assert out.splitlines()[-1] == (f"Recomputed by dualcost {version} from input {digest} (the "
                                    "audit request in RFC 8785 canonical form).")
    properties = {p.get("name"): p.get("value") for p in ET.parse(report).getroot().iter("property")}
    assert properties == {"dualcost.version": version, "dualcost.input_digest": digest}


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


def check_in_process(capsys, *args: str) -> tuple[int, str, str]:
    code = main(["check", *args])
    out, err = capsys.readouterr()
    return code, out, err


# -- exit 2: the check cannot run -------------------------------------------------------------


def test_a_service_that_cannot_be_reached_exits_two_in_one_line(tmp_path) -> None:
    """A free port with nothing listening: an outage, never a wrong figure (exit 1)."""
    published, panel = write_inputs(tmp_path)
    report = tmp_path / "report.xml"
    url = f"http://127.0.0.1:{free_port()}"
    done = run_check(str(published), str(panel), "--reference-value", "1", "--url", url,
                     "--junit", str(report))
    assert done.returncode == 2, done.stdout + done.stderr
    assert done.stdout == ""
    line, = done.stderr.splitlines()
    assert line.startswith(f"dualcost check: cannot reach the dualcost service at {url}")
    assert not report.exists()


def test_an_address_that_is_not_http_exits_two(tmp_path, capsys) -> None:
    published, panel = write_inputs(tmp_path)
    code, out, err = check_in_process(capsys, str(published), str(panel), "--url", "localhost:1")
    assert code == 2 and out == "" and "http://" in err


def test_a_request_the_service_refuses_exits_two(tmp_path, live_url, capsys) -> None:
    published, panel = write_inputs(tmp_path)
    with published.open("a", encoding="utf-8") as fh:
        fh.write("lowe_but_misspelt,2,1.42\n")
    code, out, err = check_in_process(capsys, str(published), str(panel), "--reference-value",
                                      "1", "--url", live_url)
    assert code == 2 and out == ""
    assert "refused the request: 422" in err and "/published/20/formula" in err
    assert len(err.splitlines()) == 1


def test_a_service_that_needs_a_key_refuses_without_one(tmp_path, keyed_url, capsys,
                                                        monkeypatch) -> None:
    monkeypatch.delenv("DUALCOST_API_KEY", raising=False)
    published, panel = write_inputs(tmp_path)
    args = (str(published), str(panel), "--reference-value", "1", "--url", keyed_url)
    code, out, err = check_in_process(capsys, *args)
    assert code == 2 and "401" in err
    assert check_in_process(capsys, *args, "--api-key", API_KEY)[0] == 0
    monkeypatch.setenv("DUALCOST_API_KEY", API_KEY)
    assert check_in_process(capsys, *args)[0] == 0


def test_an_answer_that_is_not_an_audit_exits_two(tmp_path, capsys, monkeypatch) -> None:
    """Something else listening at --url (a web page, say) is not a dualcost service."""
    from dualcost.client import Client

    monkeypatch.setattr(Client, "audit", lambda self, body: "<html>a login page</html>")
    published, panel = write_inputs(tmp_path)
    code, _, err = check_in_process(capsys, str(published), str(panel), "--url",
                                    "http://127.0.0.1:9")
    assert code == 2 and "did not answer with an audit" in err


@pytest.mark.parametrize("content", ['{"values": []}', '{"published": 3}', "[1, 2", "\udcff"])
def test_a_published_json_file_that_cannot_be_read_exits_two(tmp_path, capsys,
                                                              content) -> None:
    published, panel = write_inputs(tmp_path)
    bad = tmp_path / "published.json"
    bad.write_bytes(content.encode("utf-8", "surrogateescape"))
    code, out, err = check_in_process(capsys, str(bad), str(panel))
    assert code == 2 and out == "" and err.startswith("dualcost check: ")


def test_a_missing_file_exits_two(tmp_path, capsys) -> None:
    published, _ = write_inputs(tmp_path)
    code, _, err = check_in_process(capsys, str(published), str(tmp_path / "nothing.csv"))
    assert code == 2 and "nothing.csv" in err


# -- the hint ---------------------------------------------------------------------------------


def test_a_panel_that_starts_before_the_base_period_gets_a_hint(tmp_path) -> None:
    """The printed table (period 1 = 1) against a panel with an earlier period 0: every value
    differs, and the hint names period 1 and --base-period, tried once with success."""
    published, panel = write_inputs(tmp_path, earlier=True)
    report = tmp_path / "report.xml"
    done = run_check(str(published), str(panel), "--reference-value", "1", "--junit", str(report))
    assert done.returncode == 1, done.stdout + done.stderr
    hint = done.stdout.splitlines()[-1]
    assert hint == ("hint: the published values equal 1 in 1, where the recomputed ones do not: "
                    "they were probably computed on base period 1, while the recomputation took "
                    "0 (the panel's first period, as base period). Run again with --base-period "
                    "1 (with it, all 20 values agree).")
    suite = ET.parse(report).getroot().find("testsuite")
    assert suite is not None and suite.findtext("system-out") == hint
    again = run_check(str(published), str(panel), "--reference-value", "1", "--base-period", "1")
    assert again.returncode == 0, again.stdout


def test_a_base_period_given_wrongly_gets_the_same_hint(tmp_path, capsys) -> None:
    published, panel = write_inputs(tmp_path, earlier=True)
    code, out, _ = check_in_process(capsys, str(published), str(panel), "--reference-value", "1",
                                    "--base-period", "2")
    assert code == 1
    assert "took 2 (the base period given)" in out and "--base-period 1 (with it, all 20" in out


def test_a_hint_names_the_reference_value_when_that_is_what_differs(tmp_path, capsys) -> None:
    published, panel = write_inputs(tmp_path)
    code, out, _ = check_in_process(capsys, str(published), str(panel), "--reference-value",
                                    "100")
    assert code == 1
    assert out.splitlines()[-1] == (
        "hint: the published values equal 1 in 1, where the recomputed ones equal 100. Run "
        "again with --reference-value 1 (with it, all 20 values agree).")


def test_without_a_published_base_period_the_hint_names_the_option(tmp_path, capsys) -> None:
    published, panel = write_inputs(tmp_path, earlier=True, periods=(2, 3, 4, 5))
    code, out, _ = check_in_process(capsys, str(published), str(panel), "--reference-value", "1")
    assert code == 1
    assert out.splitlines()[-1] == (
        "hint: every published value differs. The recomputation took the panel's first period, "
        "0, as its base period: if the published values were computed on another base period, "
        "name it with --base-period.")


def row(period: str, published: float, recomputed: float, *, series: str = "fixed_base",
        tolerance: float = 0.05) -> dict[str, Any]:
    return {"formula": "laspeyres", "series": series, "period": period, "published": published,
            "recomputed": recomputed, "difference": published - recomputed,
            "tolerance": tolerance, "passed": abs(published - recomputed) <= tolerance}


def audit_answer(*rows: dict[str, Any]) -> dict[str, Any]:
    failed = sum(not r["passed"] for r in rows)
    return {"rows": list(rows), "passed": failed == 0, "checked": len(rows), "failed": failed}


PANEL = {"periods": ["2024-12", "2025-01", "2025-02", "2025-03"]}


def test_the_diagnosis_reads_chained_values_and_the_periods_of_a_json_panel() -> None:
    """The rule looks at the values, not at one file: chained series equal the reference value
    in the reference period too (common practice), and a JSON panel may name its options."""
    answer = audit_answer(row("2025-01", 100.0, 99.8, series="chained"),
                          row("2025-03", 102.4, 102.1, series="chained"))
    hint = diagnose(answer, PANEL)
    assert hint is not None and hint.options == {"base_period": "2025-01"}
    given = diagnose(answer, PANEL | {"reference_period": "2024-12"})
    assert given is not None
    assert given.options == {"base_period": "2025-01", "reference_period": "2025-01"}
    assert given.flags() == "--base-period 2025-01 --reference-period 2025-01"


def test_the_diagnosis_stays_quiet_without_evidence() -> None:
    # A value that differs in a period whose published value is not 100 or 1.
    assert diagnose(audit_answer(row("2025-01", 100.0, 100.0), row("2025-02", 101.3, 101.1)),
                    PANEL) is None
    # 100 published where the recomputation is 100 too: nothing to say about that period.
    assert diagnose(audit_answer(row("2025-01", 100.0, 100.02), row("2025-02", 99.0, 101.0)),
                    PANEL | {"base_period": "2025-01"}) is None
    # Not every published value of the period is 100: that period is not a reference period.
    assert diagnose(audit_answer(row("2025-02", 100.0, 99.0), row("2025-02", 103.0, 102.0)),
                    PANEL | {"base_period": "2025-01"}) is None


def test_a_json_panel_carrying_its_base_period_is_respected(tmp_path, capsys) -> None:
    """The options may travel in a JSON panel; the check reads them there like the flags."""
    published, _ = write_inputs(tmp_path, earlier=True)
    body = {"periods": [0, 1, 2, 3, 4, 5], "items": [f"c{i}" for i in range(1, 7)],
            "prices": [[0.9 * p for p in PRICES[0]], *PRICES],
            "quantities": [QUANTITIES[0], *QUANTITIES], "reference_value": 1}
    panel = tmp_path / "panel.json"
    panel.write_text(json.dumps(body), encoding="utf-8")
    code, out, _ = check_in_process(capsys, str(published), str(panel))
    assert code == 1 and "Run again with --base-period 1 (with it, all 20" in out
    panel.write_text(json.dumps(body | {"base_period": 1}), encoding="utf-8")
    assert check_in_process(capsys, str(published), str(panel))[0] == 0


def test_the_hint_against_a_running_service(tmp_path, live_url, capsys) -> None:
    published, panel = write_inputs(tmp_path, earlier=True)
    code, out, _ = check_in_process(capsys, str(published), str(panel), "--reference-value", "1",
                                    "--url", live_url)
    assert code == 1 and "--base-period 1 (with it, all 20 values agree)" in out


def _decimal_comma_copy(path: Path, separator: str = ";") -> None:
    """The file as a spreadsheet in a decimal-comma locale saves it: fields separated by
    semicolons (or tabs), decimal commas (common practice in such locales)."""
    lines = path.read_text(encoding="utf-8").splitlines()
    path.write_text("\n".join(line.replace(",", separator).replace(".", ",") for line in lines)
                    + "\n", encoding="utf-8")


@pytest.mark.parametrize("declare", [False, True])
def test_files_from_a_decimal_comma_locale_pass_detected_or_declared(tmp_path, capsys,
                                                                     declare) -> None:
    """The same published table in semicolon-separated, decimal-comma files passes as the
    point-decimal one does: declared with --separator/--decimal, or detected and said."""
    published, panel = write_inputs(tmp_path)
    _decimal_comma_copy(published)
    _decimal_comma_copy(panel)
    options = ["--separator", "semicolon", "--decimal", "comma"] if declare else []
    code, out, err = check_in_process(capsys, str(published), str(panel), "--reference-value",
                                      "1", *options)
    assert code == 0, out + err
    assert "20 published values checked: all agree" in out
    if declare:
        assert "read with" not in err
    else:
        assert f"{published}: read with decimal comma" in err
        assert f"{panel}: read with decimal comma" in err
        assert "separator semicolon" in err


def test_a_decimal_comma_keeps_the_tolerance_of_the_decimals_as_written(tmp_path, capsys) -> None:
    """'1,2731' is four decimals, as '1.2731' is: the typo of the point-decimal test fails the
    check here too, not passed by a tolerance read from the wrong mark."""
    published, panel = write_inputs(tmp_path, wrong=True)
    _decimal_comma_copy(published, "\t")
    _decimal_comma_copy(panel, "\t")
    code, out, err = check_in_process(capsys, str(published), str(panel), "--reference-value",
                                      "1", "--separator", "tab", "--decimal", "comma")
    assert code == 1, out + err
    assert "1 differ" in out


def test_a_decimal_comma_with_comma_separated_fields_cannot_be_checked(tmp_path, capsys) -> None:
    published, panel = write_inputs(tmp_path)
    code, _, err = check_in_process(capsys, str(published), str(panel), "--decimal", "comma")
    assert code == 2
    assert "decimal comma cannot go with fields separated by commas" in err
