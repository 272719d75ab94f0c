"""How long one expenditure-function integration takes for 50 items, against the closed form.

Run: ``python benchmarks/duality_integration_speed.py``. It prints, measured in the same run:

- the closed-form evaluation ``e(p1, u0)`` of a 50-item CES model (sigma 0.6) and of a 50-item
  Stone-Geary model, median of many runs;
- the same number found by integrating ``de/dt = x(p(t), e) . p'(t)`` along the straight price
  path (Hausman 1981; Vartia 1983) with the model given only by its Marshallian demands, at the
  default tolerance (rtol 1e-10), median of fewer runs, with the ratio of the two timings, the
  relative difference of the two answers and the number of demand evaluations;
- for scale, a 50-item linear demand system (vectorised demands), integrated the same way.

The machine is shared and noisy, so the ratios are the figures to compare between runs.
"""

from __future__ import annotations

import numpy as np
from _timing import median_seconds  # benchmarks/, on the path when run as a script

from dualcost.core.path_integration import integrate, straight_path
from dualcost.core.preferences import BaseBudget, DemandSystem, calibrate

N_ITEMS = 50


def scenario(seed: int = 11) -> tuple[BaseBudget, np.ndarray]:
    """An invented 50-item basket, prices moving by up to +-40 %."""
    rng = np.random.default_rng(seed)
    p0 = rng.uniform(0.5, 20.0, N_ITEMS)
    q0 = rng.uniform(1.0, 50.0, N_ITEMS)
    p1 = p0 * np.exp(rng.uniform(-0.4, 0.4, N_ITEMS))
    return BaseBudget.from_quantities(p0, q0), p1


def compare_one(label: str, family: str, params: dict, base: BaseBudget, p1: np.ndarray) -> None:
    closed = calibrate(family, base, params)
    u0 = closed.indirect_utility(base.prices, base.expenditure)
    m0 = base.expenditure

    def closed_form() -> float:
        return closed.expenditure(p1, u0)

    def integrated() -> float:
        # A fresh model each time, so that nothing is served from its cache.
        model = DemandSystem.calibrate(base, form="function", demand_function=closed.marshallian,
                                       deadline_seconds=None)
        return model.expenditure(p1, m0)

    t_closed = median_seconds(closed_form, 2000)
    t_int = median_seconds(integrated, 30)
    run = integrate(closed.marshallian, straight_path(base.prices, p1), m0)
    gap = abs(integrated() / closed_form() - 1.0)
    print(f"{label}")
    print(f"  closed form e(p1,u0)              {t_closed * 1e6:10.1f} us")
    print(f"  integrated from x(p,m) alone      {t_int * 1e6:10.1f} us   ratio {t_int / t_closed:8.1f}"
          f"   relative difference {gap:.1e}   demand evaluations {run.evaluations}")


def linear_system(base: BaseBudget, p1: np.ndarray) -> None:
    rng = np.random.default_rng(12)
    n = N_ITEMS
    own = -rng.uniform(0.5, 2.0, n) * base.quantities / base.prices
    b = np.diag(own) + 0.001 * np.outer(base.quantities / base.prices, base.quantities / base.prices) / n
    a = base.quantities - b @ base.prices

    def integrated() -> float:
        model = DemandSystem.calibrate(base, form="linear", intercepts=a, price_coefficients=b,
                                       deadline_seconds=None)
        return model.expenditure(p1, base.expenditure)

    t_int = median_seconds(integrated, 100)
    print(f"linear demand system, {n} items (vectorised demands, no closed form in the engine)")
    print(f"  integrated                        {t_int * 1e6:10.1f} us")


def main() -> None:
    base, p1 = scenario()
    compare_one(f"CES, sigma 0.6, {N_ITEMS} items", "ces", {"sigma": 0.6}, base, p1)
    compare_one(f"Stone-Geary, subsistence 30 % of the base bundle, {N_ITEMS} items", "stone_geary",
                {"subsistence_quantities": 0.3 * base.quantities}, base, p1)
    linear_system(base, p1)


if __name__ == "__main__":
    main()
