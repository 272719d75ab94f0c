"""A family added later works in comparisons, series and households with no other change.

The family below is written the way a contributor would start: one class with scalar private
methods only (one price vector and one number at a time; ``broadcasts`` left False), registered
in ``FAMILIES``. It is CES preferences in calibrated share form written out from the textbook
formulas (Arrow, Chenery, Minhas and Solow 1961, Review of Economics and Statistics 43(3); share
form as in Moulton 1996): ``c(p) = (sum_i s_i (p_i / p0_i)^(1 - sigma))^(1 / (1 - sigma))``,
``e = u c(p)``, ``v = m / c(p)``, ``x_i = m w_i(p) / p_i`` with
``w_i = s_i (p_i / p0_i)^(1 - sigma) / sum_j s_j (p_j / p0_j)^(1 - sigma)``. Household batches,
index series and single comparisons must then give the numbers of the built-in CES family,
which is vectorised and checked against published results elsewhere.
"""

from __future__ import annotations

from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.comparison import compare
from dualcost.core.households import HouseholdJob, run_households
from dualcost.core.preferences import FAMILIES, BaseBudget, ParameterSpec, Preferences, calibrate
from dualcost.core.series import calibrate_to_base, index_series
from dualcost.core.series_panel import Panel

SIGMA = 0.6


class TextbookCES(Preferences):
    """CES in share form, one price vector at a time (the contributor's first version)."""

    family = "textbook_ces"
    title = "CES written out from the textbook formulas"
    source = "Arrow, Chenery, Minhas and Solow (1961)"
    homothetic = True
    parameter_specs = (ParameterSpec("sigma", "Elasticity of substitution, not 1.",
                                     required=True),)

    def __init__(self, shares: np.ndarray, reference_prices: np.ndarray, sigma: float) -> None:
        self.shares = shares
        self.reference_prices = reference_prices
        self.sigma = sigma
        self.n_items = shares.size

    @classmethod
    def calibrate(cls, base: BaseBudget, *, sigma: float | None = None,
                  **_: Any) -> TextbookCES:
        return cls(base.shares, base.prices, float(sigma))  # type: ignore[arg-type]

    def _terms(self, prices: np.ndarray) -> np.ndarray:
        assert prices.ndim == 1  # scalar private methods: one price vector at a time
        return self.shares * (prices / self.reference_prices) ** (1.0 - self.sigma)

    def _cost(self, prices: np.ndarray) -> float:
        return float(np.sum(self._terms(prices)) ** (1.0 / (1.0 - self.sigma)))

    def _expenditure(self, prices: np.ndarray, utility: float) -> float:
        assert isinstance(utility, float)
        return utility * self._cost(prices)

    def _indirect_utility(self, prices: np.ndarray, income: float) -> float:
        assert isinstance(income, float)
        return income / self._cost(prices)

    def _marshallian(self, prices: np.ndarray, income: float) -> np.ndarray:
        terms = self._terms(prices)
        return income * terms / np.sum(terms) / prices

    @property
    def substitution_elasticity(self) -> float:
        return self.sigma


@pytest.fixture
def registered(monkeypatch: pytest.MonkeyPatch) -> None:
    """The one line a contributor adds to ``FAMILIES``."""
    monkeypatch.setitem(FAMILIES, TextbookCES.family, TextbookCES)


def test_households_of_a_new_family_equal_the_built_in_ces(registered: None) -> None:
    """Every household's indices, Konüs indices, CV, EV and biases, over two periods, equal
    the built-in (vectorised) CES family's to rounding; the batch says the new family was
    evaluated one household at a time (CES formulas: Arrow et al. 1961)."""
    rng = np.random.default_rng(41)
    n = 6
    p0 = rng.uniform(1.0, 5.0, n)
    p1 = p0 * np.exp(rng.normal(0.02, 0.1, (2, n)))
    w = rng.dirichlet(np.full(n, 2.0), 30)
    m = rng.uniform(100.0, 500.0, 30)
    formulas = ["laspeyres", "paasche", "fisher", "tornqvist", "walsh", "lloyd_moulton"]
    new = run_households(HouseholdJob.checked("textbook_ces", {"sigma": SIGMA}, p0, p1,
                                              formulas=formulas, chunk_rows=8), w, expenditure=m)
    built_in = run_households(HouseholdJob.checked("ces", {"sigma": SIGMA}, p0, p1,
                                                   formulas=formulas, chunk_rows=8),
                              w, expenditure=m)
    assert new.values.keys() == built_in.values.keys()
    for name, values in built_in.values.items():
        assert_allclose(new.values[name], values, rtol=1e-11, atol=1e-11, err_msg=name)
    assert "evaluated_one_by_one" in [n.code for n in new.notices]
    assert new.job.lloyd_moulton_sigma == SIGMA


def test_series_of_a_new_family_equal_the_built_in_ces(registered: None) -> None:
    """The Konüs series (fixed base and chained, at every living standard) and the bias of the
    formula series equal the built-in CES family's to rounding (Arrow et al. 1961)."""
    rng = np.random.default_rng(42)
    p = np.exp(np.cumsum(rng.normal(0.0, 0.05, (8, 5)), axis=0))
    panel = Panel.checked(p, quantities=rng.uniform(0.5, 5.0, (8, 5)))
    results = [index_series(panel, base=2, model=calibrate_to_base(panel, 2, family,
                                                                   {"sigma": SIGMA}))
               for family in ("textbook_ces", "ces")]
    new, built_in = (r.konus for r in results)
    assert new is not None and built_in is not None
    for kind in ("fixed_base", "chained"):
        for target, values in getattr(built_in, kind).items():
            assert_allclose(getattr(new, kind)[target], values, rtol=1e-12, err_msg=target)
    for a, b in zip(results[0].bias, results[1].bias, strict=True):
        assert_allclose(a.points, b.points, rtol=1e-9, atol=1e-11)


def test_a_comparison_under_a_new_family_equals_the_built_in_ces(registered: None) -> None:
    """The single comparison: Konüs indices, CV, EV and the formulas' bias (Arrow et al. 1961)."""
    rng = np.random.default_rng(43)
    base = BaseBudget.from_quantities(rng.uniform(1.0, 5.0, 5), rng.uniform(1.0, 9.0, 5))
    p1 = base.prices * np.exp(rng.normal(0.0, 0.2, 5))
    new, built_in = (compare(calibrate(family, base, {"sigma": SIGMA}), base, p1,
                             current_income=1.1 * base.expenditure)
                     for family in ("textbook_ces", "ces"))
    for field in ("base", "current", "midpoint"):
        assert_allclose(getattr(new.konus, field), getattr(built_in.konus, field), rtol=1e-12)
    assert_allclose(new.compensating_variation, built_in.compensating_variation, rtol=1e-10)
    for name, result in built_in.formulas.items():
        assert_allclose(new.formulas[name].bias_points, result.bias_points, rtol=1e-8,
                        atol=1e-11, err_msg=name)
