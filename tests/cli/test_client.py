"""The Python client: against the service on a loopback socket, and against httpx's
MockTransport for the answers a healthy service does not give (proxies' pages, broken bodies,
connections that fail)."""

from __future__ import annotations

import inspect
import json
from collections.abc import Callable
from datetime import datetime, timedelta, timezone
from pathlib import Path
from typing import Any

import httpx
import pytest
from numpy.testing import assert_allclose

import dualcost.client
from dualcost import DualcostError
from dualcost.client import (
    Client,
    ClientError,
    ProblemError,
    Provenance,
    Saved,
    ServiceUnreachable,
    Table,
    UnreadableAnswer,
    input_digest,
    parse_cell,
    provenance_of,
)
from tests.api.test_comparisons import small_request
from tests.cli.conftest import API_KEY
from tests.conftest import ROOT, free_port, load_example

PANEL = ROOT / "docs" / "examples" / "wrenmouth_panel.csv"


def mock(handler: Callable[[httpx.Request], httpx.Response], **kwargs: Any) -> Client:
    return Client("http://dualcost.test", transport=httpx.MockTransport(handler), **kwargs)


def answering(response: httpx.Response) -> tuple[Client, list[httpx.Request]]:
    """A client whose every request gets ``response``, and the list of requests it sent."""
    sent: list[httpx.Request] = []

    def handler(request: httpx.Request) -> httpx.Response:
        sent.append(request)
        return response

    return mock(handler), sent


# -- the public surface -----------------------------------------------------------------------


def test_the_public_names_are_frozen() -> None:
    assert sorted(dualcost.client.__all__) == [
        "Cell", "Client", "ClientError", "CsvBody", "ProblemError", "Provenance", "Saved",
        "ServiceUnreachable", "Table", "UnreadableAnswer", "input_digest", "parse_cell",
        "provenance_of"]


def test_options_are_keyword_only() -> None:
    """After the request (and a job id or a CSV body), every parameter is keyword-only."""
    leading = {"self", "request", "spec", "job_id", "run_id", "households", "panel", "data", "method",
               "path", "base_url"}
    for name, method in inspect.getmembers(Client, inspect.isfunction):
        if name.startswith("_") and name != "__init__":
            continue
        for p in inspect.signature(method).parameters.values():
            if p.name not in leading:
                assert p.kind in (p.KEYWORD_ONLY, p.VAR_KEYWORD), (name, p.name)


def test_every_client_exception_is_a_dualcost_error() -> None:
    for cls in (ServiceUnreachable, ProblemError, UnreadableAnswer):
        assert issubclass(cls, ClientError) and issubclass(cls, DualcostError)
    assert issubclass(ServiceUnreachable, ConnectionError)


# -- answers by content type (MockTransport) --------------------------------------------------


@pytest.mark.parametrize("response", [
    httpx.Response(204),
    httpx.Response(200, content=b""),
    httpx.Response(202, headers={"content-type": "application/json"}, content=b""),
])
def test_no_content_and_empty_answers_are_none(response) -> None:
    client, _ = answering(response)
    assert client.request("DELETE", "/v1/household-jobs/x") is None


def test_a_csv_answer_is_a_table_with_numbers_parsed() -> None:
    text = ("period,laspeyres_fixed_base,household,skipped,note\r\n"
            "2025-01,100.0,007,false,\r\n2025-02,101.25,12,true,\"a, b\"\r\n"
            "2025-03,1e-05,-3,false,n/a\r\n")
    client, _ = answering(httpx.Response(200, text=text,
                                         headers={"content-type": "text/csv; charset=utf-8"}))
    table = client.index_series({"periods": []}, format="csv")
    assert isinstance(table, Table) and table.text == text and len(table) == 3
    assert table.header == ("period", "laspeyres_fixed_base", "household", "skipped", "note")
    assert table.rows[0] == ("2025-01", 100.0, "007", False, None)
    assert table.column("laspeyres_fixed_base") == [100.0, 101.25, 1e-05]
    assert [type(v) for v in table.column("household")] == [str, int, int]
    assert table.records()[1]["note"] == "a, b"
    with pytest.raises(KeyError, match="the columns are period"):
        table.column("paasche")


