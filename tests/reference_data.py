"""Check values from outside the project, shared by the tests that compare against them.

The artificial six-commodity, five-period data set. Source of every value below: ILO, IMF, OECD,
UNECE, Eurostat and World Bank (2004), *Consumer Price Index Manual: Theory and Practice*,
chapter 19 ("Price indices using an artificial data set"): prices from Table 19.1, quantities
from Table 19.2 and the fixed-base indices (period 1 = 1) from Table 19.3, printed to four
decimals. The values were recalled from memory, not copied from the document at hand (see
/work/shared/reference/README.md); the recalled indices are consistent with the recalled prices
and quantities to the printed four decimals.

Plain lists, as a JSON request body takes them; ``np.array(...)`` gives the arrays. A test that
changes a row copies it first, so that the next test sees the printed values.
"""

from __future__ import annotations

# CPI Manual (2004) Table 19.1, prices of commodities 1-6 (columns) in periods 1-5 (rows)
# (recalled from memory).
SIX_COMMODITY_PRICES: list[list[float]] = [
    [1.0, 1.0, 1.0, 1.0, 1.0, 1.0],
    [1.2, 3.0, 1.3, 0.7, 1.4, 0.8],
    [1.0, 1.0, 1.5, 0.5, 1.7, 0.6],
    [0.8, 0.5, 1.6, 0.3, 1.9, 0.4],
    [1.0, 1.0, 1.6, 0.1, 2.0, 0.2],
]

# CPI Manual (2004) Table 19.2, quantities of commodities 1-6 (columns) in periods 1-5 (rows)
# (recalled from memory).
SIX_COMMODITY_QUANTITIES: list[list[float]] = [
    [1.0, 1.0, 2.0, 1.0, 4.5, 0.5],
    [0.8, 0.9, 1.9, 1.3, 4.7, 0.6],
    [1.0, 1.1, 1.8, 3.0, 5.0, 0.8],
    [1.2, 1.2, 1.9, 6.0, 5.6, 1.3],
    [0.9, 1.2, 2.0, 12.0, 6.5, 2.5],
]

# CPI Manual (2004) Table 19.3, fixed-base price indices with period 1 = 1, periods 1-5, four
# printed decimals (recalled from memory).
SIX_COMMODITY_PRINTED: dict[str, list[float]] = {
    "laspeyres": [1.0000, 1.4200, 1.3450, 1.3550, 1.4400],
    "paasche": [1.0000, 1.3824, 1.2031, 1.0209, 0.7968],
    "fisher": [1.0000, 1.4011, 1.2721, 1.1762, 1.0712],
    "tornqvist": [1.0000, 1.4052, 1.2890, 1.2268, 1.2477],
}
