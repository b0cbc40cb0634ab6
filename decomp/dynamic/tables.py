"""Bid-price tables by leg, period and seats remaining, and their Parquet files.

A table gives, for leg ``i``, period ``t`` and ``x >= 1`` seats left on it, the
bid price of its x-th seat: a request in period ``t`` is accepted when its fare
covers the sum, over its legs, of the table values at their current seats
left. The values of all legs sit in one flat array, leg ``i``'s block of
``T * (C_i + 1)`` numbers at ``offset[i]`` in (period, seats) order, with the
column of ``x = 0`` holding +inf (no seat: closed).

Parquet file (one row per leg, period and ``x = 1 .. C_i``): columns ``leg``
(string), ``period`` (int32, 0 = the opening period), ``seats_remaining``
(int32) and ``bid_price`` (float64); the key-value metadata ``decomp.tables``
holds a JSON object with the method, the periods and the bound.
"""

from __future__ import annotations

import dataclasses
import json
import pathlib
from typing import Any, Mapping

import numpy as np

from ..errors import InstanceError

METADATA_KEY = b"decomp.tables"
COLUMNS = ("leg", "period", "seats_remaining", "bid_price")


@dataclasses.dataclass(frozen=True, eq=False)
class BidPriceTables:
    """Capacity- and time-dependent bid prices of every leg (see the module docstring).

    ``value``: the sum over legs of each leg program's expected revenue;
    ``bound``: an upper bound on the network's optimal expected revenue when
    the method gives one (the Lagrangian relaxation), else None.
    """

    leg_ids: np.ndarray
    capacity: np.ndarray
    periods: int
    values: np.ndarray
    offset: np.ndarray
    method: str
    value: float | None = None
    bound: float | None = None
    info: Mapping[str, Any] = dataclasses.field(default_factory=dict)

    def __post_init__(self):
        for name, dtype in (("leg_ids", object), ("capacity", np.int64), ("values", np.float64),
                            ("offset", np.int64)):
            a = np.array(getattr(self, name), dtype=dtype, copy=True)
            a.setflags(write=False)
            object.__setattr__(self, name, a)
        object.__setattr__(self, "info", dict(self.info))    # a plain dict: the tables travel to Dask workers

    @classmethod
    def from_legs(cls, leg_ids, capacity, bids: list, method: str, **kw) -> "BidPriceTables":
        """From one ``(T, C_i + 1)`` array per leg."""
        sizes = np.array([b.size for b in bids], dtype=np.int64)
        offset = np.r_[0, np.cumsum(sizes)[:-1]] if len(bids) else np.zeros(0, dtype=np.int64)
        periods = bids[0].shape[0] if bids else 0
        values = np.concatenate([b.reshape(-1) for b in bids]) if bids else np.zeros(0)
        return cls(leg_ids=leg_ids, capacity=capacity, periods=periods, values=values, offset=offset,
                   method=method, **kw)

    @property
    def n_legs(self) -> int:
        return len(self.leg_ids)

    def leg(self, i: int) -> np.ndarray:
        """Leg ``i``'s table as a (T, C_i + 1) view."""
        w = int(self.capacity[i]) + 1
        return self.values[self.offset[i]:self.offset[i] + self.periods * w].reshape(self.periods, w)

    def lookup(self, legs: np.ndarray, period: np.ndarray, seats: np.ndarray) -> np.ndarray:
        """Bid prices at (leg, period, seats left), elementwise (broadcast); legs >= n_legs give 0.

        Seats above a leg's capacity count as its capacity (the table starts there).
        """
        legs = np.asarray(legs)
        real = legs < self.n_legs
        li = np.where(real, legs, 0)
        cap = self.capacity[li]
        x = np.clip(seats, 0, cap)
        t = np.clip(period, 0, self.periods - 1)
        v = self.values[self.offset[li] + t * (cap + 1) + x]
        return np.where(real, v, 0.0)

    def aligned_with(self, instance) -> bool:
        return (self.n_legs == instance.n_legs and list(self.leg_ids) == list(instance.leg_ids)
                and np.array_equal(self.capacity, np.floor(np.asarray(instance.capacity) + 1e-9).astype(np.int64)))


def write_parquet(tables: BidPriceTables, path) -> pathlib.Path:
    """Write the tables as Parquet (atomically), with the metadata :func:`read_parquet` needs; returns the path."""
    import pyarrow.parquet as pq

    from ..atomic import atomic_path

    path = pathlib.Path(path)
    with atomic_path(path) as tmp:
        pq.write_table(_arrow_table(tables), tmp)
    return path


def write(tables: BidPriceTables, path) -> pathlib.Path:
    """Write the tables in the format of the path's suffix, atomically: ``.parquet`` (with the metadata
    :func:`read_parquet` needs) or ``.csv`` (the four columns only); another suffix is an InstanceError."""
    import pyarrow as pa
    import pyarrow.csv as pcsv

    from ..atomic import atomic_path
    from ..tables import check_table_path

    path = check_table_path(path)
    if path.suffix.lower() == ".parquet":
        return write_parquet(tables, path)
    table = _arrow_table(tables)
    table = table.set_column(0, "leg", table.column("leg").cast(pa.string()))
    with atomic_path(path) as tmp:
        pcsv.write_csv(table, tmp)
    return path


