"""The segments of the piecewise-linear PNLP: breakpoints, widths and slopes per product.

For each product ``j`` the concave expected-sales curve S_j(x) = E[min(max(D_j, 0), x)] is
interpolated between breakpoints at demand quantiles

    b_0 = 0,  b_k = max(0, mean_j + std_j * Phi^{-1}(k / (K + 1))),  k = 1..K,

giving K segments of width w_jk = b_k - b_{k-1} and slope s_jk = (S_j(b_k) - S_j(b_{k-1})) / w_jk.
S_j is concave, so the slopes decrease and an LP fills the segments in order without binary
variables. Products with std = 0 get one segment [0, mean] of slope 1 (their other segments have
width 0). For products of another demand family the breakpoints are still placed at normal
quantiles of their mean and std, and S_j is that family's expected sales (chords of a concave
curve all the same).

This table is the PWL model's data: the array method (:mod:`decomp.methods.highs`), the
certificate (:mod:`decomp.certify`) and the Pyomo model (:mod:`models.pwl`) read it from here.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from . import distributions


def segments(instance, K: int):
    """Breakpoints (P x (K+1)), widths and slopes (P x K) of the PWL model."""
    K = int(K)
    if K < 1:
        raise ValueError(f"segments must be >= 1, got {K}")
    levels = np.arange(1, K + 1, dtype=np.float64) / (K + 1)
    z = special.ndtri(levels)                                   # (K,)
    mean = instance.mean[:, None]
    std = instance.std[:, None]
    b = np.empty((instance.n_products, K + 1))
    b[:, 0] = 0.0
    b[:, 1:] = np.maximum(0.0, mean + std * z[None, :])
    det = instance.std <= 0
    b[det, 1:] = np.maximum(instance.mean[det], 0.0)[:, None]
    width = np.diff(b, axis=1)
    S = np.empty_like(b)
    for k in range(K + 1):                                     # a loop over segments, not products
        S[:, k] = distributions.expected_sales(instance, b[:, k])
    dS = np.diff(S, axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        slope = np.where(width > 0, dS / np.where(width > 0, width, 1.0), 0.0)
    # zero-width segments (quantiles below zero, std = 0) get slope 0: they hold no seats
    slope = np.clip(slope, 0.0, 1.0)
    return b, width, slope
