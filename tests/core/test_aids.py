"""AIDS and QUAIDS: duality, derivative identities, calibration, special cases and checks."""

from __future__ import annotations

import math

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.errors import InvalidInput, NumericalFailure
from dualcost.core.preferences import AIDS, FAMILIES, QUAIDS, BaseBudget, Preferences, calibrate

from .family_cases import aids_parameters, random_budget, random_prices
from .numeric_helpers import central_derivative, central_jacobian

FAMILY_IDS = ["aids", "quaids"]


def _model(
    family: str, seed: int, n: int = 5
) -> tuple[Preferences, BaseBudget, np.random.Generator]:
    rng = np.random.default_rng(seed)
    base = random_budget(rng, n)
    params = aids_parameters(rng, base, quadratic=family == "quaids")
    return FAMILIES[family].calibrate(base, **params), base, rng


def _points(base: BaseBudget, rng: np.random.Generator, k: int = 4):
    """Random prices within a factor 1.8 of base, incomes within a factor 2 of base."""
    for _ in range(k):
        yield random_prices(rng, base), base.expenditure * math.exp(rng.uniform(-0.7, 0.7))


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_duality_identities(family: str) -> None:
    """e(p, v(p, m)) = m, v(p, e(p, u)) = u and h(p, u) = x(p, e(p, u)).

    Source: duality of utility maximisation and expenditure minimisation, Mas-Colell, Whinston
    and Green (1995), Microeconomic Theory, 3.E (Propositions 3.E.1 and 3.E.3). Closed forms,
    rtol 1e-10.
    """
    model, base, rng = _model(family, seed=11)
    for p, m in _points(base, rng):
        u = model.indirect_utility(p, m)
        assert_allclose(model.expenditure(p, u), m, rtol=1e-10, atol=0)
        assert_allclose(model.hicksian(p, u), model.marshallian(p, m), rtol=1e-10, atol=0)
        for u in (model.base_utility * 0.6, model.base_utility * 1.3):
            e = model.expenditure(p, u)
            assert_allclose(model.indirect_utility(p, e), u, rtol=1e-10, atol=0)
            assert_allclose(model.hicksian(p, u), model.marshallian(p, e), rtol=1e-10, atol=0)


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_shephard_lemma(family: str) -> None:
    """h_i(p, u) = d e(p, u) / d p_i by central differences.

    Source: Shephard's lemma (Shephard 1953; Mas-Colell, Whinston and Green 1995, 3.G.1).
    Finite differences, rtol 1e-6.
    """
    model, base, rng = _model(family, seed=12)
    for p, m in _points(base, rng, k=3):
        u = model.indirect_utility(p, m)
        grad = central_jacobian(lambda q, u=u: model.expenditure(q, u), p)
        assert_allclose(model.hicksian(p, u), grad, rtol=1e-6, atol=0)


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_roy_identity(family: str) -> None:
    """x_i(p, m) = -(dv/dp_i) / (dv/dm) by central differences.

    Source: Roy's identity (Roy 1947; Mas-Colell, Whinston and Green 1995, 3.G.4).
    Finite differences, rtol 1e-6.
    """
    model, base, rng = _model(family, seed=13)
    for p, m in _points(base, rng, k=3):
        dv_dm = central_derivative(lambda income, p=p: model.indirect_utility(p, income), m)
        roy = -central_jacobian(lambda q, m=m: model.indirect_utility(q, m), p) / dv_dm
        assert_allclose(model.marshallian(p, m), roy, rtol=1e-6, atol=0)


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_slutsky_closed_form(family: str) -> None:
    """The closed-form Slutsky matrix equals d h / d p, is symmetric, NSD and has S p = 0.

    Sources: S = D_p h(p, u) and its symmetry, negative semidefiniteness and S p = 0
    (Mas-Colell, Whinston and Green 1995, 3.G.2 and 2.F.2); the numeric check is the
    interface's central-difference default. Closed form rtol 1e-10; against the numeric
    matrix, rtol 1e-6 of its largest element.
    """
    model, base, rng = _model(family, seed=14)
    for p, m in _points(base, rng):
        s = model.slutsky_matrix(p, m)
        numeric = Preferences.slutsky_matrix(model, p, m)
        scale = float(np.max(np.abs(s)))
        assert_allclose(s, numeric, rtol=0, atol=1e-6 * scale)
        assert_allclose(s, s.T, rtol=1e-10, atol=1e-13 * scale)
        assert_allclose(s @ p, 0.0, atol=1e-10 * scale * float(np.max(p)))
        scaled = p[:, None] * s * p[None, :]
        assert np.max(np.linalg.eigvalsh(scaled)) <= 1e-10 * float(np.max(np.abs(scaled)))


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_slutsky_equation(family: str) -> None:
    """S_ij = dx_i/dp_j + x_j dx_i/dm, from Marshallian demands by central differences.

    Source: the Slutsky equation (Slutsky 1915; Mas-Colell, Whinston and Green 1995,
    3.G.3). Finite differences, 1e-6 of the largest element.
    """
    model, base, rng = _model(family, seed=15)
    p, m = next(_points(base, rng, k=1))
    x = model.marshallian(p, m)
    dx_dm = central_derivative(lambda income: model.marshallian(p, income), m)
    s = central_jacobian(lambda q: model.marshallian(q, m), p) + np.outer(dx_dm, x)
    closed = model.slutsky_matrix(p, m)
    assert_allclose(closed, s, rtol=0, atol=1e-6 * float(np.max(np.abs(closed))))


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_calibration_reproduces_base(family: str) -> None:
    """With alpha calibrated, the model's demands at (p0, m0) are the base bundle.

    Source: the calibration condition stated in the interface; shares are the AIDS share
    equations of Deaton and Muellbauer (1980), eq. 8, and Banks, Blundell and Lewbel (1997),
    eq. 12. Adding-up sum alpha = 1 (Deaton and Muellbauer 1980, eq. 9). rtol 1e-10.
    """
    for seed in range(5):
        model, base, _ = _model(family, seed=20 + seed, n=3 + seed)
        assert_allclose(model.budget_shares(base.prices, base.expenditure), base.shares,
                        rtol=1e-10, atol=1e-14)
        assert_allclose(model.marshallian(base.prices, base.expenditure), base.quantities,
                        rtol=1e-10, atol=0)
        assert_allclose(model.alpha.sum(), 1.0, rtol=0, atol=1e-12)
        info = model.parameters()
        assert info["alpha_calibrated"] is True
        assert info["base_share_gap"] < 1e-12


