"""Fit a preference family to budget data: the estimate, its uncertainty, tests, elasticities,
regularity over the sample, and the parameters that calibrate the family for a comparison.

Families fitted (see each share system's module for the equations and sources):

- ``ces``         flat CES, sigma and the weights (:mod:`.ces`);
- ``nested_ces``  one sigma per group of a given tree, all groups jointly (:mod:`.ces`);
- ``stone_geary`` the linear expenditure system (:mod:`.les`);
- ``aids``        AIDS, nonlinear or linear approximate, restrictions on request;
- ``quaids``      AIDS with the quadratic expenditure term (:mod:`.almost_ideal`).

Every family is fitted on its share equations by iterated least squares with HC1-type robust
standard errors clustered by observation (:mod:`.system`); intervals and p-values use Student's t
with ``T - K / m`` degrees of freedom.

Regularity over the sample. For AIDS and QUAIDS each observation is checked with the family's own
evaluation (:class:`dualcost.core.preferences.aids.AIDS` and ``QUAIDS``): monotonicity fails
where a fitted share leaves [0, 1], concavity where the Slutsky matrix is not negative
semidefinite (:func:`dualcost.core.preferences.base.slutsky_notices`; Mas-Colell, Whinston and
Green 1995, 3.G). For the others concavity has a closed condition: CES and nested CES are concave
when every sigma is zero or more; the linear expenditure system when every marginal budget share
is zero or more and income exceeds the subsistence cost (Deaton and Muellbauer 1980, 3.1).
"""

from __future__ import annotations

from collections.abc import Sequence
from dataclasses import dataclass, field
from typing import Any

import numpy as np
import numpy.typing as npt
from scipy import stats

from ..elasticities import ElasticityTable, elasticity_table
from ..errors import DualcostError, InvalidInput
from ..preferences.aids import AIDS, QUAIDS
from ..preferences.base import Notice, slutsky_notices
from .almost_ideal import (
    AlmostIdealShares,
    QuadraticAlmostIdealShares,
    RestrictionTest,
    restriction_tests,
)
from .ces import CESShares, NestedCESShares
from .les import LinearExpenditureShares
from .panel import Panel
from .system import FitOptions, Label, Matrix, ShareSystem, SystemFit, Vector, fit_system

#: The share system of each family that can be fitted, in the order they are listed to users.
FITTED_SYSTEMS: dict[str, type[ShareSystem]] = {
    "ces": CESShares,
    "nested_ces": NestedCESShares,
    "stone_geary": LinearExpenditureShares,
    "aids": AlmostIdealShares,
    "quaids": QuadraticAlmostIdealShares,
}
FITTED_FAMILIES = tuple(FITTED_SYSTEMS)
#: At most this many observations are named one by one in a regularity report.
LISTED = 50

COVARIANCE = ("HC1 heteroskedasticity-robust covariance (MacKinnon and White 1985), clustered by "
              "observation across the share equations (Liang and Zeger 1986)")
SYSTEM = ("the last item's equation is dropped (adding-up) and the others are fitted jointly, the "
          "weighting by their residual covariance iterated to convergence (Zellner 1962; "
          "Barten 1969)")


@dataclass(frozen=True)
class ParameterEstimate:
    """One structural parameter: estimated freely, derived from free ones, or fixed."""

    label: Label
    estimate: float
    std_error: float | None
    t_statistic: float | None
    p_value: float | None
    ci_low: float | None
    ci_high: float | None
    kind: str  # "estimated", "derived" (by a restriction) or "fixed" (a normalisation)


@dataclass(frozen=True)
class RegularityReport:
    """Where over the sample the fitted model breaks a regularity condition (observation
    positions), with the first notes."""

    checked: int
    monotonicity: tuple[int, ...]
    concavity: tuple[int, ...]
    symmetry: tuple[int, ...]
    outside_domain: tuple[int, ...]
    notes: tuple[tuple[int, Notice], ...]


