"""POST /v1/comparisons with demand systems and utility formulas: answers and bad input.

References: quasi-linear preferences, whose expenditure function is
``e(p, u) = p_r (u + a . q + q' B q / 2)`` with ``q = p / p_r`` when the demands of the other
items are ``a + B q`` (Mas-Colell, Whinston and Green 1995, 3.B and 3.D, quasilinear utility;
derived here by Roy's identity); the linear expenditure system (Stone 1954; Geary 1950) for the
utility formula. Bad input must give an RFC 9457 problem naming the field (our rule).
"""

from __future__ import annotations

import copy

import numpy as np
import pytest
from numpy.testing import assert_allclose

from tests.api.test_bad_input import assert_problem
from tests.conftest import load_example

LINEAR = "compare.wrenmouth_linear_demand.json"
UTILITY = "compare.wrenmouth_utility_formula.json"
IDS = ["rye_loaf", "peat_briquettes", "ferry_pass", "other_goods"]


def linear_request() -> dict:
    return load_example(LINEAR)


def vector(body: dict, where: str) -> np.ndarray:
    part = body[where]["prices"]
    return np.array([part[i] for i in IDS])


def log_linear_request() -> dict:
    """Constant-elasticity demands for three items, other goods the numeraire; intercepts make
    the base bundle the demands at base prices."""
    body = linear_request()
    p0 = vector(body, "base")
    q0 = np.array([body["base"]["quantities"][i] for i in IDS])
    m0 = float(p0 @ q0)
    eps = np.array([[-0.4, 0.05, 0.02, 0], [0.04, -0.45, 0.01, 0], [0.03, 0.02, -0.38, 0],
                    [0, 0, 0, 0]])
    eta = np.array([0.6, 0.5, 1.1, 0.0])
    a = np.log(q0) - eps @ np.log(p0) - eta * np.log(m0)
    a[3] = 0.0
    body["model"] = {"family": "demand_system", "form": "log_linear", "numeraire": "other_goods",
                     "intercepts": dict(zip(IDS, a.tolist(), strict=True)),
                     "price_elasticities": eps.tolist(),
                     "income_elasticities": dict(zip(IDS, eta.tolist(), strict=True))}
    return body


def semi_log_request() -> dict:
    body = log_linear_request()
    p0 = vector(body, "base")
    q0 = np.array([body["base"]["quantities"][i] for i in IDS])
    m0 = float(p0 @ q0)
    b = np.array([[-0.15, 0.01, 0.001, 0], [0.01, -0.05, 0.001, 0], [0.002, 0.001, -0.01, 0],
                  [0, 0, 0, 0]])
    c = np.array([0.001, 0.0008, 0.002, 0.0])
    a = np.log(q0) - b @ p0 - c * m0
    a[3] = 0.0
    body["model"] = {"family": "demand_system", "form": "semi_log", "numeraire": "other_goods",
                     "intercepts": a.tolist(), "price_coefficients": b.tolist(),
                     "income_coefficients": c.tolist()}
    return body


def formula_request() -> dict:
    """The linear example's demands written as formulas."""
    body = linear_request()
    body["model"] = {
        "family": "demand_system", "form": "formula", "numeraire": "other_goods",
        "demand_formulas": {
            "rye_loaf": "15.71 - 2*rye_loaf + 0.1*peat_briquettes + 0.005*ferry_pass",
            "peat_briquettes": "8.384 + 0.1*rye_loaf - 0.3*peat_briquettes + 0.002*ferry_pass",
            "ferry_pass": "1.35 + 0.005*rye_loaf + 0.002*peat_briquettes - 0.01*ferry_pass",
        },
    }
    return body


def post(client, body: dict):
    return client.post("/v1/comparisons", json=body)


