"""Offer-set columns: a market offering one set S to all its arrivals, as a column of the master LP.

Column c of market m offers the set S_c (a few of the market's products). It sells
x_k = arrivals_m w_k / (w0_m + W(S_c)) of each k in S_c, earns sum_k f_k x_k and takes
sum_k x_k seats on each of the products' legs. Sets are stored explicitly (CSR:
``ptr``, ``members`` in market-product positions), so a column keeps its meaning
when the bid prices move. Everything is numpy over (column, member) pairs.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp


@dataclasses.dataclass(frozen=True, eq=False)
class Columns:
    """Offer-set columns: market, members (CSR over market products), sales, revenue, leg loads."""

    market: np.ndarray        # per column
    ptr: np.ndarray           # members of column c: members[ptr[c]:ptr[c+1]]
    members: np.ndarray       # market-product positions
    sales: np.ndarray         # per (column, member)
    revenue: np.ndarray       # per column
    loads: sp.csc_matrix      # legs x columns

    @property
    def n(self) -> int:
        return len(self.market)

    @classmethod
    def empty(cls, n_legs: int) -> "Columns":
        z = np.zeros(0, dtype=np.int64)
        return cls(market=z, ptr=np.zeros(1, dtype=np.int64), members=z, sales=np.zeros(0),
                   revenue=np.zeros(0), loads=sp.csc_matrix((n_legs, 0)))

    def concat(self, other: "Columns") -> "Columns":
        return Columns(market=np.concatenate([self.market, other.market]),
                       ptr=np.concatenate([self.ptr, self.ptr[-1] + other.ptr[1:]]),
                       members=np.concatenate([self.members, other.members]),
                       sales=np.concatenate([self.sales, other.sales]),
                       revenue=np.concatenate([self.revenue, other.revenue]),
                       loads=sp.hstack([self.loads, other.loads], format="csc"))

    def product_sales(self, weights: np.ndarray, n_products: int) -> np.ndarray:
        """sum_c weights_c x_c per market product (the sales of a mix of columns)."""
        owner = np.repeat(np.arange(self.n), np.diff(self.ptr))
        return np.bincount(self.members, weights=self.sales * weights[owner], minlength=n_products)


def market_ranges(mp):
    """(first, end) position of each market's products among the market products."""
    sizes = np.bincount(mp.market, minlength=mp.n_markets)
    end = np.cumsum(sizes)
    return end - sizes, end


def threshold_sets(net, ranges, markets: np.ndarray, r: np.ndarray, thresholds: np.ndarray) -> Columns:
    """Columns offering {k in market : r_k >= threshold} (revenue-ordered sets), one per (market, threshold).

    Empty sets are dropped (not offering is each market's slack in the master).
    """
    mp = net.mp
    first, end = ranges
    sizes = (end - first)[markets]
    col = np.repeat(np.arange(len(markets)), sizes)
    pos = np.repeat(first[markets], sizes) + (np.arange(int(sizes.sum())) - np.repeat(np.cumsum(sizes) - sizes, sizes))
    keep = r[pos] >= thresholds[col]
    col, pos = col[keep], pos[keep]
    nonempty = np.bincount(col, minlength=len(markets)) > 0
    renum = np.cumsum(nonempty) - 1
    return _build(net, markets[nonempty], renum[col], pos)


def offered_sets(net, markets: np.ndarray, offered: np.ndarray) -> Columns:
    """Columns offering, for each of ``markets``, its products marked in ``offered`` (empty sets dropped)."""
    mp = net.mp
    chosen = np.zeros(mp.n_markets, dtype=bool)
    chosen[np.asarray(markets, dtype=np.int64)] = True
    pos = np.flatnonzero(offered & chosen[mp.market])
    mk = mp.market[pos]
    has = np.zeros(mp.n_markets, dtype=bool)
    has[mk] = True                                  # markets with a non-empty set, in market order
    return _build(net, np.flatnonzero(has), (np.cumsum(has) - 1)[mk], pos)


def _build(net, markets, col, pos) -> Columns:
    mp = net.mp
    n = len(markets)
    order = np.argsort(col, kind="stable")
    col, pos = col[order], pos[order]
    ptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(np.bincount(col, minlength=n), out=ptr[1:])
    w = mp.weight[pos]
    den = mp.w0[markets] + np.bincount(col, weights=w, minlength=n)
    x = mp.arrivals[markets][col] * w / den[col]
    revenue = np.bincount(col, weights=net.fare_m[pos] * x, minlength=n)
    X = sp.csr_matrix((x, (col, pos)), shape=(n, len(mp.market)))
    loads = (X @ net.legs_m).T.tocsc()
    return Columns(market=np.asarray(markets, dtype=np.int64), ptr=ptr, members=pos, sales=x, revenue=revenue,
                   loads=loads)