@dataclass(frozen=True)
class FitResult:
    """Everything one fit returns."""

    family: str
    estimator: str | None
    restrictions: str | None
    method: str
    covariance_type: str
    system: ShareSystem
    theta: Vector
    covariance: Matrix
    parameters: tuple[ParameterEstimate, ...]
    spec: dict[str, Any]
    fit: SystemFit
    tests: tuple[RestrictionTest, ...]
    elasticities: ElasticityTable
    regularity: RegularityReport
    confidence_level: float
    notices: tuple[Notice, ...] = field(default=())

    def spec_for(self, theta: Vector) -> dict[str, Any]:
        """Calibration parameters for other parameter values (for a parametric bootstrap)."""
        return self.system.spec(theta)

    def shares_at(self, prices: npt.ArrayLike, expenditure: float) -> Vector:
        """The fitted model's budget shares at one price vector and total expenditure."""
        lp = np.log(np.asarray(prices, dtype=np.float64))[None, :]
        return self.system.shares(self.theta, lp, np.array([np.log(expenditure)]))[0]

    def comparison_obstacle(self) -> str | None:
        """Why the fitted model cannot calibrate its family for a comparison, or ``None``."""
        return self.system.comparison_obstacle(self.theta)


def fitted_system(family: str, n_items: int, options: FitOptions) -> ShareSystem:
    """The share system of ``family`` for ``n_items`` items, built from the options it takes."""
    if family not in FITTED_FAMILIES:
        raise InvalidInput("family", f"cannot fit family {family!r}; the fitted families are "
                           f"{', '.join(FITTED_FAMILIES)}")
    return FITTED_SYSTEMS[family].from_options(n_items, options)


def fit(
    panel: Panel,
    family: str,
    *,
    estimator: str | None = None,
    restrictions: str | None = None,
    quadratic: bool = False,
    price_terms: bool | None = None,
    alpha0: float | None = None,
    tree: Any = None,
    confidence_level: float = 0.95,
    point: tuple[npt.ArrayLike, float] | None = None,
    max_iterations: int = 200,
    item_names: Sequence[str] | None = None,
    max_jacobian: int | None = None,
) -> FitResult:
    """Fit ``family`` (one of :data:`FITTED_FAMILIES`) to ``panel`` (:class:`Panel`).

    ``estimator``, ``restrictions``, ``quadratic``, ``price_terms``, ``alpha0`` and ``tree`` are
    the family's options (see :class:`FitOptions`); a family refuses those it does not take.
    ``confidence_level`` is of every interval, strictly between 0 and 1; ``point`` is
    ``(prices, total expenditure)`` where elasticities are evaluated (default the sample's
    weighted geometric means); exceeding ``max_iterations`` of the iterated least squares raises
    :class:`NumericalFailure`; ``item_names`` are used in messages about collinear prices;
    a fit whose Jacobian (observations x equations x parameters) has more entries than
    ``max_jacobian`` is refused.
    """
    level = float(confidence_level)
    if not 0.0 < level < 1.0:
        raise InvalidInput("confidence_level", f"must be strictly between 0 and 1, got {level:g}")
    if int(max_iterations) < 1:
        raise InvalidInput("max_iterations", "must be at least 1")
    system = fitted_system(family, panel.n_items, FitOptions(
        estimator=estimator, restrictions=restrictions, price_terms=price_terms, alpha0=alpha0,
        quadratic=quadratic, tree=tree, item_names=item_names))
    _check_jacobian_size(panel, system, max_jacobian)
    at = _point(panel, point)
    result = fit_system(system, panel, max_iterations=int(max_iterations))
    tests, notices = _tests_and_notices(system, panel, result, int(max_iterations))
    parameters = _parameter_table(system, result, level)
    table = elasticity_table(system, result.theta, result.covariance, *at)
    if not np.all(np.isfinite(table.expenditure)):
        notices.append(Notice("elasticity_undefined", "At the point asked for, the model's share "
                              "of at least one item is zero, so its elasticities are undefined "
                              "and left empty."))
    regularity = _regularity(system, result, panel)
    notices.extend(_regularity_notices(regularity))
    obstacle = system.comparison_obstacle(result.theta)
    if obstacle is not None:
        notices.append(Notice("not_comparable", f"The fitted model cannot be used in a "
                              f"comparison: {obstacle}."))
    return FitResult(
        family=system.family, estimator=system.estimator, restrictions=system.restrictions,
        method=f"{system.method}; {SYSTEM}", covariance_type=COVARIANCE, system=system,
        theta=result.theta, covariance=result.covariance, parameters=parameters,
        spec=system.spec(result.theta), fit=result, tests=tests, elasticities=table,
        regularity=regularity, confidence_level=level, notices=tuple(notices))


