"""Sensitivity sweeps (dualcost.core.sensitivity): a grid equals separate comparisons point by
point, and the CES grid's Konüs index follows its closed form.

Sources: the CES unit cost (Arrow, Chenery, Minhas and Solow 1961) gives
K = (sum_i w_i r_i^(1 - sigma))^(1 / (1 - sigma)), with the Cobb-Douglas limit prod r_i^w_i at
sigma = 1; Konüs (1924): K(u0) <= Laspeyres for every family.
"""

from __future__ import annotations

import numpy as np
import pytest

from dualcost.core import sensitivity as sv
from dualcost.core.comparison import compare
from dualcost.core.errors import InvalidInput
from dualcost.core.preferences import BaseBudget, calibrate

P0 = np.array([1.0, 2.0, 4.0, 0.5])
Q0 = np.array([3.0, 1.0, 0.5, 4.0])
P1 = np.array([1.3, 1.9, 4.6, 0.55])
BASE = BaseBudget.from_quantities(P0, Q0)
TREE = {"name": "all", "sigma": 0.5, "children": [
    {"name": "food", "sigma": 1.5, "children": [0, 1]}, {"name": "other", "sigma": 0.3,
                                                          "children": [2, 3]}]}


def test_a_ces_grid_follows_the_closed_form() -> None:
    """The CES Konüs index at each sigma of the grid (Arrow et al. 1961), Cobb-Douglas at 1."""
    grid = sv.Grid("ces", {}, "sigma", (0.0, 0.5, 1.0, 2.0))
    result = sv.sweep(BASE, P1, grid=grid, current_income=12.0)
    w, r = BASE.shares, P1 / P0
    for sigma, point in zip(grid.values, result.points, strict=True):
        c = point.comparison
        expected = (float(np.prod(r ** w)) if sigma == 1.0
                    else float(w @ r ** (1 - sigma)) ** (1 / (1 - sigma)))
        assert c.konus.base == pytest.approx(expected, rel=1e-12)
        assert c.konus.base <= c.formulas["laspeyres"].value * (1 + 1e-12)
    konus = [p.comparison.konus.base for p in result.points]
    assert konus == sorted(konus, reverse=True)  # more substitution, a lower true index
    band = {r.measure: r for r in result.along_grid}["konus_base"]
    assert (band.low, band.high, band.count) == (min(konus), max(konus), 4)


@pytest.mark.parametrize(("family", "parameters", "parameter", "group", "values"), [
    ("ces", {"sigma": 0.7}, "sigma", None, (0.2, 0.9, 1.7)),
    ("nested_ces", {"tree": TREE}, "sigma", "food", (0.4, 1.0, 3.0)),
    ("stone_geary", {"frisch": -2.0}, "frisch", None, (-4.0, -2.0, -1.2)),
    ("aids", {"gamma": -0.05 * (np.diag([.3, .2, .2, .3]) - np.outer([.3, .2, .2, .3],
                                                                      [.3, .2, .2, .3])),
              "beta": np.array([0.02, -0.01, 0.01, -0.02])}, "gamma_scale", None,
     (0.0, 1.0, 2.0)),
])
def test_a_sweep_equals_separate_comparisons_point_by_point(
        family: str, parameters: dict[str, object], parameter: str, group: str | None,
        values: tuple[float, ...]) -> None:
    """Each point of a grid is the comparison one would request alone with the parameter set
    to that value (common practice: a sweep is a loop of single requests)."""
    base = BASE
    if family == "aids":
        base = BaseBudget.from_shares(P0, [.3, .2, .2, .3], 10.0)
    grid = sv.Grid(family, parameters, parameter, values, group)
    result = sv.sweep(base, P1, grid=grid, current_income=11.0)
    for value, point in zip(values, result.points, strict=True):
        alone = compare(calibrate(family, base, sv.with_parameter(grid, value)), base, P1,
                        current_income=11.0)
        assert point.comparison.konus == alone.konus
        assert {n: f.bias_points for n, f in point.comparison.formulas.items()} == {
            n: f.bias_points for n, f in alone.formulas.items()}


def test_the_band_runs_across_the_models() -> None:
    """The band across families is the least and greatest of their Konüs indices."""
    models = [lambda b: calibrate("cobb_douglas", b), lambda b: calibrate("ces", b,
                                                                         {"sigma": 0.3}),
              lambda b: calibrate("nested_ces", b, {"tree": TREE})]
    result = sv.sweep(BASE, P1, models=models, current_income=12.0)
    konus = [e.comparison.konus.base for e in result.models]
    band = {r.measure: r for r in result.band}
    assert (band["konus_base"].low, band["konus_base"].high) == (min(konus), max(konus))
    lasp = [e.comparison.formulas["laspeyres"].bias_points for e in result.models]
    assert band["laspeyres_bias_points"].high == max(lasp)
    assert result.points == () and result.along_grid == ()


@pytest.mark.parametrize(("grid", "name", "index"), [
    (sv.Grid("ces", {}, "sigma", (0.5, -1.0)), "grid_values", 1),
    (sv.Grid("ces", {}, "rho", (0.5,)), "grid_parameter", None),
    (sv.Grid("cobb_douglas", {}, "gamma_scale", (0.5,)), "grid_parameter", None),
    (sv.Grid("nested_ces", {"tree": TREE}, "sigma", (0.5,), "drinks"), "grid_group", None),
])
def test_a_bad_grid_is_refused_by_name(grid: sv.Grid, name: str, index: int | None) -> None:
    """A value the family refuses (at its position), a parameter the family lacks, gamma_scale
    on a family without gamma, a group the tree lacks."""
    with pytest.raises(InvalidInput) as caught:
        sv.sweep(BASE, P1, grid=grid)
    assert (caught.value.parameter, caught.value.index) == (name, index)


def test_band_of_is_the_range_over_the_values_that_are_results() -> None:
    """band_of against numpy's nanmin/nanmax (reference library) where some model's value is a
    result, NaN where none is, and the count of results; seeded."""
    import numpy as np

    from dualcost.core.sensitivity import band_of

    rng = np.random.default_rng(18)
    values = [rng.uniform(0.9, 1.2, (3, 5)) for _ in range(4)]
    for v in values:
        v[rng.uniform(size=v.shape) < 0.3] = np.nan
    values[0][0, 0] = values[1][0, 0] = values[2][0, 0] = values[3][0, 0] = np.nan
    band = band_of(values)
    stack = np.stack(values)
    some = np.isfinite(stack).any(axis=0)
    assert np.array_equal(band.count, np.isfinite(stack).sum(axis=0))
    assert np.array_equal(band.low[some], np.nanmin(stack[:, some], axis=0))
    assert np.array_equal(band.high[some], np.nanmax(stack[:, some], axis=0))
    assert np.isnan(band.low[0, 0]) and np.isnan(band.high[0, 0]) and band.count[0, 0] == 0
