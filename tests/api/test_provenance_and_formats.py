"""Provenance at every exit, and content negotiation on every operation.

Every answer of an operation states the service's version and the SHA-256 of its canonical
input: JSON answers in a ``provenance`` member, every answer in ``Dualcost-Version`` and
``Dualcost-Input-Digest`` headers, CSV and text answers with the indexation caution in
``Dualcost-Caution``. The digests are recomputed here independently: the standard library's
``json.dumps`` with sorted keys and compact separators is the JSON Canonicalization Scheme
(RFC 8785) for values whose keys are ASCII and whose numbers are integers or written by Python
in plain notation (checked), once integral floats are written as integers, as RFC 8785 writes
them (Section 3.2.2.3). Content negotiation follows RFC 9110, Section 12.5.1; a refusal is a
406 problem (RFC 9457).
"""

from __future__ import annotations

import copy
import csv
import hashlib
import importlib.metadata
import io
import json
import math
import struct
from typing import Any

import pytest
from fastapi.testclient import TestClient
from hypothesis import given, settings
from hypothesis import strategies as st

from dualcost.api.render import accept_ranges
from dualcost.api.schemas.common import CAUTION
from dualcost.canonical import _plain_rows, _write, canonical_json, es_number
from dualcost.client import Table, input_digest
from tests.api.test_comparisons import small_request
from tests.api.test_estimation_api import _long_csv
from tests.api.test_households import create_job, household_csv, upload
from tests.api.test_series import six_commodity_csv
from tests.conftest import EXAMPLES, load_example

VERSION = importlib.metadata.version("dualcost")
BASKET = {"items": ["rye_loaf", "peat_briquettes", "ferry_pass"],
          "base": {"prices": [2.40, 9.00, 38.0], "quantities": [12, 6, 1]},
          "current": {"prices": [2.52, 12.15, 41.0]},
          "model": {"family": "ces", "sigma": 0.6}}
SHEET_QUERY = ("items=rye_loaf,peat_briquettes,ferry_pass&p0=2.40,9,38&p1=2.52,12.15,41&q0=12,6,1"
               "&family=ces&sigma=0.6")
SERIES_SHEET_QUERY = ("items=rye_loaf,peat_briquettes,ferry_pass&periods=2025-01,2025-02"
                      "&prices=2.40,9,38&prices=2.45,10.5,38&quantities=12,6,1"
                      "&quantities=12,5.6,1&formulas=laspeyres,fisher")
UPRATING_SHEET_QUERY = ("items=rye_loaf,ferry_pass&periods=2025-01,2025-02,2026-01,2026-02"
                        "&prices=2.40,38&prices=2.45,38&prices=2.50,39&prices=2.60,40"
                        "&quantities=12,1&quantities=12,1&quantities=12,1&quantities=12,1"
                        "&measure=twelve_month&period_of_year=1&lag=1&index=laspeyres")
UPRATING = "uprating.wrenmouth_pensions_april.json"
HOUSEHOLDS = "householdIndices.wrenmouth_deciles_ces.json"
FIT = "fitModel.wrenmouth_quarterly_aids.json"


# -- an independent recomputation of the digest -------------------------------------------------


def _plain(value: Any) -> Any:
    """``value`` with integral floats as ints; every other float must be one Python writes in
    plain notation, where its repr is RFC 8785's form."""
    if isinstance(value, float):
        if value == int(value) and abs(value) < 2 ** 53:
            return int(value)
        assert "e" not in repr(value), f"{value!r} needs the exponent rules of RFC 8785"
        return value
    if isinstance(value, dict):
        assert all(k.isascii() for k in value), "non-ASCII keys sort by UTF-16 in RFC 8785"
        return {k: _plain(v) for k, v in value.items()}
    if isinstance(value, list):
        return [_plain(v) for v in value]
    return value


def expected_digest(value: Any) -> str:
    text = json.dumps(_plain(value), sort_keys=True, separators=(",", ":"), ensure_ascii=False)
    return "sha256:" + hashlib.sha256(text.encode("utf-8")).hexdigest()


def assert_provenance(answer: dict[str, Any], digest: str) -> None:
    assert answer["provenance"] == {"service": "dualcost", "version": VERSION,
                                    "input_digest": digest}


def assert_headers(r: Any, digest: str, *, caution: bool = True) -> None:
    assert r.headers["dualcost-version"] == VERSION
    assert r.headers["dualcost-input-digest"] == digest
    if caution:
        assert r.headers["dualcost-caution"] == " ".join(CAUTION.split())
        r.headers["dualcost-caution"].encode("ascii")  # RFC 9110 field values: ASCII here


# -- the canonical form -------------------------------------------------------------------------

