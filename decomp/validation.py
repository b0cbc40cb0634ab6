"""The rules an instance obeys, written once.

Instance folders (:mod:`decomp.io`), DataFrames and Arrow tables
(:meth:`Instance.from_frames`), Python lists (:meth:`Instance.from_lists`), new
forecasts (:meth:`Instance.with_forecast`) and in-memory instances
(:func:`check_instance`, run before every write) all pass through the functions
below, so each rule has one copy and every refusal is the same
:class:`~decomp.errors.InstanceError`: the file or table, the row (1-based data
row: the first row after the header is row 1), the column, the value and what to do.

Limits (anything beyond is refused, with the limit named):

=========================  ============================================================
what                       rule
=========================  ============================================================
capacity (legs)            0 <= capacity <= :data:`MAX_CAPACITY` = 1e12 seats (an
                           "unlimited" leg is written as 1e12; measured solved by highs,
                           ipopt and lagrangian at 1e15)
fare (products)            0 < fare <= :data:`MAX_FARE` = 1e12 fare units
mean, std (products)       0 <= value <= :data:`MAX_DEMAND` = 1e6 passengers per product
                           (at 1e9 the Lagrangian method ends in numerical trouble)
every number               finite; 0 or at least :data:`SMALLEST_NONZERO` (2.2e-308, the
                           smallest normal double: a subnormal std crashed the solvers)
legs per itinerary         1 to :data:`MAX_LEGS_PER_ITINERARY` = 16 (real itineraries have a
                           handful; the Lagrangian network build grows with the square of
                           an itinerary's length); each leg at most once; consecutive legs
                           connect (one's destination is the next one's origin)
ids (leg, product)         non-empty, unique, no spaces, no control characters (C0, DEL,
                           C1 such as U+0085), no line or paragraph separators
                           (U+2028/2029), no bidirectional controls (U+200E/F, U+202A-E,
                           U+2066-9, U+061C: a right-to-left override makes two ids print alike)
station codes              non-empty, the same characters refused as in ids; a leg's origin
                           is not its destination
distribution               one of :data:`DISTRIBUTIONS`; a negative binomial has
                           std^2 > mean (or mean = std = 0)
number columns             in a CSV file, text that reads as a number; in a Parquet file, a
                           DataFrame or a list, numbers (text there is refused, not parsed)
meta (meta.json, meta=)    a JSON object; its text (keys and values, at any depth) holds none
                           of the characters refused in ids; ``distribution`` a known name
arrivals (markets)         0 <= arrivals <= :data:`MAX_ARRIVALS` = 1e8 customers per market
no_purchase_weight         0 < weight <= :data:`MAX_WEIGHT` = 1e12 (a market where nobody can
(markets)                  leave has no logit sales LP)
market ids (markets)       as leg and product ids
market (products)          a market of the markets table, or empty (outside every market)
preference_weight          0 < weight <= :data:`MAX_WEIGHT` where the product has a market,
(products)                 empty where it has none; at most :data:`MAX_WEIGHT_RATIO` = 1e6
                           times its market's no-purchase weight (the sales LP carries that
                           ratio as a coefficient, and HiGHS' tolerances do not resolve much
                           larger ones); an extra column, so text that reads as a number is
                           one in any source
=========================  ============================================================

The markets (:mod:`decomp.choice.data`) come with a third table: :func:`market_fields` checks it
with the products' ``market`` and ``preference_weight`` columns, :func:`check_instance` an
in-memory instance's markets.

Nothing here loops over products in Python: the checks are pyarrow compute and
numpy over whole columns, and a refusal finds its row by ``argmax``.
"""

from __future__ import annotations

import dataclasses
import json
import math
import re
import warnings
from typing import Mapping

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .errors import InstanceError

#: Demand distributions a product may carry (column ``distribution``).
DISTRIBUTIONS = ("normal", "gamma", "poisson", "negbin")

LEG_COLUMNS = ("leg", "origin", "destination", "capacity")
PRODUCT_COLUMNS = ("product", "legs", "fare", "mean", "std")

MAX_CAPACITY = 1e12            # seats per leg
MAX_FARE = 1e12                # fare units per seat
MAX_DEMAND = 1e6               # mean and std of a product's demand, passengers
MAX_LEGS_PER_ITINERARY = 16    # legs of one product
MAX_ARRIVALS = 1e8             # customers per market over the horizon
MAX_WEIGHT = 1e12              # preference and no-purchase weights
MAX_WEIGHT_RATIO = 1e6         # a product's weight over its market's no-purchase weight

MARKET_COLUMNS = ("market", "arrivals", "no_purchase_weight")
PRODUCT_MARKET_COLUMNS = ("market", "preference_weight")
SMALLEST_NONZERO = float(np.finfo(np.float64).tiny)


@dataclasses.dataclass(frozen=True)
class NumberRule:
    """A number column: its table, whether 0 is allowed, its upper limit and unit."""

    table: str
    column: str
    positive: bool         # > 0 (else >= 0)
    limit: float
    unit: str
    sign: str              # the reason when the lower bound fails


