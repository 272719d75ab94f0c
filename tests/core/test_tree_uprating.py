"""Uprating clauses on a node of an index tree (core/tree_uprating.py): the factor is the clause
worked by hand on the tree's own chained series (a cumulative change rounded half up to one
decimal under a cap: common practice in indexation clauses), under the published index and the
Konüs index; a node that is not in the tree is named."""

from __future__ import annotations

from decimal import ROUND_HALF_UP, Decimal

import numpy as np
import pytest

from dualcost.core.aggregation import Link, Quotes
from dualcost.core.errors import InvalidInput
from dualcost.core.tree_uprating import tree_uprating
from tests.core.test_sigma_fit import LEAVES, hierarchy, model, prices

PERIODS = [f"2024-{m:02d}" for m in range(1, 11)]


def links() -> list[Link]:
    out = []
    m = model(0.7, 0.4, 2.5)
    p = prices(1)
    for period, ref in ((2, 0), (5, 4)):
        w = np.full(9, np.nan)
        w[LEAVES] = 1000.0 * np.asarray(m.budget_shares(p[:, ref]))
        out.append(Link(period, w, (ref,)))
    return out


def by_hand(later: float, earlier: float, cap: float) -> float:
    change = Decimal(repr(float(100.0 * (later / earlier - 1.0)))).quantize(
        Decimal("0.1"), rounding=ROUND_HALF_UP)
    return 1.0 + min(float(change), cap) / 100.0


@pytest.mark.parametrize("node", [None, "A", "b2"])
def test_the_factor_is_the_clause_on_the_nodes_published_series(node: str | None) -> None:
    clause = {"measure": "cumulative", "since": "2024-03", "period_of_year": 9, "lag": 1,
              "decimals": 1, "rounding": "half_up", "cap": 50.0}
    u = tree_uprating(hierarchy(), Quotes(prices(1), tuple(LEAVES), (None,) * 6), links(),
                      PERIODS, clauses=[clause], node=node, amount=100.0, upper="young",
                      sigma_fit="by_group")
    k = 0 if node is None else ["all", "A", "a1", "a2", "a3", "B", "b1", "b2", "c"].index(node)
    assert u.node == k and u.indices == ("young", "konus") and u.periods[0] == "2024-03"
    assert u.tree.konus is not None
    at, since = u.periods.index("2024-09"), u.periods.index("2024-03")
    [result] = u.clauses
    for name, series in (("young", u.tree.index[k]), ("konus", u.tree.konus[k])):
        factor = result.by_series[name].factors[0]
        assert factor == pytest.approx(by_hand(series[at], series[since], 50.0), abs=1e-12)
        paid = result.by_series[name].paid
        assert paid is not None and paid[-1] == pytest.approx(100.0 * factor)
    assert ("node_assumed" in {n.code for n in u.notices}) == (node is None)


def test_a_node_not_in_the_tree_is_named() -> None:
    with pytest.raises(InvalidInput) as bad:
        tree_uprating(hierarchy(), Quotes(prices(1), tuple(LEAVES), (None,) * 6), links(),
                      PERIODS, clauses=[{"measure": "cumulative", "since": "2024-03",
                                         "period_of_year": 9, "lag": 1}], node="Z",
                      sigma_by_level=[1.0, 1.0, 1.0])
    assert bad.value.parameter == "node"