def _arrow_table(tables: BidPriceTables):
    """One row per leg, period and seats remaining (:data:`COLUMNS`), the tables' facts as schema metadata."""
    import pyarrow as pa

    T = tables.periods
    cap = tables.capacity
    rows_per_leg = T * cap
    leg_of_row = np.repeat(np.arange(tables.n_legs), rows_per_leg)
    start = np.r_[0, np.cumsum(rows_per_leg)[:-1]] if tables.n_legs else np.zeros(0, dtype=np.int64)
    within = np.arange(int(rows_per_leg.sum())) - np.repeat(start, rows_per_leg)
    c = cap[leg_of_row]
    period = within // np.maximum(c, 1)
    seats = within % np.maximum(c, 1) + 1
    bid = tables.values[tables.offset[leg_of_row] + period * (c + 1) + seats]
    leg_names = np.asarray(tables.leg_ids).astype(str)
    table = pa.table({
        "leg": pa.DictionaryArray.from_arrays(pa.array(leg_of_row.astype(np.int32)), pa.array(leg_names)),
        "period": pa.array(period.astype(np.int32)),
        "seats_remaining": pa.array(seats.astype(np.int32)),
        "bid_price": pa.array(bid.astype(np.float64)),
    })
    meta = {"method": tables.method, "periods": T, "value": tables.value, "bound": tables.bound,
            "legs": leg_names.tolist(), "capacity": cap.tolist(), "info": _plain(dict(tables.info))}
    return table.replace_schema_metadata({METADATA_KEY: json.dumps(meta).encode()})


def _plain(obj):
    if isinstance(obj, dict):
        return {str(k): _plain(v) for k, v in obj.items()}
    if isinstance(obj, (list, tuple)):
        return [_plain(v) for v in obj]
    if hasattr(obj, "item"):
        return obj.item()
    return obj


def read_parquet(path) -> BidPriceTables:
    """Read tables written by :func:`write_parquet`; a bad file raises InstanceError naming row and field."""
    import pyarrow as pa
    import pyarrow.parquet as pq

    path = pathlib.Path(path)
    if not path.exists():
        raise InstanceError("bid-price table file not found", file=path)
    try:
        table = pq.read_table(path)
    except (pa.ArrowInvalid, OSError) as exc:
        raise InstanceError(f"not a readable Parquet file ({exc})", file=path) from exc
    missing = [c for c in COLUMNS if c not in table.column_names]
    if missing:
        raise InstanceError(f"missing column(s) {', '.join(missing)}; expected {', '.join(COLUMNS)}", file=path)
    raw = (table.schema.metadata or {}).get(METADATA_KEY)
    try:
        meta = json.loads(raw) if raw else None
    except json.JSONDecodeError as exc:
        raise InstanceError(f"metadata {METADATA_KEY.decode()} is not JSON", file=path) from exc
    if not isinstance(meta, dict) or not isinstance(meta.get("legs"), list) or not isinstance(meta.get("capacity"), list):
        raise InstanceError(f"no {METADATA_KEY.decode()} metadata (legs, capacity, periods); "
                            "write the file with decomp's table writer", file=path)
    legs = [str(l) for l in meta["legs"]]
    cap = np.asarray(meta["capacity"], dtype=np.int64)
    T = int(meta.get("periods", 0))
    pos = {l: i for i, l in enumerate(legs)}
    leg_col = table.column("leg").combine_chunks()
    if not pa.types.is_dictionary(leg_col.type):
        leg_col = leg_col.cast(pa.string()).dictionary_encode()
    names = leg_col.dictionary.to_pylist()
    name_pos = np.array([pos.get(str(l), -1) for l in names], dtype=np.int64)
    codes = leg_col.indices.to_numpy(zero_copy_only=False)
    period = np.asarray(table.column("period").to_numpy(zero_copy_only=False), dtype=np.float64)
    seats = np.asarray(table.column("seats_remaining").to_numpy(zero_copy_only=False), dtype=np.float64)
    bid = np.asarray(table.column("bid_price").to_numpy(zero_copy_only=False), dtype=np.float64)
    li = name_pos[codes] if len(codes) else np.zeros(0, dtype=np.int64)
    for name, bad in (("leg", li < 0),
                      ("period", ~np.isfinite(period) | (period < 0) | (period >= T) | (period != np.round(period))),
                      ("seats_remaining", ~np.isfinite(seats) | (seats < 1) | (seats > cap[np.maximum(li, 0)])
                       | (seats != np.round(seats))),
                      ("bid_price", ~np.isfinite(bid) | (bid < 0))):
        if np.any(bad):
            r = int(np.argmax(bad))
            value = names[codes[r]] if name == "leg" else {"period": period, "seats_remaining": seats, "bid_price": bid}[name][r]
            raise InstanceError("invalid value (legs must be listed in the metadata; periods 0..T-1; "
                                "seats 1..capacity; bid prices finite and >= 0)", file=path, row=r + 1, column=name,
                                value=value)
    sizes = T * (cap + 1)
    offset = np.r_[0, np.cumsum(sizes)[:-1]] if len(legs) else np.zeros(0, dtype=np.int64)
    values = np.full(int(sizes.sum()), np.nan)
    p, x = period.astype(np.int64), seats.astype(np.int64)
    flat = offset[li] + p * (cap[li] + 1) + x
    values[flat] = bid
    zero_cols = (offset[:, None] + np.arange(T)[None, :] * (cap[:, None] + 1)).ravel()
    values[zero_cols] = np.inf
    if np.isnan(values).any():
        raise InstanceError(f"{int(np.isnan(values).sum())} (leg, period, seats_remaining) rows are missing; "
                            f"expected every period 0..{T - 1} and every seat count 1..capacity of each leg", file=path)
    if len(flat) and np.bincount(flat, minlength=len(values)).max() > 1:
        raise InstanceError("a (leg, period, seats_remaining) row appears twice", file=path)
    return BidPriceTables(leg_ids=legs, capacity=cap, periods=T, values=values, offset=offset,
                          method=str(meta.get("method", "")), value=meta.get("value"), bound=meta.get("bound"),
                          info=meta.get("info") or {})
