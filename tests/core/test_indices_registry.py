"""The formula registry (dualcost.core.indices.REGISTRY): each formula declared once, and every
operation offering what it declares.

Outside sources: Fisher (1922), *The Making of Index Numbers*, and ILO, IMF, OECD, UNECE,
Eurostat and World Bank (2004), *Consumer Price Index Manual*, chs. 15, 16 and 20 (time reversal,
which formulas weight by which period's quantities); Hardy, Littlewood and Polya (1934),
*Inequalities*, ch. II (harmonic <= geometric <= arithmetic mean).
"""

from __future__ import annotations

import inspect
import re
from dataclasses import replace
from typing import Any

import numpy as np
import pytest
from numpy.testing import assert_allclose

import dualcost.core.multilateral
from dualcost.core.comparison import WeightReference, compare
from dualcost.core.errors import InvalidInput
from dualcost.core.households import DEFAULT_FORMULAS, HOUSEHOLD_FORMULAS, HouseholdJob
from dualcost.core.indices import (
    FORMULAS,
    HOUSEHOLD_DEFAULT,
    INPUTS,
    REGISTRY,
    IndexData,
    IndexFormula,
    check_formula_names,
    formulas_for,
)
from dualcost.core.multilateral import bilateral_log_matrix, geks
from dualcost.core.preferences import BaseBudget, calibrate
from dualcost.core.series import GEKS_SERIES, SERIES_FORMULAS, calibrate_to_base, index_series
from dualcost.core.series_panel import Panel

BILATERAL = [f for f in REGISTRY.values() if f.kind == "bilateral"]


def random_data(seed: int, n: int = 6, *, available: bool = False) -> IndexData:
    """Positive prices, quantities, an earlier basket and shares; with ``available``, item 0 not
    on sale in period 0 and item 1 not on sale in period 1 (for Feenstra's index)."""
    rng = np.random.default_rng(seed)
    p0, p1, q0, q1, qb = (rng.uniform(0.5, 4.0, n) for _ in range(5))
    wb = rng.dirichlet(np.ones(n))
    on0, on1 = np.ones(n, dtype=bool), np.ones(n, dtype=bool)
    if available:
        on0[0] = on1[1] = False
        q0, q1 = np.where(on0, q0, 0.0), np.where(on1, q1, 0.0)
    return IndexData(p0, p1, q0, q1, weight_quantities=qb, weight_shares=wb, sigma=0.7,
                     available0=on0, available1=on1, new_goods_sigma=2.5)


def swapped(d: IndexData) -> IndexData:
    return replace(d, p0=d.p1, p1=d.p0, q0=d.q1, q1=d.q0, available0=d.available1,
                   available1=d.available0)


def value(formula: IndexFormula, d: IndexData) -> float:
    return float(formula.compute(d))


# -- what each entry declares ---------------------------------------------------------------------


@pytest.mark.parametrize("formula", REGISTRY.values(), ids=list(REGISTRY))
def test_every_formula_gives_its_formula_and_cites_its_source(formula: IndexFormula) -> None:
    """Each entry's function states the formula and cites every author and year (or paragraph)
    of its ``source``; a multilateral entry's sources are cited where GEKS is computed (house
    rule: every formula's docstring gives the formula and its published source)."""
    doc = inspect.getdoc(formula.compute) or ""
    if formula.kind == "multilateral":
        doc = inspect.getdoc(dualcost.core.multilateral) or ""
    assert "=" in doc, formula.name
    cited = re.findall(r"([^;()]+?) \((\d{4})\)(?: ([\d.]+))?", formula.source)
    assert cited, formula.source
    for author, year, paragraph in cited:
        assert author.strip() in doc, (formula.name, author)
        assert year in doc or (paragraph and paragraph in doc), (formula.name, year)