#: RFC 8785, Appendix B: IEEE 754 doubles (as hex) and their canonical text.
RFC_8785_NUMBERS = [
    ("0000000000000000", "0"), ("8000000000000000", "0"), ("0000000000000001", "5e-324"),
    ("8000000000000001", "-5e-324"), ("7fefffffffffffff", "1.7976931348623157e+308"),
    ("ffefffffffffffff", "-1.7976931348623157e+308"), ("4340000000000000", "9007199254740992"),
    ("c340000000000000", "-9007199254740992"), ("4430000000000000", "295147905179352830000"),
    ("44b52d02c7e14af5", "9.999999999999997e+22"), ("44b52d02c7e14af6", "1e+23"),
    ("44b52d02c7e14af7", "1.0000000000000001e+23"), ("444b1ae4d6e2ef4e", "999999999999999700000"),
    ("444b1ae4d6e2ef4f", "999999999999999900000"), ("444b1ae4d6e2ef50", "1e+21"),
    ("3eb0c6f7a0b5ed8c", "9.999999999999997e-7"), ("3eb0c6f7a0b5ed8d", "0.000001"),
    ("41b3de4355555553", "333333333.3333332"), ("41b3de4355555554", "333333333.33333325"),
    ("41b3de4355555555", "333333333.3333333"), ("41b3de4355555556", "333333333.3333334"),
    ("41b3de4355555557", "333333333.33333343"), ("becbf647612f3696", "-0.0000033333333333333333"),
    ("43143ff3c1cb0959", "1424953923781206.2"),
]


@pytest.mark.parametrize(("bits", "text"), RFC_8785_NUMBERS)
def test_numbers_are_written_as_rfc_8785_writes_them(bits: str, text: str) -> None:
    """The number serialisation table of RFC 8785, Appendix B."""
    assert es_number(struct.unpack(">d", bytes.fromhex(bits))[0]) == text


def test_canonical_form_sorts_members_and_escapes_as_rfc_8785() -> None:
    """RFC 8785, 3.2.3: members sorted by UTF-16 code units, its own example (U+1F600, whose
    surrogates are 0xD83D 0xDE00, comes before U+FB33; by code points it would come after);
    3.2.2.2: control characters as short escapes or \\u00xx in lowercase, other characters as
    they are."""
    keys = ["\u20ac", "\r", "\ufb33", "1", "\U0001f600", "\u0080", "\u00f6"]
    text = canonical_json(dict.fromkeys(keys, 0)).decode("utf-8")
    assert text == '{"\\r":0,"1":0,"\u0080":0,"ö":0,"€":0,"😀":0,"\ufb33":0}'
    value = {"b": [1.0, 0.5, None, True, "t\n\x1f\u00fc"], "a": {}}
    assert canonical_json(value).decode("utf-8") == '{"a":{},"b":[1,0.5,null,true,"t\\n\\u001fü"]}'


_SCALARS = (st.none() | st.booleans() | st.integers(-2 ** 60, 2 ** 60) | st.text(max_size=6)
            | st.floats(allow_nan=False, allow_infinity=False)
            | st.sampled_from([0.5, 2.4, 1e-5, 1e-7, 12.0, -0.0, 1e16, 1e21, 3e300]))
_JSON = st.recursive(_SCALARS, lambda inner: st.lists(inner, max_size=12)
                     | st.dictionaries(st.text(max_size=4), inner, max_size=12), max_leaves=60)


@settings(max_examples=300, deadline=None, derandomize=True)
@given(_JSON)
def test_the_quick_road_writes_what_the_scheme_writes(value: Any) -> None:
    """canonical_json takes orjson where it gives RFC 8785's text; on random JSON values (long
    vectors, tiny and huge floats, keys beyond U+FFFF) it must equal the value-by-value
    writer."""
    out: list[str] = []
    _write(value, out)
    expected = "".join(out).encode("utf-8", "surrogatepass")
    assert canonical_json(value) == expected
    assert canonical_json(value, json_values=True) == expected


_GAPPY_ROW = st.lists(st.none() | st.floats(allow_nan=False, allow_infinity=False)
                      | st.sampled_from([0.5, 2.4, 1e-5, 1e-7, 12.0, -0.0, 1e16, 3e300]),
                      min_size=9, max_size=30)


def test_a_plain_panel_takes_orjson_at_once_and_a_nan_in_it_is_still_refused() -> None:
    """Twelve rows of plain floats and nulls: orjson's text as it is, equal to the scheme's;
    one NaN among them has no canonical form, as the value-by-value writer says."""
    rows: list[list[Any]] = [[None if (t + i) % 7 == 0 else 1.5 + t / 7 + i / 3
                              for i in range(20)] for t in range(12)]
    assert _plain_rows(rows)
    out: list[str] = []
    _write(rows, out)
    assert canonical_json(rows) == "".join(out).encode("utf-8")
    rows[5][3] = float("nan")
    assert not _plain_rows(rows)
    with pytest.raises(ValueError):
        canonical_json(rows)


_ODD_CELL = st.sampled_from([float("nan"), float("inf"), True, 3, 2 ** 60, "1.5", [1.5], {},
                             0.0, 7.0, 1e-300])