def test_given_alpha_reports_base_share_gap() -> None:
    """With alpha given, the gap to the base shares is reported, not raised.

    Source: AIDS shares w = alpha + gamma ln p + beta (ln m - ln a(p)) (Deaton and Muellbauer
    1980, eq. 8): moving alpha by delta (summing to 0) moves the base shares by
    delta - beta (delta . ln p0). Closed form, rtol 1e-10.
    """
    rng = np.random.default_rng(30)
    base = random_budget(rng)
    params = aids_parameters(rng, base)
    fitted = AIDS.calibrate(base, **params)
    delta = np.array([0.01, -0.02, 0.005, 0.0, 0.005])
    model = AIDS.calibrate(base, alpha=fitted.alpha + delta, **params)
    lnp0 = np.log(base.prices)
    expected = delta - params["beta"] * float(delta @ lnp0)
    assert_allclose(model.budget_shares(base.prices, base.expenditure) - base.shares, expected,
                    rtol=1e-8, atol=1e-14)
    info = model.parameters()
    assert info["alpha_calibrated"] is False
    assert_allclose(info["base_share_gap"], np.max(np.abs(expected)), rtol=1e-8)


def test_translog_special_case_is_homothetic() -> None:
    """beta = 0, lambda = 0: ln e = ln a(p) + u, a homothetic translog whose Konüs index is the
    same at every u and equals the Törnqvist index of the model's shares at p0 and p1.

    Sources: Deaton and Muellbauer (1980), section I (the AIDS nests the homothetic
    translog of Christensen, Jorgenson and Lau 1975); Diewert (1976), "Exact and superlative
    index numbers", Journal of Econometrics 4: the Törnqvist index is exact for it.
    rtol 1e-10.
    """
    rng = np.random.default_rng(31)
    base = random_budget(rng)
    params = aids_parameters(rng, base)
    params["beta"] = np.zeros(base.n_items)
    for model in (AIDS.calibrate(base, **params),
                  QUAIDS.calibrate(base, **params, **{"lambda": np.zeros(base.n_items)})):
        p0 = base.prices
        for _ in range(3):
            p1 = random_prices(rng, base)
            ratios = [model.expenditure(p1, u) / model.expenditure(p0, u) for u in (-2.0, 0.5, 4.0)]
            assert_allclose(ratios, ratios[0], rtol=1e-10, atol=0)
            w0 = model.budget_shares(p0, base.expenditure)
            w1 = model.budget_shares(p1, 3.0 * base.expenditure)
            tornqvist = math.exp(float(0.5 * (w0 + w1) @ np.log(p1 / p0)))
            assert_allclose(ratios[0], tornqvist, rtol=1e-10, atol=0)


