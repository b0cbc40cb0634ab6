"""Normal demand: expected sales, spill, marginal sales and the newsvendor fractile.

Expected sales are reported with demand floored at zero,
``S(x) = E[min(max(D, 0), x)]`` for x >= 0, which is the textbook
``E[min(D, x)] = mu - sigma G(z)`` (z = (x - mu)/sigma, G the standard normal
loss function) minus the constant ``E[min(D, 0)] = mu - sigma G(-mu/sigma)``:

    S(x) = sigma (G(-mu/sigma) - G(z)).

The constant changes neither the optimum nor the bid prices. Products with
sigma = 0 have S(x) = min(x, mu). All functions are vectorized over products.
"""

from __future__ import annotations

import numpy as np
from scipy import special

_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)
_SQRT_HALF = np.sqrt(0.5)


def _as_arrays(*values):
    """Broadcast to writable float arrays of at least one dimension."""
    return [np.array(v, dtype=np.float64) for v in
            np.broadcast_arrays(*(np.atleast_1d(np.asarray(v, dtype=np.float64)) for v in values))]


def pdf(z):
    return _INV_SQRT_2PI * np.exp(-0.5 * np.square(z))


def upper_tail(z):
    """P(Z > z) = Phi(-z), accurate in both tails."""
    return special.ndtr(-np.asarray(z, dtype=np.float64))


def loss(z):
    """Standard normal loss G(z) = E[(Z - z)^+] = phi(z) - z (1 - Phi(z))."""
    scalar = np.ndim(z) == 0
    z = np.atleast_1d(np.asarray(z, dtype=np.float64))
    # For z > 0 write both terms with the scaled complementary error function
    # so that phi and the tail share the factor exp(-z^2/2) (no underflow to
    # 0 - 0 before the true value does).
    out = np.empty_like(z)
    pos = z > 0
    zp = z[pos]
    out[pos] = np.exp(-0.5 * zp * zp) * (_INV_SQRT_2PI - 0.5 * zp * special.erfcx(zp * _SQRT_HALF))
    zn = z[~pos]
    out[~pos] = pdf(zn) - zn * special.ndtr(-zn)
    out = np.maximum(out, 0.0)
    return float(out[0]) if scalar else out


def expected_sales(x, mean, std):
    """S(x) = E[min(max(D, 0), x)] for D ~ N(mean, std^2), x >= 0."""
    x, mean, std = _as_arrays(x, mean, std)
    out = np.minimum(x, np.maximum(mean, 0.0))
    s = std > 0
    if np.any(s):
        sd = std[s]
        out[s] = sd * (loss(-mean[s] / sd) - loss((x[s] - mean[s]) / sd))
    return out


def textbook_expected_sales(x, mean, std):
    """E[min(D, x)] = mean - std G((x - mean)/std), demand not floored (may be < 0 in mass)."""
    x, mean, std = (np.asarray(v, dtype=np.float64) for v in (x, mean, std))
    return mean - std * loss((x - mean) / std)


def expected_spill(x, mean, std):
    """E[(D - x)^+] = std G(z): demand turned away at allocation x."""
    x, mean, std = (np.asarray(v, dtype=np.float64) for v in (x, mean, std))
    return std * loss((x - mean) / std)


def marginal_sales(x, mean, std):
    """S'(x) = P(D > x) for x >= 0 (std = 0: 1 below the mean, 0 above)."""
    x, mean, std = _as_arrays(x, mean, std)
    out = (x < mean).astype(np.float64)
    s = std > 0
    if np.any(s):
        out[s] = upper_tail((x[s] - mean[s]) / std[s])
    return out


#: Smallest ratio a/f used in the fractile: a = 0 would mean an unbounded allocation.
MIN_RATIO = 1e-300


def fractile(a, fare, mean, std):
    """Newsvendor allocation argmax_{x >= 0} f S(x) - a x, and dx/da.

    For std > 0: x = max(0, mean + std z) with z = -ndtri(a / f) (computed this
    way rather than ndtri(1 - a/f) to avoid cancellation); dx/da =
    -std / (f phi(z)) where x > 0, else 0. For std = 0: x = mean when a < f,
    0 otherwise, and dx/da = 0 (the subproblem is then piecewise linear).
    Returns (x, dxda, z).
    """
    a, fare, mean, std = np.broadcast_arrays(*(np.asarray(v, dtype=np.float64) for v in (a, fare, mean, std)))
    ratio = np.clip(a / fare, MIN_RATIO, 1.0)
    z = -special.ndtri(ratio)
    with np.errstate(invalid="ignore", divide="ignore", over="ignore"):
        # std = 0 meets z = +-inf at the ends; those entries are replaced below
        x = mean + std * z
        dxda = -std / (fare * pdf(z))
    inside = (x > 0) & (ratio < 1.0)
    x = np.where(inside, x, 0.0)
    dxda = np.where(inside, dxda, 0.0)
    det = std <= 0
    if np.any(det):
        x = np.where(det, np.where(a < fare, mean, 0.0), x)
        dxda = np.where(det, 0.0, dxda)
    return x, dxda, z