def quasi_linear_expenditure(body: dict, prices: np.ndarray, standard: float) -> float:
    """e(p, u) = p_r (U + a.q + q'Bq/2), with U fixed by e(p0, u) = u (money at base prices)."""
    model = body["model"]
    a = np.array([model["intercepts"][i] for i in IDS[:3]])
    rows = model["price_coefficients"]
    b = np.array([[rows[i].get(j, 0.0) for j in IDS[:3]] for i in IDS[:3]])
    p0 = vector(body, "base")

    def part(p: np.ndarray) -> float:
        q = p[:3] / p[3]
        return float(a @ q + 0.5 * q @ b @ q)

    level = standard / p0[3] - part(p0)
    return float(prices[3] * (level + part(prices)))


def test_linear_demand_system_matches_its_closed_form(client) -> None:
    """The linear example (quasi-linear in other goods) gives e(p1, u0), hence K(u0), CV and EV,
    of the closed form above to 1e-8, with the integration's diagnostics."""
    body = linear_request()
    r = post(client, body)
    assert r.status_code == 200, r.text
    out = r.json()
    p0, p1 = vector(body, "base"), vector(body, "current")
    m0 = float(p0 @ np.array([body["base"]["quantities"][i] for i in IDS]))
    m1 = body["current"]["expenditure"]
    e10 = quasi_linear_expenditure(body, p1, m0)
    assert_allclose(out["konus"]["base"], e10 / m0, rtol=1e-8)
    assert_allclose(out["compensation"]["compensating_variation"], e10 - m1, rtol=1e-8)
    # u1 on the money-at-base-prices scale solves e(p1, u1) = m1; e is linear in u here.
    u1 = m0 + (m1 - e10) * p0[3] / p1[3]
    assert_allclose(out["compensation"]["equivalent_variation"], m0 - u1, rtol=1e-8)
    params = out["model_parameters"]
    assert params["form"] == "linear" and params["numeraire"] == "other_goods"
    assert params["error_estimate"] < 1e-8 and params["path_spread"] < 1e-8
    codes = {n["code"] for n in out["notices"]}
    assert {"expenditure_by_integration", "path_integration"} <= codes
    assert out["diagnostics"]["expenditure_residual"] < 1e-9


@pytest.mark.parametrize("make", [log_linear_request, semi_log_request, formula_request])
def test_each_form_answers_with_konus_cv_ev_and_diagnostics(client, make) -> None:
    """Log-linear, semi-log and formula demands answer with the Konüs indices, CV, EV and the
    integration diagnostics; the Konüs bound K(u0) <= Laspeyres holds where the demands are
    regular (Konüs 1924)."""
    r = post(client, make())
    assert r.status_code == 200, r.text
    out = r.json()
    validity = out["validity"]
    # Where the demands are not integrable or not symmetric the model's figures are withheld
    # from the headline and given for diagnosis only (dualcost.core.validity).
    figures = out if validity["regular"] else validity["figures_not_results"]
    if not validity["regular"]:
        assert validity["reasons"] and out["konus"]["base"] is None
        assert out["compensation"]["compensating_variation"] is None
    for key in ("base", "current", "midpoint"):
        assert np.isfinite(figures["konus"][key])
    assert np.isfinite(figures["compensation"]["compensating_variation"])
    assert np.isfinite(figures["compensation"]["equivalent_variation"])
    params = out["model_parameters"]
    assert params["error_estimate"] is not None and params["path_spread"] is not None
    codes = {n["code"] for n in out["notices"]}
    assert "expenditure_by_integration" in codes
    assert codes & {"path_integration", "not_integrable"}
    formulas = {f["formula"]: f["value"] for f in out["formulas"]}
    if not [c for c in codes if c.startswith("slutsky")]:
        assert figures["konus"]["base"] <= formulas["laspeyres"] * (1 + 1e-12)


def test_formula_demands_equal_the_same_linear_demands(client) -> None:
    """The same demands as coefficients or as formulas give the same answer (to 1e-10)."""
    a, b = post(client, linear_request()).json(), post(client, formula_request()).json()
    assert_allclose(b["konus"]["base"], a["konus"]["base"], rtol=1e-10)
    assert_allclose(b["compensation"]["equivalent_variation"],
                    a["compensation"]["equivalent_variation"], rtol=1e-9)