#: The number columns and their bounds, in the order they are checked.
NUMBER_RULES = {
    "capacity": NumberRule("legs", "capacity", False, MAX_CAPACITY, "seats (for an unlimited leg write 1e12)",
                           "capacity must be >= 0"),
    "fare": NumberRule("products", "fare", True, MAX_FARE, "fare units", "fare must be > 0"),
    "mean": NumberRule("products", "mean", False, MAX_DEMAND, "passengers per product", "demand mean must be >= 0"),
    "std": NumberRule("products", "std", False, MAX_DEMAND, "passengers per product", "demand std must be >= 0"),
    "arrivals": NumberRule("markets", "arrivals", False, MAX_ARRIVALS, "customers per market",
                           "arrivals must be >= 0 (expected customers)"),
    "no_purchase_weight": NumberRule("markets", "no_purchase_weight", True, MAX_WEIGHT, "(a weight)",
                                     "the no-purchase weight must be > 0 (a market where nobody can leave has "
                                     "no logit sales LP)"),
    "preference_weight": NumberRule("products", "preference_weight", True, MAX_WEIGHT, "(a weight)",
                                    "the preference weight must be > 0 (leave a product out of its market's "
                                    "table to never sell it)"),
}

#: Characters no id, station code or meta text may hold (RE2 syntax for pyarrow, Python's for meta).
_REFUSED_CHARS = (r"\x00-\x1f\x7f-\x9f\x{2028}\x{2029}\x{200e}\x{200f}\x{202a}-\x{202e}"
                  r"\x{2066}-\x{2069}\x{061c}")
_REFUSED = f"[{_REFUSED_CHARS}]"
_REFUSED_PY = re.compile("[\x00-\x1f\x7f-\x9f\u2028\u2029\u200e\u200f\u202a-\u202e\u2066-\u2069\u061c]")
_REFUSED_WHAT = ("control characters (NUL, tab, line breaks, U+0085, ...), line separators or "
                 "bidirectional controls (a right-to-left override)")


class UnusedLegWarning(UserWarning):
    """A leg that no product uses (allowed, but often a data mistake)."""


class UnusedMarketWarning(UserWarning):
    """A market that no product is sold in (allowed: its customers all leave)."""


@dataclasses.dataclass(frozen=True)
class Where:
    """The names errors give the tables and the meta data (file paths, or 'legs' / 'products' / 'markets')."""

    legs: object = "legs"
    products: object = "products"
    meta: object = "meta"
    markets: object = "markets"

    def of(self, table: str):
        return {"legs": self.legs, "markets": self.markets}.get(table, self.products)


# ---------------------------------------------------------------------------
# turning Arrow columns into checked arrays
# ---------------------------------------------------------------------------

def check_names(names, required, file) -> None:
    """Every required column present, none named twice."""
    seen = set()
    for n in names:
        if n in seen:
            raise InstanceError("the header names this column twice", file=file, column=n)
        seen.add(n)
    for n in required:
        if n not in seen:
            raise InstanceError(f"missing column '{n}' (the header must have {', '.join(required)})",
                                file=file, column=n)


def _first(mask) -> int:
    return int(np.argmax(mask))


def _first_null(arr: pa.Array) -> int:
    return int(np.flatnonzero(arr.is_null().to_numpy(zero_copy_only=False))[0])


def _first_failing(arr: pa.Array, convert) -> int:
    """Index of the first element that ``convert`` rejects (bisection over prefixes)."""
    lo, hi = 0, len(arr)              # invariant: arr[:lo] converts, arr[:hi] does not
    while hi - lo > 1:
        mid = (lo + hi) // 2
        try:
            convert(arr.slice(0, mid))
            lo = mid
        except (pa.ArrowException, ValueError, TypeError):
            hi = mid
    return lo


def text(arr: pa.Array, file, column) -> pa.Array:
    """A column as a string array (Parquet may bring other types); a null is a missing value."""
    if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
        out = arr.cast(pa.string())
    else:
        try:
            out = pc.cast(arr, pa.string())
        except pa.ArrowException as exc:
            raise InstanceError(f"the column has type {arr.type}, expected text", file=file,
                                column=column) from exc
    if out.null_count:
        raise InstanceError("missing value", file=file, row=_first_null(out) + 1, column=column)
    return out


def _is_text(t) -> bool:
    return pa.types.is_string(t) or pa.types.is_large_string(t)


def _number_hint(v: str) -> str:
    """Why a text is not a number, with the likely fix."""
    if v == "":
        return "missing value"
    if re.fullmatch(r"\s*[-+]?[\d.]+,[\d.,]*\s*", v):
        return ("not a number: a comma inside a number (a thousands separator or a decimal comma?); "
                "write 1200 or 1200.5")
    return "not a number"


