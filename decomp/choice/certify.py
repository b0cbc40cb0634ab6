"""The certificate of a sales-LP answer: computed from the instance alone, whatever the method claims.

For sales x (per product) and bid prices pi (per leg):

* feasibility, in seats (or customers): leg capacity excess max_i (A x - c)_i; in each
  market the no-purchases y_m = arrivals_m - sum_{j in m} x_j must be >= 0 and every
  product's ratio row x_j <= w_j y_m / w0_m must hold; x >= 0, and x_j <= mean_j
  outside markets. ``max_violation`` is the largest, ``max_violation_rel`` the largest
  relative to max(1, capacity) or max(1, arrivals);
* the dual bound at pi projected to pi >= 0, the Lagrangian dual of the leg capacities
  (equal to the LP dual objective; weak duality makes it an upper bound at any pi >= 0):

      q(pi) = c.pi + sum_m arrivals_m R_m(f - A'pi) + sum_{j outside markets} mean_j (f_j - a_j)^+,

  R_m the market's best expected net fare per arrival (:func:`decomp.choice.mnl.best_offer`);
* the gap (q - f.x) / max(1, |f.x|). For a feasible x it is the sum of each market's
  shortfall from its best at pi and the capacity complementarity pi.(c - A x);
* ``kkt_residual``: the largest of those market shortfalls per arrival relative to the
  market's top fare (and, outside markets, the DLP's reduced-cost violation over the fare).
"""

from __future__ import annotations

import numpy as np

from ..certify import checked_point, relative_gap
from ..result import Certificate
from . import mnl
from .data import require


def certify(instance, x, pi) -> Certificate:
    """The :class:`~decomp.result.Certificate` of sales ``x`` and bid prices ``pi`` on ``instance``."""
    mk = require(instance)
    x, pi = checked_point(instance, x, pi)
    mp = mnl.MarketProducts.of(mk)
    pi_plus = np.maximum(np.nan_to_num(pi, nan=0.0), 0.0)
    net = instance.fare - instance.leg_sum(pi_plus)

    viol, viol_rel = _feasibility(instance, mk, mp, x)
    primal = float(instance.fare @ x)
    R, _ = mnl.best_offer(mp, net[mp.index])
    outside = ~mk.in_market
    mean_out = np.maximum(instance.mean[outside], 0.0)
    dual = (float(instance.capacity @ pi_plus) + float(mp.arrivals @ R)
            + float(mean_out @ np.maximum(net[outside], 0.0)))
    gap = relative_gap(dual, primal)
    return Certificate(max_violation=viol, max_violation_rel=viol_rel,
                       kkt_residual=_kkt(instance, mk, mp, x, net, R), dual_value=dual, primal_value=primal,
                       gap=float(gap), min_bid_price=float(pi.min()) if pi.size else 0.0)


def _feasibility(instance, mk, mp, x):
    """(largest violation, largest relative violation) over legs, markets and bounds."""
    pairs = [(np.maximum(-x, 0.0), np.ones(len(x)))]
    if instance.n_legs:
        excess = instance.leg_load(x) - instance.capacity
        pairs.append((np.maximum(excess, 0.0), np.maximum(1.0, instance.capacity)))
    xm = x[mp.index]
    y = mp.arrivals - mp.per_market(xm)
    scale = np.maximum(1.0, mp.arrivals)
    pairs.append((np.maximum(-y, 0.0), scale))
    ratio_excess = xm - mp.weight * np.maximum(y, 0.0)[mp.market] / mp.w0[mp.market]
    pairs.append((np.maximum(ratio_excess, 0.0), scale[mp.market]))
    outside = ~mk.in_market
    pairs.append((np.maximum(x[outside] - np.maximum(instance.mean[outside], 0.0), 0.0), np.ones(int(outside.sum()))))
    viol = max((float(v.max()) for v, _ in pairs if v.size), default=0.0)
    rel = max((float((v / s).max()) for v, s in pairs if v.size), default=0.0)
    return viol, rel


def _kkt(instance, mk, mp, x, net, R) -> float:
    """Largest market shortfall per arrival over the market's top fare; DLP reduced costs outside markets."""
    got = mp.per_market(net[mp.index] * x[mp.index])
    lam = mp.arrivals
    top = np.zeros(mp.n_markets)
    np.maximum.at(top, mp.market, instance.fare[mp.index])
    short = np.where(lam > 0, (lam * R - got) / np.maximum(lam, 1e-300), 0.0) / np.maximum(top, 1e-300)
    out = float(np.max(np.abs(short), initial=0.0))
    outside = ~mk.in_market
    if outside.any():
        f, r, xo = instance.fare[outside], net[outside], x[outside]
        mean = np.maximum(instance.mean[outside], 0.0)
        tol = 1e-6 * np.maximum(1.0, mean)
        bad = np.where(xo < mean - tol, np.maximum(r, 0.0), 0.0) + np.where(xo > tol, np.maximum(-r, 0.0), 0.0)
        out = max(out, float(np.max(bad / f)))
    return out
