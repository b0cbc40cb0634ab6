"""Power-law fits of solve time against problem size: t = a * n**b.

The fit is ordinary least squares on logs, log t = log a + b log n, so ``b``
is the slope of the log-log plot (1 is linear scaling). ``stderr`` carries the
standard errors of ``b`` and ``log a`` and the residual standard deviation of
log t, from which prediction intervals follow (production sizing uses them).
"""

from __future__ import annotations

import math
from typing import NamedTuple

import numpy as np


class PowerLawFit(NamedTuple):
    """``a``, ``b`` of t = a n^b and ``stderr``: a dict of uncertainty figures.

    ``stderr`` keys: ``b`` and ``log_a`` (standard errors; None with two
    points), ``sigma`` (residual standard deviation of natural-log time; None
    with two points), ``cov`` (2x2 covariance of (log a, b) as nested lists, or
    None), ``n_points``, ``log_n_mean`` (centre of the data in log n),
    ``n_min``/``n_max`` (the range fitted).
    Unpacks as ``a, b, stderr = fit_power_law(n, t)``.
    """

    a: float
    b: float
    stderr: dict

    def predict(self, n) -> np.ndarray:
        """Fitted time at size(s) ``n``."""
        return self.a * np.asarray(n, dtype=np.float64) ** self.b

    def log_sd(self, n) -> np.ndarray | None:
        """Standard deviation of the fitted log t at ``n`` (fit uncertainty only), or None."""
        cov = self.stderr.get("cov")
        if cov is None:
            return None
        x = np.log(np.asarray(n, dtype=np.float64))
        c = np.asarray(cov)
        return np.sqrt(c[0, 0] + 2 * x * c[0, 1] + x * x * c[1, 1])


def fit_power_law(n, t) -> PowerLawFit:
    """Least-squares fit of log t = log a + b log n.

    ``n`` and ``t`` are sequences of equal length with positive values; at
    least two distinct sizes are needed. Raises ValueError otherwise.
    """
    n = np.asarray(n, dtype=np.float64).ravel()
    t = np.asarray(t, dtype=np.float64).ravel()
    if n.shape != t.shape:
        raise ValueError(f"fit_power_law: n has {n.size} values, t has {t.size}")
    if n.size < 2:
        raise ValueError("fit_power_law: need at least two (n, t) points")
    if not (np.all(np.isfinite(n)) and np.all(np.isfinite(t)) and np.all(n > 0) and np.all(t > 0)):
        raise ValueError("fit_power_law: n and t must be finite and positive")
    if np.unique(n).size < 2:
        raise ValueError("fit_power_law: need at least two distinct sizes")
    x, y = np.log(n), np.log(t)
    X = np.column_stack([np.ones_like(x), x])
    coef, *_ = np.linalg.lstsq(X, y, rcond=None)
    log_a, b = float(coef[0]), float(coef[1])
    dof = n.size - 2
    if dof > 0:
        resid = y - X @ coef
        sigma2 = float(resid @ resid) / dof
        cov = sigma2 * np.linalg.inv(X.T @ X)
        info = {"b": math.sqrt(cov[1, 1]), "log_a": math.sqrt(cov[0, 0]), "sigma": math.sqrt(sigma2),
                "cov": cov.tolist()}
    else:
        info = {"b": None, "log_a": None, "sigma": None, "cov": None}
    info.update(n_points=int(n.size), log_n_mean=float(x.mean()), n_min=float(n.min()), n_max=float(n.max()))
    return PowerLawFit(math.exp(log_a), b, info)
