"""Means with t-based 95% confidence intervals, paired and unpaired differences."""

from __future__ import annotations

import math

import numpy as np
from scipy import stats


def mean_ci(x, level: float = 0.95) -> dict:
    """Mean and t-based confidence interval (half-width ``nan`` with fewer than 2 values)."""
    x = np.asarray(x, dtype=np.float64)
    n = len(x)
    mean = float(x.mean()) if n else math.nan
    if n < 2:
        return {"mean": mean, "halfwidth": math.nan, "low": math.nan, "high": math.nan, "n": n}
    sd = float(x.std(ddof=1))
    hw = float(stats.t.ppf(0.5 + level / 2, n - 1) * sd / math.sqrt(n))
    return {"mean": mean, "halfwidth": hw, "low": mean - hw, "high": mean + hw, "n": n}


def unpaired_halfwidth(x, y, level: float = 0.95) -> float:
    """Welch t interval half-width for mean(x) - mean(y), ignoring that the samples are paired."""
    x, y = np.asarray(x, dtype=np.float64), np.asarray(y, dtype=np.float64)
    nx, ny = len(x), len(y)
    if nx < 2 or ny < 2:
        return math.nan
    vx, vy = x.var(ddof=1) / nx, y.var(ddof=1) / ny
    se2 = vx + vy
    if se2 == 0:
        return 0.0
    df = se2 ** 2 / (vx ** 2 / (nx - 1) + vy ** 2 / (ny - 1))
    return float(stats.t.ppf(0.5 + level / 2, df) * math.sqrt(se2))


def paired_difference(x, y, level: float = 0.95) -> dict:
    """mean(x - y) on common random numbers with its t interval, and the unpaired half-width."""
    d = np.asarray(x, dtype=np.float64) - np.asarray(y, dtype=np.float64)
    out = mean_ci(d, level)
    out["unpaired_halfwidth"] = unpaired_halfwidth(x, y, level)
    return out
