"""Heteroscedasticity-robust (HC3) standard errors in closed form.

HC3 (MacKinnon & White 1985; common practice for small samples):
cov = (X'X)⁻¹ X' diag(eᵢ² / (1 − hᵢ)²) X (X'X)⁻¹.
"""

from __future__ import annotations

import numpy as np
from numpy.typing import NDArray


def hc3_cov(
    X: NDArray[np.float64],
    resid: NDArray[np.float64],
    leverage: NDArray[np.float64],
    xtx_inv: NDArray[np.float64],
) -> NDArray[np.float64]:
    """HC3 covariance of the coefficients; rows with leverage 1 contribute nothing."""
    with np.errstate(divide="ignore", invalid="ignore"):
        omega = np.where(leverage < 1 - 1e-12, resid**2 / (1 - leverage) ** 2, 0.0)
    meat = (X * omega[:, None]).T @ X
    cov: NDArray[np.float64] = xtx_inv @ meat @ xtx_inv
    return cov
