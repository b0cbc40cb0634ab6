"""The sales-based linear program under the multinomial logit (Gallego, Ratliff and Shebalov 2015).

Variables: expected sales x_j of every product and expected no-purchases y_m of every market.

    max  sum_j f_j x_j
    s.t. sum_{j uses leg i} x_j <= c_i                    every leg i          (bid price pi_i >= 0)
         sum_{j in m} x_j + y_m = arrivals_m               every market m       (balance)
         x_j / w_j <= y_m / w0_m                           every product j in m (ratio; written
                                                                                  x_j - (w_j / w0_m) y_m <= 0)
         x, y >= 0;   0 <= x_j <= mean_j for a product outside every market (independent demand, as the DLP)

Under the multinomial logit every feasible (x, y) of a market is a mix of offer sets'
sales, so its optimum equals the choice-based deterministic LP's (Liu and van Ryzin
2008), whose columns are offer sets; the bid prices are the capacity rows' duals.

:func:`lp_arrays` gives the LP column-wise as sparse arrays (no loop over products):
columns are the products (instance order) and then the markets' no-purchase variables;
rows are the legs, the markets' balance rows and the products' ratio rows (market
products in :attr:`Markets.order`).
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from .data import require


@dataclasses.dataclass(frozen=True, eq=False)
class LPArrays:
    """The sales LP: max cost.z s.t. row_lower <= M z <= row_upper, col_lower <= z <= col_upper."""

    cost: np.ndarray
    col_lower: np.ndarray
    col_upper: np.ndarray
    row_lower: np.ndarray
    row_upper: np.ndarray
    matrix: sp.csc_matrix        # rows: legs, markets (balance), market products (ratio)
    n_legs: int
    n_products: int
    n_markets: int


def lp_arrays(instance) -> LPArrays:
    """The sales-based LP of ``instance`` (which must have markets) as sparse arrays."""
    mk = require(instance)
    L, P, M = instance.n_legs, instance.n_products, mk.n_markets
    order = mk.order                                 # market products, grouped by market
    K = len(order)
    m_of = mk.product_market[order]
    ratio = mk.weight[order] / mk.no_purchase_weight[m_of]
    A = instance.A.tocoo()
    rows = np.concatenate([A.row, L + m_of, L + M + np.arange(K), L + np.arange(M), L + M + np.arange(K)])
    cols = np.concatenate([A.col, order, order, P + np.arange(M), P + m_of])
    vals = np.concatenate([A.data, np.ones(K), np.ones(K), np.ones(M), -ratio])
    matrix = sp.csc_matrix((vals, (rows, cols)), shape=(L + M + K, P + M))
    upper = np.where(mk.in_market, np.inf, np.maximum(instance.mean, 0.0))
    inf = np.inf
    return LPArrays(
        cost=np.concatenate([instance.fare, np.zeros(M)]),
        col_lower=np.zeros(P + M), col_upper=np.concatenate([upper, np.full(M, inf)]),
        row_lower=np.concatenate([np.full(L, -inf), mk.arrivals, np.full(K, -inf)]),
        row_upper=np.concatenate([instance.capacity, mk.arrivals, np.zeros(K)]),
        matrix=matrix, n_legs=L, n_products=P, n_markets=M)