def numbers(arr: pa.Array, file, column, *, typed: bool) -> np.ndarray:
    """A number column as float64. Non-numeric, missing, NaN and infinite values are errors.

    ``typed``: the source stores types (Parquet, a DataFrame, a list): text there is refused
    rather than parsed. A CSV file's columns are text and are parsed.
    """
    t = arr.type
    if pa.types.is_integer(t) or pa.types.is_floating(t) or pa.types.is_decimal(t):
        if arr.null_count:
            raise InstanceError("missing value", file=file, row=_first_null(arr) + 1, column=column)
        try:       # unsafe: an int64 of 2**62 has no exact double; the limits below refuse it by size
            out = pc.cast(arr, pa.float64(), safe=False).to_numpy(zero_copy_only=False)
        except pa.ArrowException as exc:       # a decimal beyond float64's range
            raise InstanceError(f"a value of type {t} cannot be read as a number ({exc})", file=file,
                                column=column) from exc
    elif _is_text(t) and not typed:
        txt = pc.utf8_trim_whitespace(text(arr, file, column))

        def conv(a):
            return pc.cast(a, pa.float64())
        try:
            out = conv(txt).to_numpy(zero_copy_only=False)
        except pa.ArrowException:
            i = _first_failing(txt, conv)
            v = txt[i].as_py()
            raise InstanceError(_number_hint(v), file=file, row=i + 1, column=column, value=v) from None
    elif pa.types.is_null(t):
        raise InstanceError("missing value", file=file, row=1, column=column)
    else:
        i = 0
        if arr.null_count == len(arr):
            raise InstanceError("missing value", file=file, row=1, column=column)
        if arr.null_count:
            i = int(np.flatnonzero(~arr.is_null().to_numpy(zero_copy_only=False))[0])
        kind = "text" if _is_text(t) else f"values of type {t}"
        raise InstanceError(f"the column holds {kind}, not numbers: store this column as numbers "
                            f"(int or float), not as text", file=file, row=i + 1, column=column,
                            value=arr[i].as_py() if _is_text(t) else str(arr[i].as_py()))
    return out


def _match(arr: pa.Array, pattern: str) -> np.ndarray:
    return pc.match_substring_regex(arr, pattern).to_numpy(zero_copy_only=False)


def check_ids(txt: pa.Array, file, column, what) -> pa.Array:
    """Unique, non-empty ids without spaces or refused characters, as a string array."""
    empty = pc.equal(pc.utf8_length(pc.utf8_trim_whitespace(txt)), 0).to_numpy(zero_copy_only=False)
    if empty.any():
        i = _first(empty)
        raise InstanceError(f"empty {what} id", file=file, row=i + 1, column=column, value=txt[i].as_py())
    bad = _match(txt, _REFUSED)
    if bad.any():
        i = _first(bad)
        raise InstanceError(f"a {what} id must not contain {_REFUSED_WHAT}", file=file, row=i + 1,
                            column=column, value=txt[i].as_py())
    spaced = _match(txt, r"\s|\x{a0}|\x{1680}|[\x{2000}-\x{200b}]|\x{202f}|\x{205f}|\x{3000}|\x{feff}")
    if spaced.any():
        i = _first(spaced)
        raise InstanceError(f"a {what} id must not contain spaces", file=file, row=i + 1,
                            column=column, value=txt[i].as_py())
    enc = pc.dictionary_encode(txt)
    if len(enc.dictionary) < len(txt):
        codes = enc.indices.to_numpy(zero_copy_only=False)
        uniq, first = np.unique(codes, return_index=True)
        dup = np.ones(len(codes), dtype=bool)
        dup[first] = False
        i = _first(dup)
        j = int(first[np.searchsorted(uniq, codes[i])])
        raise InstanceError(f"duplicate {what} id (first in row {j + 1})", file=file, row=i + 1,
                            column=column, value=txt[i].as_py())
    return txt


def check_stations(stations: Mapping[str, pa.Array], file) -> None:
    """Station codes non-empty, without refused characters; a leg's origin is not its destination."""
    for col in ("origin", "destination"):
        st = stations[col]
        empty = pc.equal(pc.utf8_length(st), 0).to_numpy(zero_copy_only=False)
        if empty.any():
            raise InstanceError("empty station code", file=file, row=_first(empty) + 1, column=col)
        bad = _match(st, _REFUSED)
        if bad.any():
            i = _first(bad)
            raise InstanceError(f"a station code must not contain {_REFUSED_WHAT}", file=file, row=i + 1,
                                column=col, value=st[i].as_py())
    same = pc.equal(stations["origin"], stations["destination"]).to_numpy(zero_copy_only=False)
    if same.any():
        i = _first(same)
        raise InstanceError("the leg's origin is its destination", file=file, row=i + 1, column="destination",
                            value=stations["destination"][i].as_py())


def check_numbers(values: np.ndarray, rule: NumberRule, file) -> None:
    """Finite, within the rule's bounds, and 0 or a normal (not subnormal) double."""
    def refuse(bad, reason):
        if bad.any():
            i = _first(bad)
            raise InstanceError(reason, file=file, row=i + 1, column=rule.column, value=float(values[i]))

    refuse(~np.isfinite(values), "NaN or infinite value")
    refuse(values <= 0 if rule.positive else values < 0, rule.sign)
    refuse(values > rule.limit, f"above decomp's limit of {rule.limit:g} {rule.unit}")
    refuse((values != 0) & (np.abs(values) < SMALLEST_NONZERO),
           f"a value below {SMALLEST_NONZERO:.3g} (a subnormal number, too small for the solvers' "
           f"arithmetic); write 0" + (" or a larger value" if rule.positive else ""))


