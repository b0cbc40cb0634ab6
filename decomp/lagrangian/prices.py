"""Bid prices in and out of the dual method: starting points, warm starts, exact
zeros, and the prices of legs that left the problem."""

from __future__ import annotations

import logging

import numpy as np

from .. import distributions
from ..errors import ConfigError

log = logging.getLogger(__name__)

#: A bid price below this fraction of the largest fare is reported as 0 (the leg slack).
ZERO_RESOLUTION = 1e-9
#: The dual method's lower bound on bid prices, as a fraction of the largest fare
#: (see :mod:`decomp.lagrangian.newton`): the optimal dual value moves by at most
#: FLOOR * largest fare * total capacity.
FLOOR = 1e-13


def settled(old, new, bid_tol, fare_max) -> bool:
    """The move from bid prices ``old`` to ``new`` changes every one by at most bid_tol of
    itself (or of 1e-3 of the largest, for the smallest ones); those at or below the
    reporting resolution on both sides count as settled."""
    scale = np.maximum(old, 1e-3 * float(old.max(initial=0.0)))
    zero = np.maximum(old, new) <= ZERO_RESOLUTION * fare_max
    return bool(np.all((np.abs(new - old) <= bid_tol * scale) | zero))


def fare_start(net):
    """Half the demand-weighted fare per leg of each leg's products (a cold start)."""
    if net.n == 0:
        return np.zeros(0)
    sub = net.products
    share_g = 1.0 / np.maximum(np.asarray(net.AT_g.sum(axis=1)).ravel(), 1.0)
    share = sub.fare * net.to_products(share_g)
    mean = np.maximum(sub.mean, 0.0)
    dem = net.load(mean)
    rev = net.load(share * mean)
    return 0.5 * rev / np.maximum(dem, 1e-300)


def warm_prices(instance, warm_start, default):
    """Bid prices aligned with the instance's legs from a dict (by leg id) or an array;
    missing or non-finite entries keep ``default``. The range is not checked here:
    ``decomp.solve`` clamps a warm start once, to [0, the largest fare on each leg]
    (:mod:`decomp.warmstart`), and the loop starts from it no lower than its floor."""
    L = instance.n_legs
    if isinstance(warm_start, dict) or hasattr(warm_start, "keys"):
        pos = instance.leg_position()
        unknown = [k for k in warm_start if k not in pos]
        if unknown:
            log.warning("warm start names %d legs not in the instance (ignored), e.g. %r",
                        len(unknown), unknown[0])
        out = default.copy()
        for k, v in warm_start.items():
            if k in pos and v is not None and np.isfinite(float(v)):
                out[pos[k]] = float(v)
    else:
        arr = np.asarray(warm_start, dtype=np.float64)
        if arr.shape != (L,):
            raise ConfigError(f"warm start has shape {arr.shape}; expected ({L},), one bid price per leg "
                              "in instance.leg_ids order (or pass a dict by leg id)")
        out = np.where(np.isfinite(arr), arr, default)
    return out


def snap_zeros(pi, fare_max):
    """Bid prices below the resolution (ZERO_RESOLUTION of the largest fare) become exactly 0."""
    out = pi.copy()
    out[out <= ZERO_RESOLUTION * fare_max] = 0.0
    return out


def price_closed_legs(instance, net, pi_full):
    """Zero-capacity legs get the smallest bid price that closes every product on them:
    max over its products of (f_j S_j'(0) - the product's other bid prices)^+. (Any
    larger value is optimal too; this one is the smallest, hence reported.)"""
    if not np.any(net.dead):
        return
    dead = np.nonzero(net.dead)[0]
    thr = distributions.Products.from_instance(instance, dead).closing()
    lpp = instance.legs_per_product
    starts, counts = instance.leg_ptr[dead], lpp[dead]
    idx = np.repeat(starts - np.cumsum(np.concatenate([[0], counts[:-1]])), counts) + np.arange(counts.sum())
    legs = instance.leg_index[idx]
    owner = np.repeat(np.arange(len(dead)), counts)
    zl = net.zero_leg
    others = np.bincount(owner, weights=np.where(zl[legs], 0.0, pi_full[legs]), minlength=len(dead))
    need = np.maximum(thr - others, 0.0)
    on_zero = zl[legs]
    best = np.zeros(instance.n_legs)
    np.maximum.at(best, legs[on_zero], need[owner[on_zero]])
    pi_full[zl] = best[zl]
