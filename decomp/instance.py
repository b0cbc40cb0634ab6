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

#: Demand distributions a product may carry (column ``distribution``).
DISTRIBUTIONS = ("normal", "gamma", "poisson", "negbin")


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
        """A copy with new demand forecasts and/or capacities (same network)."""
        changes = {}
        if mean is not None:
            changes["mean"] = mean
        if std is not None:
            changes["std"] = std
        if capacity is not None:
            changes["capacity"] = capacity
        if meta is not None:
            changes["meta"] = meta
        return dataclasses.replace(self, **changes)

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
        :func:`decomp.read_instance`, with the same
        :class:`~decomp.errors.InstanceError`: the table ("legs" or "products"),
        the 1-based row (position, not the index label), the column and the value.
        """
        from .io import instance_from_tables

        meta = dict(meta or {})
        meta.setdefault("name", "instance")
        return instance_from_tables(_arrow_table(legs, "legs"), _arrow_table(products, "products", list_column="legs"),
                                    meta=meta, legs_name="legs", products_name="products")

    @classmethod
    def from_lists(cls, legs, products, **kw) -> "Instance":
        """Build a small instance from Python lists (tests and examples), checked like a file.

        ``legs``: iterable of (id, origin, destination, capacity);
        ``products``: iterable of (id, [leg ids], fare, mean, std).
        Raises :class:`~decomp.errors.InstanceError` (row 1-based, column named)
        for an unknown leg id or any value :func:`decomp.io.check_instance` refuses.
        """
        from .errors import InstanceError
        from .io import check_instance

        legs = list(legs)
        products = list(products)
        pos = {l[0]: i for i, l in enumerate(legs)}
        ptr = np.zeros(len(products) + 1, dtype=np.int64)
        ptr[1:] = np.cumsum([len(p[1]) for p in products])
        idx = []
        for row, p in enumerate(products, start=1):
            for leg in p[1]:
                if leg not in pos:
                    raise InstanceError(f"unknown leg id '{leg}' (not in the legs table)", file="products",
                                        row=row, column="legs", value=" ".join(map(str, p[1])))
                idx.append(pos[leg])
        inst = cls(
            leg_ids=[l[0] for l in legs], leg_origin=[l[1] for l in legs],
            leg_destination=[l[2] for l in legs], capacity=[l[3] for l in legs],
            product_ids=[p[0] for p in products], leg_ptr=ptr, leg_index=np.array(idx, dtype=np.int64),
            fare=[p[2] for p in products], mean=[p[3] for p in products],
            std=[p[4] for p in products], **kw)
        try:
            check_instance(inst)
        except InstanceError as exc:          # name the list, as from_frames names the table
            table = "legs" if exc.column in ("leg", "origin", "destination", "capacity") else "products"
            raise InstanceError(exc.reason, file=table, row=exc.row, column=exc.column, value=exc.value) from exc
        return inst


def _arrow_table(table, name, list_column=None):
    """A pandas DataFrame or pyarrow Table as a pyarrow Table; a list column joined by spaces."""
    import pyarrow as pa
    import pyarrow.compute as pc

    from .errors import InstanceError

    if isinstance(table, pa.Table):
        out = table
    elif hasattr(table, "columns") and hasattr(table, "iloc"):
        try:
            out = pa.Table.from_pandas(table, preserve_index=False)
        except (pa.ArrowException, TypeError, ValueError) as exc:
            raise InstanceError(f"cannot read the DataFrame: {exc}", file=name) from exc
    else:
        raise InstanceError(f"expected a pandas DataFrame or a pyarrow Table, got {type(table).__name__}",
                            file=name)
    if list_column in out.column_names:
        col = out.column(list_column).combine_chunks()
        if pa.types.is_list(col.type) or pa.types.is_large_list(col.type):
            joined = pc.binary_join(pc.cast(col, pa.list_(pa.string())), " ")
            out = out.set_column(out.column_names.index(list_column), list_column, joined)
    return out