def itineraries(col: pa.Array, file, leg_txt: pa.Array):
    """Split the legs column into (leg_ptr, leg_index), checking every token."""
    txt = text(col, file, "legs")
    lists = pc.split_pattern(txt, " ")
    lengths = pc.list_value_length(lists).to_numpy(zero_copy_only=False).astype(np.int64)
    leg_ptr = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=leg_ptr[1:])
    tokens = pc.list_flatten(lists)
    empty_tok = pc.equal(pc.utf8_length(tokens), 0).to_numpy(zero_copy_only=False)
    if empty_tok.any():
        k = _first(empty_tok)
        i = int(np.searchsorted(leg_ptr, k, side="right") - 1)
        v = txt[i].as_py()
        why = ("empty legs field: a product needs at least one leg" if v.strip() == ""
               else "leg ids must be separated by single spaces")
        raise InstanceError(why, file=file, row=i + 1, column="legs", value=v)
    check_itinerary_lengths(leg_ptr, file, lambda i: txt[i].as_py())
    idx = pc.index_in(tokens, value_set=leg_txt)
    if idx.null_count:
        k = _first_null(idx)
        i = int(np.searchsorted(leg_ptr, k, side="right") - 1)
        raise InstanceError(f"unknown leg id '{tokens[k].as_py()}' (not in the legs table)",
                            file=file, row=i + 1, column="legs", value=txt[i].as_py())
    return leg_ptr, idx.to_numpy(zero_copy_only=False).astype(np.int64)


def check_itinerary_lengths(leg_ptr, file, shown=None) -> None:
    """Each product has 1 to :data:`MAX_LEGS_PER_ITINERARY` legs."""
    n = np.diff(np.asarray(leg_ptr))
    if (n == 0).any():
        raise InstanceError("empty legs field: a product needs at least one leg", file=file,
                            row=_first(n == 0) + 1, column="legs")
    check_itinerary_limit(leg_ptr, file, shown)


def check_itinerary_limit(leg_ptr, file, shown=None) -> None:
    """No product has more than :data:`MAX_LEGS_PER_ITINERARY` legs."""
    n = np.diff(np.asarray(leg_ptr))
    if len(n) and n.max() > MAX_LEGS_PER_ITINERARY:
        i = _first(n > MAX_LEGS_PER_ITINERARY)
        raise InstanceError(f"an itinerary of {int(n[i])} legs: decomp's limit is {MAX_LEGS_PER_ITINERARY} legs "
                            f"per itinerary; split it or check the legs column", file=file, row=i + 1,
                            column="legs", value=None if shown is None else shown(i))


def check_each_leg_once(leg_ptr, leg_index, file, leg_ids) -> None:
    """An itinerary flies each leg at most once (twice would take two seats per sale)."""
    owner = np.repeat(np.arange(len(leg_ptr) - 1), np.diff(leg_ptr))
    order = np.lexsort((leg_index, owner))
    o, leg = owner[order], leg_index[order]
    twice = (o[1:] == o[:-1]) & (leg[1:] == leg[:-1])
    if twice.any():
        k = np.flatnonzero(twice)
        j = int(o[k].min())
        lid = leg_ids[int(leg[k][np.argmin(o[k])])]
        raise InstanceError(f"the itinerary flies leg '{lid}' twice", file=file, row=j + 1, column="legs",
                            value=" ".join(str(leg_ids[x]) for x in leg_index[leg_ptr[j]:leg_ptr[j + 1]]))


def check_connected(leg_ptr, leg_index, stations, file, leg_ids) -> None:
    """Consecutive legs of an itinerary connect: one's destination is the next one's origin."""
    if len(leg_index) < 2:
        return
    both = pa.chunked_array([stations["origin"], stations["destination"]])
    codes = pc.dictionary_encode(both).combine_chunks().indices.to_numpy(zero_copy_only=False)
    L = len(leg_ids)
    org, dst = codes[:L], codes[L:]
    has_next = np.ones(len(leg_index), dtype=bool)
    has_next[leg_ptr[1:] - 1] = False                 # last leg of each product
    has_next[-1] = False
    k = np.flatnonzero(has_next)
    broken = dst[leg_index[k]] != org[leg_index[k + 1]]
    if broken.any():
        k0 = int(k[_first(broken)])
        i = int(np.searchsorted(leg_ptr, k0, side="right") - 1)
        a, b = leg_index[k0], leg_index[k0 + 1]
        raise InstanceError(
            f"legs do not connect: '{leg_ids[a]}' arrives at {stations['destination'][a].as_py()} "
            f"but '{leg_ids[b]}' leaves from {stations['origin'][b].as_py()}",
            file=file, row=i + 1, column="legs")


def check_distribution(d: pa.Array, file) -> np.ndarray:
    """The product column ``distribution``: known names only."""
    known = pc.is_in(d, value_set=pa.array(DISTRIBUTIONS)).to_numpy(zero_copy_only=False)
    if not known.all():
        i = _first(~known)
        raise InstanceError(f"unknown demand distribution; known: {', '.join(DISTRIBUTIONS)}",
                            file=file, row=i + 1, column="distribution", value=d[i].as_py())
    return np.asarray(d.to_numpy(zero_copy_only=False), dtype=object)


