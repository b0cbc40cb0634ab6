"""Markets: which products a customer chooses among, and how (multinomial logit).

A network with markets has a third table beside ``legs`` and ``products``:

* ``markets.csv`` (or ``markets.parquet``), columns ``market,arrivals,no_purchase_weight``:
  the market's id, the expected number of customers arriving over the booking horizon
  (>= 0), and the weight of not buying (> 0);

and two more product columns:

* ``market``: the id of the market the product is sold in, or empty for a product
  outside every market (its demand stays independent: ``mean`` and ``std`` as today);
* ``preference_weight``: the product's weight in its market's choice (> 0; empty
  outside markets).

A customer of market m offered the set S of its products buys product j in S with
probability ``w_j / (w0_m + sum_{k in S} w_k)`` and buys nothing otherwise (the
multinomial logit). The ``mean`` and ``std`` of a market's products are then what an
independent-demand forecast would say (the generator writes the expected sales with
every product open and their Poisson spread): the DLP and the PNLP use them, the
sales-based LP (model ``sblp``) does not.

The rules (limits, ids, the weights' ratio to the no-purchase weight) are
:mod:`decomp.validation`'s, the one copy shared with the other tables: problems are
:class:`~decomp.errors.InstanceError` naming the file, the 1-based row, the column and
the value. A network without a markets file and without a ``market`` column behaves
exactly as before. This module holds the markets' data type and reads and writes their
table; nothing loops over products in Python.
"""

from __future__ import annotations

import dataclasses
import pathlib
from functools import cached_property
from types import MappingProxyType
from typing import Mapping

import numpy as np
import pyarrow as pa

from .. import validation
from ..errors import InstanceError
from ..validation import (MARKET_COLUMNS, MAX_ARRIVALS, MAX_WEIGHT, MAX_WEIGHT_RATIO,  # noqa: F401
                          PRODUCT_MARKET_COLUMNS, UnusedMarketWarning)

MARKET_FILES = ("markets.csv", "markets.parquet")


def _frozen(a, dtype):
    out = np.array(a, dtype=dtype, copy=True)
    out.setflags(write=False)
    return out


@dataclasses.dataclass(frozen=True, eq=False)
class Markets:
    """The markets of a network and each product's place in them.

    Markets (``M``): ``market_ids``, ``arrivals`` (expected customers over the
    horizon), ``no_purchase_weight`` (> 0). Products (``P``, aligned with the
    instance's products): ``product_market`` (the market's index, -1 for a product
    outside every market) and ``weight`` (its preference weight; 0 outside markets).
    ``extra`` keeps further columns of the markets table.
    """

    market_ids: np.ndarray
    arrivals: np.ndarray
    no_purchase_weight: np.ndarray
    product_market: np.ndarray
    weight: np.ndarray
    extra: Mapping[str, np.ndarray] = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        set_ = object.__setattr__
        set_(self, "market_ids", _frozen(self.market_ids, object))
        set_(self, "arrivals", _frozen(self.arrivals, np.float64))
        set_(self, "no_purchase_weight", _frozen(self.no_purchase_weight, np.float64))
        set_(self, "product_market", _frozen(self.product_market, np.int64))
        set_(self, "weight", _frozen(self.weight, np.float64))
        set_(self, "extra", MappingProxyType({k: _frozen(v, None) for k, v in dict(self.extra).items()}))
        M = len(self.market_ids)
        for name in ("arrivals", "no_purchase_weight"):
            if len(getattr(self, name)) != M:
                raise ValueError(f"Markets: {name} has {len(getattr(self, name))} entries, expected {M}")
        if len(self.weight) != len(self.product_market):
            raise ValueError("Markets: weight and product_market must both have one entry per product")
        if len(self.product_market) and (self.product_market.min() < -1 or self.product_market.max() >= M):
            raise ValueError("Markets: product_market refers to a market that does not exist")

    @property
    def n_markets(self) -> int:
        return len(self.market_ids)

    @property
    def n_products(self) -> int:
        return len(self.product_market)

    @cached_property
    def in_market(self) -> np.ndarray:
        """True for products sold in a market (their demand comes from the choice model)."""
        return self.product_market >= 0

    @cached_property
    def order(self) -> np.ndarray:
        """The market products' indices, grouped by market (stable: instance order within a market)."""
        idx = np.flatnonzero(self.in_market)
        return idx[np.argsort(self.product_market[idx], kind="stable")]

    @cached_property
    def sizes(self) -> np.ndarray:
        """Products per market."""
        return np.bincount(self.product_market[self.in_market], minlength=self.n_markets)

    @cached_property
    def open_sales(self) -> np.ndarray:
        """Expected sales per product with every product of its market open (0 outside markets).

        ``arrivals_m * w_j / (w0_m + sum_k w_k)``: what an independent-demand forecast
        estimated from sales with everything open converges to.
        """
        m = self.product_market
        inm = self.in_market
        total = np.bincount(m[inm], weights=self.weight[inm], minlength=self.n_markets) + self.no_purchase_weight
        out = np.zeros(self.n_products)
        out[inm] = self.arrivals[m[inm]] * self.weight[inm] / total[m[inm]]
        return out

    def with_arrivals(self, arrivals) -> "Markets":
        """A copy with other expected arrivals (e.g. those still to come)."""
        return dataclasses.replace(self, arrivals=np.asarray(arrivals, dtype=np.float64))

    def table(self) -> pa.Table:
        """The markets table (``market, arrivals, no_purchase_weight`` and extra columns)."""
        cols = {"market": pa.array(self.market_ids, pa.string()),
                "arrivals": pa.array(self.arrivals, pa.float64()),
                "no_purchase_weight": pa.array(self.no_purchase_weight, pa.float64())}
        for k, v in self.extra.items():
            cols[k] = validation.as_arrow(v)
        return pa.table(cols)


