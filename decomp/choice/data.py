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

Limits: arrivals at most :data:`MAX_ARRIVALS` per market; weights in (0,
:data:`MAX_WEIGHT`]; a product's weight at most :data:`MAX_WEIGHT_RATIO` times its
market's no-purchase weight (the LP's rows carry that ratio as a coefficient, and
HiGHS' tolerances do not resolve much larger ones). Market ids follow the rules of
leg and product ids (unique, no spaces or control characters). A network without a
markets file and without a ``market`` column behaves exactly as before.

Problems are :class:`~decomp.errors.InstanceError` naming the file, the 1-based
row, the column and the value, as for the other tables; nothing loops over
products in Python.
"""

from __future__ import annotations

import dataclasses
import pathlib
import warnings
from functools import cached_property
from types import MappingProxyType
from typing import Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import InstanceError

MARKET_COLUMNS = ("market", "arrivals", "no_purchase_weight")
PRODUCT_MARKET_COLUMNS = ("market", "preference_weight")
MARKET_FILES = ("markets.csv", "markets.parquet")

MAX_ARRIVALS = 1e8        # customers per market over the horizon
MAX_WEIGHT = 1e12         # preference and no-purchase weights
MAX_WEIGHT_RATIO = 1e6    # a product's weight over its market's no-purchase weight


class UnusedMarketWarning(UserWarning):
    """A market that no product is sold in (allowed: its customers all leave)."""


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
        from ..io import _as_arrow

        cols = {"market": pa.array(self.market_ids, pa.string()),
                "arrivals": pa.array(self.arrivals, pa.float64()),
                "no_purchase_weight": pa.array(self.no_purchase_weight, pa.float64())}
        for k, v in self.extra.items():
            cols[k] = _as_arrow(v)
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
# building and checking
# ---------------------------------------------------------------------------

def markets_from_tables(markets: pa.Table, product_market, product_weight, *, markets_name="markets",
                        products_name="products") -> Markets:
    """Check a markets table (Arrow) and the products' market and weight columns; build :class:`Markets`.

    ``product_market`` and ``product_weight``: the products' ``market`` and
    ``preference_weight`` columns as kept in ``Instance.product_extra`` (text or
    numbers, None or empty for a product outside every market).
    """
    from ..io import _check_names, _col, _ids, _numbers, _objects

    _check_names(markets.column_names, MARKET_COLUMNS, markets_name)
    if markets.num_rows == 0:
        raise InstanceError("the table has no rows", file=markets_name)
    ids = _ids(_col(markets, "market"), markets_name, "market", "market")
    arrivals = _numbers(_col(markets, "arrivals"), markets_name, "arrivals")
    _range(arrivals, arrivals >= 0, markets_name, "arrivals", "arrivals must be >= 0 (expected customers)")
    _range(arrivals, arrivals <= MAX_ARRIVALS, markets_name, "arrivals",
           f"above decomp's limit of {MAX_ARRIVALS:g} customers per market")
    w0 = _numbers(_col(markets, "no_purchase_weight"), markets_name, "no_purchase_weight")
    _range(w0, w0 > 0, markets_name, "no_purchase_weight",
           "the no-purchase weight must be > 0 (a market where nobody can leave has no logit sales LP)")
    _range(w0, w0 <= MAX_WEIGHT, markets_name, "no_purchase_weight", f"above decomp's limit of {MAX_WEIGHT:g}")

    P = len(product_market)
    text = _market_text(product_market)
    has = pc.greater(pc.utf8_length(text), 0).to_numpy(zero_copy_only=False)
    idx = pc.index_in(text, value_set=ids).to_numpy(zero_copy_only=False)
    unknown = has & np.isnan(np.asarray(idx, dtype=np.float64))
    if unknown.any():
        i = int(np.argmax(unknown))
        raise InstanceError(f"unknown market '{text[i].as_py()}' (not in the markets table {markets_name}); "
                            "add it there or leave the field empty for a product outside every market",
                            file=products_name, row=i + 1, column="market", value=text[i].as_py())
    product_m = np.where(has, np.nan_to_num(np.asarray(idx, dtype=np.float64), nan=-1), -1).astype(np.int64)
    weight = _weights(product_weight, has, products_name)
    ratio = np.zeros(P)
    ratio[has] = weight[has] / w0[product_m[has]]
    _range(ratio, ratio <= MAX_WEIGHT_RATIO, products_name, "preference_weight",
           f"the weight is more than {MAX_WEIGHT_RATIO:g} times its market's no_purchase_weight; "
           "scale the market's weights together")
    used = np.zeros(len(w0), dtype=bool)
    used[product_m[has]] = True
    if not used.all():
        k = int(np.argmax(~used))
        warnings.warn(f"{markets_name}: {int((~used).sum())} market(s) with no product, e.g. row {k + 1} "
                      f"'{ids[k].as_py()}' (its customers all leave)", UnusedMarketWarning, stacklevel=3)
    extra = {c: _extra(markets, c, markets_name) for c in markets.column_names if c not in MARKET_COLUMNS}
    return Markets(market_ids=_objects(ids), arrivals=arrivals, no_purchase_weight=w0,
                   product_market=product_m, weight=weight, extra=extra)


def _extra(table, column, name):
    from ..io import _col, _extra as io_extra

    return io_extra(_col(table, column), name, column)


def _range(values, ok, path, column, reason):
    bad = ~np.asarray(ok)
    if bad.any():
        i = int(np.argmax(bad))
        raise InstanceError(reason, file=path, row=i + 1, column=column, value=float(values[i]))


def _market_text(values) -> pa.Array:
    """The product market column as text, None as empty ("" = outside every market)."""
    a = np.asarray(values, dtype=object)
    txt = pa.array([None if v is None else str(v) for v in a.tolist()], pa.string())
    return pc.utf8_trim_whitespace(pc.fill_null(txt, ""))


def _weights(values, has, products_name) -> np.ndarray:
    """The preference weights as float64: > 0 and finite where a market is given, empty elsewhere."""
    a = np.asarray(values, dtype=object) if np.asarray(values).dtype == object else np.asarray(values)
    P = len(a)
    out = np.zeros(P)
    if a.dtype.kind in "fiu":
        num = a.astype(np.float64)
        blank = np.isnan(num) if a.dtype.kind == "f" else np.zeros(P, dtype=bool)
    else:
        blank = np.array([v is None or (isinstance(v, str) and v.strip() == "") or
                          (isinstance(v, float) and np.isnan(v)) for v in a.tolist()], dtype=bool)
        num = np.full(P, np.nan)
        for i in np.flatnonzero(~blank):           # a text column: usually none (numbers come as numbers)
            try:
                num[i] = float(str(a[i]).strip())
            except ValueError:
                raise InstanceError("not a number", file=products_name, row=int(i) + 1,
                                    column="preference_weight", value=str(a[i])) from None
    missing = has & blank
    if missing.any():
        i = int(np.argmax(missing))
        raise InstanceError("a product sold in a market needs a preference weight", file=products_name,
                            row=i + 1, column="preference_weight")
    stray = ~has & ~blank
    if stray.any():
        i = int(np.argmax(stray))
        raise InstanceError("a preference weight without a market: give the product's market, or leave the "
                            "weight empty", file=products_name, row=i + 1, column="preference_weight",
                            value=float(num[i]))
    w = np.where(has, num, 0.0)
    _range(w, ~has | np.isfinite(w), products_name, "preference_weight", "NaN or infinite value")
    _range(w, ~has | (w > 0), products_name, "preference_weight",
           "the preference weight must be > 0 (leave a product out of its market's table to never sell it)")
    _range(w, w <= MAX_WEIGHT, products_name, "preference_weight", f"above decomp's limit of {MAX_WEIGHT:g}")
    out[:] = w
    return out


# ---------------------------------------------------------------------------
# attaching to an instance, reading and writing folders
# ---------------------------------------------------------------------------

def with_markets(instance, markets, *, markets_name="markets", products_name="products"):
    """``instance`` with the markets table ``markets`` (a DataFrame or Arrow table) attached and checked.

    The products' ``market`` and ``preference_weight`` columns come from the
    instance's extra product columns (``Instance.from_frames`` keeps them).
    """
    import dataclasses as dc

    from ..instance import _arrow_table

    table = _arrow_table(markets, markets_name)
    extra = instance.product_extra
    for col in PRODUCT_MARKET_COLUMNS:
        if col not in extra:
            raise InstanceError(f"missing column '{col}': with a markets table every product row says its "
                                "market (empty for none) and its preference_weight", file=products_name,
                                column=col)
    m = markets_from_tables(table, extra["market"], extra["preference_weight"], markets_name=markets_name,
                            products_name=products_name)
    return dc.replace(instance, markets=m)


def read_markets(folder, instance, products_name="products"):
    """``instance`` with the markets of ``folder`` attached, or unchanged when it has none.

    A ``market`` product column without a markets file, or a markets file without
    the product columns, is an InstanceError naming what is missing.
    """
    from ..io import _find_table, _not_a_file, _read_csv, _read_parquet

    folder = pathlib.Path(folder)
    present = [folder / f for f in MARKET_FILES if (folder / f).exists() or _not_a_file(folder / f)]
    has_column = "market" in instance.product_extra
    if not present:
        if has_column:
            raise InstanceError("the products name markets but there is no markets.csv (or markets.parquet); "
                                "add it, or drop the market column", file=products_name, column="market")
        return instance
    path, fmt = _find_table(folder, "markets")
    table = _read_csv(path, MARKET_COLUMNS) if fmt == "csv" else _read_parquet(path, MARKET_COLUMNS)
    return with_markets(instance, table, markets_name=path, products_name=products_name)


def write_markets(instance, folder, format: str) -> None:
    """Write ``instance``'s markets table into ``folder`` (nothing when it has none)."""
    m = getattr(instance, "markets", None)
    if m is None:
        return
    table = m.table()
    folder = pathlib.Path(folder)
    if format == "csv":
        from ..io import _csv_bytes

        (folder / "markets.csv").write_bytes(_csv_bytes(table))
    else:
        import pyarrow.parquet as pq

        pq.write_table(table, folder / "markets.parquet", compression="zstd")


def check(instance) -> None:
    """The checks of the files on an in-memory instance's markets (no-op without markets)."""
    m = getattr(instance, "markets", None)
    if m is None:
        return
    if m.n_products != instance.n_products:
        raise InstanceError(f"the markets describe {m.n_products} products, the network has {instance.n_products}")
    extra = instance.product_extra
    for col in PRODUCT_MARKET_COLUMNS:
        if col not in extra:
            raise InstanceError(f"missing product column '{col}' (the markets are written from it)", column=col)
    again = markets_from_tables(m.table(), extra["market"], extra["preference_weight"], markets_name=None,
                                products_name=None)
    if not (np.array_equal(again.product_market, m.product_market) and np.array_equal(again.weight, m.weight)):
        raise InstanceError("the markets' product assignment differs from the product columns market and "
                            "preference_weight; build them with decomp.choice.with_markets")
