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
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np
from numpy.typing import NDArray

from .errors import InvalidInput
from .indices import matched_sample, sato_vartia

Array = NDArray[np.float64]
Mask = NDArray[np.bool_]


@dataclass(frozen=True)
class NewGoodsIndex:
    """Feenstra's index, its two parts, and which items were common, along leading axes."""

    index: Array
    sato_vartia_common: Array
    common_share_base: Array  # lambda_0
    common_share_current: Array  # lambda_1
    common: Mask


def check_new_goods_sigma(name: str, sigma: float) -> float:
    """The adjustment needs an elasticity above 1 (items that are not essential)."""
    value = float(sigma)
    if not np.isfinite(value) or value <= 1.0:
        raise InvalidInput(name, "the new-goods adjustment (Feenstra 1994) needs an elasticity "
                           f"of substitution greater than 1, got {value:g}")
    return value


def feenstra(
    p0: Array, p1: Array, q0: Array, q1: Array, available0: Mask, available1: Mask, sigma: float
) -> NewGoodsIndex:
    """Feenstra's (1994) CES price index between two periods whose items differ.

    ``available0`` and ``available1`` say which items are on sale in each period; an item is
    *bought* when it is on sale and its quantity is above zero, and *common* when bought in both.
    Prices and quantities of items not on sale are ignored. Arrays may carry leading axes.
    """
    s = check_new_goods_sigma("sigma", sigma)
    bought0 = available0 & (np.where(available0, q0, 0.0) > 0.0)
    bought1 = available1 & (np.where(available1, q1, 0.0) > 0.0)
    common = bought0 & bought1
    if not np.all(np.any(common, axis=-1)):
        raise InvalidInput("quantities", "the new-goods adjustment needs at least one item bought "
                           "in both periods of each comparison")
    p0f = np.where(bought0, p0, 1.0)
    p1f = np.where(bought1, p1, 1.0)
    v0 = np.where(bought0, p0f * q0, 0.0)
    v1 = np.where(bought1, p1f * q1, 0.0)
    lam0 = np.sum(np.where(common, v0, 0.0), axis=-1) / np.sum(v0, axis=-1)
    lam1 = np.sum(np.where(common, v1, 0.0), axis=-1) / np.sum(v1, axis=-1)
    sv = sato_vartia(matched_sample(p0f, p1f, q0, q1, common))
    index = sv * np.exp((np.log(lam1) - np.log(lam0)) / (s - 1.0))
    return NewGoodsIndex(index=np.asarray(index), sato_vartia_common=sv, common_share_base=lam0,
                         common_share_current=lam1, common=common)