def test_utility_formula_matches_the_linear_expenditure_system(client) -> None:
    """The utility-formula example is Stone-Geary (Stone 1954; Geary 1950): its answer equals
    the closed-form stone_geary family's for the same subsistence quantities, to 1e-8."""
    body = load_example(UTILITY)
    r = post(client, body)
    assert r.status_code == 200, r.text
    ours = r.json()
    ref_body = copy.deepcopy(body)
    ref_body["model"] = {"family": "stone_geary", "subsistence_quantities":
                         {"rye_loaf": 4, "peat_briquettes": 2, "ferry_pass": 0, "smoked_eel": 0}}
    ref = post(client, ref_body).json()
    for key in ("base", "current", "midpoint"):
        assert_allclose(ours["konus"][key], ref["konus"][key], rtol=1e-8)
    for key in ("compensating_variation", "equivalent_variation"):
        assert_allclose(ours["compensation"][key], ref["compensation"][key], rtol=1e-7)
    assert ours["diagnostics"]["duality_residual"] < 1e-9
    assert ours["model_parameters"]["largest_first_order_residual"] < 1e-9
    assert "utility_by_optimisation" in {n["code"] for n in ours["notices"]}


def test_asymmetric_system_is_reported_not_integrable(client) -> None:
    """Asymmetric cross-price coefficients: no utility function has these demands (Hurwicz and
    Uzawa 1971); the answer carries not_integrable and the path spread."""
    body = linear_request()
    rows = body["model"]["price_coefficients"]
    rows["rye_loaf"]["peat_briquettes"] = 0.6
    rows["peat_briquettes"]["rye_loaf"] = -0.4
    out = post(client, body).json()
    codes = {n["code"] for n in out["notices"]}
    assert "not_integrable" in codes and "slutsky_not_symmetric" in codes
    assert out["model_parameters"]["path_spread"] > out["model_parameters"]["path_spread_tolerance"]


def test_a_given_price_path(client) -> None:
    """A path through given price vectors is used and reported; for these integrable demands it
    changes nothing (Hurwicz and Uzawa 1971)."""
    body = linear_request()
    body["model"]["path"] = [
        {"rye_loaf": 2.9, "peat_briquettes": 9.5, "ferry_pass": 38.0, "other_goods": 1.0},
        [2.6, 11.0, 40.0, 1.01],
    ]
    out = post(client, body).json()
    assert out["model_parameters"]["path_points"] == 2
    assert_allclose(out["konus"]["base"], post(client, linear_request()).json()["konus"]["base"],
                    rtol=1e-9)


def test_catalogue_lists_the_new_families(client) -> None:
    families = {f["family"]: f for f in client.get("/v1/preference-families").json()}
    assert "form" in [p["name"] for p in families["demand_system"]["parameters"]]
    assert families["utility_formula"]["parameters"][0]["name"] == "utility_formula"
    assert "Hausman (1981)" in families["demand_system"]["source"]


# -- bad input --------------------------------------------------------------------------------


def with_formula(rye: str) -> dict:
    body = formula_request()
    body["model"]["demand_formulas"]["rye_loaf"] = rye
    return body


def with_utility(text: str, **current) -> dict:
    body = load_example(UTILITY)
    body["model"]["utility_formula"] = text
    body["current"].update(current)
    return body


