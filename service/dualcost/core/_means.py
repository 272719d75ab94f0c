"""Power means and logarithmic means, evaluated stably; they work along the last axis.

The CES unit cost relative to a reference point, the Lloyd-Moulton index and every group of a
nested CES tree are the same object: the weighted power mean of order ``t = 1 - sigma``

    M_t(r; s) = (sum_i s_i r_i^t)^(1/t),     M_0(r; s) = prod_i r_i^(s_i)

(Hardy, Littlewood and Polya 1934, *Inequalities*, ch. II). We work with its logarithm. Where
``|t ln r|`` is of moderate size we use ``log1p(sum_i s_i expm1(t ln r_i)) / t``, which keeps full
accuracy as ``t`` goes to 0 (the Cobb-Douglas limit) instead of cancelling; otherwise the
log-sum-exp form, which cannot overflow for large ``sigma``.
"""

from __future__ import annotations

import math
from typing import Any

import numpy as np
from numpy.typing import NDArray
from scipy.special import logsumexp

Array = NDArray[np.float64]

# Beyond this |t * ln r| the expm1 form could overflow; log-sum-exp takes over.
_EXPM1_LIMIT = 30.0


def log_power_mean(log_relatives: Array, weights: Array, t: float) -> Any:
    """``ln M_t(r; s)`` along the last axis, for weights ``s`` summing to one (zeros allowed)."""
    centre = np.sum(weights * log_relatives, axis=-1)
    if t == 0.0:
        return centre
    # Centring on the weighted mean keeps the expm1 terms small when the inputs are levels
    # rather than relatives near one, so no digits are lost (ln M_t(r) = c + ln M_t(r e^-c)).
    z = t * (log_relatives - np.expand_dims(centre, -1))
    if np.max(np.abs(z)) < _EXPM1_LIMIT:
        return centre + np.log1p(np.sum(weights * np.expm1(z), axis=-1)) / t
    return centre + logsumexp(z, b=weights, axis=-1) / t


def power_mean_shares(log_relatives: Array, weights: Array, t: float) -> Array:
    """The terms' shares in the power mean, ``s_i r_i^t / sum_j s_j r_j^t``, along the last axis.

    These are the elasticities ``d ln M_t / d ln r_i``; for a CES unit cost they are the
    expenditure shares at the new prices.
    """
    if t == 0.0:
        return np.array(weights, dtype=np.float64, copy=True)
    z = t * log_relatives
    z = z - np.max(np.where(weights > 0.0, z, -np.inf), axis=-1, keepdims=True)
    terms = weights * np.exp(z)
    return terms / np.sum(terms, axis=-1, keepdims=True)


def log_quantity_mean(log_z: Array, weights: Array, sigma: float) -> float:
    """``ln`` of the CES quantity aggregate of ``exp(log_z)``: the power mean of order
    ``rho = (sigma - 1) / sigma``, the minimum at ``sigma = 0`` (Arrow, Chenery, Minhas and
    Solow 1961; Sato 1967). Weights sum to one.

    Zero quantity indices (``log_z = -inf``) are allowed: a zero term pulls the mean to zero when
    ``rho <= 0`` (sigma <= 1) and adds nothing to the sum otherwise (Hardy, Littlewood and Polya
    1934, ch. II), where the other weights are rescaled to sum to one.
    """
    if sigma == 0.0:
        return float(log_z.min())
    rho = (sigma - 1.0) / sigma
    finite = np.isfinite(log_z)
    if np.all(finite):
        return float(log_power_mean(log_z, weights, rho))
    if rho <= 0.0 or not np.any(finite):
        return -math.inf
    kept = float(weights[finite].sum())
    return math.log(kept) / rho + float(log_power_mean(log_z[finite], weights[finite] / kept, rho))


def log_mean(a: Array, b: Array) -> Array:
    """The logarithmic mean ``(a - b) / (ln a - ln b)``, with ``L(a, a) = a``, for a, b > 0.

    Written as ``b expm1(y) / y`` with ``y = ln(a / b)``, which stays accurate as a approaches b.
    """
    y = np.log(a / b)
    safe = np.where(y == 0.0, 1.0, y)
    return np.where(y == 0.0, b, b * np.expm1(safe) / safe)