@settings(max_examples=300, deadline=None, derandomize=True)
@given(st.lists(_GAPPY_ROW, max_size=4) | st.lists(_GAPPY_ROW, min_size=9, max_size=12),
       st.lists(st.tuples(st.integers(0, 11), st.integers(0, 29), _ODD_CELL), max_size=2))
def test_rows_with_gaps_are_written_as_the_scheme_writes_them(value: Any, odd: Any) -> None:
    """A panel's rows (floats with nulls where an item is not priced) take orjson as they are
    when every float is plain, checked row by row or, for many rows, all at once; whole, tiny,
    huge or non-finite floats, integers, booleans, text or containers among them must still be
    written as the value-by-value writer of RFC 8785 writes them (or refused as it refuses
    them)."""
    for row, column, cell in odd:
        if row < len(value) and column < len(value[row]):
            value[row][column] = cell
    out: list[str] = []
    try:
        _write(value, out)
    except ValueError:
        with pytest.raises(ValueError):
            canonical_json(value)
        return
    assert canonical_json(value) == "".join(out).encode("utf-8")


_TOKENS = st.sampled_from([1.0, -0.0, 0.5, 1e-5, 1e-7, 1e16, 1e21, 2.0 ** 53, 9007199254740993,
                           2 ** 63 - 1, -(2 ** 63), 2 ** 64, 123456789012345678, 1e-4, 0.1,
                           0.30000000000000004, 5e-324, "\U0001f600", "\ufb33", "\x1f\x7f",
                           "\u2028", "\ud800", "1.0", "e5", None, True,
                           # strings that hold what a whole float ends with, and quotes
                           "1.0,", "[2.0]", "x.0}", '"', '".0,', '\\".0]', "-0.0,",
                           # numbers orjson writes with an exponent that RFC 8785 writes
                           # plainly (1e-6 to 1e-5, 1e16 to 1e21) or otherwise, and strings
                           # that look like them
                           9.185394123497313e-6, -2.5e-6, 1.5e16, -1e20, 3e-300, -1.5e300,
                           "9e-6", "type-2e-5", "x1e+16,", '"2e-6'])
_RISKY_JSON = st.recursive(_SCALARS | _TOKENS, lambda inner: st.lists(inner, max_size=6)
                           | st.dictionaries(st.text(max_size=3) | _TOKENS.filter(
                               lambda t: isinstance(t, str)), inner, max_size=6), max_leaves=30)


@settings(max_examples=500, deadline=None, derandomize=True)
@given(_RISKY_JSON)
def test_the_quickest_road_writes_what_the_scheme_writes(value: Any) -> None:
    """canonical_json(json_values=True) takes orjson's sorted text as it is unless a token in it
    may be written otherwise (whole floats, exponents, long integers, characters beyond U+FFFF,
    null): on random JSON values dense in such tokens (and in strings that only look like
    them) it must equal the value-by-value writer of RFC 8785."""
    out: list[str] = []
    try:
        _write(value, out)
    except ValueError:
        with pytest.raises(ValueError):
            canonical_json(value, json_values=True)
        return
    assert canonical_json(value, json_values=True) == "".join(out).encode("utf-8",
                                                                          "surrogatepass")


def test_the_quickest_road_is_taken_where_orjson_writes_the_scheme_s_text() -> None:
    """A request of prices and ids takes orjson's text, with whole floats mended (12.0 written
    12, outside strings only: "group 1.0,2.0]" stays as it is); a negative zero or a backslash
    in a string (where quotes cannot simply be counted) sends it down the quicker road, to the
    same text."""
    from dualcost.canonical import _quickest

    value = {"base": {"prices": {f"item_{i}": 1.25 + i / 7 for i in range(300)},
                      "quantities": [12.5, 0.25, 3.75] * 60},
             "model": {"family": "ces", "sigma": 0.7}, "ids": ["a", "b"], "n": 12}
    out: list[str] = []
    _write(value, out)
    assert _quickest(value) == "".join(out).encode()
    for whole in ({"q": [12.0, 0.0, 2.0 ** 53]}, {"name": "group 1.0"},
                  {"tree": {"name": "group 1.0,2.0]", "sigma": 2.0, "children": ["a.0}"]}}):
        out = []
        _write(value | whole, out)
        assert _quickest(value | whole) == "".join(out).encode()
    # Shares of a few millionths (orjson '9.1e-6', RFC 8785 '0.0000091') and huge numbers are
    # mended in the text too, outside strings only.
    for tiny in ({"shares": [9.1e-6, 0.25, -2.5e-6, 1e-7], "note": "9.1e-6, type-2e-5"},
                 {"h": [{"id": "1e+16", "x": 1.5e16, "y": 3e-300}]}):
        out = []
        _write(value | tiny, out)
        assert _quickest(value | tiny) == "".join(out).encode()
    for declined in ({"q": -0.0}, {"q": 12.0, "name": 'say "1.0,"'}):
        assert _quickest(value | declined) is None
        assert canonical_json(value | declined, json_values=True) == canonical_json(
            value | declined)