@pytest.mark.parametrize("body,pointer,words", [
    (with_formula("15 - 2*rye + peat_briquettes"), "/model/demand_formulas/rye_loaf",
     ["unknown name 'rye'", "character 8", "rye_loaf"]),
    (with_formula("10 / (peat_briquettes - 9)"), "/model/demand_formulas/rye_loaf",
     ["division by zero", "character 4"]),
    (with_formula("exp(2 * income)"), "/model/demand_formulas/rye_loaf", ["overflow"]),
    (with_formula("rye_loaf " + "+ rye_loaf " * 1000), "/model/demand_formulas/rye_loaf",
     ["characters long", "limit is 4000"]),
    (with_formula("(" * 1000 + "rye_loaf" + ")" * 1000), "/model/demand_formulas/rye_loaf",
     ["nested more than 64 levels"]),
    (with_utility("log(rye_loaf) + log(peat)"), "/model/utility_formula",
     ["unknown name 'peat'", "peat_briquettes"]),
    (with_utility("sqrt(" * 600 + "rye_loaf" + ")" * 600), "/model/utility_formula",
     ["nested more than 64 levels"]),
    (with_utility("x" * 10_000), "/model/utility_formula", ["10000 characters"]),
    (with_utility("0.3*log(rye_loaf - 4) + 0.35*log(peat_briquettes - 2) + 0.15*log(ferry_pass)"
                  " + 0.2*log(smoked_eel)", expenditure=20.0), "/model/utility_formula",
     ["could not be found"]),
])
def test_bad_formulas_give_a_problem_with_the_place(client, body, pointer, words) -> None:
    """Unknown names, faults at the prices evaluated, over-long or over-deep formulas and solves
    that find nothing: a 422 problem pointing at the formula, with the reason (our rules)."""
    assert_problem(post(client, body), pointer, *words)


def test_demand_turning_negative_on_the_path(client) -> None:
    """Rye at 9 pounds drives its linear demand below zero on the way: the problem points at the
    current price that does it (our rule: demands must not be negative)."""
    body = linear_request()
    body["current"]["prices"]["rye_loaf"] = 9.0
    assert_problem(post(client, body), "/current/prices/rye_loaf", "negative", "price path")


@pytest.mark.parametrize("change,pointer,words", [
    ({"form": "cubic"}, "/model/form", ["must be one of"]),
    ({"numeraire": "lamp_oil"}, "/model/numeraire", ["item id"]),
    ({"deadline_seconds": 100}, "/model/deadline_seconds", ["set by the service"]),
    ({"item_names": ["a"]}, "/model/item_names", ["set by the service"]),
    ({"demand_function": "x"}, "/model/demand_function", ["Python only"]),
    ({"price_coefficients": {"rye": {"rye_loaf": 1.0}}}, "/model/price_coefficients/rye",
     ["not an item id"]),
    ({"price_coefficients": [[-2.0, 0, 0, 0.1], [0, -0.3, 0, 0], [0, 0, -0.01, 0], [0, 0, 0, 0]]},
     "/model/price_coefficients/0/3", ["numeraire"]),
    ({"path": [{"rye_loaf": 2.5, "peat_briquettes": 0.0, "ferry_pass": 38, "other_goods": 1}]},
     "/model/path/0/peat_briquettes", ["greater than zero"]),
    ({"path": [[1, 2]]}, "/model/path/0", ["2 values"]),
    ({"intercepts": {"rye_loaf": 1.0}}, "/model/intercepts", ["no value"]),
    ({"price_elasticities": np.eye(4).tolist()}, "/model/price_elasticities",
     ["not used by the linear form"]),
])
def test_bad_parameters_give_a_problem(client, change, pointer, words) -> None:
    body = linear_request()
    body["model"].update(change)
    assert_problem(post(client, body), pointer, *words)


def test_compute_deadline_setting() -> None:
    """The compute_deadline_seconds setting (DUALCOST_COMPUTE_DEADLINE_SECONDS) bounds the
    numerical work: past it, a 503 deadline-exceeded problem says so (our rule)."""
    from fastapi.testclient import TestClient

    from dualcost.api.app import create_app
    from dualcost.config import Settings
    from tests.conftest import EXAMPLES

    hurried = TestClient(create_app(Settings(examples_dir=EXAMPLES, compute_deadline_seconds=1e-6)))
    for body in (linear_request(), load_example(UTILITY)):
        r = post(hurried, body)
        assert r.status_code == 503, r.text
        problem = r.json()
        assert problem["type"] == "/problems/deadline-exceeded"
        assert "deadline" in problem["detail"]
