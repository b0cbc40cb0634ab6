"""The multinomial logit over markets: choice probabilities, and each market's best offer set.

A customer of market m offered the set S buys j in S with probability
w_j / (w0_m + W(S)), W(S) = sum_{k in S} w_k. With net fares r_j (fare less the
displacement of the product's legs), the best expected net fare per arrival is

    R_m(r) = max_S  sum_{j in S} w_j r_j / (w0_m + W(S)),

attained by a revenue-ordered set: S = {j : r_j > R_m} (Talluri and van Ryzin 2004,
for the multinomial logit; equivalently w0 R = sum_j w_j (r_j - R)^+). It is computed
here by Dinkelbach's iteration for the ratio, R <- value of {j : r_j > R} from R = 0,
which increases monotonically and stops, exactly, when the set repeats (at most one
more step than the market has products; typically three or four). All markets at
once: numpy over the products, ``bincount`` by market.

:func:`smoothed_value` is the same with (z)^+ replaced by mu log(1 + e^{z/mu}): a
smooth, convex R^mu(r) >= R(r), within mu log 2 W / w0 of it, with its gradient
(the choice probabilities of a soft offer set) and the ingredients of its Hessian.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy.special import expit


@dataclasses.dataclass(frozen=True, eq=False)
class MarketProducts:
    """The products sold in markets, grouped by market, as flat arrays (``K`` of them).

    ``index``: their positions in the instance; ``market``: the market of each;
    ``weight``: preference weights; ``w0``, ``arrivals``: per market (``M``).
    """

    index: np.ndarray
    market: np.ndarray
    weight: np.ndarray
    w0: np.ndarray
    arrivals: np.ndarray

    @classmethod
    def of(cls, markets) -> "MarketProducts":
        idx = markets.order
        return cls(index=idx, market=markets.product_market[idx], weight=markets.weight[idx],
                   w0=markets.no_purchase_weight, arrivals=markets.arrivals)

    @property
    def n_markets(self) -> int:
        return len(self.w0)

    def per_market(self, values) -> np.ndarray:
        """Sum of a per-product quantity over each market."""
        return np.bincount(self.market, weights=values, minlength=self.n_markets)


def best_offer(mp: MarketProducts, r: np.ndarray, max_steps: int | None = None):
    """(R per market, offered mask per product): the best offer sets at net fares ``r`` (Dinkelbach).

    ``r`` is aligned with ``mp`` (market products in market order). Products with
    r_j <= R_m are not offered (a tie adds nothing). The value rises and the set shrinks
    from step to step (kept so in floating point: a product once dropped stays out, so
    rounding at a tie cannot make it cycle), so each market is done within one step more
    than it has products; a market whose set repeats is done, and each step works on the
    products of the markets not yet done.
    """
    M = mp.n_markets
    offered = r > 0.0
    R = np.zeros(M)
    act = np.arange(len(r))                       # products of the markets still changing
    steps = max_steps if max_steps is not None else int(np.bincount(mp.market).max(initial=0)) + 2
    for _ in range(steps):
        m, v, ra, oa = mp.market[act], mp.weight[act], r[act], offered[act]
        vo = np.where(oa, v, 0.0)
        value = np.bincount(m, weights=vo * ra, minlength=M) / (mp.w0 + np.bincount(m, weights=vo, minlength=M))
        R[m] = value[m]
        again = oa & (ra > value[m])
        moved = again != oa
        if not moved.any():
            break
        offered[act] = again
        changed = np.zeros(M, dtype=bool)
        changed[m[moved]] = True
        act = act[changed[m]]
    return R, offered


def sales(mp: MarketProducts, offered: np.ndarray, arrivals=None) -> np.ndarray:
    """Expected sales per market product when each market offers ``offered`` to its arrivals."""
    lam = mp.arrivals if arrivals is None else arrivals
    den = mp.w0 + mp.per_market(np.where(offered, mp.weight, 0.0))
    return np.where(offered, lam[mp.market] * mp.weight / den[mp.market], 0.0)


def set_value(mp: MarketProducts, r: np.ndarray, offered: np.ndarray) -> np.ndarray:
    """Expected net fare per arrival of each market's set ``offered`` at net fares ``r``."""
    v = np.where(offered, mp.weight, 0.0)
    return mp.per_market(v * r) / (mp.w0 + mp.per_market(v))