def test_quaids_with_zero_lambda_is_aids() -> None:
    """QUAIDS with lambda = 0 is AIDS (Banks, Blundell and Lewbel 1997, section II): every
    function and the calibrated alpha agree to rtol 1e-12."""
    rng = np.random.default_rng(32)
    base = random_budget(rng)
    params = aids_parameters(rng, base)
    aids = AIDS.calibrate(base, **params)
    quaids = QUAIDS.calibrate(base, **params, **{"lambda": np.zeros(base.n_items)})
    assert_allclose(quaids.alpha, aids.alpha, rtol=1e-12, atol=1e-15)
    for p, m in _points(base, rng):
        u = aids.indirect_utility(p, m)
        assert_allclose(quaids.indirect_utility(p, m), u, rtol=1e-12, atol=0)
        assert_allclose(quaids.expenditure(p, u), aids.expenditure(p, u), rtol=1e-12, atol=0)
        assert_allclose(quaids.marshallian(p, m), aids.marshallian(p, m), rtol=1e-12, atol=0)
        assert_allclose(quaids.hicksian(p, u), aids.hicksian(p, u), rtol=1e-12, atol=0)
        assert_allclose(quaids.slutsky_matrix(p, m), aids.slutsky_matrix(p, m), rtol=1e-12,
                        atol=0)


def test_quaids_calibration_root_tends_to_aids() -> None:
    """The calibrated QUAIDS root is the one continuous with AIDS as lambda -> 0, with no
    cancellation for tiny lambda (Banks, Blundell and Lewbel 1997 nest AIDS at lambda = 0;
    the cancellation-free root of a quadratic is common practice). The gap shrinks linearly
    in the lambda scale."""
    rng = np.random.default_rng(33)
    base = random_budget(rng)
    params = aids_parameters(rng, base, quadratic=True)
    lam = params.pop("lambda")
    aids = AIDS.calibrate(base, **params)
    gaps = []
    for scale in (1e-2, 1e-4, 1e-13):
        model = QUAIDS.calibrate(base, **params, **{"lambda": scale * lam})
        gaps.append(float(np.max(np.abs(model.alpha - aids.alpha))))
        assert_allclose(model.budget_shares(base.prices, base.expenditure), base.shares,
                        rtol=1e-10, atol=1e-14)
    assert gaps[2] < 1e-13
    assert_allclose(gaps[1] / gaps[0], 1e-2, rtol=1e-2)


@pytest.mark.parametrize("family", FAMILY_IDS)
def test_not_homothetic(family: str) -> None:
    """With beta != 0 the Konüs index depends on the living standard (Deaton and Muellbauer
    1980: the AIDS is homothetic only when beta = 0); the family says homothetic = False."""
    model, base, rng = _model(family, seed=34)
    assert model.homothetic is False
    assert model.income_floor(base.prices) == 0.0
    p1 = random_prices(rng, base)
    k = [model.expenditure(p1, u) / model.expenditure(base.prices, u) for u in (1.0, 4.0)]
    assert abs(k[0] - k[1]) > 1e-6 * k[0]


# -- validation --------------------------------------------------------------------------------
def _valid(family: str) -> tuple[BaseBudget, dict]:
    rng = np.random.default_rng(40)
    base = random_budget(rng, 3)
    return base, aids_parameters(rng, base, quadratic=family == "quaids")


_SPIN = np.array([[0.0, 1.0, -1.0], [-1.0, 0.0, 1.0], [1.0, -1.0, 0.0]])  # zero rows and columns


