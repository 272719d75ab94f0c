"""The CES new-goods adjustment of Feenstra (1994), vectorised along the last axis.

For a CES consumer with elasticity of substitution ``sigma > 1``, an item not on sale has an
infinite reservation price and drops out of the unit cost. Comparing periods 0 and 1 whose items
differ, with ``I`` the items bought in both (the common items),

    P = P_SV(I) * (lambda_1 / lambda_0)^(1 / (sigma - 1)),
    lambda_t = sum_{i in I} p_ti q_ti / sum_{i bought in t} p_ti q_ti,

where ``P_SV(I)`` is the Sato-Vartia index over the common items with their shares taken among
them (Sato 1976; Vartia 1976). ``lambda_t`` is the common items' share of period t's spending: a
new item in period 1 lowers ``lambda_1`` and so the index, by the gain from the wider choice; an
item gone from period 1 lowers ``lambda_0`` and raises it (Feenstra 1994, *American Economic
Review* 84(1), Proposition 1). For CES preferences this equals the Konüs index exactly.

The index is the ``feenstra`` entry of the formula registry (:mod:`dualcost.core.indices`, where
:func:`~dualcost.core.indices.new_goods_index` computes it with its parts); :func:`feenstra` here
takes the arrays directly.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray

from .indices import IndexData, NewGoodsIndex, check_new_goods_sigma, new_goods_index

__all__ = ["NewGoodsIndex", "check_new_goods_sigma", "feenstra"]

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]


def feenstra(
    p0: Array, p1: Array, q0: Array, q1: Array, available0: Mask, available1: Mask, sigma: float
) -> NewGoodsIndex:
    """Feenstra's (1994) CES price index between two periods whose items differ.

    ``available0`` and ``available1`` say which items are on sale in each period; an item is
    *bought* when it is on sale and its quantity is above zero, and *common* when bought in both.
    Prices and quantities of items not on sale are ignored. Arrays may carry leading axes.
    """
    s = check_new_goods_sigma("sigma", sigma)
    return new_goods_index(IndexData(p0, p1, q0, q1, available0=available0,
                                     available1=available1, new_goods_sigma=s))
