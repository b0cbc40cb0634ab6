"""The Lagrangian dual of the sales LP: relax the leg capacities, one small problem per market.

With bid prices pi >= 0 the sales LP splits by market; market m earns
arrivals_m R_m(r) at net fares r = f - A'pi (:mod:`decomp.choice.mnl`), a product
outside every market mean_j (r_j)^+, so

    q(pi) = c.pi + sum_m arrivals_m R_m(f - A'pi) + sum_{j outside} mean_j (f_j - a_j)^+,

convex and piecewise linear in pi (each R_m is a maximum over offer sets of functions
linear in pi), with the subgradient c - A x(pi), x(pi) the sales of the best sets.
The LP dual of the sales LP has the same value: there is no duality gap.

:func:`smoothed` replaces every (z)^+ by mu log(1 + e^{z/mu}) (in R_m through
:func:`decomp.choice.mnl.smoothed_value`): a convex, twice differentiable q_mu >= q,
with q_mu - q at most about mu log 2 (sum of the markets' arrivals W/w0 and the other
products' means), whose Hessian is

    sum over market products j:  arrivals_m h_j / W_m (u_j - ubar_m)(u_j - ubar_m)'
    + sum over other products:    mean_j s_j (1 - s_j) / mu_j  u_j u_j',

u_j the product's leg incidence and ubar_m = sum_k p_k u_k its market's expected legs.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp
from scipy.special import expit

from . import mnl


@dataclasses.dataclass(frozen=True, eq=False)
class DualPoint:
    """The exact dual at pi: value, subgradient, and the sales of the best offer sets."""

    value: float
    gradient: np.ndarray
    R: np.ndarray              # per market
    offered: np.ndarray        # per market product
    x_m: np.ndarray
    x_o: np.ndarray


def evaluate(net, pi) -> DualPoint:
    """q(pi) with the sales of the best offer sets (ties: not offered)."""
    mp = net.mp
    r_m, r_o = net.net_fares(pi)
    R, offered = mnl.best_offer(mp, r_m)
    x_m = mnl.sales(mp, offered)
    x_o = np.where(r_o > 0, net.mean_o, 0.0)
    value = float(net.capacity @ pi + mp.arrivals @ R + net.mean_o @ np.maximum(r_o, 0.0))
    return DualPoint(value=value, gradient=net.capacity - net.load(x_m, x_o), R=R, offered=offered,
                     x_m=x_m, x_o=x_o)


@dataclasses.dataclass(frozen=True, eq=False)
class SmoothPoint:
    """q_mu at pi: value, gradient, and what the Hessian needs."""

    value: float
    gradient: np.ndarray
    market: mnl.Smoothed
    x_m: np.ndarray
    x_o: np.ndarray
    curv_o: np.ndarray


def smoothed(net, pi, mu_m: np.ndarray, mu_o: np.ndarray, near=None) -> SmoothPoint:
    """q_mu(pi) and its gradient; ``mu_m`` per market, ``mu_o`` per other product (fare units).

    ``near``: (bid prices, SmoothPoint) of a nearby point; the root finding then starts from
    its values moved to first order, R + sum_j p_j (change of r_j).
    """
    mp = net.mp
    r_m, r_o = net.net_fares(pi)
    start = None
    if near is not None:
        pi_near, point_near = near
        moved = net.legs_m @ (np.asarray(pi_near) - pi)                     # change of the net fares
        start = point_near.market.value + mp.per_market(point_near.market.prob * moved)
    sm = mnl.smoothed_value(mp, r_m, mu_m, start=start)
    z = r_o / mu_o
    s = expit(z)
    x_m = mp.arrivals[mp.market] * sm.prob
    x_o = net.mean_o * s
    value = float(net.capacity @ pi + mp.arrivals @ sm.value + net.mean_o @ (mu_o * np.logaddexp(0.0, z)))
    return SmoothPoint(value=value, gradient=net.capacity - net.load(x_m, x_o), market=sm, x_m=x_m, x_o=x_o,
                       curv_o=net.mean_o * s * (1.0 - s) / mu_o)


def hessian(net, point: SmoothPoint) -> np.ndarray:
    """The dense L x L Hessian of q_mu at ``point`` (products outside the smoothing band add nothing).

    Products of one itinerary group (same market, same legs) share u_j, so the sums run
    over groups: sum_g d_g (u_g - ubar_m)(u_g - ubar_m)', d_g the group's sum of
    arrivals_m h_j / W_m and ubar_m = sum_g p_g u_g.
    """
    mp = net.mp
    sm = point.market
    L = net.n_legs
    H = np.zeros((L, L))
    soft = sm.soft
    if len(soft):
        G = len(net.group_market)
        d = np.bincount(net.group[soft], weights=mp.arrivals[mp.market[soft]] * sm.curv / sm.total[mp.market[soft]],
                        minlength=G)
        has = np.zeros(mp.n_markets, dtype=bool)
        has[mp.market[soft]] = True                                        # markets with smooth products
        row_of = np.cumsum(has) - 1
        in_soft = np.flatnonzero(has[net.group_market])                    # groups of those markets
        p_g = np.bincount(net.group, weights=sm.prob, minlength=G)[in_soft]
        pos = row_of[net.group_market[in_soft]]
        Pm = sp.csr_matrix((p_g, (pos, np.arange(len(in_soft)))), shape=(int(has.sum()), len(in_soft)))
        ubar = Pm @ net.legs_g[in_soft]                                    # expected legs per arrival
        act = in_soft[d[in_soft] > 0]
        Y = (net.legs_g[act] - ubar[row_of[net.group_market[act]]]).tocsr()
        H += (Y.T @ sp.diags(d[act]) @ Y).toarray()
    if len(point.curv_o):
        keep = point.curv_o > 1e-300
        Uo = net.legs_o[np.flatnonzero(keep)]
        H += (Uo.T @ sp.diags(point.curv_o[keep]) @ Uo).toarray()
    return H