@pytest.mark.parametrize("family", FAMILY_IDS)
@pytest.mark.parametrize(
    ("change", "parameter", "words"),
    [
        (lambda p: {"gamma": p["gamma"] + 0.01 * _SPIN}, "gamma", "symmetric"),
        (lambda p: {"gamma": p["gamma"] + 0.01 * np.eye(3)}, "gamma", "row"),
        (lambda p: {"gamma": p["gamma"] + 0.01 * np.array([[1.0, -1.0, 0.0]] * 3)}, "gamma",
         "column"),
        (lambda p: {"gamma": np.zeros((3, 4))}, "gamma", "3 by 3"),
        (lambda p: {"gamma": None}, "gamma", "required"),
        (lambda p: {"beta": p["beta"] + 0.01}, "beta", "sum to 0"),
        (lambda p: {"beta": np.zeros(4)}, "beta", "3 values"),
        (lambda p: {"alpha": np.array([0.5, 0.3, 0.3])}, "alpha", "sum to 1"),
        (lambda p: {"alpha": np.array([0.5, 0.5])}, "alpha", "3 values"),
        (lambda p: {"beta0": 0.0}, "beta0", "greater than 0"),
        (lambda p: {"alpha0": float("nan")}, "alpha0", "finite"),
    ],
)
def test_validation_errors(family: str, change, parameter: str, words: str) -> None:
    """Each rule of Deaton and Muellbauer (1980), eqs. 9-11 (adding-up, homogeneity,
    symmetry), and each shape rule, raises InvalidInput naming the parameter."""
    base, params = _valid(family)
    params.update(change(params))
    with pytest.raises(InvalidInput) as info:
        FAMILIES[family].calibrate(base, **params)
    assert info.value.parameter == parameter
    assert words in info.value.rule


@pytest.mark.parametrize(
    ("lam", "words"),
    [(np.array([0.01, 0.01, 0.0]), "sum to 0"), (np.zeros(2), "3 values"), (None, "required")],
)
def test_lambda_validation(lam, words: str) -> None:
    """lambda must sum to 0 (Banks, Blundell and Lewbel 1997, adding-up) and be n long."""
    base, params = _valid("quaids")
    params["lambda"] = lam
    with pytest.raises(InvalidInput) as info:
        QUAIDS.calibrate(base, **params)
    assert info.value.parameter == "lambda"
    assert words in info.value.rule


def test_registry_and_unknown_parameters() -> None:
    """Both families are registered; lambda is not an AIDS parameter (the registry's rule)."""
    base, params = _valid("quaids")
    assert FAMILIES["aids"] is AIDS and FAMILIES["quaids"] is QUAIDS
    model = calibrate("quaids", base, params)
    assert isinstance(model, QUAIDS)
    assert {s.name for s in QUAIDS.parameter_specs} == {
        "gamma", "beta", "lambda", "alpha", "alpha0", "beta0"
    }
    with pytest.raises(InvalidInput) as info:
        calibrate("aids", base, params)
    assert info.value.parameter == "lambda"
    with pytest.raises(InvalidInput) as info:
        AIDS.calibrate(base, **params)
    assert info.value.parameter == "lambda"


def test_quaids_calibration_without_real_root() -> None:
    """A lambda so large that (lambda(p0)/b(p0)) y^2 - (1 - beta . ln p0) y + R = 0 has no
    real root cannot be calibrated: InvalidInput on lambda (the quadratic's discriminant,
    common practice)."""
    base, params = _valid("quaids")
    lnp0 = np.log(base.prices)
    direction = lnp0 - lnp0.mean()
    params["lambda"] = direction / float(direction @ lnp0)  # lambda(p0) = 1, sums to 0
    with pytest.raises(InvalidInput) as info:
        QUAIDS.calibrate(base, **params)
    assert info.value.parameter == "lambda"
    assert "no real root" in info.value.rule