def test_a_csv_answer_keeps_its_provenance() -> None:
    """From the answer's headers; or from the trailer rows, which are not data rows."""
    headers = {"content-type": "text/csv", "dualcost-version": "9.9", "dualcost-caution": "Care.",
               "dualcost-input-digest": "sha256:" + "0" * 64}
    client, _ = answering(httpx.Response(200, text="a,b\r\n1,2\r\n", headers=headers))
    table = client.fit({}, format="csv")
    assert table.provenance == Provenance("9.9", "sha256:" + "0" * 64, "Care.")
    assert provenance_of(table) == table.provenance
    trailed = Table.from_csv("a,b\r\n1,2\r\n#dualcost-version,9.9\r\n"
                             "#dualcost-input-digest,sha256:ab\r\n#dualcost-caution,Care.\r\n")
    assert trailed.rows == ((1, 2),) and trailed.provenance == Provenance("9.9", "sha256:ab",
                                                                          "Care.")
    assert Table.from_csv("a\r\n1\r\n").provenance is None
    assert provenance_of({"provenance": {"service": "dualcost", "version": "9.9",
                                         "input_digest": "sha256:ab"}}) == \
        Provenance("9.9", "sha256:ab")
    assert provenance_of({"konus": {}}) is None and provenance_of("1.5") is None


@pytest.mark.parametrize("text,value", [
    ("", None), ("true", True), ("false", False), ("0", 0), ("-12", -12), ("0.5", 0.5),
    ("1e+20", 1e20), ("-2.5E-3", -0.0025), ("007", "007"), ("2025-01", "2025-01"),
    ("1,5", "1,5"), ("nan", "nan"), (" 1", " 1"),
])
def test_cells_are_parsed_as_the_service_writes_them(text, value) -> None:
    parsed = parse_cell(text)
    assert parsed == value and type(parsed) is type(value)


def test_csv_is_asked_for_with_the_format_parameter_and_uploads_say_text_csv() -> None:
    client, sent = answering(httpx.Response(200, json={}))
    client.index_series({"periods": [1]}, format="csv")
    client.index_series_csv(b"period,item,price\n", base_period="2025-01",
                            formulas=["laspeyres", "fisher"], model={"family": "ces", "sigma": 2},
                            geks_window=13, reference_value=None)
    client.fit_csv("period,item,price\n", family="ces", normalise_shares=True)
    assert sent[0].url.params["format"] == "csv"
    query = sent[1].url.params
    assert query["base_period"] == "2025-01" and query["formulas"] == "laspeyres,fisher"
    assert json.loads(query["model"]) == {"family": "ces", "sigma": 2}
    assert query["geks_window"] == "13" and "reference_value" not in query
    assert query["format"] == "json" and sent[1].headers["content-type"] == "text/csv"
    assert sent[1].content == b"period,item,price\n"
    assert sent[2].url.params["normalise_shares"] == "true"
    assert sent[2].url.params["family"] == "ces"


def test_plain_text_is_text_and_other_types_are_bytes() -> None:
    client, _ = answering(httpx.Response(200, text="1.1882",
                                         headers={"content-type": "text/plain"}))
    assert client.request("GET", "/v1/sheet/value") == "1.1882"
    client, _ = answering(httpx.Response(200, content=b"PAR1",
                                         headers={"content-type": "application/octet-stream"}))
    assert client.request("GET", "/x") == b"PAR1"


def test_a_broken_json_answer_is_unreadable() -> None:
    client, _ = answering(httpx.Response(200, content=b'{"konus": ',
                                         headers={"content-type": "application/json"}))
    with pytest.raises(UnreadableAnswer, match="application/json answer of POST"):
        client.compare({})


def test_a_ragged_csv_answer_is_unreadable_not_cut() -> None:
    client, _ = answering(httpx.Response(200, text="period,value\r\n2025-01,100.0,extra\r\n",
                                         headers={"content-type": "text/csv"}))
    with pytest.raises(UnreadableAnswer, match="record 2 has 3 cells, the header 2"):
        client.fit({}, format="csv")


# -- the API key ------------------------------------------------------------------------------


def test_the_api_key_is_sent_as_x_api_key() -> None:
    sent: list[httpx.Request] = []
    with mock(lambda r: sent.append(r) or httpx.Response(200, json={}), api_key="k1") as dc:
        dc.health()
    assert sent[0].headers["x-api-key"] == "k1"
    with mock(lambda r: sent.append(r) or httpx.Response(200, json={})) as dc:
        dc.health()
    assert "x-api-key" not in sent[1].headers


def test_the_api_key_opens_a_service_that_requires_one(keyed_url) -> None:
    with Client(keyed_url) as dc, pytest.raises(ProblemError) as info:
        dc.formulas()
    assert info.value.status == 401 and info.value.type.endswith("unauthorized")
    with Client(keyed_url, api_key=API_KEY) as dc:
        assert "fisher" in {f["formula"] for f in dc.formulas()}


# -- problems and failures --------------------------------------------------------------------