def test_orjson_writes_the_digits_python_s_repr_writes() -> None:
    """The quick road relies on orjson's shortest round-trip digits being repr's (both the
    shortest digits that read back, the nearest of them) for doubles in [1e-4, 1e16): checked
    on 50,000 random bit patterns there, seeded."""
    import numpy as np
    import orjson

    rng = np.random.default_rng(8785)
    bits = rng.integers(0x3F1A36E2EB1C432D, 0x4341C37937E08000, size=50_000, dtype=np.int64)
    values = bits.view(np.float64).tolist()
    assert all(1e-4 <= v < 1e16 for v in values)
    assert orjson.dumps(values).decode() == "[" + ",".join(map(repr, values)) + "]"


@pytest.mark.parametrize("vector", [
    [0.1 * k + 0.05 for k in range(20)], [-3.5 + k for k in range(20)],
    [2.0 ** -k for k in range(20)], [10.0 ** k + 0.5 for k in range(20)], [1.0] * 20,
    [k / 7 for k in range(1, 20)] + [1e-5],
])
def test_long_vectors_keyed_or_not_take_the_quick_road_to_the_same_text(vector) -> None:
    for value in (vector, {f"item_{k:02d}": v for k, v in enumerate(vector)}):
        out: list[str] = []
        _write(value, out)
        assert canonical_json(value) == "".join(out).encode()


@pytest.mark.parametrize("value", [[0.5] * 9 + [math.nan], {str(i): 0.5 for i in range(9)} |
                                   {"x": math.inf}, [math.nan], {"a": -math.inf}])
def test_nan_and_infinity_have_no_canonical_form(value: Any) -> None:
    with pytest.raises(ValueError, match="NaN and infinity"):
        canonical_json(value)
    with pytest.raises(ValueError, match="NaN and infinity"):
        canonical_json(value, json_values=True)


def test_key_order_whitespace_and_number_spelling_leave_the_digest(client: TestClient) -> None:
    """Two bodies that differ only in member order, whitespace and how a number is spelt get
    one digest; a changed number another."""
    first = json.dumps(BASKET)
    second = ('{ "model": {"sigma": 6e-1, "family": "ces"},\n  "current": {"prices": '
              '[2.520, 12.15, 41]},\n "base": {"quantities": [12.0, 6, 1.0], "prices": [2.4, 9, '
              '38.00]}, "items": ["rye_loaf", "peat_briquettes", "ferry_pass"]}')
    third = first.replace("12.15", "12.16")
    digests = []
    for text in (first, second, third):
        r = client.post("/v1/comparisons", content=text.encode(),
                        headers={"content-type": "application/json"})
        assert r.status_code == 200, r.text
        digests.append(r.json()["provenance"]["input_digest"])
    assert digests[0] == digests[1] == expected_digest(BASKET) == input_digest(BASKET)
    assert digests[2] != digests[0]


@pytest.mark.parametrize("name", sorted(p.name for p in EXAMPLES.glob("*.json")))
def test_every_example_gets_the_digest_of_its_body(client: TestClient, name: str) -> None:
    """For every example request, the digest in the answer is the digest of the body as sent,
    recomputed independently: a pipeline needs nothing but the body it sent."""
    operation = name.split(".")[0]
    path = {"compare": "/v1/comparisons", "indexSeries": "/v1/index-series",
            "auditPublishedSeries": "/v1/audits", "fitModel": "/v1/fits",
            "fitAndCompare": "/v1/fitted-comparisons",
            "householdIndices": "/v1/household-indices", "uprating": "/v1/uprating",
            "indexTree": "/v1/index-tree",
            "upratingFromIndexTree": "/v1/uprating/index-tree",
            "revealedPreference": "/v1/revealed-preference",
            "sensitivity": "/v1/sensitivity",
            "fittedSensitivity": "/v1/fitted-sensitivity"}[operation]
    body = load_example(name)
    r = client.post(path, json=body)
    assert r.status_code == 200, r.text
    assert_provenance(r.json(), expected_digest(body))
    assert_headers(r, expected_digest(body), caution=False)


def test_the_version_is_the_installed_distribution_s() -> None:
    from dualcost.api.provenance import _pyproject_version, service_version
    from tests.conftest import ROOT

    assert service_version() == VERSION
    assert _pyproject_version(ROOT / "pyproject.toml") == VERSION  # not bumped in one place only


# -- every operation's answer -------------------------------------------------------------------