def test_quaids_domain() -> None:
    """Where 1 - lambda(p) u <= 0 the QUAIDS cost function is undefined (Banks, Blundell and
    Lewbel 1997, eq. 8): the methods raise InvalidInput on utility or income, never NaN."""
    rng = np.random.default_rng(41)
    base = random_budget(rng, 3)
    params = aids_parameters(rng, base)
    lnp0 = np.log(base.prices)
    # A unit lambda summing to 0 with lambda(p0) = 0, then ln p moved along it: lambda(p) = 0.5.
    lam = np.cross(np.ones(3), lnp0)
    lam /= np.linalg.norm(lam)
    model = QUAIDS.calibrate(base, **params, **{"lambda": lam})
    lnp = lnp0 + 0.5 * lam
    p = np.exp(lnp)
    assert_allclose(float(lam @ np.log(p)), 0.5, rtol=1e-12)
    for method in (model.expenditure, model.hicksian):
        with pytest.raises(InvalidInput) as info:
            method(p, 2.5)
        assert info.value.parameter == "utility"
        assert "1 / lambda(p) = 2" in info.value.rule
    # Incomes with ln(m / a(p)) < -b(p) / lambda(p) are outside the domain.
    m = math.exp(model.log_a(p) - 2.5 * model._b(lnp) / 0.5)
    for method in (model.indirect_utility, model.marshallian, model.budget_shares,
                   model.slutsky_matrix, model.regularity):
        with pytest.raises(InvalidInput) as info:
            method(p, m)
        assert info.value.parameter == "income"
        assert "nan" not in info.value.rule.lower()


def test_extreme_prices_do_not_warn() -> None:
    """Extreme but valid prices give a finite answer or a NumericalFailure, never a numpy
    warning (pytest turns warnings into errors); house rule, common practice."""
    model, base, _ = _model("quaids", seed=42)
    tilt = np.array([1e150, 1e-150, 1.0, 1e100, 1e-100])
    for p in (base.prices * 1e-150, base.prices * 1e150, base.prices * tilt):
        try:
            value = model.expenditure(p, model.base_utility)
        except (NumericalFailure, InvalidInput):
            continue
        assert math.isfinite(value)


# -- regularity --------------------------------------------------------------------------------
@pytest.mark.parametrize("family", FAMILY_IDS)
def test_regular_near_base(family: str) -> None:
    """The test parameter sets are regular near base: shares in [0, 1], Slutsky symmetric NSD
    (Mas-Colell, Whinston and Green 1995, 3.G)."""
    model, base, rng = _model(family, seed=43)
    assert model.regularity(base.prices, base.expenditure) == []
    for p, m in _points(base, rng):
        assert model.regularity(p, m) == []


def test_regularity_reports_negative_share() -> None:
    """AIDS shares are linear in ln(m / a(p)) (Deaton and Muellbauer 1980, eq. 8), so a large
    beta drives a share below zero at low income: monotonicity fails and is reported with the
    item's index."""
    base = BaseBudget.from_shares([1.0, 2.0, 3.0], [0.2, 0.3, 0.5], 100.0)
    w0 = base.shares
    params = {"gamma": -0.05 * (np.diag(w0) - np.outer(w0, w0)), "beta": [0.15, -0.05, -0.1]}
    model = AIDS.calibrate(base, **params)
    assert model.regularity(base.prices, base.expenditure) == []
    m = base.expenditure * math.exp(-3.0)
    w = model.budget_shares(base.prices, m)
    assert w[0] < 0.0 and w[1] > 0.0 and w[2] > 0.0
    codes = [n.code for n in model.regularity(base.prices, m)]
    first = next(n for n in model.regularity(base.prices, m) if n.code == codes[0])
    assert codes[0] == "shares_outside_unit_interval"
    assert first.items == (0,)  # the items by position; the web layer names them


def test_regularity_reports_slutsky_not_nsd() -> None:
    """With gamma = +2 (diag(w0) - w0 w0') the compensated share derivatives make
    K = gamma + w w' - diag(w) positive semidefinite at base, so the Slutsky matrix has a
    positive eigenvalue (negativity fails: Mas-Colell, Whinston and Green 1995, 3.G.2)."""
    base = BaseBudget.from_shares([1.0, 2.0, 3.0], [0.2, 0.3, 0.5], 100.0)
    w0 = base.shares
    model = AIDS.calibrate(base, gamma=2.0 * (np.diag(w0) - np.outer(w0, w0)), beta=np.zeros(3))
    codes = {n.code for n in model.regularity(base.prices, base.expenditure)}
    assert codes == {"slutsky_not_negative_semidefinite"}
