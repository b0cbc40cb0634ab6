"""Leg and product tables of a result, joined to the network, as pandas DataFrames.

Leg table (:data:`LEG_COLUMNS`), one row per leg:
    leg, origin, destination, capacity, allocated (seats the allocation puts on
    the leg, A x), load_factor (allocated / capacity; empty for a zero-capacity
    leg), bid_price, state.
``state`` is ``closed`` for a leg without capacity, ``binding`` when its
capacity constraint is priced (bid price above :data:`BINDING_PRICE` times the
largest fare: a seat more would earn something, and by complementary slackness
the leg is full), ``slack`` otherwise (a seat more earns nothing).

Product table (:data:`PRODUCT_COLUMNS`), one row per product:
    product, legs (leg ids in travel order, separated by spaces), fare, mean,
    std, allocation, displacement (the sum of its legs' bid prices), margin
    (fare - displacement), decision (``open`` when the margin is >= 0 under the
    bid-price rule, :mod:`decomp.decision`, else ``closed``; a product using a
    closed leg is ``closed`` whatever its margin: there is no seat to sell, and
    a zero-capacity leg's bid price is not unique, see README, "Closed legs").

The same column names are used by ``decomp solve --leg-table / --product-table`` and the
library (:func:`leg_table`, :func:`product_table`); bid-price files use
``leg, bid_price``.
"""

from __future__ import annotations

import pathlib
import warnings

import numpy as np

from .errors import InstanceError

LEG_COLUMNS = ("leg", "origin", "destination", "capacity", "allocated", "load_factor", "bid_price", "state")
PRODUCT_COLUMNS = ("product", "legs", "fare", "mean", "std", "allocation", "displacement", "margin", "decision")
BID_PRICE_COLUMNS = ("leg", "bid_price")
#: A leg is binding when its bid price exceeds this fraction of the largest fare (solver round-off below).
BINDING_PRICE = 1e-7


def _check_pair(instance, result):
    if result.bid_price_array is not None and len(result.bid_price_array) != instance.n_legs:
        raise InstanceError(f"the result has {len(result.bid_price_array)} bid prices, the instance "
                            f"{instance.n_legs} legs: not the same network", column="bid_prices")
    if len(result.leg_ids) == instance.n_legs and not np.array_equal(
            np.asarray(result.leg_ids, dtype=str), np.asarray(instance.leg_ids, dtype=str)):
        raise InstanceError("the result's legs are not the instance's (ids or order differ)", column="leg")
    if result.allocation is not None and len(result.allocation) != instance.n_products:
        raise InstanceError(f"the result has {len(result.allocation)} allocations, the instance "
                            f"{instance.n_products} products: not the same network", column="allocation")


def _allocation(instance, result) -> np.ndarray:
    """The result's allocation, or NaN per product with a warning when the result holds none."""
    if result.allocation is not None:
        return np.asarray(result.allocation, dtype=np.float64)
    warnings.warn("the result holds no allocation (a solve that returned none, or a result file written "
                  "without it, as to_json_dict() and decomp solve write it): allocated seats, load factors "
                  "and allocations are NaN; result.save(path) keeps the allocation", UserWarning, stacklevel=3)
    return np.full(instance.n_products, np.nan)


def _bid_prices(instance, result) -> np.ndarray:
    if result.bid_price_array is None or len(result.bid_price_array) == 0:
        return np.full(instance.n_legs, np.nan)
    return np.asarray(result.bid_price_array, dtype=np.float64)


def leg_states(instance, bid_prices) -> np.ndarray:
    """``binding`` / ``slack`` / ``closed`` per leg (see the module docstring)."""
    cap = np.asarray(instance.capacity, dtype=np.float64)
    scale = max(1.0, float(np.max(instance.fare))) if instance.n_products else 1.0
    state = np.where(np.asarray(bid_prices) > BINDING_PRICE * scale, "binding", "slack").astype(object)
    state[cap <= 0] = "closed"
    return state


def leg_table(instance, result):
    """One row per leg: :data:`LEG_COLUMNS` (a pandas DataFrame)."""
    import pandas as pd

    _check_pair(instance, result)
    bp = _bid_prices(instance, result)
    x = _allocation(instance, result)
    cap = np.asarray(instance.capacity, dtype=np.float64)
    allocated = instance.leg_load(x) if result.allocation is not None else np.full(instance.n_legs, np.nan)
    with np.errstate(divide="ignore", invalid="ignore"):
        lf = np.where(cap > 0, allocated / np.where(cap > 0, cap, 1.0), np.nan)
    return pd.DataFrame({
        "leg": instance.leg_ids.astype(str), "origin": instance.leg_origin.astype(str),
        "destination": instance.leg_destination.astype(str), "capacity": cap, "allocated": allocated,
        "load_factor": lf, "bid_price": bp, "state": leg_states(instance, bp)}, columns=list(LEG_COLUMNS))


def product_table(instance, result):
    """One row per product: :data:`PRODUCT_COLUMNS` (a pandas DataFrame)."""
    import pandas as pd
    import pyarrow as pa
    import pyarrow.compute as pc

    _check_pair(instance, result)
    bp = _bid_prices(instance, result)
    displacement = instance.leg_sum(bp)
    margin = instance.fare - displacement
    tokens = pc.take(pa.array(instance.leg_ids.astype(str), pa.string()), pa.array(instance.leg_index))
    lists = pa.ListArray.from_arrays(pa.array(instance.leg_ptr), tokens)
    legs = pc.binary_join(lists, " ").to_numpy(zero_copy_only=False)
    x = _allocation(instance, result)
    # open when the fare is at least the displacement (ties open; round-off of 1e-9 of the fare allowed)
    decision = np.where(margin >= -1e-9 * np.maximum(1.0, instance.fare), "open", "closed").astype(object)
    decision[np.isnan(margin)] = "unknown"
    decision[instance.leg_sum(instance.capacity <= 0) > 0] = "closed"      # uses a leg without seats
    return pd.DataFrame({
        "product": instance.product_ids.astype(str), "legs": legs, "fare": instance.fare, "mean": instance.mean,
        "std": instance.std, "allocation": np.asarray(x, dtype=np.float64), "displacement": displacement,
        "margin": margin, "decision": decision}, columns=list(PRODUCT_COLUMNS))


def check_table_path(path, option: str = "table file") -> pathlib.Path:
    """The path if it ends in .csv or .parquet and can be written (:func:`decomp.paths.output_file`);
    :class:`~decomp.errors.OutputPathError` naming ``option`` otherwise."""
    from .paths import output_file

    return output_file(path, option, suffixes=(".csv", ".parquet"))


def write_table(frame, path) -> pathlib.Path:
    """Write a DataFrame as CSV or Parquet (by suffix), atomically."""
    import pyarrow as pa
    import pyarrow.csv as pcsv
    import pyarrow.parquet as pq

    from .atomic import atomic_path

    path = check_table_path(path)
    table = pa.Table.from_pandas(frame, preserve_index=False)
    with atomic_path(path) as tmp:
        if path.suffix.lower() == ".csv":
            pcsv.write_csv(table, tmp)
        else:
            pq.write_table(table, tmp)
    return path
