"""Derivatives by central differences, for the delta method and the fit's Jacobian.

``d f / d theta_k ~ (f(theta + h e_k) - f(theta - h e_k)) / (2 h)`` with step
``h = 1e-6 (1 + |theta_k|)``: truncation error of order ``h^2`` (1e-12), rounding of order
``eps / h`` (1e-10) (common practice; Nocedal and Wright 2006, *Numerical Optimization*, 8.1).
"""

from __future__ import annotations

from collections.abc import Callable

import numpy as np
from numpy.typing import NDArray

Array = NDArray[np.float64]


def central_jacobian(func: Callable[[Array], Array], theta: Array) -> Array:
    """Central differences of ``func`` in each parameter, stacked on a new last axis: for ``func``
    returning T by n, the result is T by n by K."""
    cols = []
    for k in range(theta.size):
        h = 1e-6 * (1.0 + abs(float(theta[k])))
        up = theta.copy()
        down = theta.copy()
        up[k] += h
        down[k] -= h
        cols.append((func(up) - func(down)) / (2.0 * h))
    return np.stack(cols, axis=-1)
