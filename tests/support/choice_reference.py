"""Reference solutions for customer choice, independent of decomp.choice: brute force and scipy's HiGHS.

* :func:`cdlp_column_generation`: the choice-based deterministic LP (Gallego, Iyengar,
  Phillips and Dubey 2004; Liu and van Ryzin 2008), market by market: a column is one
  market offering one subset S of its products to all its arrivals, earning
  arrivals * sum_{j in S} f_j P_j(S) and taking arrivals * P_j(S) seats on each leg of
  each j in S, P_j(S) = w_j / (w0 + sum_{k in S} w_k). Solved by column generation:
  the restricted LP by ``scipy.optimize.linprog(method="highs")``, pricing by brute
  force over every subset of every market (2^n subsets, n <= 8). Products outside every
  market are plain LP variables 0 <= x_j <= mean_j.
* :func:`cdlp_all_columns`: the same LP with every subset of every market as a column
  from the start (no pricing).
* :func:`best_subset`: the subset of one market maximizing expected net fare per
  arrival, by enumeration.

Under the multinomial logit the sales-based LP has the same optimal value as the
choice-based LP (Gallego, Ratliff and Shebalov 2015, Operations Research 63(1)); that
theorem is what the tests check the project against.
"""

from __future__ import annotations

import itertools

import numpy as np
from scipy.optimize import linprog


def subsets(n: int):
    """Every non-empty subset of range(n), as tuples."""
    for k in range(1, n + 1):
        yield from itertools.combinations(range(n), k)


def choice_probabilities(weights, w0, subset) -> np.ndarray:
    """P_j(S) for j in ``subset`` (aligned with it) under the multinomial logit."""
    w = np.asarray([weights[j] for j in subset], dtype=float)
    return w / (w0 + w.sum())


def best_subset(net_fares, weights, w0):
    """(value per arrival, subset) maximizing sum_{j in S} r_j P_j(S) over every subset (empty: 0)."""
    best, arg = 0.0, ()
    for s in subsets(len(net_fares)):
        v = float(np.dot([net_fares[j] for j in s], choice_probabilities(weights, w0, s)))
        if v > best + 1e-15:
            best, arg = v, s
    return best, arg


class _Network:
    """The network as plain Python: legs, markets (products, weights, w0, arrivals), other products."""

    def __init__(self, capacity, markets, others):
        self.capacity = np.asarray(capacity, dtype=float)
        self.markets = markets        # list of dict(products=[(legs, fare, weight)], w0, arrivals)
        self.others = others          # list of (legs, fare, mean)

    def column(self, m, subset):
        mk = self.markets[m]
        probs = choice_probabilities([p[2] for p in mk["products"]], mk["w0"], subset)
        load = np.zeros(len(self.capacity))
        revenue = 0.0
        for j, p in zip(subset, probs):
            legs, fare, _ = mk["products"][j]
            load[list(legs)] += mk["arrivals"] * p
            revenue += mk["arrivals"] * p * fare
        return revenue, load


def _solve_restricted(net, columns):
    """linprog over the columns (market, subset) plus the other products; (value, pi, sigma, t)."""
    L, M = len(net.capacity), len(net.markets)
    n_c, n_o = len(columns), len(net.others)
    cost = np.zeros(n_c + n_o)
    A = np.zeros((L + M, n_c + n_o))
    for k, (m, s) in enumerate(columns):
        rev, load = net.column(m, s)
        cost[k] = rev
        A[:L, k] = load
        A[L + m, k] = 1.0
    bounds = [(0, None)] * n_c
    for k, (legs, fare, mean) in enumerate(net.others):
        cost[n_c + k] = fare
        A[list(legs), n_c + k] = 1.0
        bounds.append((0, mean))
    b = np.concatenate([net.capacity, np.ones(M)])
    res = linprog(-cost, A_ub=A, b_ub=b, bounds=bounds, method="highs")
    assert res.status == 0, res.message
    duals = -np.asarray(res.ineqlin.marginals)
    return -res.fun, duals[:L], duals[L:], res.x


def cdlp_column_generation(capacity, markets, others=(), max_rounds=1000):
    """(optimal value, bid prices, rounds) of the choice-based LP by column generation."""
    net = _Network(capacity, markets, list(others))
    # start: each market's full set (any start works; pricing adds the rest)
    columns = [(m, tuple(range(len(mk["products"])))) for m, mk in enumerate(markets)]
    for rounds in range(1, max_rounds + 1):
        value, pi, sigma, _ = _solve_restricted(net, columns)
        added = 0
        for m, mk in enumerate(markets):
            net_fares = [fare - sum(pi[i] for i in legs) for legs, fare, _ in mk["products"]]
            best, subset = best_subset(net_fares, [p[2] for p in mk["products"]], mk["w0"])
            if mk["arrivals"] * best - sigma[m] > 1e-9 * max(1.0, abs(value)) and (m, subset) not in columns:
                columns.append((m, subset))
                added += 1
        if added == 0:
            return value, pi, rounds
    raise AssertionError("column generation did not converge")


def cdlp_all_columns(capacity, markets, others=()):
    """The optimal value of the choice-based LP with every subset of every market as a column."""
    net = _Network(capacity, markets, list(others))
    columns = [(m, s) for m, mk in enumerate(markets) for s in subsets(len(mk["products"]))]
    return _solve_restricted(net, columns)[0]


def from_instance(instance):
    """(capacity, markets, others) of a decomp Instance with markets, in plain Python."""
    mk = instance.markets
    legs_of = [tuple(instance.leg_index[instance.leg_ptr[j]:instance.leg_ptr[j + 1]].tolist())
               for j in range(instance.n_products)]
    markets = [dict(products=[], w0=float(mk.no_purchase_weight[m]), arrivals=float(mk.arrivals[m]))
               for m in range(mk.n_markets)]
    others = []
    for j in range(instance.n_products):
        m = int(mk.product_market[j])
        if m >= 0:
            markets[m]["products"].append((legs_of[j], float(instance.fare[j]), float(mk.weight[j])))
        else:
            others.append((legs_of[j], float(instance.fare[j]), float(instance.mean[j])))
    return instance.capacity.tolist(), markets, others