@dataclasses.dataclass(frozen=True, eq=False)
class Smoothed:
    """R^mu per market and what its derivatives need.

    ``prob``: dR/dr_j (the soft offer set's choice probabilities); ``total``:
    W_m = w0_m + sum_j w_j s_j; ``soft``: the products within the smoothing band
    (elsewhere s_j is 0 or 1 to e^-40) and ``curv`` their h_j = w_j s_j (1 - s_j) / mu_m.
    The Hessian of R_m is (I - 1 p')' diag(h) (I - 1 p') / W_m.
    """

    value: np.ndarray
    prob: np.ndarray
    total: np.ndarray
    soft: np.ndarray
    curv: np.ndarray


#: Products whose net fare is more than SATURATED smoothing widths from R^mu enter as exact
#: linear (or zero) terms: their softplus differs from (z)^+ by less than e^-20 of mu.
SATURATED = 20.0
#: Half-width of the band of smooth products around the starting value, in smoothing widths.
BAND = 40.0


def smoothed_value(mp: MarketProducts, r: np.ndarray, mu: np.ndarray, start=None, tol: float = 1e-12,
                   max_steps: int = 60) -> Smoothed:
    """R^mu: the root of w0 R = sum_j w_j mu log(1 + exp((r_j - R) / mu)), per market.

    ``mu``: smoothing per market (fare units, > 0). Newton's method from ``start`` (a
    nearby earlier value; default the exact R): the left side minus the right is
    concave and increasing in R, so from any start Newton's iterates are below the
    root after the first step and then rise monotonically to it. Products farther
    than ``BAND`` widths from the start enter as exact linear (or zero) terms; if the
    root moved so far that one of them is within ``SATURATED`` widths of it, the
    computation is repeated from the root.
    """
    if start is None:
        start = best_offer(mp, r)[0]
    for _ in range(3):
        out, moved = _smoothed_from(mp, r, mu, np.asarray(start, dtype=np.float64), tol, max_steps)
        if not moved:
            return out
        start = out.value
    return out


def _smoothed_from(mp, r, mu, start, tol, max_steps):
    m, v = mp.market, mp.weight
    M = mp.n_markets
    gap = r - start[m]
    band = BAND * mu[m]
    soft = np.flatnonzero(np.abs(gap) < band)
    hard_in = gap >= band
    A = mp.per_market(np.where(hard_in, v * r, 0.0))
    B = mp.per_market(np.where(hard_in, v, 0.0))
    R = start.copy()
    going = np.ones(M, dtype=bool)                    # markets not yet converged
    sel = soft                                        # ... and their smooth products
    for _ in range(max_steps):
        ms, mus = m[sel], mu[m[sel]]
        z = (r[sel] - R[ms]) / mus
        e = np.exp(-np.abs(z))                        # softplus and logistic from one exponential
        soft_plus = np.maximum(z, 0.0) + np.log1p(e)
        logistic = np.where(z >= 0, 1.0, e) / (1.0 + e)
        phi = mp.w0 * R - (A - B * R) - np.bincount(ms, weights=v[sel] * mus * soft_plus, minlength=M)
        W = mp.w0 + B + np.bincount(ms, weights=v[sel] * logistic, minlength=M)
        step = np.where(going, -phi / W, 0.0)
        R += step
        going &= np.abs(step) > tol * np.maximum(1.0, np.abs(R))
        if not going.any():
            break
        sel = sel[going[m[sel]]]
    ms, vs, mus = m[soft], v[soft], mu[m[soft]]
    z = (r[soft] - R[ms]) / mus
    ss = expit(z)
    W = mp.w0 + B + np.bincount(ms, weights=vs * ss, minlength=M)
    s_all = hard_in.astype(np.float64)
    s_all[soft] = ss
    moved = bool(np.any(np.abs(R - start) > (BAND - SATURATED) * mu))
    return Smoothed(value=R, prob=v * s_all / W[m], total=W, soft=soft, curv=vs * ss * (1.0 - ss) / mus), moved