def _check_jacobian_size(panel: Panel, system: ShareSystem, max_jacobian: int | None) -> None:
    n = panel.n_items
    size = panel.n_obs * (n - 1) * system.n_parameters
    if max_jacobian is not None and size > max_jacobian:
        raise InvalidInput("observations", f"the fit is too large: {panel.n_obs} observations x "
                           f"{n - 1} equations x {system.n_parameters} parameters = {size} "
                           f"Jacobian entries, above the limit of {max_jacobian}; use fewer "
                           "observations or items (or group the items)")


def _tests_and_notices(system: ShareSystem, panel: Panel, result: SystemFit, max_iterations: int
                       ) -> tuple[tuple[RestrictionTest, ...], list[Notice]]:
    """The restriction tests (AIDS and QUAIDS) and the notices of the data and the estimator."""
    notices = list(panel.notices)
    if not isinstance(system, AlmostIdealShares):
        return (), notices
    tests = _tests(system, panel, result, max_iterations)
    if system.linear:
        notices.append(Notice(
            "linear_approximation", "The linear approximate AIDS replaces ln a(p) by Stone's "
            "price index; its estimates are read as the parameters of the exact AIDS with "
            f"alpha0 = {system.alpha0:g} for the elasticities, the regularity checks and the "
            "model specification, which is an approximation."))
    if not system.price_terms:
        notices.append(Notice(
            "engel_curves_only", "price_terms is false: every gamma_ij is fixed at 0, so the "
            "fit describes how shares change with total expenditure only (Engel curves), and "
            "the price elasticities follow from that assumption, not from the data."))
    return tests, notices


def _point(panel: Panel, point: tuple[npt.ArrayLike, float] | None) -> tuple[Vector, float]:
    """Prices and total expenditure where elasticities are evaluated."""
    if point is None:
        log_p, log_m = panel.mean_point()
        return np.exp(log_p), float(np.exp(log_m))
    prices, expenditure = point
    p = np.asarray(prices, dtype=np.float64)
    if p.shape != (panel.n_items,):
        raise InvalidInput("point_prices", f"must hold {panel.n_items} prices, one per item")
    bad = np.flatnonzero(~np.isfinite(p) | (p <= 0.0))
    if bad.size:
        raise InvalidInput("point_prices", "must be a finite number above zero", int(bad[0]))
    m = float(expenditure)
    if not (np.isfinite(m) and m > 0.0):
        raise InvalidInput("point_expenditure", "must be a finite number above zero")
    return p, m


def _tests(system: AlmostIdealShares, panel: Panel, result: SystemFit,
           max_iterations: int) -> tuple[RestrictionTest, ...]:
    if not system.price_terms:
        return ()
    if system.restrictions == "none":
        return restriction_tests(system, result, "none")
    free = AlmostIdealShares(system.n_items, restrictions="none", quadratic=system.quadratic,
                             price_terms=True, estimator=system.estimator, alpha0=system.alpha0,
                             item_names=system.item_names)
    return restriction_tests(free, fit_system(free, panel, max_iterations=max_iterations),
                             system.restrictions)


def _parameter_table(system: ShareSystem, result: SystemFit, level: float
                     ) -> tuple[ParameterEstimate, ...]:
    a, c = system.full_map
    phi = system.full(result.theta)
    cov = a @ result.covariance @ a.T
    q = float(stats.t.ppf(0.5 + 0.5 * level, result.df_resid))
    out = []
    for r, label in enumerate(system.full_labels):
        est = float(phi[r])
        if not np.any(a[r]):
            out.append(ParameterEstimate(label, est, None, None, None, None, None, "fixed"))
            continue
        se = float(np.sqrt(max(cov[r, r], 0.0)))
        t = est / se if se > 0.0 else None
        p = float(2.0 * stats.t.sf(abs(t), result.df_resid)) if t is not None else None
        # A row that is one free parameter as it stands is estimated; any other is derived.
        direct = np.count_nonzero(a[r]) == 1 and float(a[r].max()) == 1.0 and c[r] == 0.0
        kind = "estimated" if direct else "derived"
        out.append(ParameterEstimate(label, est, se, t, p, est - q * se, est + q * se, kind))
    return tuple(out)


