"""The network as the decomposition of the sales LP sees it: market products, other products, closed legs.

A product that uses a leg of zero capacity can never be sold: it is left out of its
market's choice (it is never offered, so it changes nobody's choice) and its leg's
bid price is set at the end to the smallest value that closes all its products
(:meth:`ChoiceNetwork.closing_prices`; any larger value is as optimal, since the
leg's term c_i pi_i of the dual is 0). Products outside every market keep
independent demand, bounded by their mean as in the DLP.
"""

from __future__ import annotations

import dataclasses

import numpy as np
import scipy.sparse as sp

from . import mnl
from .data import require


@dataclasses.dataclass(frozen=True, eq=False)
class ChoiceNetwork:
    """What the dual and the master problem work on.

    ``mp``: the sellable market products grouped by market (:class:`mnl.MarketProducts`),
    ``fare_m`` their fares and ``legs_m`` their leg incidence (K x L CSR);
    ``out_index``, ``fare_o``, ``mean_o``, ``legs_o``: the sellable products outside
    every market; ``closed``: legs of zero capacity; ``top``: each market's top fare.
    """

    instance: object
    mp: mnl.MarketProducts
    fare_m: np.ndarray
    legs_m: sp.csr_matrix
    out_index: np.ndarray
    fare_o: np.ndarray
    mean_o: np.ndarray
    legs_o: sp.csr_matrix
    capacity: np.ndarray
    closed: np.ndarray
    top: np.ndarray
    group: np.ndarray = None          # per market product: its itinerary group (same market, same legs)
    group_market: np.ndarray = None   # per group
    legs_g: sp.csr_matrix = None      # groups x legs

    @classmethod
    def of(cls, instance) -> "ChoiceNetwork":
        mk = require(instance)
        closed = instance.capacity <= 0
        blocked = instance.leg_sum(closed.astype(np.float64)) > 0      # uses a closed leg: never sold
        full = mnl.MarketProducts.of(mk)
        keep = ~blocked[full.index]
        mp = mnl.MarketProducts(index=full.index[keep], market=full.market[keep], weight=full.weight[keep],
                                w0=full.w0, arrivals=full.arrivals)
        out = np.flatnonzero(~mk.in_market & ~blocked & (instance.mean > 0))
        AT = instance.AT
        top = np.zeros(mk.n_markets)
        np.maximum.at(top, mp.market, instance.fare[mp.index])
        legs_m = AT[mp.index]
        group = _itinerary_groups(legs_m, mp.market)
        first = np.flatnonzero(np.r_[True, group[1:] != group[:-1]])
        return cls(instance=instance, mp=mp, fare_m=instance.fare[mp.index], legs_m=legs_m,
                   out_index=out, fare_o=instance.fare[out], mean_o=instance.mean[out], legs_o=AT[out],
                   capacity=instance.capacity, closed=closed, top=top, group=group,
                   group_market=mp.market[first], legs_g=legs_m[first])

    @property
    def n_legs(self) -> int:
        return len(self.capacity)

    @property
    def fare_scale(self) -> float:
        """The median top fare of the markets (and fare of the other products) that sell anything."""
        tops = np.concatenate([self.top, self.fare_o])
        tops = tops[tops > 0]
        return float(np.median(tops)) if len(tops) else 1.0

    def net_fares(self, pi):
        """(net fares of the market products, of the other products) at bid prices ``pi``."""
        return self.fare_m - self.legs_m @ pi, self.fare_o - self.legs_o @ pi

    def allocation(self, x_m, x_o) -> np.ndarray:
        """Sales per product of the instance (0 for products never sold)."""
        x = np.zeros(self.instance.n_products)
        x[self.mp.index] = x_m
        x[self.out_index] = x_o
        return x

    def load(self, x_m, x_o) -> np.ndarray:
        """Seats each leg carries."""
        return self.legs_m.T @ x_m + self.legs_o.T @ x_o

    def closing_prices(self, pi) -> np.ndarray:
        """``pi`` with each closed leg at the smallest price that closes all its products.

        A product on a closed leg must not be worth offering: its net fare at most 0
        (then below its market's best value, which is >= 0).
        """
        if not self.closed.any():
            return pi
        inst = self.instance
        out = np.asarray(pi, dtype=np.float64).copy()
        out[self.closed] = 0.0
        others = inst.leg_sum(out)
        need = np.maximum(inst.fare - others, 0.0)              # what the closed legs must take away
        on_closed = inst.A[self.closed]                          # closed legs x products
        for k, i in enumerate(np.flatnonzero(self.closed)):      # one step per closed leg, numpy over products
            row = on_closed.getrow(k)
            out[i] = float(need[row.indices].max(initial=0.0))
        return out


def _itinerary_groups(legs: sp.csr_matrix, market: np.ndarray) -> np.ndarray:
    """Runs of consecutive products of one market flying the same legs (fare classes of one itinerary).

    Only neighbours are compared (products listed itinerary by itinerary, as the
    generator writes them, share a group); products of one itinerary listed apart get
    groups of their own, which is correct, only less compact.
    """
    K = legs.shape[0]
    if K == 0:
        return np.zeros(0, dtype=np.int64)
    n = np.diff(legs.indptr)
    width = int(n.max())
    rows = np.full((K, width), -1, dtype=np.int64)
    rows[np.repeat(np.arange(K), n), np.arange(legs.nnz) - np.repeat(legs.indptr[:-1], n)] = legs.indices
    new = np.ones(K, dtype=bool)
    new[1:] = (market[1:] != market[:-1]) | np.any(rows[1:] != rows[:-1], axis=1)
    return np.cumsum(new) - 1