def require(instance) -> Markets:
    """The instance's markets, or an InstanceError saying how to give them."""
    m = getattr(instance, "markets", None)
    if m is None:
        raise InstanceError("the network has no markets: the choice-based model (sblp) needs a markets table "
                            "(markets.csv beside legs.csv and products.csv, with product columns market and "
                            "preference_weight; `decomp generate --markets` writes such networks)",
                            file=instance.name)
    if m.n_products != instance.n_products:
        raise InstanceError(f"the markets describe {m.n_products} products, the network has "
                            f"{instance.n_products}", file=instance.name)
    return m


# ---------------------------------------------------------------------------
# attaching to an instance, reading and writing folders
# ---------------------------------------------------------------------------

def with_markets(instance, markets, *, markets_name="markets", products_name="products", typed=True):
    """``instance`` with the markets table ``markets`` (a DataFrame or Arrow table) attached and checked
    (:func:`decomp.validation.market_fields`).

    The products' ``market`` and ``preference_weight`` columns come from the
    instance's extra product columns (``Instance.from_frames`` keeps them).
    """
    table = validation.frame_table(markets, markets_name)
    extra = instance.product_extra
    for col in PRODUCT_MARKET_COLUMNS:
        if col not in extra:
            raise InstanceError(f"missing column '{col}': with a markets table every product row says its "
                                "market (empty for none) and its preference_weight", file=products_name,
                                column=col)
    fields = validation.market_fields(table, extra["market"], extra["preference_weight"], typed=typed,
                                      where=validation.Where(products=products_name, markets=markets_name))
    return dataclasses.replace(instance, markets=Markets(**fields))


def read_markets(folder, instance, products_name="products"):
    """``instance`` with the markets of ``folder`` attached, or unchanged when it has none.

    A ``market`` product column without a markets file, or a markets file without
    the product columns, is an InstanceError naming what is missing.
    """
    from ..io import find_table, not_a_file, read_csv_table, read_parquet_table

    folder = pathlib.Path(folder)
    present = [folder / f for f in MARKET_FILES if (folder / f).exists() or not_a_file(folder / f)]
    has_column = "market" in instance.product_extra
    if not present:
        if has_column:
            raise InstanceError("the products name markets but there is no markets.csv (or markets.parquet); "
                                "add it, or drop the market column", file=products_name, column="market")
        return instance
    path, fmt = find_table(folder, "markets")
    table = read_csv_table(path, MARKET_COLUMNS) if fmt == "csv" else read_parquet_table(path, MARKET_COLUMNS)
    return with_markets(instance, table, markets_name=path, products_name=products_name, typed=fmt == "parquet")


def write_markets(instance, folder, format: str) -> None:
    """Write ``instance``'s markets table into ``folder`` (nothing when it has none)."""
    m = getattr(instance, "markets", None)
    if m is None:
        return
    table = m.table()
    folder = pathlib.Path(folder)
    if format == "csv":
        from ..io import csv_bytes

        (folder / "markets.csv").write_bytes(csv_bytes(table))
    else:
        import pyarrow.parquet as pq

        pq.write_table(table, folder / "markets.parquet", compression="zstd")