def _regularity(system: ShareSystem, result: SystemFit, panel: Panel) -> RegularityReport:
    t_obs = panel.n_obs
    mono = tuple(int(t) for t in np.flatnonzero(
        np.any((result.fitted < 0.0) | (result.fitted > 1.0), axis=1)))
    notes: list[tuple[int, Notice]] = []
    if isinstance(system, AlmostIdealShares):
        return _almost_ideal_regularity(system, result.theta, panel)
    concave: tuple[int, ...] = ()
    outside: tuple[int, ...] = ()
    if isinstance(system, (CESShares, NestedCESShares)):
        n_groups = 1 if isinstance(system, CESShares) else system.tree.n_groups
        low = [float(s) for s in result.theta[:n_groups] if s < 0.0]
        if low:
            concave = tuple(range(t_obs))
            notes.append((0, Notice("slutsky_not_negative_semidefinite", f"An estimated sigma "
                                    f"({low[0]:.6g}) is below zero: the cost function is not "
                                    "concave at any observation.")))
    elif isinstance(system, LinearExpenditureShares):
        gamma, beta = system._split(result.theta)
        floor = panel.prices @ gamma
        outside = tuple(int(t) for t in np.flatnonzero(panel.expenditure <= floor))
        if np.any(beta < 0.0):
            inside = np.flatnonzero(panel.expenditure > floor)
            concave = tuple(int(t) for t in inside)
            notes.append((0, Notice("slutsky_not_negative_semidefinite", f"A marginal budget "
                                    f"share is negative ({float(beta.min()):.6g}): the Slutsky "
                                    "matrix is not negative semidefinite at any observation.")))
    for t in mono[:LISTED]:
        notes.append((t, Notice("shares_outside_unit_interval", "A fitted share lies outside [0, 1].")))
    return RegularityReport(t_obs, mono, concave, (), outside, tuple(notes))


def _almost_ideal_regularity(system: AlmostIdealShares, theta: Vector, panel: Panel
                             ) -> RegularityReport:
    """Each observation through the family's own evaluation (AIDS, QUAIDS classes)."""
    alpha, beta, gamma, lam = system.unpack(theta)
    model: AIDS | QUAIDS
    if system.quadratic:
        model = QUAIDS(alpha, gamma, beta, lam, system.alpha0, 1.0)
    else:
        model = AIDS(alpha, gamma, beta, system.alpha0, 1.0)
    names = system.item_names
    mono: list[int] = []
    concave: list[int] = []
    asym: list[int] = []
    outside: list[int] = []
    notes: list[tuple[int, Notice]] = []
    for t in range(panel.n_obs):
        p, m = panel.prices[t], float(panel.expenditure[t])
        try:
            w = model.budget_shares(p, m)
            slutsky = model.slutsky_matrix(p, m)
        except DualcostError as exc:
            outside.append(t)
            if len(notes) < LISTED:
                notes.append((t, Notice("outside_domain", f"The model cannot be evaluated "
                                        f"here: {exc}.")))
            continue
        off = np.flatnonzero((w < 0.0) | (w > 1.0))
        if off.size:
            mono.append(t)
            if len(notes) < LISTED:
                i = int(off[0])
                notes.append((t, Notice("shares_outside_unit_interval", f"The fitted share of "
                                        f"{names[i]} is {w[i]:.6g}, outside [0, 1].")))
        for notice in slutsky_notices(slutsky, p):
            target = concave if notice.code == "slutsky_not_negative_semidefinite" else asym
            target.append(t)
            if len(notes) < LISTED and notice.code == "slutsky_not_negative_semidefinite":
                notes.append((t, notice))
    return RegularityReport(panel.n_obs, tuple(mono), tuple(concave), tuple(asym),
                            tuple(outside), tuple(notes))


def _regularity_notices(report: RegularityReport) -> list[Notice]:
    out = []
    for code, where, what in (
        ("monotonicity_violated", report.monotonicity, "a fitted share outside [0, 1]"),
        ("concavity_violated", report.concavity, "a Slutsky matrix that is not negative "
         "semidefinite (the cost function is not concave there)"),
        ("outside_domain", report.outside_domain, "no model value (outside the region where the "
         "model is defined)"),
    ):
        if where:
            out.append(Notice(code, f"The fitted model has {what} at {len(where)} of "
                              f"{report.checked} observations; see regularity."))
    return out
