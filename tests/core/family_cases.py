"""One calibrated instance per preference family, for the checks that every family must pass.

Each case builds a family from a seeded random base budget with ``n`` items and returns it with
price vectors to evaluate at. Prices stay within a factor of about 3 of the base prices, where
every family here is regular. Adding a family adds one ``FamilyCase`` line below.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from dualcost.core.preferences import (
    AIDS,
    CES,
    QUAIDS,
    BaseBudget,
    CobbDouglas,
    HomogeneousQuadratic,
    NestedCES,
    Preferences,
    StoneGeary,
    Translog,
)


@dataclass(frozen=True)
class FamilyCase:
    id: str
    build: Callable[[np.random.Generator, BaseBudget], Preferences]
    homothetic: bool


def random_budget(rng: np.random.Generator, n: int = 5) -> BaseBudget:
    """Base prices around 1 to 5 and quantities around 1 to 10, income about 10 to 200."""
    prices = rng.uniform(1.0, 5.0, n)
    quantities = rng.uniform(1.0, 10.0, n)
    return BaseBudget.from_quantities(prices, quantities)


def random_prices(rng: np.random.Generator, base: BaseBudget, spread: float = 0.6) -> np.ndarray:
    """Base prices each moved by a factor between exp(-spread) and exp(spread) (about 1/1.8 to
    1.8 at the default)."""
    return base.prices * np.exp(rng.uniform(-spread, spread, base.n_items))


def aids_parameters(
    rng: np.random.Generator, base: BaseBudget, *, quadratic: bool = False
) -> dict[str, np.ndarray]:
    """A regular (QU)AIDS parameter set around the base shares ``w0`` (alpha left to calibrate).

    ``gamma = -0.05 (diag(w0) - w0 w0')`` is symmetric with zero row and column sums;
    ``beta = 0.05 w0 (z - w0 . z)`` and ``lambda = 0.01 w0 (z' - w0 . z')`` sum to zero.
    """
    w0 = base.shares
    z = rng.normal(size=w0.size)
    params = {
        "gamma": -0.05 * (np.diag(w0) - np.outer(w0, w0)),
        "beta": 0.05 * w0 * (z - w0 @ z),
    }
    if quadratic:
        z = rng.normal(size=w0.size)
        params["lambda"] = 0.01 * w0 * (z - w0 @ z)
    return params


def stone_geary_elasticities(rng: np.random.Generator, base: BaseBudget) -> np.ndarray:
    """Expenditure elasticities scaled so that sum w0 eta = 1 (Engel aggregation).

    Drawn in [0.6, 1.4] before scaling, so every eta stays below 1.4 / 0.6 < 2.5: with
    frisch = -2.5 every subsistence quantity q0 (1 - eta / 2.5) is then positive.
    """
    raw = rng.uniform(0.6, 1.4, base.n_items)
    return raw / float(base.shares @ raw)


def nested_ces_tree(n: int) -> dict:
    """A three-level tree for any n >= 3: root sigma 0.3 over group "a" (items 0..k-1,
    sigma 2.0) and group "b" (sigma 0.7: item k and subgroup "b1" of the rest, sigma 1.0)."""
    k = (n - 1) // 2
    return {
        "sigma": 0.3,
        "children": [
            {"name": "a", "sigma": 2.0, "children": list(range(k))},
            {
                "name": "b",
                "sigma": 0.7,
                "children": [k, {"name": "b1", "sigma": 1.0, "children": list(range(k + 1, n))}],
            },
        ],
    }


CASES: list[FamilyCase] = [
    FamilyCase("cobb_douglas", lambda rng, b: CobbDouglas.calibrate(b), True),
    FamilyCase("ces_0.4", lambda rng, b: CES.calibrate(b, sigma=0.4), True),
    FamilyCase("ces_leontief", lambda rng, b: CES.calibrate(b, sigma=0.0), True),
    FamilyCase("ces_near_1", lambda rng, b: CES.calibrate(b, sigma=1.0 + 1e-9), True),
    FamilyCase("ces_3", lambda rng, b: CES.calibrate(b, sigma=3.0), True),
    FamilyCase(
        "nested_ces",
        lambda rng, b: NestedCES.calibrate(b, tree=nested_ces_tree(b.n_items)),
        True,
    ),
    FamilyCase("aids", lambda rng, b: AIDS.calibrate(b, **aids_parameters(rng, b)), False),
    FamilyCase(
        "quaids",
        lambda rng, b: QUAIDS.calibrate(b, **aids_parameters(rng, b, quadratic=True)),
        False,
    ),
    FamilyCase(
        "stone_geary",
        lambda rng, b: StoneGeary.calibrate(
            b, expenditure_elasticities=stone_geary_elasticities(rng, b), frisch=-2.5
        ),
        False,
    ),
    FamilyCase(
        "stone_geary_subsistence",
        lambda rng, b: StoneGeary.calibrate(b, subsistence_quantities=0.3 * b.quantities),
        False,
    ),
    FamilyCase("translog_0.6", lambda rng, b: Translog.calibrate(b, sigma=0.6), True),
    # sigma 0.4, not 0.5: with relatives in [1/1.8, 1.8] a demand stays non-negative only while
    # rho_i < (1 + sigma) / sigma * mean(rho), which needs (1 + sigma) / sigma >= 3.24.
    FamilyCase("quadratic_0.4", lambda rng, b: HomogeneousQuadratic.calibrate(b, sigma=0.4), True),
]

CASE_IDS = [c.id for c in CASES]
