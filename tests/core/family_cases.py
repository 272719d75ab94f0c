"""One calibrated instance per preference family, for the checks that every family must pass.

Each case builds a family from a seeded random base budget with ``n`` items and returns it with
price vectors to evaluate at. Prices stay within a factor of about 3 of the base prices, where
every family here is regular. Adding a family adds one ``FamilyCase`` line below.
"""

from __future__ import annotations

from collections.abc import Callable
from dataclasses import dataclass

import numpy as np

from dualcost.core.preferences import AIDS, CES, QUAIDS, BaseBudget, CobbDouglas, Preferences


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


def random_prices(rng: np.random.Generator, base: BaseBudget) -> np.ndarray:
    """Base prices each moved by a factor between 1/1.8 and 1.8."""
    return base.prices * np.exp(rng.uniform(-0.6, 0.6, base.n_items))


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


CASES: list[FamilyCase] = [
    FamilyCase("cobb_douglas", lambda rng, b: CobbDouglas.calibrate(b), True),
    FamilyCase("ces_0.4", lambda rng, b: CES.calibrate(b, sigma=0.4), True),
    FamilyCase("ces_leontief", lambda rng, b: CES.calibrate(b, sigma=0.0), True),
    FamilyCase("ces_near_1", lambda rng, b: CES.calibrate(b, sigma=1.0 + 1e-9), True),
    FamilyCase("ces_3", lambda rng, b: CES.calibrate(b, sigma=3.0), True),
    FamilyCase("aids", lambda rng, b: AIDS.calibrate(b, **aids_parameters(rng, b)), False),
    FamilyCase(
        "quaids",
        lambda rng, b: QUAIDS.calibrate(b, **aids_parameters(rng, b, quadratic=True)),
        False,
    ),
]

CASE_IDS = [c.id for c in CASES]
