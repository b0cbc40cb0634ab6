"""Lagrangian relaxation of the network dynamic program (Topaloglu 2009).

The network program decides in each period whether to accept a request for
product ``j``, and acceptance uses a seat on every leg of ``j``. Give each
leg ``i`` of ``j`` its own accept decision ``w_ijt`` and relax ``w_ijt = u_jt``
with a multiplier ``lambda_ijt`` (one per leg, product and period). The
relaxed program separates (H. Topaloglu, "Using Lagrangian relaxation to
compute capacity-dependent bid prices in network revenue management",
Operations Research 57(3), 2009):

    V^lambda = sum_t sum_j p_tj (r_j - sum_{i in j} lambda_ijt)^+  +  sum_i v_i^lambda(c_i),

where ``v_i^lambda`` is the single-leg program of leg ``i`` in which product
``j`` earns ``lambda_ijt``. For every ``lambda``, ``V^lambda`` is an upper bound
on the optimal expected revenue (the relaxed program allows more), and it is
convex in ``lambda``. At ``lambda_ijt = pi_i`` (the DLP's duals) it is at most
the DLP value: each leg earns at most ``pi_i c_i``, and the first term is the
DLP dual's second term. An optimal ``lambda`` can be taken with
``lambda >= 0`` and ``sum_{i in j} lambda_ijt = r_j`` (raising a short sum
lowers the first term at least as fast as it raises the legs' values); the
search keeps to that set, where the first term is zero.

Minimization (:func:`relax`): projected subgradient steps with a Polyak step
to a target level below the best bound found (the variable target value
method, Goffin and Kiwiel 1999, "Convergence of a simple subgradient level
method"). The subgradient is exact: ``p_tj`` times the probability that leg
``i`` accepts ``j`` in period ``t`` under its own optimal policy (a forward
pass over the leg's seats), less ``p_tj`` where ``r_j`` exceeds the sum of
multipliers. Progress is certified: every iterate's ``V^lambda`` is computed
exactly, so the best value is a valid bound at every iteration, and it never
rises. The search stops when the target gap falls below the tolerance
(further steps are expected to improve the bound by less than that share),
at the iteration limit or at the time limit, and says which.

The legs' programs are solved together, vectorized over legs, products and
seats (legs padded to the largest), with a Python step per period: the work of
one evaluation is ``periods x legs x seats x products per leg``. The network
must have at most one request per period (the published problems do).
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np
import scipy.sparse as sp

from .demand import PeriodDemand
from .tables import BidPriceTables

log = logging.getLogger(__name__)

#: A progress line on the logger every this many iterations (counted, so the lines do not depend on the clock).
PROGRESS_EVERY = 10

#: Why the search stopped.
CONVERGED = "converged"             # target gap below tol x bound
STATIONARY = "stationary"           # zero projected subgradient: the bound is minimal
ITERATION_LIMIT = "iteration_limit"
TIME_LIMIT = "time_limit"


@dataclasses.dataclass(frozen=True)
class RelaxationStep:
    """One iterate of the search: its exact bound, the best so far, the target gap and the step length."""

    iteration: int
    value: float
    best: float
    target_gap: float
    step: float
    seconds: float


@dataclasses.dataclass(frozen=True, eq=False)
class RelaxationResult:
    """The best bound found, the one at the static bid prices, the tables at the best multipliers."""

    bound: float
    start_bound: float
    tables: BidPriceTables
    multipliers: np.ndarray          # (T, pairs) at the best bound, pairs in product order (instance.leg_index)
    termination: str
    iterations: int
    seconds: float
    history: tuple


class _Network:
    """The index arrays of one instance: leg-product pairs, their padding by leg and by product."""

    def __init__(self, instance, demand: PeriodDemand):
        P, L = instance.n_products, instance.n_legs
        n = instance.legs_per_product
        self.pair_prod = np.repeat(np.arange(P), n)
        self.pair_leg = np.asarray(instance.leg_index, dtype=np.int64)
        K = len(self.pair_leg)
        self.K = K
        self.fare = np.asarray(instance.fare, dtype=np.float64)
        self.cap = np.floor(np.asarray(instance.capacity, dtype=np.float64) + 1e-9).astype(np.int64)
        self.Cmax = int(self.cap.max()) if L else 0
        # pairs padded by leg: (L, Jmax), padding -> pair index K (a dummy with zero probability)
        order = np.argsort(self.pair_leg, kind="stable")
        per_leg = np.bincount(self.pair_leg, minlength=L)
        J = int(per_leg.max()) if L else 0
        first = np.r_[0, np.cumsum(per_leg)[:-1]]
        col = np.arange(K) - np.repeat(first, per_leg)
        self.by_leg = np.full((L, max(J, 1)), K, dtype=np.int64)
        self.by_leg[self.pair_leg[order], col] = order
        # pairs padded by product: (P, W), padding -> -1
        W = int(n.max()) if P else 1
        self.by_prod = np.full((P, W), -1, dtype=np.int64)
        pcol = np.arange(K) - np.repeat(instance.leg_ptr[:-1], n)
        self.by_prod[self.pair_prod, pcol] = np.arange(K)
        # pair -> product summation
        self.M = sp.csr_matrix((np.ones(K), (np.arange(K), self.pair_prod)), shape=(K, P))
        self.prob = demand.prob                                   # (T, P)
        pp = np.zeros((demand.periods, K + 1))
        pp[:, :K] = demand.prob[:, self.pair_prod]
        self.pair_prob = pp[:, :K]
        self.leg_prob = pp[:, self.by_leg]                        # (T, L, J)

    def project(self, lam: np.ndarray) -> np.ndarray:
        """Euclidean projection, per (period, product), onto {lambda >= 0, sum over j's legs = r_j}.

        The sort-based projection onto a scaled simplex (Held, Wolfe and
        Crowder 1974), vectorized over periods and products.
        """
        T = lam.shape[0]
        valid = self.by_prod >= 0                                  # (P, W)
        u = np.where(valid[None], lam[:, np.maximum(self.by_prod, 0)], -np.inf)   # (T, P, W)
        s = -np.sort(-u, axis=2)
        s_valid = np.isfinite(s)
        css = np.cumsum(np.where(s_valid, s, 0.0), axis=2)
        k = np.arange(1, s.shape[2] + 1)
        r = self.fare[None, :, None]
        cond = s_valid & (s - (css - r) / k > 0)
        rho = np.maximum(cond.sum(axis=2), 1)                      # cond holds on a prefix
        theta = (np.take_along_axis(css, rho[..., None] - 1, axis=2)[..., 0] - self.fare[None, :]) / rho
        w = np.maximum(u - theta[..., None], 0.0)
        out = np.empty_like(lam)
        tt = np.broadcast_to(np.arange(T)[:, None, None], w.shape)
        out[tt[:, valid], np.broadcast_to(self.by_prod, w.shape)[:, valid]] = w[:, valid]
        return out

    def tangent(self, g: np.ndarray) -> np.ndarray:
        """``g`` less its mean over each product's legs (the direction within sum_i lambda_ijt = r_j)."""
        n = np.bincount(self.pair_prod, minlength=self.M.shape[1]).astype(np.float64)
        mean = (g @ self.M) / np.maximum(n, 1.0)
        return g - mean[:, self.pair_prod]

    def evaluate(self, lam: np.ndarray, want_gradient: bool = True):
        """``V^lambda``, its subgradient (T, K) and the legs' bid tables (T, L, Cmax + 1)."""
        T, L = self.leg_prob.shape[0], len(self.cap)
        C = self.Cmax
        lam_pad = np.concatenate([lam, np.zeros((T, 1))], axis=1)
        R = lam_pad[:, self.by_leg]                                # (T, L, J)
        Pr = self.leg_prob
        short = self.fare[None, :] - lam @ self.M                  # (T, P): r_j - sum of multipliers
        const = float(np.sum(self.prob * np.maximum(short, 0.0)))
        bid = np.empty((T, L, C + 1))
        bid[:, :, 0] = np.inf
        V = np.zeros((L, C + 1))
        for t in range(T - 1, -1, -1):                             # backward: the legs' programs
            dv = np.diff(V, axis=1)                                # (L, C)
            bid[t, :, 1:] = dv
            gain = np.einsum("lj,ljc->lc", Pr[t], np.maximum(R[t][:, :, None] - dv[:, None, :], 0.0))
            V[:, 1:] += gain
        value = const + float(V[np.arange(L), self.cap].sum())
        if not want_gradient:
            return value, None, bid
        dist = np.zeros((L, C + 1))
        dist[np.arange(L), self.cap] = 1.0
        accept = np.empty_like(R)
        for t in range(T):                                         # forward: where each leg's seats are
            acc = R[t][:, :, None] > bid[t, :, None, 1:]           # (L, J, C): leg accepts j with x seats
            accept[t] = np.einsum("ljc,lc->lj", acc, dist[:, 1:])
            q = np.einsum("lj,ljc->lc", Pr[t], acc)
            move = dist[:, 1:] * q
            dist[:, 1:] -= move
            dist[:, :-1] += move
        g = np.zeros((T, self.K + 1))
        np.add.at(g, (slice(None), self.by_leg), Pr * accept)       # pads land on column K
        g = g[:, :self.K]
        g -= (self.prob * (short > 0))[:, self.pair_prod]
        return value, g, bid

    def tables(self, instance, bid, **kw) -> BidPriceTables:
        return BidPriceTables.from_legs(instance.leg_ids, self.cap,
                                        [bid[:, i, :self.cap[i] + 1] for i in range(len(self.cap))], **kw)


def relax(instance, demand: PeriodDemand, bid_prices, *, tol: float = 1e-5, iteration_limit: int = 300,
          time_limit: float | None = None, target_share: float = 0.01, patience: int = 10) -> RelaxationResult:
    """Minimize Topaloglu's bound from the static bid prices ``bid_prices`` (aligned with ``instance.leg_ids``).

    ``target_share``: the first target gap as a share of the first bound;
    ``patience``: iterations without reaching half the target gap before it is halved
    (and the search returns to the best multipliers).
    """
    for name, v, ok in (("tol", tol, tol > 0), ("iteration_limit", iteration_limit, iteration_limit >= 0),
                        ("time_limit", time_limit, time_limit is None or time_limit > 0),
                        ("target_share", target_share, target_share > 0), ("patience", patience, patience >= 1)):
        if not ok:
            raise ValueError(f"relax: {name} = {v!r} is out of range")
    demand.check(instance)
    demand.require_at_most_one_request("the Lagrangian relaxation of the network program")
    pi = np.asarray(bid_prices, dtype=np.float64)
    if pi.shape != (instance.n_legs,) or not np.all(np.isfinite(pi)):
        raise ValueError(f"bid prices must be {instance.n_legs} finite numbers aligned with instance.leg_ids")
    t0 = time.perf_counter()
    net = _Network(instance, demand)
    T = demand.periods
    lam0 = np.broadcast_to(pi[net.pair_leg], (T, net.K)).copy()   # lambda_ijt = pi_i: at most the DLP value
    v0, _, bid0 = net.evaluate(lam0, want_gradient=False)
    best, best_lam, best_bid, best_d = v0, lam0, bid0, None
    # first iterate within the restricted set: the fare split in proportion to the bid prices
    share = pi[net.pair_leg]
    tot = (share @ net.M)[net.pair_prod]
    n_legs = instance.legs_per_product[net.pair_prod]
    split = np.where(tot > 0, share / np.where(tot > 0, tot, 1.0), 1.0 / n_legs) * net.fare[net.pair_prod]
    lam = np.broadcast_to(split, (T, net.K)).copy()
    gap = target_share * abs(v0)
    history = [RelaxationStep(0, v0, v0, gap, 0.0, time.perf_counter() - t0)]
    since, termination, it = 0, ITERATION_LIMIT, 0
    for it in range(1, iteration_limit + 1):
        value, g, bid = net.evaluate(lam)
        reached = value <= best - gap / 2
        d = net.tangent(g)
        if value < best:
            best, best_lam, best_bid, best_d = value, lam, bid, d
        norm2 = float(np.sum(d * d))
        since = 0 if reached else since + 1
        if since >= patience:
            gap, since, lam, value = gap / 2, 0, best_lam, best
            d = best_d if best_d is not None else net.tangent(net.evaluate(lam)[1])
            norm2 = float(np.sum(d * d))
        step = 0.0 if norm2 == 0 else (value - (best - gap)) / norm2
        history.append(RelaxationStep(it, value, best, gap, step * np.sqrt(norm2), time.perf_counter() - t0))
        if norm2 == 0:
            termination = STATIONARY
            break
        if gap <= tol * abs(best):
            termination = CONVERGED
            break
        if time_limit is not None and time.perf_counter() - t0 > time_limit:
            termination = TIME_LIMIT
            break
        if it % PROGRESS_EVERY == 0:
            log.info("relaxation: iteration %d of at most %d, bound %.6g (start %.6g), target gap %.3g, %.1f s",
                     it, iteration_limit, best, v0, gap, time.perf_counter() - t0)
        lam = net.project(lam - step * d)
    seconds = time.perf_counter() - t0
    log.info("relaxation: %s after %d iterations, bound %.6g, %.1f s", termination, it, best, seconds)
    tables = net.tables(instance, best_bid, method="lagrangian relaxation", value=best, bound=best,
                        info={"start_bound": v0, "termination": termination, "iterations": it,
                              "seconds": seconds, "periods": T, "demand": demand.source})
    return RelaxationResult(bound=best, start_bound=v0, tables=tables, multipliers=best_lam,
                            termination=termination, iterations=it, seconds=seconds, history=tuple(history))