@pytest.mark.parametrize("formula", REGISTRY.values(), ids=list(REGISTRY))
def test_target_is_consistent_with_symmetry(formula: IndexFormula) -> None:
    """Symmetric formulas are compared with the Konüs index at the midpoint standard and only
    they are; a current-period target is for a formula weighting by current quantities
    (Paasche); unweighted formulas use no quantities and are compared at base utility (CPI
    Manual 2004, chs. 15 and 20; common practice)."""
    assert (formula.target == "midpoint") == formula.symmetric
    if formula.target == "current":
        assert formula.uses_current_quantities
    if not formula.weighted:
        assert formula.target == "base" and "period_quantities" not in formula.requires
    if formula.superlative:
        assert formula.symmetric
    assert (formula.kind == "multilateral") == (formula.link is not None)
    if formula.link is not None:
        assert formula.compute is REGISTRY[formula.link].compute


@pytest.mark.parametrize("formula", [f for f in BILATERAL if f.symmetric],
                         ids=[f.name for f in BILATERAL if f.symmetric])
@pytest.mark.parametrize("seed", [1, 2, 3])
def test_symmetric_formulas_pass_time_reversal(formula: IndexFormula, seed: int) -> None:
    """P(0, 1) P(1, 0) = 1 (time reversal; Fisher 1922; CPI Manual 2004, ch. 16), for every
    formula declared symmetric, Feenstra's with an item arriving and one leaving."""
    d = random_data(seed, available="availability" in formula.requires)
    assert_allclose(value(formula, d) * value(formula, swapped(d)), 1.0, rtol=1e-13)


@pytest.mark.parametrize("formula", FORMULAS.values(), ids=list(FORMULAS))
def test_current_quantities_flag_is_what_the_formula_reads(formula: IndexFormula) -> None:
    """A formula changes with the current quantities exactly when it is declared to weight by
    them (CPI Manual 2004, ch. 15: Laspeyres-type formulas weight by the base period only, the
    others by both periods or by none)."""
    d = random_data(4)
    moved = replace(d, q1=d.q1 * np.linspace(0.5, 2.0, d.q1.size))
    changed = not np.isclose(value(formula, moved), value(formula, d), rtol=1e-12, atol=0.0)
    assert changed == formula.uses_current_quantities


@pytest.mark.parametrize("name", GEKS_SERIES)
def test_a_multilateral_entry_over_two_periods_is_its_link(name: str) -> None:
    """Over a window of two periods the GEKS index is its bilateral link, since
    (P(s, s) P(s, t) P(s, t) P(t, t))^(1/2) = P(s, t) by the identity test (Gini 1931; CPI
    Manual 2004, ch. 16), which is what the entry's ``compute`` stands for."""
    d = random_data(7)
    formula = REGISTRY[name]
    assert formula.link is not None
    g = bilateral_log_matrix(np.vstack([d.p0, d.p1]), np.vstack([d.q0, d.q1]),
                             np.ones((2, d.p0.size), dtype=bool), formula.link)
    assert_allclose(geks(g)[1], value(formula, d), rtol=1e-13)


def test_missing_inputs_are_worded_for_every_operation_that_offers_the_formula() -> None:
    """Every option a formula needs has the sentence each of its operations says when the option
    is missing; the series also says when it lacks quantities (common practice: nothing is
    left out without saying why)."""
    for formula in REGISTRY.values():
        for scope in ("comparison", "series"):
            if scope not in formula.scopes:
                continue
            for need in formula.needs:
                assert formula.missing({need}, scope), (formula.name, scope, need)
        if "period_quantities" in formula.requires:
            assert formula.missing({"period_quantities"}, "series")
    assert set(INPUTS) >= {n for f in REGISTRY.values() for n in f.needs}


# -- what each operation offers -------------------------------------------------------------------


def test_scopes_are_the_names_each_operation_offers() -> None:
    """The comparison, the series and the households offer exactly their registry scope, in
    registry order, with the households' default among them."""
    assert tuple(FORMULAS) == formulas_for("comparison")
    assert SERIES_FORMULAS == formulas_for("series") == tuple(REGISTRY)
    assert GEKS_SERIES == tuple(f.name for f in REGISTRY.values() if f.kind == "multilateral")
    assert HOUSEHOLD_FORMULAS == formulas_for("households")
    assert DEFAULT_FORMULAS == HOUSEHOLD_DEFAULT
    assert set(HOUSEHOLD_DEFAULT) <= set(HOUSEHOLD_FORMULAS)
    assert check_formula_names(list(FORMULAS)) == tuple(FORMULAS)
    for name in set(REGISTRY) - set(FORMULAS):
        with pytest.raises(InvalidInput, match="unknown index formula"):
            check_formula_names([name])