def check_negbin(distribution, default, mean, std, file) -> None:
    """A negative binomial has variance above its mean: std^2 > mean (or no demand: mean = std = 0)."""
    if distribution is None:
        if default != "negbin":
            return
        nb = np.ones(len(mean), dtype=bool)
    else:
        nb = np.asarray(distribution) == "negbin"
    bad = nb & (std * std <= mean) & ~((mean == 0) & (std == 0))
    if bad.any():
        i = _first(bad)
        raise InstanceError(f"a negative binomial needs std^2 > mean (here {std[i] ** 2:g} <= {mean[i]:g}); "
                            f"use poisson for std^2 = mean", file=file, row=i + 1, column="std",
                            value=float(std[i]))


def check_meta(meta, file) -> dict:
    """The meta data: a JSON-like object whose text holds no refused character, with a known
    ``distribution`` when one is given. Returns it as a dict."""
    if not isinstance(meta, Mapping):
        raise InstanceError("meta data must be a JSON object (a dict)", file=file, value=type(meta).__name__)
    stack = [(meta, "")]
    while stack:                          # iterative: meta.json may nest deeply
        obj, where = stack.pop()
        items = obj.items() if isinstance(obj, Mapping) else enumerate(obj) if isinstance(obj, list) else ()
        for k, v in items:
            key = f"{where}.{k}" if where else str(k)
            for s in (k, v):
                if isinstance(s, str) and _REFUSED_PY.search(s):
                    raise InstanceError(f"meta text must not contain {_REFUSED_WHAT} (a terminal escape "
                                        f"code would be printed raw)", file=file, column=key[:200],
                                        value=s)
            if isinstance(v, (Mapping, list)):
                stack.append((v, key))
    if "distribution" in meta:
        d = meta["distribution"]
        if not isinstance(d, str) or d not in DISTRIBUTIONS:
            raise InstanceError(f"unknown demand distribution; known: {', '.join(DISTRIBUTIONS)}", file=file,
                                column="distribution", value=d if isinstance(d, str) else repr(d)[:200])
    return dict(meta)


def _objects(arr: pa.Array) -> np.ndarray:
    return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=object)


def _extra(arr: pa.Array, file, column) -> np.ndarray:
    """An extra column: int64 or float64 if that writes back to the same text, else text."""
    if pa.types.is_nested(arr.type):       # list, struct, map: kept as the JSON text of each value
        return np.asarray([None if v is None else json.dumps(v, default=str) for v in arr.to_pylist()],
                          dtype=object)
    if arr.null_count:                     # kept with None where the value is missing
        return np.asarray(arr.to_pylist(), dtype=object)
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_boolean(arr.type):
        return arr.to_numpy(zero_copy_only=False)
    txt = text(arr, file, column)
    try:                                   # cheap look at one value before casting them all
        float(txt[0].as_py())
    except ValueError:
        return np.asarray(txt.to_numpy(zero_copy_only=False), dtype=object)
    for typ in (pa.int64(), pa.float64()):
        try:
            num = pc.cast(txt, typ)
        except pa.ArrowException:
            continue
        if pc.all(pc.equal(pc.cast(num, pa.string()), txt)).as_py():
            return num.to_numpy(zero_copy_only=False)
    return np.asarray(txt.to_numpy(zero_copy_only=False), dtype=object)


def as_arrow(values) -> pa.Array:
    """An array of ids, text or numbers (numpy or a list) as an Arrow array."""
    if isinstance(values, (pa.Array, pa.ChunkedArray)):
        return values.combine_chunks() if isinstance(values, pa.ChunkedArray) else values
    a = np.asarray(values)
    if a.dtype.kind in "US":
        return pa.array(a.astype(object), pa.string())
    if a.dtype == object:
        try:
            return pa.array(a, pa.string())
        except (pa.ArrowException, TypeError):
            pass
        try:                                  # numbers with None (an extra column with missing values)
            return pa.array(a.tolist())
        except (pa.ArrowException, TypeError):
            return pa.array([None if v is None else str(v) for v in a.tolist()], pa.string())
    return pa.array(a)


# ---------------------------------------------------------------------------
# the one driver: tables in, checked arrays out
# ---------------------------------------------------------------------------

def _col(table: pa.Table, name: str) -> pa.Array:
    return table.column(name).combine_chunks()