def test_a_problem_raises_with_its_fields() -> None:
    problem = {"type": "/problems/invalid-input", "title": "The request breaks a rule",
               "status": 422, "detail": "1 field breaks a rule",
               "errors": [{"pointer": "/model/sigma", "detail": "must be zero or more"}]}
    client, _ = answering(httpx.Response(422, json=problem, headers={
        "content-type": "application/problem+json", "x-request-id": "r-17"}))
    with pytest.raises(ProblemError) as info:
        client.compare({})
    e = info.value
    assert (e.status, e.type, e.title, e.detail) == (422, "/problems/invalid-input",
                                                     "The request breaks a rule",
                                                     "1 field breaks a rule")
    assert e.errors == problem["errors"] and e.problem == problem and e.request_id == "r-17"
    assert str(e) == "422 The request breaks a rule: 1 field breaks a rule"


def test_an_error_page_that_is_not_a_problem_still_raises_a_problem() -> None:
    page = "<html><body>" + "upstream timed out " * 40 + "</body></html>"
    client, _ = answering(httpx.Response(502, text=page, headers={"content-type": "text/html"}))
    with pytest.raises(ProblemError) as info:
        client.audit({})
    e = info.value
    assert e.status == 502 and e.title == "Bad Gateway" and e.detail == page and e.errors == []
    assert str(e).endswith("...") and len(str(e)) < 330  # the message is short, the detail whole


@pytest.mark.parametrize("failure,reason", [
    (httpx.ConnectError("[Errno 111] Connection refused"), "Connection refused"),
    (httpx.ReadTimeout("timed out"), "no answer within 60 s (ReadTimeout)"),
    (httpx.RemoteProtocolError("Server disconnected without sending a response."),
     "Server disconnected"),
])
def test_transport_failures_raise_service_unreachable(failure, reason) -> None:
    def handler(request: httpx.Request) -> httpx.Response:
        raise failure

    with mock(handler) as dc, pytest.raises(ServiceUnreachable) as info:
        dc.health()
    assert info.value.url == "http://dualcost.test" and reason in str(info.value)
    assert isinstance(info.value.__cause__, httpx.TransportError)


def test_a_port_with_nothing_listening_is_unreachable() -> None:
    url = f"http://127.0.0.1:{free_port()}"
    with Client(url) as dc, pytest.raises(ServiceUnreachable,
                                         match=f"cannot reach the dualcost service at {url}"):
        dc.health()


@pytest.mark.parametrize("url", ["localhost:8000", "ftp://127.0.0.1", "http://"])
def test_an_address_that_is_not_http_is_refused_at_once(url) -> None:
    with pytest.raises(ValueError, match="http:// or https://"):
        Client(url)


# -- the operations, live ---------------------------------------------------------------------


def test_client_compares_and_lists(live_url) -> None:
    with Client(live_url) as dc:
        assert dc.health()["status"] == "ok"
        answer = dc.compare(small_request())
        # The service's digest of the body is the one computed here (RFC 8785, SHA-256).
        origin = provenance_of(answer)
        assert origin is not None and origin.input_digest == input_digest(small_request())
        lasp = next(f for f in answer["formulas"] if f["formula"] == "laspeyres")
        assert_allclose(lasp["value"], (1.3 * 10 + 2 * 5 + 3.6 * 2) / (10 + 10 + 8), rtol=1e-12)
        assert "ces" in {f["family"] for f in dc.families()}
        assert "fisher" in {f["formula"] for f in dc.formulas()}


def test_client_reads_the_answers_that_do_not_hang_on_one_model(live_url) -> None:
    """The client's two doors to the revealed-preference and sensitivity operations, JSON and
    CSV, give what the service answers (the numbers themselves are checked in tests/api)."""
    diary = load_example("revealedPreference.wrenmouth_household_diary.json")
    sweep = load_example("sensitivity.stone_geary_pensioner_frisch.json")
    with Client(live_url) as dc:
        assert not dc.revealed_preference(diary)["consistency"]["garp"]
        table = dc.revealed_preference(diary, format="csv")
        assert table.column("period") == diary["periods"]
        answer = dc.sensitivity(sweep)
        assert len(answer["grid"]["points"]) == len(sweep["grid"]["values"])
        assert dc.sensitivity(sweep, format="csv").column("kind")[-1] == "grid"
        fitted = load_example("fittedSensitivity.wrenmouth_quarterly_three_families.json")
        answer = dc.fitted_sensitivity(fitted)
        assert len(answer["families"]) == len(fitted["families"])
        assert dc.fitted_sensitivity(fitted, format="csv").column("kind")[-1] == "band"