def small_comparison(**kw: Any) -> Any:
    base = BaseBudget.from_quantities([2.0, 3.0, 1.5, 4.0], [5.0, 2.0, 8.0, 1.0])
    model = calibrate("ces", base, {"sigma": 0.6})
    weights = WeightReference.checked(4, quantities=[4.0, 3.0, 6.0, 2.0],
                                      prices=[1.8, 2.5, 1.6, 3.5])
    return compare(model, base, [2.3, 2.9, 1.8, 4.6], weight_reference=weights, **kw)


def test_a_comparison_computes_every_formula_of_its_scope() -> None:
    """Named one by one, each comparison formula is computed with the target its entry
    declares (the registry is the only list the comparison reads)."""
    result = small_comparison(formulas=list(formulas_for("comparison")))
    assert tuple(result.formulas) == formulas_for("comparison")
    for name, r in result.formulas.items():
        assert r.target == REGISTRY[name].target
        assert r.konus == result.konus.at(r.target)


def test_a_household_batch_accepts_its_scope_and_refuses_the_rest() -> None:
    p0, p1 = [2.0, 3.0, 1.5], [2.2, 2.7, 1.9]
    job = HouseholdJob.checked("ces", {"sigma": 0.6}, p0, p1, formulas=list(HOUSEHOLD_FORMULAS))
    assert job.formulas == HOUSEHOLD_FORMULAS
    assert HouseholdJob.checked("ces", {"sigma": 0.6}, p0, p1).formulas == HOUSEHOLD_DEFAULT
    for name in set(REGISTRY) - set(HOUSEHOLD_FORMULAS):
        with pytest.raises(InvalidInput, match="is not a formula a household batch computes"):
            HouseholdJob.checked("ces", {"sigma": 0.6}, p0, p1, formulas=[name])


# -- adding a formula -----------------------------------------------------------------------------


def harmonic_laspeyres(d: IndexData) -> Any:
    """P_HL = 1 / sum w0 (p0/p1), the base-share harmonic mean of relatives (CPI Manual 2004,
    ch. 15, recalled from memory)."""
    return 1.0 / (d.w0 / d.relatives).sum(axis=-1)


def test_adding_a_formula_is_one_function_and_one_entry(monkeypatch: pytest.MonkeyPatch) -> None:
    """With only a function and a registry entry, the comparison and the series compute the new
    formula, with its title, target and rule; its values lie below the geometric and arithmetic
    Laspeyres indices (harmonic <= geometric <= arithmetic mean, Hardy, Littlewood and Polya
    1934, ch. II). The household batch reads its lists once, at import."""
    entry = IndexFormula("harmonic_laspeyres", "Harmonic Laspeyres", "CPI Manual (2004)", "base",
                         harmonic_laspeyres, scopes=("comparison", "series"),
                         requires=("period_quantities",), rule="Over the matched items.")
    monkeypatch.setitem(REGISTRY, entry.name, entry)

    result = small_comparison(formulas=["harmonic_laspeyres", "geometric_laspeyres", "laspeyres"])
    hl = result.formulas["harmonic_laspeyres"]
    assert hl.target == "base" and hl.konus == result.konus.base
    assert hl.value < result.formulas["geometric_laspeyres"].value
    assert result.formulas["geometric_laspeyres"].value < result.formulas["laspeyres"].value

    rng = np.random.default_rng(6)
    panel = Panel.checked(np.exp(np.cumsum(rng.normal(0.0, 0.05, (5, 4)), axis=0)),
                          quantities=rng.uniform(1.0, 3.0, (5, 4)))
    model = calibrate_to_base(panel, 0, "cobb_douglas")
    series = index_series(panel, model=model, formulas=["harmonic_laspeyres", "laspeyres"])
    new = series.formulas["harmonic_laspeyres"]
    assert (new.title, new.target, new.rule) == ("Harmonic Laspeyres", "base",
                                                 "Over the matched items.")
    assert np.all(new.fixed_base[1:] < series.formulas["laspeyres"].fixed_base[1:])
    assert any(b.series == "harmonic_laspeyres" for b in series.bias)