def fields_from_tables(legs: pa.Table, prods: pa.Table, *, meta=None, where: Where = Where(),
                       typed=True) -> dict:
    """Check a legs and a products table (Arrow) and return the :class:`~decomp.instance.Instance`
    fields they hold.

    ``where`` names the tables (file paths, or "legs" / "products") in errors; ``typed``: the
    tables carry types (Parquet, DataFrames, lists), so a number column holding text is refused
    (a CSV file's columns are text, and are parsed); a pair gives it per table (legs, products).
    A leg no product uses is an
    :class:`UnusedLegWarning`.
    """
    for table, required, name in ((legs, LEG_COLUMNS, where.legs), (prods, PRODUCT_COLUMNS, where.products)):
        check_names(table.column_names, required, name)
        if table.num_rows == 0:
            raise InstanceError("the table has no rows", file=name)
    meta = check_meta(meta or {}, where.meta)
    lp, pp = where.legs, where.products
    typed_legs, typed_products = typed if isinstance(typed, tuple) else (typed, typed)

    leg_txt = check_ids(text(_col(legs, "leg"), lp, "leg"), lp, "leg", "leg")
    leg_ids = _objects(leg_txt)
    stations = {col: pc.utf8_trim_whitespace(text(_col(legs, col), lp, col)) for col in ("origin", "destination")}
    check_stations(stations, lp)
    capacity = numbers(_col(legs, "capacity"), lp, "capacity", typed=typed_legs)
    check_numbers(capacity, NUMBER_RULES["capacity"], lp)

    product_ids = _objects(check_ids(text(_col(prods, "product"), pp, "product"), pp, "product", "product"))
    values = {}
    for col in ("fare", "mean", "std"):
        values[col] = numbers(_col(prods, col), pp, col, typed=typed_products)
        check_numbers(values[col], NUMBER_RULES[col], pp)

    leg_ptr, leg_index = itineraries(_col(prods, "legs"), pp, leg_txt)
    check_each_leg_once(leg_ptr, leg_index, pp, leg_ids)
    check_connected(leg_ptr, leg_index, stations, pp, leg_ids)

    distribution = None
    if "distribution" in prods.column_names:
        distribution = check_distribution(
            pc.utf8_trim_whitespace(text(_col(prods, "distribution"), pp, "distribution")), pp)
    check_negbin(distribution, meta.get("distribution", "normal"), values["mean"], values["std"], pp)

    leg_extra = {c: _extra(_col(legs, c), lp, c) for c in legs.column_names if c not in LEG_COLUMNS}
    product_extra = {c: _extra(_col(prods, c), pp, c)
                     for c in prods.column_names if c not in PRODUCT_COLUMNS and c != "distribution"}
    _warn_unused(leg_index, leg_ids, lp)
    return dict(
        leg_ids=leg_ids, leg_origin=_objects(stations["origin"]), leg_destination=_objects(stations["destination"]),
        capacity=capacity, product_ids=product_ids, leg_ptr=leg_ptr, leg_index=leg_index,
        fare=values["fare"], mean=values["mean"], std=values["std"], distribution=distribution,
        leg_extra=leg_extra, product_extra=product_extra, meta=meta)


def _warn_unused(leg_index, leg_ids, file) -> None:
    used = np.zeros(len(leg_ids), dtype=bool)
    used[leg_index] = True
    if not used.all():
        unused = np.flatnonzero(~used)
        msg = (f"{file}: {len(unused)} leg(s) used by no product, e.g. row {unused[0] + 1} "
               f"'{leg_ids[unused[0]]}'")
        warnings.warn(msg, UnusedLegWarning, stacklevel=4)   # once: commands print it, no log line too


def check_instance(inst, where: Where = Where()) -> None:
    """Every rule of :func:`fields_from_tables` on an in-memory instance (rows 1-based; the tables
    named "legs" and "products").

    :func:`decomp.io.write_instance` runs it first, so an invalid instance is never written.
    """
    lp, pp = where.legs, where.products
    check_meta(inst.meta, where.meta)
    leg_txt = check_ids(text(as_arrow(inst.leg_ids), lp, "leg"), lp, "leg", "leg")
    leg_ids = _objects(leg_txt)
    stations = {col: pc.utf8_trim_whitespace(text(as_arrow(vals), lp, col))
                for col, vals in (("origin", inst.leg_origin), ("destination", inst.leg_destination))}
    check_stations(stations, lp)
    check_numbers(np.asarray(inst.capacity, dtype=np.float64), NUMBER_RULES["capacity"], lp)
    check_ids(text(as_arrow(inst.product_ids), pp, "product"), pp, "product", "product")
    for col in ("fare", "mean", "std"):
        check_numbers(np.asarray(getattr(inst, col), dtype=np.float64), NUMBER_RULES[col], pp)
    check_itinerary_lengths(inst.leg_ptr, pp)
    check_each_leg_once(inst.leg_ptr, inst.leg_index, pp, leg_ids)
    check_connected(inst.leg_ptr, inst.leg_index, stations, pp, leg_ids)
    distribution = None
    if inst.distribution is not None:
        distribution = check_distribution(text(as_arrow(np.asarray(inst.distribution).astype(str)), pp,
                                               "distribution"), pp)
    check_negbin(distribution, inst.meta.get("distribution", "normal"), inst.mean, inst.std, pp)
    check_instance_markets(inst, where)


# ---------------------------------------------------------------------------
# markets (customer choice): a third table and two product columns
# ---------------------------------------------------------------------------