def test_client_raises_the_problem_with_its_pointer(live_url) -> None:
    bad = small_request()
    bad["current"]["prices"][0] = 0
    with Client(live_url) as dc, pytest.raises(ProblemError) as info:
        dc.compare(bad)
    assert info.value.status == 422
    assert info.value.errors[0]["pointer"] == "/current/prices/0"
    assert info.value.request_id


def test_index_series_as_json_and_as_a_table_agree(live_url) -> None:
    body = load_example("indexSeries.wrenmouth_monthly_ces.json")
    with Client(live_url) as dc:
        answer = dc.index_series(body)
        table = dc.index_series(body, format="csv")
        uploaded = dc.index_series_csv(PANEL, base_period="2025-01", format="csv")
        with PANEL.open("rb") as fh:
            from_file = dc.index_series_csv(fh, base_period="2025-01")
    laspeyres = next(f for f in answer["formulas"] if f["formula"] == "laspeyres")
    assert table.column("period") == answer["periods"]
    assert_allclose(table.column("laspeyres_fixed_base"), laspeyres["fixed_base"], rtol=1e-15)
    assert uploaded.column("laspeyres_fixed_base") == table.column("laspeyres_fixed_base")
    assert from_file["base_period"] == "2025-01" and from_file["periods"] == answer["periods"]
    # The JSON answer and the table of one request state one input; an upload its own.
    assert table.provenance is not None and table.provenance.caution
    assert table.provenance == Provenance(answer["provenance"]["version"],
                                          answer["provenance"]["input_digest"],
                                          table.provenance.caution)
    assert uploaded.provenance is not None
    assert uploaded.provenance.input_digest == from_file["provenance"]["input_digest"]


def test_households_in_one_batch_and_as_a_job(live_url) -> None:
    body = load_example("householdIndices.wrenmouth_deciles_ces.json")
    spec = {k: v for k, v in body.items() if k != "households"}
    items = [i["id"] for i in body["items"]]
    lines = [",".join(["household", *items, "expenditure", "weight"])]
    lines += [",".join([h["id"], *(str(h["shares"][i]) for i in items), str(h["expenditure"]),
                        str(h["weight"])]) for h in body["households"]]
    with Client(live_url) as dc:
        batch = dc.household_indices(body)
        rows = dc.household_indices(body, format="csv")
        job = dc.create_household_job(spec)
        streamed = dc.upload_households(job["id"], "\n".join(lines) + "\n")
        done = dc.household_job(job["id"])
        assert dc.delete_household_job(job["id"]) is None
        with pytest.raises(ProblemError) as gone:
            dc.household_job(job["id"])
    assert len(rows) == len(batch["households"]) and done["status"] == "done"
    assert len(streamed) == len(body["households"]) and gone.value.status == 404


def test_a_household_upload_takes_its_dialect_as_keywords(live_url) -> None:
    """separator and decimal go to the upload's query string."""
    body = load_example("householdIndices.wrenmouth_deciles_ces.json")
    spec = {k: v for k, v in body.items() if k != "households"}
    items = [i["id"] for i in body["items"]]
    lines = [";".join(["household", *items])]
    lines += [";".join([h["id"], *(str(h["shares"][i]).replace(".", ",") for i in items)])
              for h in body["households"]]
    with Client(live_url) as dc:
        job = dc.create_household_job(spec)
        streamed = dc.upload_households(job["id"], "\n".join(lines) + "\n",
                                        separator="semicolon", decimal="comma")
        done = dc.household_job(job["id"])
    assert len(streamed) == len(body["households"]) and done["status"] == "done"
    assert not [n for n in done["notices"] if n["code"] == "csv_dialect_detected"]


def test_fits_fitted_comparisons_and_audits(live_url) -> None:
    with Client(live_url) as dc:
        fit = dc.fit(load_example("fitModel.wrenmouth_quarterly_aids.json"))
        parameters = dc.fit(load_example("fitModel.wrenmouth_quarterly_aids.json"), format="csv")
        fitted = dc.fit_and_compare(load_example("fitAndCompare.wrenmouth_quarterly_aids.json"))
        audit = dc.audit(load_example("auditPublishedSeries.wrenmouth_monthly_bulletin.json"))
    assert fit["fit"]["converged"]
    assert len(parameters) == len(fit["parameters"])
    assert fitted["comparison"]["konus"]["base"] > 1
    assert audit["passed"] and audit["checked"] == 9


