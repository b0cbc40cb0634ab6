"""The network instance: legs, products (itinerary-fare combinations) and forecasts.

Everything per product is a numpy array aligned with ``product_ids``; the legs of
each product are held in compressed form (``leg_ptr``/``leg_index``, travel
order kept), and the leg-by-product incidence matrix ``A`` is built from them
once, on first use. Nothing here loops over products in Python.
"""

from __future__ import annotations

import dataclasses
from functools import cached_property
from types import MappingProxyType
from typing import Any, Mapping

import numpy as np
import scipy.sparse as sp

from . import validation
from .validation import DISTRIBUTIONS  # noqa: F401  (the names a product's distribution may take)


def _frozen(a, dtype=None) -> np.ndarray:
    out = np.array(a, dtype=dtype, copy=True)
    out.setflags(write=False)
    return out


@dataclasses.dataclass(frozen=True, eq=False)
class Instance:
    """A flight network with its product forecasts.

    Legs (``L`` of them): ``leg_ids``, ``leg_origin``, ``leg_destination``,
    ``capacity`` (seats, >= 0).

    Products (``P`` of them): ``product_ids``, ``fare`` (> 0), ``mean`` and
    ``std`` of demand (>= 0); product ``j`` uses legs
    ``leg_index[leg_ptr[j]:leg_ptr[j+1]]`` in travel order.

    ``distribution`` is None (every product normal) or an array of names from
    :data:`DISTRIBUTIONS`. ``leg_extra`` and ``product_extra`` keep any further
    columns of the input tables (fare class, origin, destination, ...), as
    arrays of their original text or numbers, so that writing gives them back.

    ``markets`` is None (independent demand only) or a
    :class:`decomp.choice.data.Markets`: the markets customers choose in under
    the multinomial logit (read from ``markets.csv``; see :mod:`decomp.choice.data`).
    """

    leg_ids: np.ndarray
    leg_origin: np.ndarray
    leg_destination: np.ndarray
    capacity: np.ndarray
    product_ids: np.ndarray
    leg_ptr: np.ndarray
    leg_index: np.ndarray
    fare: np.ndarray
    mean: np.ndarray
    std: np.ndarray
    distribution: np.ndarray | None = None
    leg_extra: Mapping[str, np.ndarray] = dataclasses.field(default_factory=dict)
    product_extra: Mapping[str, np.ndarray] = dataclasses.field(default_factory=dict)
    meta: Mapping[str, Any] = dataclasses.field(default_factory=dict)
    markets: Any = None          # decomp.choice.data.Markets (customer choice), or None

    def __post_init__(self):
        set_ = object.__setattr__
        set_(self, "leg_ids", _frozen(self.leg_ids, object))
        set_(self, "leg_origin", _frozen(self.leg_origin, object))
        set_(self, "leg_destination", _frozen(self.leg_destination, object))
        set_(self, "capacity", _frozen(self.capacity, np.float64))
        set_(self, "product_ids", _frozen(self.product_ids, object))
        set_(self, "leg_ptr", _frozen(self.leg_ptr, np.int64))
        set_(self, "leg_index", _frozen(self.leg_index, np.int64))
        set_(self, "fare", _frozen(self.fare, np.float64))
        set_(self, "mean", _frozen(self.mean, np.float64))
        set_(self, "std", _frozen(self.std, np.float64))
        if self.distribution is not None:
            set_(self, "distribution", _frozen(self.distribution, object))
        set_(self, "leg_extra", MappingProxyType(
            {k: _frozen(v) for k, v in dict(self.leg_extra).items()}))
        set_(self, "product_extra", MappingProxyType(
            {k: _frozen(v) for k, v in dict(self.product_extra).items()}))
        set_(self, "meta", MappingProxyType(dict(self.meta)))
        L, P = len(self.leg_ids), len(self.product_ids)
        for name in ("leg_origin", "leg_destination", "capacity"):
            if len(getattr(self, name)) != L:
                raise ValueError(f"Instance: {name} has {len(getattr(self, name))} entries, expected {L} (one per leg)")
        for name in ("fare", "mean", "std"):
            if len(getattr(self, name)) != P:
                raise ValueError(f"Instance: {name} has {len(getattr(self, name))} entries, expected {P} (one per product)")
        if len(self.leg_ptr) != P + 1 or self.leg_ptr[0] != 0 or self.leg_ptr[-1] != len(self.leg_index):
            raise ValueError("Instance: leg_ptr must have P+1 entries, start at 0 and end at len(leg_index)")
        if len(self.leg_index) and (self.leg_index.min() < 0 or self.leg_index.max() >= L):
            raise ValueError("Instance: leg_index refers to a leg that does not exist")
        # the one rule every instance meets however it is made (the network build of the
        # Lagrangian method grows with the square of an itinerary's length)
        validation.check_itinerary_limit(self.leg_ptr, "products")

    # -- sizes -------------------------------------------------------------
    @property
    def n_legs(self) -> int:
        return len(self.leg_ids)

    @property
    def n_products(self) -> int:
        return len(self.product_ids)

    @property
    def legs_per_product(self) -> np.ndarray:
        return np.diff(self.leg_ptr)

    @property
    def name(self) -> str:
        return str(self.meta.get("name", "instance"))

    # -- derived matrices ---------------------------------------------------
    @cached_property
    def A(self) -> sp.csr_matrix:
        """Leg-by-product incidence (L x P, CSR): A[i, j] = 1 when product j uses leg i."""
        P = self.n_products
        cols = np.repeat(np.arange(P, dtype=np.int64), self.legs_per_product)
        data = np.ones(len(self.leg_index), dtype=np.float64)
        A = sp.csr_matrix((data, (self.leg_index, cols)), shape=(self.n_legs, P))
        A.sum_duplicates()
        return A

    @cached_property
    def AT(self) -> sp.csr_matrix:
        """Product-by-leg incidence (P x L, CSR), for leg sums per product."""
        return self.A.T.tocsr()

    def leg_sum(self, per_leg: np.ndarray) -> np.ndarray:
        """Sum over each product's legs of a per-leg vector (e.g. bid prices)."""
        return self.AT @ np.asarray(per_leg, dtype=np.float64)

    def leg_load(self, per_product: np.ndarray) -> np.ndarray:
        """Seats each leg carries for a per-product allocation: A x."""
        return self.A @ np.asarray(per_product, dtype=np.float64)

    def distributions(self) -> np.ndarray:
        """Per-product distribution names (normal where none is given)."""
        if self.distribution is None:
            default = str(self.meta.get("distribution", "normal"))
            return np.full(self.n_products, default, dtype=object)
        return self.distribution

    def product_legs(self, j: int) -> list:
        """Leg ids of product ``j`` in travel order (for reports, not hot paths)."""
        return list(self.leg_ids[self.leg_index[self.leg_ptr[j]:self.leg_ptr[j + 1]]])

    def with_forecast(self, mean=None, std=None, capacity=None, meta=None) -> "Instance":
        """A copy with new demand forecasts and/or capacities (same network), checked as a file is.

        ``mean`` and ``std`` (per product) and ``capacity`` (per leg): an array or list in the
        instance's order, or a pandas Series or dict keyed by product (leg) id -- aligned by id,
        never by position, and every product (leg) needs a value. A negative, NaN or out-of-limit
        value, a missing or unknown id, a value that is not a number: an
        :class:`~decomp.errors.InstanceError` naming the column, the row and the value.
        """
        changes = {}
        for name, values, ids, table, label in (("mean", mean, self.product_ids, "products", "product"),
                                                ("std", std, self.product_ids, "products", "product"),
                                                ("capacity", capacity, self.leg_ids, "legs", "leg")):
            if values is not None:
                arr = validation.forecast_values(values, ids, file=table, column=name, label=label)
                validation.check_numbers(arr, validation.NUMBER_RULES[name], table)
                changes[name] = arr
        if meta is not None:
            changes["meta"] = validation.check_meta(meta, "meta")
        out = dataclasses.replace(self, **changes)
        if "mean" in changes or "std" in changes:
            validation.check_negbin(out.distribution, out.meta.get("distribution", "normal"), out.mean, out.std,
                                    "products")
        return out

    def leg_position(self) -> dict:
        """Map from leg id to its row index."""
        return {lid: i for i, lid in enumerate(self.leg_ids)}

    def __repr__(self) -> str:
        return (f"Instance({self.name!r}: {self.n_legs:,} legs, {self.n_products:,} products, "
                f"{len(self.leg_index):,} product-leg pairs)")

    @classmethod
    def from_frames(cls, legs, products, meta=None) -> "Instance":
        """Build an instance from two tables: pandas DataFrames or pyarrow Tables.

        The tables have the columns of the instance files (see :mod:`decomp.io`):
        ``legs``: ``leg, origin, destination, capacity``; ``products``: ``product,
        legs, fare, mean, std`` where ``legs`` is the leg ids in travel order,
        either one text separated by single spaces or a list. Further columns
        (and ``distribution``) are kept as in files. The checks are those of
        :func:`decomp.read_instance` (:mod:`decomp.validation`), with the same
        :class:`~decomp.errors.InstanceError`: the table ("legs" or "products"),
        the 1-based row (position, not the index label), the column and the value.
        Number columns must hold numbers, as in a Parquet file (text is refused, not parsed).
        """
        meta = dict(meta or {})
        meta.setdefault("name", "instance")
        fields = validation.fields_from_tables(validation.frame_table(legs, "legs"),
                                               validation.frame_table(products, "products", list_column="legs"),
                                               meta=meta)
        return cls(**fields)

    @classmethod
    def from_lists(cls, legs, products, **kw) -> "Instance":
        """Build a small instance from Python lists (tests and examples), checked like a file.

        ``legs``: iterable of (id, origin, destination, capacity);
        ``products``: iterable of (id, [leg ids], fare, mean, std).
        Optional keywords: ``distribution`` (one name per product), ``leg_extra``,
        ``product_extra``, ``meta``. Raises :class:`~decomp.errors.InstanceError`
        (the list, the 1-based row, the column, the value) for anything
        :mod:`decomp.validation` refuses.
        """
        import pyarrow as pa

        from .errors import InstanceError

        unknown = set(kw) - {"distribution", "leg_extra", "product_extra", "meta"}
        if unknown:
            raise TypeError(f"Instance.from_lists got unexpected keyword(s) {sorted(unknown)}")
        legs, products = list(legs), list(products)
        for name, rows, width in (("legs", legs, 4), ("products", products, 5)):
            for row, item in enumerate(rows, start=1):
                if isinstance(item, (str, bytes)) or not hasattr(item, "__len__") or len(item) != width:
                    raise InstanceError(f"expected a tuple of {width} values", file=name, row=row,
                                        value=repr(item)[:200])
        cols = validation.column_from_values
        leg_table = pa.table({
            "leg": cols([l[0] for l in legs], "legs", "leg", numeric=False),
            "origin": cols([l[1] for l in legs], "legs", "origin", numeric=False),
            "destination": cols([l[2] for l in legs], "legs", "destination", numeric=False),
            "capacity": cols([l[3] for l in legs], "legs", "capacity", numeric=True)})
        prod_cols = {
            "product": cols([p[0] for p in products], "products", "product", numeric=False),
            "legs": cols([p[1] if isinstance(p[1], str) else " ".join(map(str, p[1])) for p in products],
                         "products", "legs", numeric=False),
            "fare": cols([p[2] for p in products], "products", "fare", numeric=True),
            "mean": cols([p[3] for p in products], "products", "mean", numeric=True),
            "std": cols([p[4] for p in products], "products", "std", numeric=True)}
        if kw.get("distribution") is not None:
            prod_cols["distribution"] = cols(list(kw["distribution"]), "products", "distribution", numeric=False)
        fields = validation.fields_from_tables(leg_table, pa.table(prod_cols), meta=kw.get("meta") or {})
        fields.update(leg_extra=kw.get("leg_extra") or {}, product_extra=kw.get("product_extra") or {})
        return cls(**fields)