def market_fields(markets: pa.Table, product_market, product_weight, *, where: Where = Where(),
                  typed=True) -> dict:
    """Check a markets table (Arrow) with the products' ``market`` and ``preference_weight`` columns
    and return the :class:`decomp.choice.data.Markets` fields they hold.

    ``product_market`` and ``product_weight``: those columns as ``Instance.product_extra`` keeps
    them (text or numbers; None or empty for a product outside every market). ``typed``: the
    markets table carries types (Parquet, a DataFrame), so its number columns must hold numbers.
    A market no product is sold in is an :class:`UnusedMarketWarning`.
    """
    mp, pp = where.markets, where.products
    check_names(markets.column_names, MARKET_COLUMNS, mp)
    if markets.num_rows == 0:
        raise InstanceError("the table has no rows", file=mp)
    ids = check_ids(text(_col(markets, "market"), mp, "market"), mp, "market", "market")
    values = {}
    for col in ("arrivals", "no_purchase_weight"):
        values[col] = numbers(_col(markets, col), mp, col, typed=typed)
        check_numbers(values[col], NUMBER_RULES[col], mp)
    w0 = values["no_purchase_weight"]

    label = pc.utf8_trim_whitespace(pc.fill_null(_as_text(as_arrow(product_market), pp, "market"), ""))
    has = pc.greater(pc.utf8_length(label), 0).to_numpy(zero_copy_only=False)
    index = pc.index_in(label, value_set=ids)
    unknown = has & ~index.is_valid().to_numpy(zero_copy_only=False)
    if unknown.any():
        i = _first(unknown)
        raise InstanceError(f"unknown market '{label[i].as_py()}' (not in the markets table {mp}); add it "
                            "there or leave the field empty for a product outside every market",
                            file=pp, row=i + 1, column="market", value=label[i].as_py())
    product_m = np.where(has, pc.fill_null(index, -1).to_numpy(zero_copy_only=False), -1).astype(np.int64)
    weight = _preference_weights(as_arrow(product_weight), has, pp)
    ratio = np.zeros(len(weight))
    ratio[has] = weight[has] / w0[product_m[has]]
    if (ratio > MAX_WEIGHT_RATIO).any():
        i = _first(ratio > MAX_WEIGHT_RATIO)
        raise InstanceError(f"the weight is more than {MAX_WEIGHT_RATIO:g} times its market's no_purchase_weight; "
                            "scale the market's weights together", file=pp, row=i + 1, column="preference_weight",
                            value=float(weight[i]))
    used = np.zeros(len(w0), dtype=bool)
    used[product_m[has]] = True
    if not used.all():
        k = _first(~used)
        warnings.warn(f"{mp}: {int((~used).sum())} market(s) with no product, e.g. row {k + 1} "
                      f"'{ids[k].as_py()}' (its customers all leave)", UnusedMarketWarning, stacklevel=4)
    extra = {c: _extra(_col(markets, c), mp, c) for c in markets.column_names if c not in MARKET_COLUMNS}
    return dict(market_ids=_objects(ids), arrivals=values["arrivals"], no_purchase_weight=w0,
                product_market=product_m, weight=weight, extra=extra)


def _as_text(arr: pa.Array, file, column) -> pa.Array:
    """A column of ids that may have been read as numbers (an extra column), as text; nulls kept."""
    if _is_text(arr.type):
        return arr.cast(pa.string())
    try:
        return pc.cast(arr, pa.string())
    except pa.ArrowException as exc:
        raise InstanceError(f"the column has type {arr.type}, expected text", file=file, column=column) from exc


def _preference_weights(arr: pa.Array, has: np.ndarray, file) -> np.ndarray:
    """The preference weights as float64: given where the product has a market, empty elsewhere (0 there)."""
    if _is_text(arr.type):
        txt = pc.utf8_trim_whitespace(arr)
        blank = pc.fill_null(pc.equal(pc.utf8_length(txt), 0), True).to_numpy(zero_copy_only=False)
        filled = pc.if_else(pa.array(blank), "0", pc.fill_null(txt, "0"))
        num = numbers(filled, file, "preference_weight", typed=False)
    elif pa.types.is_null(arr.type):
        blank, num = np.ones(len(arr), dtype=bool), np.zeros(len(arr))
    else:
        blank = ~arr.is_valid().to_numpy(zero_copy_only=False)
        num = numbers(pc.fill_null(arr, 0), file, "preference_weight", typed=True) if len(arr) else np.zeros(0)
        blank |= np.isnan(num)                 # a DataFrame's missing value
    missing = has & blank
    if missing.any():
        raise InstanceError("a product sold in a market needs a preference weight", file=file,
                            row=_first(missing) + 1, column="preference_weight")
    stray = ~has & ~blank
    if stray.any():
        i = _first(stray)
        raise InstanceError("a preference weight without a market: give the product's market, or leave the weight "
                            "empty", file=file, row=i + 1, column="preference_weight", value=float(num[i]))
    check_numbers(np.where(has, num, 1.0), NUMBER_RULES["preference_weight"], file)   # 1.0: no market, no rule
    return np.where(has, num, 0.0)


def check_instance_markets(inst, where: Where = Where()) -> None:
    """The rules of :func:`market_fields` on an in-memory instance's markets (nothing without markets),
    and its products' ``market`` and ``preference_weight`` columns saying the same as its markets."""
    m = getattr(inst, "markets", None)
    if m is None:
        return
    if m.n_products != inst.n_products:
        raise InstanceError(f"the markets describe {m.n_products} products, the network has {inst.n_products}",
                            file=where.markets)
    for col in PRODUCT_MARKET_COLUMNS:
        if col not in inst.product_extra:
            raise InstanceError(f"missing product column '{col}' (the markets are written from it)",
                                file=where.products, column=col)
    table = pa.table({"market": as_arrow(m.market_ids), "arrivals": pa.array(m.arrivals, pa.float64()),
                      "no_purchase_weight": pa.array(m.no_purchase_weight, pa.float64())})
    with warnings.catch_warnings():          # a market without products was said when the markets were made
        warnings.simplefilter("ignore", UnusedMarketWarning)
        again = market_fields(table, inst.product_extra["market"], inst.product_extra["preference_weight"],
                              where=where)
    if not (np.array_equal(again["product_market"], m.product_market) and np.array_equal(again["weight"], m.weight)):
        raise InstanceError("the markets' product assignment differs from the product columns market and "
                            "preference_weight; build them with decomp.choice.with_markets", file=where.products)


