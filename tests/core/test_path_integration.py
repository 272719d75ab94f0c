"""Expenditure functions by integration along a price path, checked against closed forms.

Sources: Hausman (1981), "Exact consumer's surplus and deadweight loss", American Economic Review
71(4), 662-676, closed-form expenditure functions of single-good demand curves (one good and a
numeraire, "all other goods", at price 1); Vartia (1983), Econometrica 51(1), the same path
integral solved numerically; the engine's own closed-form families as references for "given only
by its Marshallian demands"; integrability (Hurwicz and Uzawa 1971; Mas-Colell, Whinston and
Green 1995, 3.H). Random draws are seeded (``np.random.default_rng(seed)``).
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.comparison import compare
from dualcost.core.errors import InvalidInput, NumericalFailure
from dualcost.core.path_integration import (
    integrate,
    paced_path,
    spread_tolerance,
    straight_path,
)
from dualcost.core.preferences import FAMILIES, BaseBudget, DemandSystem, UtilityFormula

from .family_cases import CASE_IDS, CASES, FamilyCase, random_budget, random_prices

RTOL = 1e-8
NEW_FAMILIES = (DemandSystem, UtilityFormula)


def single_good(rng: np.random.Generator) -> tuple[float, float, float]:
    """Base price of the good, its new price, and base income (the numeraire's price is 1)."""
    p0 = float(rng.uniform(1.0, 4.0))
    return p0, p0 * float(np.exp(rng.uniform(-0.5, 0.6))), float(rng.uniform(100.0, 300.0))


def budget(p0: float, x0: float, m0: float) -> BaseBudget:
    """The good and the numeraire, with the base bundle the demand's own choice."""
    return BaseBudget.from_quantities([p0, 1.0], [x0, m0 - p0 * x0])


# -- Hausman (1981): single-good demand curves ------------------------------------------------


@pytest.mark.parametrize("seed", range(6))
def test_hausman_linear_demand(seed: int) -> None:
    """Linear demand x = alpha p + delta m + gamma: Hausman (1981), the expenditure function
    e(p, u) = u e^{delta p} - (1/delta)(alpha p + alpha/delta + gamma). With u fixed by
    e(p0, u) = m0, the integrated e(p1, u0) and CV = e(p1, u0) - m0 agree to 1e-8 (relative)."""
    rng = np.random.default_rng(seed)
    p0, p1, m0 = single_good(rng)
    alpha, delta = -float(rng.uniform(0.5, 3.0)), float(rng.uniform(0.002, 0.05))
    gamma = float(rng.uniform(15.0, 30.0))
    x0 = alpha * p0 + delta * m0 + gamma
    model = DemandSystem.calibrate(budget(p0, x0, m0), form="linear", numeraire=1,
                                   intercepts=[gamma, 0.0], income_coefficients=[delta, 0.0],
                                   price_coefficients=[[alpha, 0.0], [0.0, 0.0]])
    u_h = (m0 + (alpha * p0 + alpha / delta + gamma) / delta) * np.exp(-delta * p0)
    expected = u_h * np.exp(delta * p1) - (alpha * p1 + alpha / delta + gamma) / delta
    prices = np.array([p1, 1.0])
    assert_allclose(model.expenditure(prices, m0), expected, rtol=RTOL)
    result = compare(model, budget(p0, x0, m0), prices)
    assert_allclose(result.compensating_variation, expected - m0, rtol=RTOL)
    assert_allclose(result.konus.base, expected / m0, rtol=RTOL)


@pytest.mark.parametrize("seed", range(6))
def test_hausman_log_linear_demand(seed: int) -> None:
    """Constant-elasticity demand x = A p^alpha m^delta: Hausman (1981) gives
    e(p, u) = {(1 - delta) [u + A p^(1+alpha) / (1 + alpha)]}^(1/(1 - delta)); with the constant
    fixed by e(p0, u0) = m0 this is
    e(p1, u0) = [m0^(1-delta) + (1-delta) A (p1^(1+alpha) - p0^(1+alpha)) / (1+alpha)]^(1/(1-delta))
    (derived here by separating variables in de/dp = A p^alpha e^delta). The integration agrees
    to 1e-8 (relative)."""
    rng = np.random.default_rng(100 + seed)
    p0, p1, m0 = single_good(rng)
    alpha, delta = -float(rng.uniform(0.2, 1.6)), float(rng.uniform(0.2, 1.4))
    if abs(1 + alpha) < 0.05:
        alpha = -0.7
    a = float(np.log(rng.uniform(0.05, 0.3) * m0 / p0)) - delta * np.log(m0) - alpha * np.log(p0)
    big_a = np.exp(a)
    x0 = big_a * p0**alpha * m0**delta
    model = DemandSystem.calibrate(budget(p0, x0, m0), form="log_linear", numeraire=1,
                                   intercepts=[a, 0.0], income_elasticities=[delta, 0.0],
                                   price_elasticities=[[alpha, 0.0], [0.0, 0.0]])
    expected = (m0 ** (1 - delta) + (1 - delta) * big_a * (p1 ** (1 + alpha) - p0 ** (1 + alpha))
                / (1 + alpha)) ** (1 / (1 - delta))
    assert_allclose(model.expenditure(np.array([p1, 1.0]), m0), expected, rtol=RTOL)


@pytest.mark.parametrize("seed", range(4))
def test_hausman_semi_log_demand(seed: int) -> None:
    """Semi-log demand ln x = alpha p + delta m + gamma: Hausman (1981) gives
    e(p, u) = -(1/delta) ln(-delta u - (delta/alpha) e^{alpha p + gamma}); with e(p0, u0) = m0,
    e(p1, u0) = -(1/delta) ln(e^{-delta m0} + (delta/alpha)(e^{alpha p0+gamma} - e^{alpha p1+gamma})).
    The integration agrees to 1e-8 (relative)."""
    rng = np.random.default_rng(200 + seed)
    p0, p1, m0 = single_good(rng)
    alpha, delta = -float(rng.uniform(0.2, 0.8)), float(rng.uniform(0.0005, 0.004))
    gamma = float(np.log(rng.uniform(0.05, 0.3) * m0 / p0)) - alpha * p0 - delta * m0
    x0 = np.exp(alpha * p0 + delta * m0 + gamma)
    model = DemandSystem.calibrate(budget(p0, x0, m0), form="semi_log", numeraire=1,
                                   intercepts=[gamma, 0.0], income_coefficients=[delta, 0.0],
                                   price_coefficients=[[alpha, 0.0], [0.0, 0.0]])
    expected = -np.log(np.exp(-delta * m0) + delta / alpha
                       * (np.exp(alpha * p0 + gamma) - np.exp(alpha * p1 + gamma))) / delta
    assert_allclose(model.expenditure(np.array([p1, 1.0]), m0), expected, rtol=RTOL)


def test_hausman_linear_demand_written_as_a_formula() -> None:
    """The same Hausman (1981) linear demand written as a formula gives the same closed form."""
    p0, p1, m0, alpha, delta, gamma = 2.0, 2.9, 180.0, -1.7, 0.02, 21.0
    x0 = alpha * p0 + delta * m0 + gamma
    model = DemandSystem.calibrate(
        budget(p0, x0, m0), form="formula", numeraire="other", item_names=["eel", "other"],
        demand_formulas={"eel": f"{alpha} * eel + {delta} * income + {gamma}"})
    u_h = (m0 + (alpha * p0 + alpha / delta + gamma) / delta) * np.exp(-delta * p0)
    expected = u_h * np.exp(delta * p1) - (alpha * p1 + alpha / delta + gamma) / delta
    assert_allclose(model.expenditure(np.array([p1, 1.0]), m0), expected, rtol=RTOL)


# -- every closed-form family, given only by its Marshallian demands -------------------------


@pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
@pytest.mark.parametrize("seed", [0, 1])
def test_closed_form_families_from_their_demands_alone(case: FamilyCase, seed: int) -> None:
    """Each closed-form family, handed to the integration only as x(p, m), gives back its own
    Konüs indices K(u0) = e(p1,u0)/e(p0,u0) and K(u1), and CV and EV, to 1e-8 (Hausman 1981;
    Vartia 1983: e is determined by the demands through de/dp = x(p, e))."""
    rng = np.random.default_rng(seed)
    base = random_budget(rng, n=5)
    closed = case.build(rng, base)
    if isinstance(closed, NEW_FAMILIES):
        pytest.skip("not a closed-form family")
    p1 = random_prices(rng, base)
    m1 = base.expenditure * float(rng.uniform(0.9, 1.2))
    model = DemandSystem.calibrate(base, form="function", demand_function=closed.marshallian)
    ours, ref = compare(model, base, p1, current_income=m1), compare(closed, base, p1,
                                                                     current_income=m1)
    assert_allclose(ours.konus.base, ref.konus.base, rtol=RTOL)
    assert_allclose(ours.konus.current, ref.konus.current, rtol=RTOL)
    assert_allclose(ours.konus.midpoint, ref.konus.midpoint, rtol=RTOL)
    assert_allclose(ours.compensating_variation, ref.compensating_variation,
                    rtol=RTOL, atol=RTOL * base.expenditure)
    assert_allclose(ours.equivalent_variation, ref.equivalent_variation,
                    rtol=RTOL, atol=RTOL * base.expenditure)
    codes = {n.code for n in ours.notices}
    assert "not_integrable" not in codes and "path_integration" in codes
    params = model.parameters()
    assert params["path_spread"] <= spread_tolerance(model.tolerance)
    assert params["error_estimate"] < 1e-7


def test_registered() -> None:
    assert FAMILIES["demand_system"] is DemandSystem and len(CASES) >= 10


# -- integrability ----------------------------------------------------------------------------

P0 = np.array([2.0, 3.0, 5.0])
Q0 = np.array([10.0, 6.0, 4.0])
P1 = np.array([2.6, 2.4, 6.5])
B_SYMMETRIC = np.array([[-2.0, 0.5, 0.3], [0.5, -1.5, 0.2], [0.3, 0.2, -0.8]])
TWIST = np.array([[0.0, 0.6, 0.0], [-0.6, 0.0, 0.0], [0.0, 0.0, 0.0]])


def linear_system(b: np.ndarray, **kw) -> tuple[DemandSystem, BaseBudget]:
    """A three-good linear system whose demands at (p0, m0) are the base bundle."""
    base = BaseBudget.from_quantities(P0, Q0)
    return DemandSystem.calibrate(base, form="linear", intercepts=Q0 - b @ P0,
                                  price_coefficients=b, **kw), base


def test_asymmetric_slutsky_matrix_is_reported_not_integrable() -> None:
    """x = a + B p with B not symmetric: the Slutsky matrix S = B is asymmetric, so no utility
    function has these demands (Hurwicz and Uzawa 1971); two paths give different answers, and
    the answer says so."""
    model, base = linear_system(B_SYMMETRIC + TWIST)
    result = compare(model, base, P1)
    codes = [n.code for n in result.notices]
    assert "not_integrable" in codes and "slutsky_not_symmetric" in codes
    assert model.parameters()["path_spread"] > spread_tolerance(model.tolerance)


def test_symmetric_negative_definite_linear_system_is_integrable() -> None:
    """x = a + B p with B symmetric negative definite comes from a quadratic utility (Hurwicz and
    Uzawa 1971): the paths agree and no Slutsky notice appears; without a numeraire adding-up
    fails and is reported (Mas-Colell, Whinston and Green 1995, 2.E)."""
    model, base = linear_system(B_SYMMETRIC)
    result = compare(model, base, P1)
    codes = [n.code for n in result.notices]
    assert "not_integrable" not in codes and not [c for c in codes if c.startswith("slutsky")]
    assert "adding_up_failed" in codes
    assert model.parameters()["path_spread"] <= spread_tolerance(model.tolerance)


def test_a_given_path_matters_only_without_integrability() -> None:
    """Along a path through other prices, an integrable system gives the same e(p1, u0), a
    non-integrable one a different one (Stokes' theorem on h . dp; Hurwicz and Uzawa 1971)."""
    via = [np.array([3.5, 2.0, 5.0]), np.array([3.0, 3.5, 7.0])]
    for b, same in ((B_SYMMETRIC, True), (B_SYMMETRIC + TWIST, False)):
        straight, _ = linear_system(b)
        bent, _ = linear_system(b, path=via)
        e_straight = straight.expenditure(P1, 58.0)
        e_bent = bent.expenditure(P1, 58.0)
        if same:
            assert_allclose(e_bent, e_straight, rtol=1e-10)
        else:
            assert abs(e_bent / e_straight - 1) > 1e-4


def test_a_given_path_through_a_closed_form_family() -> None:
    """An integrable system (CES, Arrow et al. 1961) integrated along a three-segment path gives
    its closed-form expenditure function to 1e-8."""
    rng = np.random.default_rng(12)
    base = random_budget(rng, n=4)
    closed = FAMILIES["ces"].calibrate(base, sigma=0.7)
    via = [random_prices(rng, base), random_prices(rng, base)]
    model = DemandSystem.calibrate(base, form="function", demand_function=closed.marshallian,
                                   path=via)
    p1 = random_prices(rng, base)
    assert_allclose(model.expenditure(p1, 50.0), closed.expenditure(p1, 50.0), rtol=RTOL)
    assert model.parameters()["path_points"] == 2


def test_numeraire_closes_the_budget_and_makes_demands_homogeneous() -> None:
    """With a numeraire the system adds up, p . x = m, and is homogeneous of degree zero in
    (p, m) (Mas-Colell, Whinston and Green 1995, 2.E)."""
    base = BaseBudget.from_quantities([2.0, 3.0, 1.0], [10.0, 6.0, 100.0])
    b = np.array([[-2.0, 0.5, 0.0], [0.5, -1.5, 0.0], [0.0, 0.0, 0.0]])
    model = DemandSystem.calibrate(base, form="linear", numeraire=2, intercepts=[12.5, 9.5, 0.0],
                                   price_coefficients=b, income_coefficients=[0.01, 0.005, 0.0])
    p, m = np.array([2.5, 2.8, 1.1]), 140.0
    x = model.marshallian(p, m)
    assert_allclose(p @ x, m, rtol=1e-14)
    assert_allclose(model.marshallian(3.0 * p, 3.0 * m), x, rtol=1e-12)


@pytest.mark.parametrize("form", ["linear", "log_linear", "semi_log", "formula"])
def test_demand_derivatives_match_central_differences(form: str) -> None:
    """The Slutsky matrix from the demands' own derivatives (exact, symbolic for formulas, chain
    rule through the numeraire) equals dx/dp + (dx/dm) x' by central differences of x (common
    practice), to 1e-6 relative."""
    model = small_system(form)
    p, m = np.array([2.4, 3.3, 1.2]), 150.0
    x = model.marshallian(p, m)
    h = 1e-6
    jac = np.empty((3, 3))
    for j in range(3):
        up, down = p.copy(), p.copy()
        up[j] *= 1 + h
        down[j] *= 1 - h
        jac[:, j] = (model.marshallian(up, m) - model.marshallian(down, m)) / (up[j] - down[j])
    dm = (model.marshallian(p, m * (1 + h)) - model.marshallian(p, m * (1 - h))) / (2 * h * m)
    expected = jac + np.outer(dm, x)
    assert_allclose(model.slutsky_matrix(p, m), expected, rtol=1e-6,
                    atol=1e-6 * np.max(np.abs(expected)))


def small_system(form: str, **kw) -> DemandSystem:
    """Three items, the last a numeraire, in each form; coefficients invented."""
    base = BaseBudget.from_quantities([2.0, 3.0, 1.0], [10.0, 6.0, 100.0])
    names = ["eel", "peat", "other"]
    b = [[-2.0, 0.4, 0.0], [0.3, -1.5, 0.0], [0.0, 0.0, 0.0]]
    if form == "linear":
        return DemandSystem.calibrate(base, form=form, numeraire=2, intercepts=[12.5, 9.5, 0],
                                      price_coefficients=b, income_coefficients=[0.01, 0.004, 0],
                                      **kw)
    if form == "semi_log":
        return DemandSystem.calibrate(base, form=form, numeraire=2, intercepts=[2.8, 2.5, 0],
                                      price_coefficients=[[-0.3, 0.05, 0], [0.04, -0.2, 0],
                                                          [0, 0, 0]],
                                      income_coefficients=[0.001, 0.002, 0], **kw)
    if form == "log_linear":
        return DemandSystem.calibrate(base, form=form, numeraire=2, intercepts=[0.5, 0.1, 0],
                                      price_elasticities=[[-0.7, 0.1, 0], [0.2, -0.9, 0],
                                                          [0, 0, 0]],
                                      income_elasticities=[0.4, 0.6, 0], **kw)
    return DemandSystem.calibrate(
        base, form="formula", numeraire="other", item_names=names,
        demand_formulas={"eel": "sqrt(income) * exp(-0.3*eel) + 4/peat",
                         "peat": "max(1, 0.02*income) * peat^-0.8 + eel^2 / 10"}, **kw)


# -- the path and the integrator ---------------------------------------------------------------


def test_paths_start_and_end_where_asked_and_prices_move_one_way() -> None:
    """Both paths run from start to end through the given vertices; on the paced path every
    price moves monotonically (phi_i' = 1 + c_i (1 - 2s) > 0 for |c_i| < 1)."""
    rng = np.random.default_rng(13)
    a, b, w = rng.uniform(1, 3, 6), rng.uniform(1, 3, 6), rng.uniform(1, 3, 6)
    for path in (straight_path(a, b, [w]), paced_path(a, b, [w])):
        assert_allclose(path.at(0.0), a, rtol=0, atol=0)
        assert_allclose(path.at(1.0), w, rtol=1e-15)
        assert_allclose(path.at(2.0), b, rtol=1e-15)
        s = np.linspace(0, 1, 101)
        moves = np.array([path.point(0, t) for t in s])
        assert np.all(np.diff(moves, axis=0) * np.sign(w - a) >= -1e-15)


def test_constant_demands_integrate_exactly() -> None:
    """With demands that do not move, e(p1) = e(p0) + x . (p1 - p0) on any path (fundamental
    theorem of calculus), forwards and back."""
    x = np.array([1.0, 2.0, 0.5])
    a, b = np.array([1.0, 2.0, 3.0]), np.array([1.5, 1.0, 4.0])
    for path in (straight_path(a, b), paced_path(a, b, [np.array([3.0, 3.0, 3.0])])):
        forward = integrate(lambda p, m: x, path, 100.0)
        assert_allclose(forward.value, 100.0 + x @ (b - a), rtol=1e-13)
        back = integrate(lambda p, m: x, path, forward.value, backward=True)
        assert_allclose(back.value, 100.0, rtol=1e-13)


# -- bad input --------------------------------------------------------------------------------


def test_demand_turning_negative_on_the_path() -> None:
    """A linear demand that crosses zero before the current prices are reached is refused,
    naming the item (our rule: demands must be non-negative)."""
    model, base = linear_system(B_SYMMETRIC)
    p1 = P0 * np.array([4.0, 1.0, 1.0])
    with pytest.raises(InvalidInput) as info:
        compare(model, base, p1)
    assert info.value.parameter == "p1" and info.value.index == 0
    assert "negative" in info.value.rule


def test_formula_faults_at_the_prices_evaluated() -> None:
    """Division by zero and overflow in a demand formula name the formula (item) and the place."""
    base = BaseBudget.from_quantities([1.5, 1.0], [5.0, 50.0])
    for text, word in (("10 / (eel - 1.5) + 1", "division by zero"),
                       ("exp(20 * income)", "overflow")):
        model = DemandSystem.calibrate(base, form="formula", numeraire=1, item_names=["eel", "o"],
                                       demand_formulas=[text, None])
        with pytest.raises(InvalidInput) as info:
            compare(model, base, [1.8, 1.0])
        assert info.value.parameter == "demand_formulas" and info.value.index == 0
        assert word in info.value.rule


def test_deadline_stops_the_integration() -> None:
    """A deadline that has passed stops a solve with NumericalFailure("deadline") (our rule)."""
    model, base = linear_system(B_SYMMETRIC, deadline_seconds=1e-9)
    with pytest.raises(NumericalFailure) as info:
        model.expenditure(P1, 58.0)
    assert info.value.what == "deadline"
    slow, _ = linear_system(B_SYMMETRIC, deadline_seconds=30.0)
    slow.restart_clock()
    assert slow.expenditure(P1, 58.0) > 0


@pytest.mark.parametrize("params,name,words", [
    ({}, "form", ["required"]),
    ({"form": "quadratic"}, "form", ["must be one of"]),
    ({"form": "linear", "price_coefficients": np.eye(3)}, "intercepts", ["required"]),
    ({"form": "linear", "intercepts": [1, 2, 3], "price_coefficients": np.eye(3),
      "price_elasticities": np.eye(3)}, "price_elasticities", ["not used by the linear form"]),
    ({"form": "linear", "intercepts": [1, 2, 3], "price_coefficients": np.eye(3),
      "numeraire": 2}, "intercepts", ["numeraire"]),
    ({"form": "linear", "intercepts": [1, 2, 0], "price_coefficients": np.eye(3),
      "numeraire": 2}, "price_coefficients", ["numeraire's row and column"]),
    ({"form": "linear", "intercepts": [1, 2, 3], "price_coefficients": np.eye(3),
      "tolerance": 1e-2}, "tolerance", ["between"]),
    ({"form": "formula", "demand_formulas": ["a", "b", "c"]}, "item_names", ["item ids"]),
    ({"form": "formula", "item_names": ["a", "b", "c"], "demand_formulas": ["a", "b"]},
     "demand_formulas", ["3 formulas"]),
    ({"form": "formula", "item_names": ["a", "b", "c"], "demand_formulas": ["a", "b", "bb"]},
     "demand_formulas", ["unknown name 'bb'", "did you mean 'b'"]),
    ({"form": "formula", "item_names": ["a", "b", "c"], "demand_formulas": ["a", "b", "c"],
      "numeraire": "c"}, "demand_formulas", ["numeraire has no formula"]),
    ({"form": "formula", "item_names": ["a", "income", "c"], "demand_formulas": ["a", "1", "c"]},
     "item_names", ["income"]),
    ({"form": "linear", "intercepts": [1, 2, 3], "price_coefficients": np.eye(3),
      "path": [[1.0, -2.0, 1.0]]}, "path[0]", ["greater than zero"]),
    ({"form": "function"}, "demand_function", ["callable"]),
])
def test_bad_parameters(params: dict, name: str, words: list[str]) -> None:
    """Every parameter rule is one sentence naming the parameter (our rules)."""
    base = BaseBudget.from_quantities(P0, Q0)
    with pytest.raises(InvalidInput) as info:
        DemandSystem.calibrate(base, **params)
    assert info.value.parameter == name, info.value
    for w in words:
        assert w in info.value.rule, (w, info.value.rule)