def test_comparison_json_and_csv_carry_one_digest(client: TestClient) -> None:
    """Accept: text/csv gets the comparison as one table, one row per measure, with the same
    figures and the same digest as the JSON answer (how an answer is presented is not input)."""
    as_json = client.post("/v1/comparisons", json=BASKET).json()
    r = client.post("/v1/comparisons", json=BASKET, headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"] == "text/csv; charset=utf-8"
    assert_headers(r, as_json["provenance"]["input_digest"])
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert list(rows[0]) == ["measure", "value", "compared_with", "bias_points", "bias_percent"]
    values = {row["measure"]: row for row in rows}
    assert float(values["konus_base"]["value"]) == as_json["konus"]["base"]
    for f in as_json["formulas"]:
        assert float(values[f["formula"]]["value"]) == f["value"]
        assert values[f["formula"]]["compared_with"] == f["compared_with"]
        assert float(values[f["formula"]]["bias_points"]) == f["bias_points"]
    assert float(values["compensating_variation"]["value"]) == \
        as_json["compensation"]["compensating_variation"]
    assert not r.text.startswith("#") and "#dualcost" not in r.text  # the body: a plain table


def test_trailer_rows_on_request_keep_the_table_rectangular(client: TestClient) -> None:
    r = client.post("/v1/comparisons?format=csv&provenance=trailer", json=BASKET)
    records = list(csv.reader(io.StringIO(r.text)))
    assert {len(rec) for rec in records} == {5}
    digest = expected_digest(BASKET)
    assert records[-3:] == [["#dualcost-version", VERSION, "", "", ""],
                            ["#dualcost-input-digest", digest, "", "", ""],
                            ["#dualcost-caution", CAUTION, "", "", ""]]
    table = Table.from_csv(r.text)  # the client takes the trailer off, into its provenance
    assert table.provenance is not None and table.provenance.input_digest == digest
    assert table.column("measure")[-1] == "compensated_income"


def test_series_answers(client: TestClient) -> None:
    body = load_example("indexSeries.wrenmouth_monthly_ces.json")
    digest = expected_digest(body)
    r = client.post("/v1/index-series?format=csv", json=body)
    assert_headers(r, digest)
    text = six_commodity_csv()
    sha = hashlib.sha256(text.encode()).hexdigest()
    want = expected_digest({"csv_sha256": sha, "query": {"reference_value": "1"}})
    for fmt in ("json", "csv"):  # format is presentation: left out of the query
        r = client.post(f"/v1/index-series/csv?reference_value=1&format={fmt}",
                        content=text.encode(), headers={"content-type": "text/csv"})
        assert r.status_code == 200, r.text
        assert_headers(r, want, caution=fmt == "csv")
        if fmt == "json":
            assert_provenance(r.json(), want)


def test_audit_answers(client: TestClient) -> None:
    body = load_example("auditPublishedSeries.wrenmouth_monthly_bulletin.json")
    as_json = client.post("/v1/audits", json=body).json()
    r = client.post("/v1/audits", json=body, headers={"accept": "text/csv"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    assert_headers(r, expected_digest(body))
    rows = list(csv.DictReader(io.StringIO(r.text)))
    assert len(rows) == as_json["checked"]
    assert [float(row["recomputed"]) for row in rows] == \
        [row["recomputed"] for row in as_json["rows"]]
    assert {row["passed"] for row in rows} == {"true"}


def test_fit_answers(client: TestClient) -> None:
    body = load_example(FIT)
    r = client.post("/v1/fits?format=csv", json=body)
    assert_headers(r, expected_digest(body))
    text = _long_csv(body)
    sha = hashlib.sha256(text.encode()).hexdigest()
    r = client.post("/v1/fits/csv?family=aids&restrictions=symmetry&format=json",
                    content=text.encode(), headers={"content-type": "text/csv"})
    assert r.status_code == 200, r.text
    want = expected_digest({"csv_sha256": sha,
                            "query": {"family": "aids", "restrictions": "symmetry"}})
    assert_provenance(r.json(), want)


def test_demo_result_is_the_comparison_answer(client: TestClient) -> None:
    demo = client.get("/v1/demo").json()
    digest = expected_digest(demo["request"])
    assert_provenance(demo, digest)
    assert client.post("/v1/comparisons", json=demo["request"]).json() == demo["result"]


def test_household_batch_and_job(client: TestClient) -> None:
    body = copy.deepcopy(load_example(HOUSEHOLDS))
    r = client.post("/v1/household-indices?format=csv&provenance=trailer", json=body)
    assert_headers(r, expected_digest(body))
    records = list(csv.reader(io.StringIO(r.text)))
    assert records[-2][:2] == ["#dualcost-input-digest", expected_digest(body)]
    assert len({len(rec) for rec in records}) == 1

    spec = {k: v for k, v in body.items() if k != "households"}
    job = create_job(client, body)
    assert_provenance(job, expected_digest(spec))
    text = household_csv(body)
    r = upload(client, job, text)
    assert r.status_code == 200, r.text
    after = expected_digest({"job": spec,
                             "households_csv_sha256": hashlib.sha256(text.encode()).hexdigest()})
    assert_headers(r, after)
    status = client.get(job["links"]["self"])
    assert status.json()["status"] == "done"
    assert_provenance(status.json(), after)


def test_job_stream_trailer(client: TestClient) -> None:
    body = copy.deepcopy(load_example(HOUSEHOLDS))
    job = create_job(client, body)
    r = client.post(job["links"]["households"] + "?provenance=trailer",
                    content=household_csv(body).encode(), headers={"content-type": "text/csv"})
    table = Table.from_csv(r.text)
    assert table.provenance is not None
    assert table.provenance.input_digest == r.headers["dualcost-input-digest"]
    assert len(table) == len(body["households"])


def test_spreadsheet_forms_carry_the_digest_of_their_comparison(client: TestClient) -> None:
    """The forms' digest is that of the body their query is read into: the same for decimal
    points and commas, and the same as POST /v1/comparisons of that body."""
    digest = expected_digest(BASKET)
    point = client.get(f"/v1/sheet/value?{SHEET_QUERY}")
    comma = client.get("/v1/sheet/value?items=rye_loaf;peat_briquettes;ferry_pass&p0=2,40;9;38"
                       "&p1=2,52;12,15;41&q0=12;6;1&family=ces&sigma=0,6&decimal=comma")
    table = client.get("/v1/sheet/comparison?items=rye_loaf;peat_briquettes;ferry_pass"
                       "&p0=2,40;9;38&p1=2,52;12,15;41&q0=12;6;1&family=ces&sigma=0,6"
                       "&decimal=comma&provenance=trailer")
    for r in (point, comma, table):
        assert r.status_code == 200, r.text
        assert_headers(r, digest)
    records = list(csv.reader(io.StringIO(table.text), delimiter=";"))
    assert records[-2] == ["#dualcost-input-digest", digest, "", "", ""]
    series = client.get(f"/v1/sheet/series?{SERIES_SHEET_QUERY}")
    assert series.status_code == 200, series.text
    assert_headers(series, expected_digest({
        "items": ["rye_loaf", "peat_briquettes", "ferry_pass"], "periods": ["2025-01", "2025-02"],
        "prices": [[2.4, 9, 38], [2.45, 10.5, 38]], "quantities": [[12, 6, 1], [12, 5.6, 1]],
        "formulas": ["laspeyres", "fisher"]}))


# -- content negotiation ------------------------------------------------------------------------


def _job(client: TestClient) -> dict[str, Any]:
    return create_job(client, copy.deepcopy(load_example(HOUSEHOLDS)))


def _requests(client: TestClient) -> dict[str, tuple[str, str, dict[str, Any]]]:
    """A valid request for every operation under /v1 that answers with a body."""
    households = copy.deepcopy(load_example(HOUSEHOLDS))
    fit = load_example(FIT)
    job, done = _job(client), _job(client)
    csv_upload = {"headers": {"content-type": "text/csv"}}
    assert client.post(done["links"]["households"], content=household_csv(households).encode(),
                       **csv_upload).status_code == 200
    run = client.post("/v1/comparisons?save=true", json=BASKET).headers["dualcost-run"]
    return {
        "compare": ("POST", "/v1/comparisons", {"json": BASKET}),
        "indexSeries": ("POST", "/v1/index-series",
                        {"json": load_example("indexSeries.wrenmouth_monthly_ces.json")}),
        "indexSeriesFromCsv": ("POST", "/v1/index-series/csv",
                               {"content": six_commodity_csv().encode(), **csv_upload}),
        "auditPublishedSeries": ("POST", "/v1/audits", {"json": load_example(
            "auditPublishedSeries.wrenmouth_monthly_bulletin.json")}),
        "fitModel": ("POST", "/v1/fits", {"json": fit}),
        "fitModelCsv": ("POST", "/v1/fits/csv?family=aids",
                        {"content": _long_csv(fit).encode(), **csv_upload}),
        "fitAndCompare": ("POST", "/v1/fitted-comparisons",
                          {"json": load_example("fitAndCompare.wrenmouth_quarterly_aids.json")}),
        "householdIndices": ("POST", "/v1/household-indices", {"json": households}),
        "createHouseholdJob": ("POST", "/v1/household-jobs",
                               {"json": {k: v for k, v in households.items()
                                         if k != "households"}}),
        "householdIndicesFromCsv": ("POST", job["links"]["households"],
                                    {"content": household_csv(households).encode(),
                                     **csv_upload}),
        "getHouseholdJob": ("GET", job["links"]["self"], {}),
        "getHouseholdJobResults": ("GET", done["links"]["results"], {}),
        "getRun": ("GET", f"/v1/runs/{run}", {}),
        "listRuns": ("GET", "/v1/runs", {}),
        "rerunRun": ("POST", f"/v1/runs/{run}/rerun", {}),
        "listPreferenceFamilies": ("GET", "/v1/preference-families", {}),
        "listIndexFormulas": ("GET", "/v1/index-formulas", {}),
        "demo": ("GET", "/v1/demo", {}),
        "sheetValue": ("GET", f"/v1/sheet/value?{SHEET_QUERY}", {}),
        "sheetComparison": ("GET", f"/v1/sheet/comparison?{SHEET_QUERY}", {}),
        "sheetSeries": ("GET", f"/v1/sheet/series?{SERIES_SHEET_QUERY}", {}),
        "uprating": ("POST", "/v1/uprating", {"json": load_example(UPRATING)}),
        "sheetUprating": ("GET", f"/v1/sheet/uprating?{UPRATING_SHEET_QUERY}", {}),
        "indexTree": ("POST", "/v1/index-tree",
                      {"json": load_example("indexTree.wrenmouth_coicop.json")}),
        "sheetIndexTree": ("GET", "/v1/sheet/index-tree?node=07%20transport&period=2026-03", {}),
        "indexTreeFromCsv": ("POST", f"/v1/index-tree/csv?{tree_csv_query()}",
                             {"content": tree_csv().encode(), **csv_upload}),
        "upratingFromIndexTree": ("POST", "/v1/uprating/index-tree", {"json": load_example(
            "upratingFromIndexTree.wrenmouth_pension_from_the_tree.json")}),
        "sheetSweep": ("GET", f"/v1/sheet/sweep?{SHEET_QUERY}&values=0.2,1", {}),
        "revealedPreference": ("POST", "/v1/revealed-preference", {"json": load_example(
            "revealedPreference.wrenmouth_household_diary.json")}),
        "sensitivity": ("POST", "/v1/sensitivity", {"json": load_example(
            "sensitivity.stone_geary_pensioner_frisch.json")}),
        "fittedSensitivity": ("POST", "/v1/fitted-sensitivity", {"json": load_example(
            "fittedSensitivity.wrenmouth_quarterly_three_families.json")}),
        "readTable": ("POST", "/v1/tables", {"content": six_commodity_csv().encode(),
                                             **csv_upload}),
    }


def tree_csv() -> str:
    """The Wrenmouth demo tree's quotes as a long CSV table (tests/api/test_index_tree_csv.py)."""
    from tests.api.test_index_tree_csv import as_csv, demo, records

    return as_csv(records(demo()))


def tree_csv_query() -> str:
    from urllib.parse import urlencode

    from tests.api.test_index_tree_csv import demo, query

    return urlencode(query(demo()))


def test_every_operation_is_covered(client: TestClient) -> None:
    """Every GET and POST operation under /v1 is in :func:`_requests` (a new one must be)."""
    doc = client.get("/openapi.json").json()
    operations = {op["operationId"] for path, item in doc["paths"].items()
                  if path.startswith("/v1/") for method, op in item.items()
                  if method in ("get", "post")}
    assert operations == set(_requests(client))
    for path, item in doc["paths"].items():
        for method, op in item.items():
            if path.startswith("/v1/") and method in ("get", "post"):
                assert "406" in op["responses"], op["operationId"]


@pytest.mark.parametrize("operation", sorted(
    ["compare", "indexSeries", "indexSeriesFromCsv", "auditPublishedSeries", "fitModel",
     "fitModelCsv", "fitAndCompare", "householdIndices", "createHouseholdJob",
     "householdIndicesFromCsv", "getHouseholdJob", "listPreferenceFamilies", "listIndexFormulas",
     "demo", "sheetValue", "sheetComparison", "sheetSeries", "uprating", "sheetUprating",
     "indexTree", "sheetIndexTree", "sheetSweep", "revealedPreference", "sensitivity",
     "getHouseholdJobResults", "getRun", "listRuns", "rerunRun", "fittedSensitivity",
     "upratingFromIndexTree", "indexTreeFromCsv", "readTable"]))
def test_an_accept_header_that_admits_nothing_gets_406(client: TestClient, operation: str) -> None:
    method, path, kwargs = _requests(client)[operation]
    headers = {**kwargs.pop("headers", {}), "accept": "image/png"}
    r = client.request(method, path, headers=headers, **kwargs)
    assert r.status_code == 406, r.text
    assert r.headers["content-type"] == "application/problem+json"
    problem = r.json()
    assert problem["type"] == "/problems/not-acceptable" and problem["status"] == 406
    assert problem["acceptable"] and all(m in problem["detail"] for m in problem["acceptable"])
    # ... and what it offers is accepted.
    headers["accept"] = ", ".join(problem["acceptable"])
    again = client.request(method, path, headers=headers, **kwargs)
    if operation in ("householdIndicesFromCsv",):  # the job has its households now
        assert again.status_code == 200 or again.status_code == 409
    else:
        assert again.status_code in (200, 201), again.text
        assert again.headers["content-type"].split(";")[0] == problem["acceptable"][0]


@pytest.mark.parametrize(("accept", "media"), [
    (None, "application/json"),
    ("*/*", "application/json"),
    ("application/*", "application/json"),
    ("text/*", "text/csv"),
    ("text/csv", "text/csv"),
    ("text/csv, */*", "text/csv"),                        # the more specific range, at equal q
    ("text/csv;q=0.5, application/json", "application/json"),
    ("text/csv;q=0, */*", "application/json"),            # q=0: not acceptable
    ("*/*;q=0.5, application/json;q=0.4", "text/csv"),    # JSON's own range gives it 0.4
    ("application/json, application/problem+json", "application/json"),
    ("text/html,application/xhtml+xml,application/xml;q=0.9,*/*;q=0.8", "application/json"),
    ("not a media range", "application/json"),            # nothing parses: as if absent
])
def test_accept_header_choices(client: TestClient, accept: str | None, media: str) -> None:
    """RFC 9110, 12.5.1: the most specific range that matches gives a type its weight."""
    headers = {} if accept is None else {"accept": accept}
    r = client.post("/v1/comparisons", json=BASKET, headers=headers)
    assert r.status_code == 200, r.text
    assert r.headers["content-type"].split(";")[0] == media


@pytest.mark.parametrize("accept", ["application/problem+json", "application/xml",
                                    "application/json;q=0, text/csv;q=0"])
def test_problem_json_alone_admits_no_answer(client: TestClient, accept: str) -> None:
    """application/problem+json is the type of error answers, not of a comparison."""
    r = client.post("/v1/comparisons", json=BASKET, headers={"accept": accept})
    assert r.status_code == 406
    assert r.json()["acceptable"] == ["application/json", "text/csv"]


def test_format_decides_over_accept(client: TestClient) -> None:
    r = client.post("/v1/comparisons?format=json", json=BASKET, headers={"accept": "text/csv"})
    assert r.headers["content-type"] == "application/json"
    r = client.post("/v1/comparisons?format=csv", json=BASKET, headers={"accept": "image/png"})
    assert r.status_code == 200 and r.headers["content-type"].startswith("text/csv")
    r = client.post("/v1/audits?format=csv", json=load_example(
        "auditPublishedSeries.wrenmouth_monthly_bulletin.json"),
        headers={"accept": "application/json"})
    assert r.headers["content-type"].startswith("text/csv")


def test_an_unknown_format_is_422_naming_it(client: TestClient) -> None:
    r = client.post("/v1/comparisons?format=xlsx", json=BASKET)
    assert r.status_code == 422
    assert r.json()["errors"][0]["pointer"] == "#/query/format"


def test_problems_are_problem_json_whatever_the_accept(client: TestClient) -> None:
    """RFC 9457 practice: an error is a problem whatever the Accept header asked for. A body
    that breaks a rule of its schema is refused before the format is chosen; a rule the core
    checks, after (so an Accept that admits nothing is 406 first)."""
    for accept in ("text/csv", "image/png", "application/json"):
        r = client.post("/v1/comparisons", json={"items": ["a"]}, headers={"accept": accept})
        assert r.status_code == 422
        assert r.headers["content-type"] == "application/problem+json"
    for accept in ("text/csv", "application/json"):
        r = client.post("/v1/comparisons", json=small_request(family="ces", sigma=-1),
                        headers={"accept": accept})
        assert r.status_code == 422
        assert r.headers["content-type"] == "application/problem+json"


def test_accept_parsing() -> None:
    ranges = accept_ranges("Text/CSV;q=0.3;charset=utf-8, */*;q=0.1, image/png;q=2, bad, "
                           "*/json, text/plain;q=abc, application/json;q=1;ext=1")
    assert [(r.type, r.subtype, r.q) for r in ranges] == [
        ("text", "csv", 0.3), ("*", "*", 0.1), ("application", "json", 1.0)]


def test_a_dashboard_elsewhere_may_read_the_provenance_headers() -> None:
    """CORS (Fetch standard): headers outside the safelist reach a page of another origin only
    when Access-Control-Expose-Headers names them."""
    from dualcost.api.app import create_app
    from dualcost.config import Settings

    origin = "https://dashboards.wrenmouth.example"
    client = TestClient(create_app(Settings(examples_dir=EXAMPLES, cors_origins=(origin,))))
    r = client.post("/v1/comparisons", json=BASKET, headers={"origin": origin})
    exposed = {h.strip().lower() for h in r.headers["access-control-expose-headers"].split(",")}
    assert {"dualcost-version", "dualcost-input-digest", "dualcost-caution"} <= exposed


@pytest.mark.parametrize("value,text", [
    (2.0 ** 53, "9007199254740992"), (-(2.0 ** 53), "-9007199254740992"),
    (2.0 ** 53 + 2, "9007199254740994"), (1e16, "10000000000000000")])
def test_whole_floats_from_two_to_the_53rd_are_written_without_a_fraction(value, text) -> None:
    """RFC 8785, 3.2.2.3: numbers as ECMAScript's Number.prototype.toString writes them, which
    writes a whole double below 1e21 without '.0' (found by the hypothesis test above: orjson
    wrote 9007199254740992.0)."""
    for quickest in (False, True):
        assert canonical_json(value, json_values=quickest) == text.encode()
        assert canonical_json([value] * 10, json_values=quickest) == (
            "[" + ",".join([text] * 10) + "]").encode()