# ---------------------------------------------------------------------------
# Python objects in: lists, DataFrames, new forecasts
# ---------------------------------------------------------------------------

def _is_number(v) -> bool:
    return isinstance(v, (int, float, np.integer, np.floating)) and not isinstance(v, (bool, np.bool_))


def column_from_values(values, file, column, *, numeric: bool) -> pa.Array:
    """A list or array of Python values as an Arrow column; a mix of numbers and text (or a text
    where a number belongs) is refused at its row."""
    if numeric:
        a = np.asarray(values) if not isinstance(values, list) or values else np.zeros(0)
        if a.dtype.kind in "fiu" and a.ndim == 1:          # the usual case: no loop over the values
            return pa.array(a.astype(np.float64, copy=False), pa.float64())
        values = list(values)
        for i, v in enumerate(values):
            if v is None:
                raise InstanceError("missing value", file=file, row=i + 1, column=column)
            if not _is_number(v):
                raise InstanceError(f"not a number (a {type(v).__name__} where a number belongs)", file=file,
                                    row=i + 1, column=column, value=v if isinstance(v, str) else repr(v)[:200])
        return pa.array(np.asarray(values, dtype=np.float64) if values else [], pa.float64())
    values = list(values)
    try:
        return pa.array(values, pa.string())
    except (pa.ArrowException, TypeError):
        return pa.array([None if v is None else str(v) for v in values], pa.string())


def frame_table(table, name, list_column=None) -> pa.Table:
    """A pandas DataFrame or a pyarrow Table as a pyarrow Table; a list column joined by spaces.
    A column Arrow cannot type (numbers mixed with text) is refused at its first odd row."""
    if isinstance(table, pa.Table):
        out = table
    elif hasattr(table, "columns") and hasattr(table, "iloc"):
        try:
            out = pa.Table.from_pandas(table, preserve_index=False)
        except (pa.ArrowException, TypeError, ValueError) as exc:
            _refuse_mixed_column(table, name)
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


def _refuse_mixed_column(frame, name) -> None:
    """The first row of a DataFrame column whose values mix numbers and text."""
    for column in frame.columns:
        series = frame[column]
        if series.dtype != object:
            continue
        kinds = [("number" if _is_number(v) else "text" if isinstance(v, str) else
                  None if v is None or (isinstance(v, float) and math.isnan(v)) else "other")
                 for v in series.tolist()]
        seen = [k for k in kinds if k is not None]
        if len(set(seen)) > 1:
            first = seen[0]
            i = next(k for k, kind in enumerate(kinds) if kind is not None and kind != first)
            v = series.iloc[i]
            raise InstanceError(f"the column mixes {first} and {kinds[i]} values", file=name, row=i + 1,
                                column=str(column), value=v if isinstance(v, str) else repr(v)[:200])


def forecast_values(values, ids, *, file, column, label: str) -> np.ndarray:
    """New per-product (or per-leg) values for :meth:`Instance.with_forecast`, aligned with ``ids``.

    An array or list is taken by position (its length must match); a pandas Series or a dict by
    label: its keys must be exactly ``ids`` (a Series with the default index 0..n-1 counts as
    positions). Anything else, a missing or unknown id, or a value that is not a number is an
    InstanceError naming the row (and the id).
    """
    n = len(ids)
    pos = {str(k): i for i, k in enumerate(np.asarray(ids).tolist())}
    if hasattr(values, "index") and hasattr(values, "to_numpy") and not hasattr(values, "columns"):
        index = values.index
        default = (getattr(index, "dtype", None) is not None and index.dtype.kind in "iu"
                   and list(index) == list(range(len(values))) and not set(map(str, index)) & set(pos))
        values = values.to_numpy() if default else dict(zip(index.tolist(), values.tolist()))
    if isinstance(values, Mapping):
        unknown = [k for k in values if str(k) not in pos]
        if unknown:
            raise InstanceError(f"unknown {label} id '{unknown[0]}' ({len(unknown)} unknown; the instance has "
                                f"{n} {label}s, e.g. {', '.join(list(pos)[:3])})", file=file, column=column,
                                value=str(unknown[0]))
        if len(values) < n:
            missing = next(k for k in pos if k not in {str(x) for x in values})
            raise InstanceError(f"no value for {label} '{missing}' ({n - len(values)} of {n} missing): give "
                                f"every {label} a value", file=file, row=pos[missing] + 1, column=column)
        by_pos = [None] * n
        for k, v in values.items():
            by_pos[pos[str(k)]] = v
        values = by_pos
    elif isinstance(values, (str, bytes)) or not hasattr(values, "__len__"):
        raise InstanceError(f"expected an array, a list, a pandas Series or a dict by {label} id, got "
                            f"{type(values).__name__}", file=file, column=column)
    if len(values) != n:
        raise InstanceError(f"{len(values)} values for {n} {label}s (one per {label}, in the instance's order)",
                            file=file, column=column)
    return column_from_values(values, file, column, numeric=True).to_numpy(zero_copy_only=False)
