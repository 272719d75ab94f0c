"""Fixed-base indices for the six-commodity, five-period artificial data set.

Source of every value in this file: ILO, IMF, OECD, UNECE, Eurostat and World Bank (2004),
*Consumer Price Index Manual: Theory and Practice*, chapter 19 ("Price indices using an
artificial data set"): prices from Table 19.1, quantities from Table 19.2 and the fixed-base
indices (period 1 = 1) from Table 19.3, printed to four decimals. The values were recalled from
memory, not copied from the document at hand (see /work/shared/reference/README.md); the recalled
indices are consistent with the recalled prices and quantities to the printed four decimals.
"""

from __future__ import annotations

import numpy as np
import pytest
from numpy.testing import assert_allclose

from dualcost.core.indices import FORMULAS, IndexData
from tests.reference_data import SIX_COMMODITY_PRICES, SIX_COMMODITY_QUANTITIES
from tests.reference_data import SIX_COMMODITY_PRINTED as PRINTED

# CPI Manual (2004) Tables 19.1 (prices), 19.2 (quantities) and 19.3 (fixed-base indices),
# recalled from memory: periods 1-5 (rows) by commodities 1-6 (columns).
PRICES = np.array(SIX_COMMODITY_PRICES)
QUANTITIES = np.array(SIX_COMMODITY_QUANTITIES)

# Half a unit in the fourth printed decimal.
PRINTED_ROUNDING = 5e-5


def fixed_base_data() -> IndexData:
    """All five comparisons (period 1 against periods 1-5) in one call: leading axis = period."""
    return IndexData(
        p0=np.broadcast_to(PRICES[0], PRICES.shape),
        p1=PRICES,
        q0=np.broadcast_to(QUANTITIES[0], QUANTITIES.shape),
        q1=QUANTITIES,
    )


@pytest.mark.parametrize("name", sorted(PRINTED))
def test_fixed_base_index_matches_printed_table(name: str) -> None:
    """Fixed-base Laspeyres, Paasche, Fisher and Törnqvist for periods 1-5 equal CPI Manual
    (2004) Table 19.3 to the four printed decimals (values recalled from memory)."""
    result = np.asarray(FORMULAS[name].compute(fixed_base_data()))
    assert result.shape == (5,)
    assert_allclose(result, PRINTED[name], rtol=0.0, atol=PRINTED_ROUNDING)


def test_vectorised_call_equals_one_period_at_a_time() -> None:
    """The leading period axis is only a batch axis: each period computed alone gives the same
    value (common practice for vectorised code; checked to rounding error)."""
    batch = fixed_base_data()
    for name in PRINTED:
        together = np.asarray(FORMULAS[name].compute(batch))
        for t in range(PRICES.shape[0]):
            alone = FORMULAS[name].compute(
                IndexData(PRICES[0], PRICES[t], QUANTITIES[0], QUANTITIES[t])
            )
            assert_allclose(together[t], alone, rtol=1e-14, atol=0.0, err_msg=f"{name}, {t}")
