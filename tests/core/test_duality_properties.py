"""Property tests (hypothesis) of the duality identities over every preference family:
e(p, v(p, m)) = m, v(p, e(p, u)) = u and h(p, u) = x(p, e(p, u)) at generated prices and
incomes (Mas-Colell, Whinston and Green 1995, ch. 3, Propositions 3.E.1 and 3.G.1)."""

from __future__ import annotations

import numpy as np
import pytest
from hypothesis import given, settings
from hypothesis import strategies as st
from numpy.testing import assert_allclose

from tests.core.family_cases import CASE_IDS, CASES, random_budget

N = 5
moves = st.lists(st.floats(min_value=-0.5, max_value=0.5), min_size=N, max_size=N)
scale = st.floats(min_value=0.6, max_value=1.6)


@pytest.mark.parametrize("case", CASES, ids=CASE_IDS)
@settings(max_examples=40, deadline=None, derandomize=True)
@given(log_moves=moves, income_scale=scale)
def test_duality_identities_hold_at_generated_prices(case, log_moves, income_scale) -> None:
    rng = np.random.default_rng(5)
    base = random_budget(rng, N)
    model = case.build(rng, base)
    p = base.prices * np.exp(np.array(log_moves))
    m = base.expenditure * income_scale
    if m <= model.income_floor(p) * 1.05:
        return  # below the family's subsistence cost the identities are not defined
    u = model.indirect_utility(p, m)
    assert_allclose(model.expenditure(p, u), m, rtol=1e-10)
    assert_allclose(model.indirect_utility(p, model.expenditure(p, u)), u, rtol=1e-9, atol=1e-12)
    x = model.marshallian(p, m)
    assert_allclose(model.hicksian(p, u), x, rtol=1e-9, atol=1e-12 * np.max(np.abs(x)))
    assert_allclose(p @ x, m, rtol=1e-9)  # adding-up (Walras' law)