def test_a_fit_from_csv(live_url) -> None:
    """The fit example's budget data in long form, one CSV row per quarter and item."""
    body = load_example("fitModel.wrenmouth_quarterly_aids.json")
    items = [i["id"] for i in body["items"]]
    lines = ["observation,item,price,expenditure"]
    lines += [f"{label},{i},{body['prices'][t][i]},{body['expenditures'][t][i]}"
              for t, label in enumerate(body["observations"]) for i in items]
    with Client(live_url) as dc:
        fit = dc.fit_csv("\n".join(lines) + "\n", family="aids", restrictions="symmetry")
        table = dc.fit_csv("\n".join(lines) + "\n", family="aids", format="csv")
    assert fit["fit"]["converged"] and fit["family"] == "aids"
    assert "estimate" in table.header


def test_a_path_is_read_and_text_is_not_taken_for_a_path(tmp_path: Path) -> None:
    client, sent = answering(httpx.Response(200, json={}))
    file = tmp_path / "panel.csv"
    file.write_text("period,item,price\n1,a,2\n", encoding="utf-8")
    client.index_series_csv(file)
    client.index_series_csv(str(file))
    assert sent[0].content == b"period,item,price\n1,a,2\n"
    assert sent[1].content == str(file).encode()


# -- saved runs -------------------------------------------------------------------------------


def test_save_adds_save_true_to_the_query_and_gives_the_run_id() -> None:
    client, sent = answering(httpx.Response(200, json={"konus": {}},
                                            headers={"dualcost-run": "ab" * 16}))
    saved = client.save("GET", "/v1/sheet/value", params={"items": "a,b"})
    assert saved == Saved("ab" * 16, {"konus": {}})
    assert dict(sent[0].url.params) == {"items": "a,b", "save": "true"}
    unsaved, _ = answering(httpx.Response(200, json={}))
    with pytest.raises(UnreadableAnswer, match="Dualcost-Run"):
        unsaved.save("POST", "/v1/comparisons", json={})


def test_the_runs_listing_takes_times_in_utc_and_follows_its_pages() -> None:
    pages = {None: {"runs": [{"id": "1"}, {"id": "2"}], "next": "/v1/runs?limit=2&before=7"},
             "7": {"runs": [{"id": "3"}], "next": None}}
    sent: list[httpx.Request] = []

    def handler(request: httpx.Request) -> httpx.Response:
        sent.append(request)
        return httpx.Response(200, json=pages[request.url.params.get("before")])

    client = mock(handler)
    since = datetime(2026, 12, 2, 13, 30, tzinfo=timezone(timedelta(hours=1)))
    assert [r["id"] for r in client.iter_runs(operation="compare", since=since)] == \
        ["1", "2", "3"]
    assert dict(sent[0].url.params) == {"operation": "compare",
                                        "since": "2026-12-02T12:30:00Z"}
    assert client.list_runs(until="2026-12-02", limit=2)["next"]
    assert dict(sent[-1].url.params) == {"until": "2026-12-02", "limit": "2"}


def test_client_saves_reads_lists_and_reruns_a_run(live_url) -> None:
    """A saved comparison read back equal to the answer, listed first, and re-run on the
    same version: identical (JSON), no difference rows (CSV)."""
    with Client(live_url) as dc:
        saved = dc.save("POST", "/v1/comparisons", json=small_request())
        run = dc.get_run(saved.run_id)
        newest = dc.list_runs(operation="compare", limit=1)["runs"]
        check = dc.rerun(saved.run_id)
        table = dc.rerun(saved.run_id, format="csv")
        with pytest.raises(ProblemError) as missing:
            dc.get_run("0" * 32)
    assert run["answer"] == saved.answer and run["input"] == small_request()
    assert [r["id"] for r in newest] == [saved.run_id]
    assert check["identical"] and check["figures_differing"] == 0
    assert table.header[0] == "where" and len(table) == 0
    assert missing.value.status == 404


def test_client_reads_a_finished_household_jobs_results(live_url) -> None:
    """The results read back later are the rows the upload streamed."""
    body = load_example("householdIndices.wrenmouth_deciles_ces.json")
    spec = {k: v for k, v in body.items() if k != "households"}
    items = [i["id"] for i in body["items"]]
    lines = [",".join(["household", *items, "expenditure", "weight"])]
    lines += [",".join([h["id"], *(str(h["shares"][i]) for i in items), str(h["expenditure"]),
                        str(h["weight"])]) for h in body["households"]]
    with Client(live_url) as dc:
        job = dc.create_household_job(spec)
        streamed = dc.upload_households(job["id"], "\n".join(lines) + "\n")
        later = dc.household_job_results(job["id"])
    assert later.header == streamed.header and later.rows == streamed.rows
    assert later.provenance is not None
