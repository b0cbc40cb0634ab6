"""Reading, validating and writing instance folders.

An instance is a folder with two tables and an optional ``meta.json``:

* ``legs.csv`` (or ``legs.parquet``), columns ``leg,origin,destination,capacity``;
* ``products.csv`` (or ``products.parquet``), columns ``product,legs,fare,mean,std``,
  where ``legs`` holds the product's leg ids in travel order, separated by
  single spaces;
* ``meta.json``: a JSON object (name, generator, seed, parameters, ...).

Further columns are allowed and kept (``Instance.leg_extra`` /
``Instance.product_extra``): a column whose every value is an integer or a
number written in canonical form becomes int64 / float64, anything else
stays text, so writing gives the same text back. An optional product column
``distribution`` names each product's demand distribution (one of
:data:`decomp.instance.DISTRIBUTIONS`).

Limits (anything beyond is refused with the limit named): capacity and fare at
most :data:`MAX_CAPACITY` / :data:`MAX_FARE` (1e12: an "unlimited" leg can be
written as 1e12 seats; measured solved by highs, ipopt and lagrangian at 1e15),
demand mean and std at most :data:`MAX_DEMAND` (1e6 passengers per product; at
1e9 the Lagrangian method ends in numerical trouble). Ids hold no spaces or
control characters (a NUL made two products print alike); a leg's origin is
not its destination; an itinerary flies each leg at most once; a negative
binomial product has std^2 > mean (its variance exceeds its mean, or it has
mean = std = 0). One trailing blank line is allowed. An extra Parquet column
with nulls keeps them (None); a nested one (list, struct) is kept as the JSON
text of each value.

Every problem is an :class:`~decomp.errors.InstanceError` naming the file, the
row (1-based data row: the first row after the header is row 1), the column and
the value. Parsing is pyarrow plus numpy over whole columns; nothing loops over
products in Python.
"""

from __future__ import annotations

import codecs
import contextlib
import csv
import errno
import json
import logging
import math
import os
import pathlib
import shutil
import stat
import tempfile
import warnings

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pcsv
import pyarrow.parquet as pq

from .errors import InstanceError
from .instance import DISTRIBUTIONS, Instance

log = logging.getLogger(__name__)

LEG_COLUMNS = ("leg", "origin", "destination", "capacity")
PRODUCT_COLUMNS = ("product", "legs", "fare", "mean", "std")
META_FILE = "meta.json"
FORMATS = ("csv", "parquet")
_INSTANCE_FILES = {"legs.csv", "products.csv", "legs.parquet", "products.parquet", META_FILE,
                   "markets.csv", "markets.parquet"}      # markets: decomp.choice.data

MAX_CAPACITY = 1e12   # seats per leg
MAX_FARE = 1e12       # fare units per seat
MAX_DEMAND = 1e6      # mean and std of a product's demand, passengers
_CONTROL = r"[\x00-\x1f\x7f]"


class UnusedLegWarning(UserWarning):
    """A leg that no product uses (allowed, but often a data mistake)."""


# ---------------------------------------------------------------------------
# reading tables
# ---------------------------------------------------------------------------

def _not_a_file(path: pathlib.Path) -> str | None:
    """Why ``path`` exists but cannot be read as a table file, or None (a file, or nothing there)."""
    try:
        st = os.stat(path)
    except FileNotFoundError:
        return "a broken symbolic link" if os.path.islink(path) else None
    except OSError as exc:
        if exc.errno == errno.ELOOP:
            return "a symbolic link loop"
        return f"not readable ({exc.strerror or exc})"
    if stat.S_ISDIR(st.st_mode):
        return "a folder, not a file"
    if not stat.S_ISREG(st.st_mode):
        return "not a regular file (a FIFO, socket or device)"
    return None


def _find_table(folder: pathlib.Path, stem: str) -> tuple[pathlib.Path, str]:
    csv_path, pq_path = folder / f"{stem}.csv", folder / f"{stem}.parquet"
    for p in (csv_path, pq_path):
        why = _not_a_file(p)
        if why is not None:
            raise InstanceError(f"{p.name} is {why}", file=p)
    if csv_path.is_file() and pq_path.is_file():
        raise InstanceError(f"both {csv_path.name} and {pq_path.name} exist; keep one", file=folder)
    if csv_path.is_file():
        return csv_path, "csv"
    if pq_path.is_file():
        return pq_path, "parquet"
    raise InstanceError(f"missing file: the instance needs {stem}.csv or {stem}.parquet", file=csv_path)


def _csv_header(path: pathlib.Path) -> list[str]:
    try:
        with open(path, "rb") as fh:       # bytes: a text reader would decode ahead into the rows
            first = fh.readline().decode("utf-8")
    except UnicodeDecodeError as exc:
        raise InstanceError(f"the header is not valid UTF-8 text ({exc.reason})", file=path, row=0) from exc
    except OSError as exc:
        raise InstanceError(f"cannot read the file: {exc.strerror or exc}", file=path) from exc
    if not first.strip():
        raise InstanceError("the file is empty: it needs a header line and at least one row", file=path)
    try:
        names = next(csv.reader([first.lstrip("\ufeff")]))
    except csv.Error as exc:           # e.g. a field longer than the csv module's limit (131,072)
        raise InstanceError(f"cannot parse the header: {exc}", file=path, row=0) from exc
    return names


def _read_csv(path: pathlib.Path, required) -> pa.Table:
    names = _csv_header(path)
    _check_names(names, required, path)
    _check_utf8(path, names)
    table, bad = _parse_csv(path, names, threads=True)
    if bad is not None and not bad.text.strip() and _ends_with_one_blank_line(path):
        if _parse_csv(path, names, threads=False)[1].number == table.num_rows + 2:   # it is that last line
            bad = None
    if bad is not None:
        if bad.number is None:             # the threaded reader does not count lines
            _, bad = _parse_csv(path, names, threads=False)
        row = None if bad.number is None else bad.number - 1   # file line -> data row
        why = ("blank line" if not bad.text.strip() else
               f"expected {bad.expected_columns} fields, got {bad.actual_columns}")
        raise InstanceError(why, file=path, row=row, value=bad.text)
    if table.column_names != names:
        raise InstanceError(f"the header reads as {table.column_names}, expected {names}", file=path)
    if table.num_rows and _ends_with_one_blank_line(path) and _last_row_empty(table):
        table = table.slice(0, table.num_rows - 1)     # one trailing blank line: allowed
    return table


def _ends_with_one_blank_line(path) -> bool:
    """The file ends in exactly one blank line (after the last row's own line end)."""
    with open(path, "rb") as fh:
        fh.seek(max(0, os.path.getsize(path) - 6))
        tail = fh.read().replace(b"\r\n", b"\n")
    return tail.endswith(b"\n\n") and not tail.endswith(b"\n\n\n")


def _last_row_empty(table: pa.Table) -> bool:
    return all(table.column(i)[-1].as_py() == "" for i in range(table.num_columns))


def _check_utf8(path, names) -> None:
    """InstanceError at the row (and column) of the first byte that is not UTF-8.

    Checked before pyarrow parses the file: its handler of a bad row cannot decode such a row and
    would print an ignored exception instead of naming the row.
    """
    decoder = codecs.getincrementaldecoder("utf-8")()
    lines = 0
    tail = b""                             # the current line's bytes so far (for the column)
    with open(path, "rb") as fh:
        for chunk in iter(lambda: fh.read(1 << 24), b""):
            try:
                decoder.decode(chunk)
            except UnicodeDecodeError as exc:
                start = max(0, min(exc.start, len(chunk)))
                lines += chunk.count(b"\n", 0, start)
                cut = chunk.rfind(b"\n", 0, start)
                line = chunk[cut + 1:start] if cut >= 0 else tail + chunk[:start]
                k = line.count(b",")
                raise InstanceError("the text is not valid UTF-8", file=path, row=lines,
                                    column=names[k] if lines > 0 and k < len(names) else None) from None
            lines += chunk.count(b"\n")
            cut = chunk.rfind(b"\n")
            tail = chunk[cut + 1:] if cut >= 0 else tail + chunk
        try:
            decoder.decode(b"", final=True)
        except UnicodeDecodeError:
            raise InstanceError("the text is not valid UTF-8 (the file ends inside a character)", file=path,
                                row=lines) from None


def _parse_csv(path, names, threads):
    """Parse with every column as text; also return the first row with a wrong field count."""
    bad_rows = []

    def on_invalid(row):
        bad_rows.append(row)
        return "skip"

    try:
        table = pcsv.read_csv(
            path,
            read_options=pcsv.ReadOptions(use_threads=threads, block_size=1 << 24),
            parse_options=pcsv.ParseOptions(invalid_row_handler=on_invalid, newlines_in_values=False,
                                            ignore_empty_lines=False),
            convert_options=pcsv.ConvertOptions(
                column_types={n: pa.string() for n in names},
                strings_can_be_null=False, quoted_strings_can_be_null=False))
    except pa.ArrowException as exc:
        raise InstanceError(f"cannot parse the CSV file: {exc}", file=path) from exc
    return table, (bad_rows[0] if bad_rows else None)


def _read_parquet(path: pathlib.Path, required) -> pa.Table:
    try:
        with pq.ParquetFile(path) as parquet:   # not pq.read_table: that imports pyarrow.dataset (0.15 s)
            table = parquet.read()
        names = table.column_names             # a damaged footer can hold names that are not UTF-8
        table.validate(full=True)              # and string data that is not (checked once, here)
    except (pa.ArrowException, OSError) as exc:
        raise InstanceError(f"cannot read the Parquet file: {exc}", file=path) from exc
    except UnicodeDecodeError as exc:
        raise InstanceError(f"the Parquet file holds text that is not valid UTF-8 ({exc.reason})",
                            file=path) from exc
    _check_names(names, required, path)
    return table


def _check_names(names, required, path):
    seen = set()
    for n in names:
        if n in seen:
            raise InstanceError("the header names this column twice", file=path, column=n)
        seen.add(n)
    for n in required:
        if n not in seen:
            raise InstanceError(f"missing column '{n}' (the header must have {', '.join(required)})",
                                file=path, column=n)


def _col(table: pa.Table, name: str) -> pa.Array:
    return table.column(name).combine_chunks()


def _read_table(folder, stem, required):
    path, fmt = _find_table(folder, stem)
    table = _read_csv(path, required) if fmt == "csv" else _read_parquet(path, required)
    if table.num_rows == 0:
        raise InstanceError("the table has no rows", file=path)
    return path, table


# ---------------------------------------------------------------------------
# column conversion with row-exact errors
# ---------------------------------------------------------------------------

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


def _text(arr: pa.Array, path, column) -> pa.Array:
    """A column as a string array (Parquet may bring other types)."""
    if pa.types.is_string(arr.type) or pa.types.is_large_string(arr.type):
        out = arr.cast(pa.string())
    else:
        try:
            out = pc.cast(arr, pa.string())
        except pa.ArrowException as exc:
            raise InstanceError(f"the column has type {arr.type}, expected text", file=path,
                                column=column) from exc
    if out.null_count:
        i = int(np.flatnonzero(out.is_null().to_numpy(zero_copy_only=False))[0])
        raise InstanceError("missing value", file=path, row=i + 1, column=column)
    return out


def _numbers(arr: pa.Array, path, column) -> np.ndarray:
    """A numeric column as float64; non-numeric, NaN and infinite values are errors."""
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_decimal(arr.type):
        if arr.null_count:
            i = int(np.flatnonzero(arr.is_null().to_numpy(zero_copy_only=False))[0])
            raise InstanceError("missing value", file=path, row=i + 1, column=column)
        out = pc.cast(arr, pa.float64()).to_numpy(zero_copy_only=False)
    else:
        txt = _text(arr, path, column)
        txt = pc.utf8_trim_whitespace(txt)

        def conv(a):
            return pc.cast(a, pa.float64())
        try:
            out = conv(txt).to_numpy(zero_copy_only=False)
        except pa.ArrowException:
            i = _first_failing(txt, conv)
            v = txt[i].as_py()
            why = "missing value" if v == "" else "not a number"
            raise InstanceError(why, file=path, row=i + 1, column=column, value=v) from None
    bad = ~np.isfinite(out)
    if bad.any():
        i = int(np.argmax(bad))
        raise InstanceError("NaN or infinite value", file=path, row=i + 1, column=column,
                            value=float(out[i]))
    return out


def _ids(arr: pa.Array, path, column, what) -> pa.Array:
    """Unique, non-empty ids without spaces, as a string array."""
    txt = _text(arr, path, column)
    empty = pc.equal(pc.utf8_length(pc.utf8_trim_whitespace(txt)), 0).to_numpy(zero_copy_only=False)
    if empty.any():
        i = int(np.argmax(empty))
        raise InstanceError(f"empty {what} id", file=path, row=i + 1, column=column, value=txt[i].as_py())
    control = pc.match_substring_regex(txt, _CONTROL).to_numpy(zero_copy_only=False)
    if control.any():
        i = int(np.argmax(control))
        raise InstanceError(f"a {what} id must not contain control characters (NUL, tab, line breaks, ...)",
                            file=path, row=i + 1, column=column, value=txt[i].as_py())
    spaced = pc.match_substring_regex(txt, r"\s").to_numpy(zero_copy_only=False)
    if spaced.any():
        i = int(np.argmax(spaced))
        raise InstanceError(f"a {what} id must not contain spaces", file=path, row=i + 1,
                            column=column, value=txt[i].as_py())
    enc = pc.dictionary_encode(txt)
    if len(enc.dictionary) < len(txt):
        codes = enc.indices.to_numpy(zero_copy_only=False)
        _, first = np.unique(codes, return_index=True)
        dup = np.ones(len(codes), dtype=bool)
        dup[first] = False
        i = int(np.argmax(dup))
        j = int(first[np.searchsorted(_, codes[i])])
        raise InstanceError(f"duplicate {what} id (first in row {j + 1})", file=path, row=i + 1,
                            column=column, value=txt[i].as_py())
    return txt


def _objects(arr: pa.Array) -> np.ndarray:
    return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=object)


def _check_range(values, ok, path, column, reason):
    bad = ~ok
    if bad.any():
        i = int(np.argmax(bad))
        raise InstanceError(reason, file=path, row=i + 1, column=column, value=float(values[i]))


def _extra(arr: pa.Array, path, column) -> np.ndarray:
    """An extra column: int64 or float64 if that writes back to the same text, else text."""
    if pa.types.is_nested(arr.type):       # list, struct, map: kept as the JSON text of each value
        return np.asarray([None if v is None else json.dumps(v, default=str) for v in arr.to_pylist()],
                          dtype=object)
    if arr.null_count:                     # kept with None where the value is missing
        return np.asarray(arr.to_pylist(), dtype=object)
    if pa.types.is_integer(arr.type) or pa.types.is_floating(arr.type) or pa.types.is_boolean(arr.type):
        return arr.to_numpy(zero_copy_only=False)
    txt = _text(arr, path, column)
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


# ---------------------------------------------------------------------------
# read_instance
# ---------------------------------------------------------------------------

def read_instance(path) -> Instance:
    """Read and validate an instance folder (CSV or Parquet tables, optional meta.json).

    Raises :class:`~decomp.errors.InstanceError` naming the file, the row
    (1-based data row, header excluded), the column and the value of the first
    problem found. A leg that no product uses gives an
    :class:`UnusedLegWarning` (``warnings.warn``; not logged as well, so it shows once).
    """
    folder = pathlib.Path(path)
    if not folder.exists():
        raise InstanceError("no such instance folder", file=folder)
    if not folder.is_dir():
        raise InstanceError("an instance is a folder holding legs.csv and products.csv "
                            "(or the .parquet pair)", file=folder)
    meta = _read_meta(folder)
    legs_path, legs = _read_table(folder, "legs", LEG_COLUMNS)
    prod_path, prods = _read_table(folder, "products", PRODUCT_COLUMNS)
    meta.setdefault("name", folder.resolve().name)
    inst = instance_from_tables(legs, prods, meta=meta, legs_name=legs_path, products_name=prod_path)
    from .choice.data import read_markets       # customer choice: markets.csv, when there is one

    return read_markets(folder, inst, products_name=prod_path)


def instance_from_tables(legs: pa.Table, prods: pa.Table, *, meta=None, legs_name="legs",
                         products_name="products") -> Instance:
    """Validate a legs and a products table (Arrow) and build the instance: the checks of the files.

    :func:`read_instance` calls it on the tables it read, and
    :meth:`decomp.Instance.from_frames` on DataFrames, so both give the same
    :class:`~decomp.errors.InstanceError` (named by ``legs_name`` / ``products_name``
    instead of a file, with the 1-based data row, the column and the value).
    """
    legs_path, prod_path = legs_name, products_name
    for table, required, name in ((legs, LEG_COLUMNS, legs_path), (prods, PRODUCT_COLUMNS, prod_path)):
        _check_names(table.column_names, required, name)
        if table.num_rows == 0:
            raise InstanceError("the table has no rows", file=name)
    meta = dict(meta or {})
    _check_meta_distribution(meta, "meta")

    leg_txt = _ids(_col(legs, "leg"), legs_path, "leg", "leg")
    leg_ids = _objects(leg_txt)
    stations = {}
    for col in ("origin", "destination"):
        st = _text(_col(legs, col), legs_path, col)
        st = pc.utf8_trim_whitespace(st)
        empty = pc.equal(pc.utf8_length(st), 0).to_numpy(zero_copy_only=False)
        if empty.any():
            i = int(np.argmax(empty))
            raise InstanceError("empty station code", file=legs_path, row=i + 1, column=col)
        stations[col] = st
    _check_stations(stations, legs_path)
    capacity = _numbers(_col(legs, "capacity"), legs_path, "capacity")
    _check_range(capacity, capacity >= 0, legs_path, "capacity", "capacity must be >= 0")
    _check_limit(capacity, MAX_CAPACITY, legs_path, "capacity", "seats (for an unlimited leg write 1e12)")

    product_ids = _objects(_ids(_col(prods, "product"), prod_path, "product", "product"))
    fare = _numbers(_col(prods, "fare"), prod_path, "fare")
    _check_range(fare, fare > 0, prod_path, "fare", "fare must be > 0")
    _check_limit(fare, MAX_FARE, prod_path, "fare", "fare units")
    mean = _numbers(_col(prods, "mean"), prod_path, "mean")
    _check_range(mean, mean >= 0, prod_path, "mean", "demand mean must be >= 0")
    _check_limit(mean, MAX_DEMAND, prod_path, "mean", "passengers per product")
    std = _numbers(_col(prods, "std"), prod_path, "std")
    _check_range(std, std >= 0, prod_path, "std", "demand std must be >= 0")
    _check_limit(std, MAX_DEMAND, prod_path, "std", "passengers per product")

    leg_ptr, leg_index = _product_legs(_col(prods, "legs"), prod_path, leg_txt)
    _check_each_leg_once(leg_ptr, leg_index, prod_path, leg_ids)
    _check_connected(leg_ptr, leg_index, stations, prod_path, leg_ids)

    distribution = None
    if "distribution" in prods.column_names:
        d = pc.utf8_trim_whitespace(_text(_col(prods, "distribution"), prod_path, "distribution"))
        known = pc.is_in(d, value_set=pa.array(DISTRIBUTIONS)).to_numpy(zero_copy_only=False)
        if not known.all():
            i = int(np.argmax(~known))
            raise InstanceError(f"unknown demand distribution; known: {', '.join(DISTRIBUTIONS)}",
                                file=prod_path, row=i + 1, column="distribution", value=d[i].as_py())
        distribution = np.asarray(d.to_numpy(zero_copy_only=False), dtype=object)
    _check_negbin(distribution, meta.get("distribution", "normal"), mean, std, prod_path)

    leg_extra = {c: _extra(_col(legs, c), legs_path, c)
                 for c in legs.column_names if c not in LEG_COLUMNS}
    product_extra = {c: _extra(_col(prods, c), prod_path, c)
                     for c in prods.column_names if c not in PRODUCT_COLUMNS and c != "distribution"}

    used = np.zeros(len(leg_ids), dtype=bool)
    used[leg_index] = True
    if not used.all():
        unused = np.flatnonzero(~used)
        msg = (f"{legs_path}: {len(unused)} leg(s) used by no product, e.g. row {unused[0] + 1} "
               f"'{leg_ids[unused[0]]}'")
        warnings.warn(msg, UnusedLegWarning, stacklevel=3)   # once: commands print it, no log line too

    return Instance(
        leg_ids=leg_ids,
        leg_origin=np.asarray(stations["origin"].to_numpy(zero_copy_only=False), dtype=object),
        leg_destination=np.asarray(stations["destination"].to_numpy(zero_copy_only=False), dtype=object),
        capacity=capacity, product_ids=product_ids, leg_ptr=leg_ptr, leg_index=leg_index,
        fare=fare, mean=mean, std=std, distribution=distribution,
        leg_extra=leg_extra, product_extra=product_extra, meta=meta)


def _read_meta(folder: pathlib.Path) -> dict:
    path = folder / META_FILE
    if not path.exists():
        return {}
    why = _not_a_file(path)
    if why is not None:
        raise InstanceError(f"{META_FILE} is {why}", file=path)
    try:
        meta = json.loads(path.read_text(encoding="utf-8"))
    except (UnicodeDecodeError, json.JSONDecodeError) as exc:
        raise InstanceError(f"not valid JSON: {exc}", file=path) from exc
    except RecursionError as exc:
        raise InstanceError("JSON nested too deeply to read", file=path) from exc
    except OSError as exc:
        raise InstanceError(f"cannot read the file: {exc.strerror or exc}", file=path) from exc
    if not isinstance(meta, dict):
        raise InstanceError("meta.json must hold a JSON object", file=path)
    _check_meta_distribution(meta, path)
    return meta


def _check_meta_distribution(meta: dict, path):
    """The instance-wide demand distribution, when given, must be a known family name."""
    if "distribution" in meta:
        d = meta["distribution"]
        if not isinstance(d, str) or d not in DISTRIBUTIONS:
            raise InstanceError(f"unknown demand distribution; known: {', '.join(DISTRIBUTIONS)}", file=path,
                                column="distribution", value=d if isinstance(d, str) else repr(d)[:200])


def _check_limit(values, limit, path, column, unit):
    _check_range(values, values <= limit, path, column, f"above decomp's limit of {limit:g} {unit}")


def _check_stations(stations, path):
    """Station codes without control characters; a leg's origin is not its destination."""
    for col in ("origin", "destination"):
        bad = pc.match_substring_regex(stations[col], _CONTROL).to_numpy(zero_copy_only=False)
        if bad.any():
            i = int(np.argmax(bad))
            raise InstanceError("a station code must not contain control characters", file=path, row=i + 1,
                                column=col, value=stations[col][i].as_py())
    same = pc.equal(stations["origin"], stations["destination"]).to_numpy(zero_copy_only=False)
    if same.any():
        i = int(np.argmax(same))
        raise InstanceError("the leg's origin is its destination", file=path, row=i + 1, column="destination",
                            value=stations["destination"][i].as_py())


def _check_each_leg_once(leg_ptr, leg_index, path, leg_ids):
    """An itinerary flies each leg at most once (twice would take two seats per sale)."""
    owner = np.repeat(np.arange(len(leg_ptr) - 1), np.diff(leg_ptr))
    order = np.lexsort((leg_index, owner))
    o, leg = owner[order], leg_index[order]
    twice = (o[1:] == o[:-1]) & (leg[1:] == leg[:-1])
    if twice.any():
        k = np.flatnonzero(twice)
        j = int(o[k].min())
        lid = leg_ids[int(leg[k][np.argmin(o[k])])]
        raise InstanceError(f"the itinerary flies leg '{lid}' twice", file=path, row=j + 1, column="legs",
                            value=" ".join(str(leg_ids[x]) for x in leg_index[leg_ptr[j]:leg_ptr[j + 1]]))


def _check_negbin(distribution, default, mean, std, path):
    """A negative binomial has variance above its mean: std^2 > mean (or no demand: mean = std = 0)."""
    if distribution is None:
        if default != "negbin":
            return
        nb = np.ones(len(mean), dtype=bool)
    else:
        nb = distribution == "negbin"
    bad = nb & (std * std <= mean) & ~((mean == 0) & (std == 0))
    if bad.any():
        i = int(np.argmax(bad))
        raise InstanceError(f"a negative binomial needs std^2 > mean (here {std[i] ** 2:g} <= {mean[i]:g}); "
                            f"use poisson for std^2 = mean", file=path, row=i + 1, column="std",
                            value=float(std[i]))


def _product_legs(col: pa.Array, path, leg_txt: pa.Array):
    """Split the legs column into (leg_ptr, leg_index), checking every token."""
    txt = _text(col, path, "legs")
    lists = pc.split_pattern(txt, " ")
    lengths = pc.list_value_length(lists).to_numpy(zero_copy_only=False).astype(np.int64)
    leg_ptr = np.zeros(len(lengths) + 1, dtype=np.int64)
    np.cumsum(lengths, out=leg_ptr[1:])
    tokens = pc.list_flatten(lists)
    empty_tok = pc.equal(pc.utf8_length(tokens), 0).to_numpy(zero_copy_only=False)
    if empty_tok.any():
        k = int(np.argmax(empty_tok))
        i = int(np.searchsorted(leg_ptr, k, side="right") - 1)
        v = txt[i].as_py()
        why = ("empty legs field: a product needs at least one leg" if v.strip() == ""
               else "leg ids must be separated by single spaces")
        raise InstanceError(why, file=path, row=i + 1, column="legs", value=v)
    idx = pc.index_in(tokens, value_set=leg_txt)
    if idx.null_count:
        k = int(np.flatnonzero(idx.is_null().to_numpy(zero_copy_only=False))[0])
        i = int(np.searchsorted(leg_ptr, k, side="right") - 1)
        raise InstanceError(f"unknown leg id '{tokens[k].as_py()}' (not in the legs table)",
                            file=path, row=i + 1, column="legs", value=txt[i].as_py())
    return leg_ptr, idx.to_numpy(zero_copy_only=False).astype(np.int64)


def _check_connected(leg_ptr, leg_index, stations, path, leg_ids):
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
        k0 = int(k[np.argmax(broken)])
        i = int(np.searchsorted(leg_ptr, k0, side="right") - 1)
        a, b = leg_index[k0], leg_index[k0 + 1]
        raise InstanceError(
            f"legs do not connect: '{leg_ids[a]}' arrives at {stations['destination'][a].as_py()} "
            f"but '{leg_ids[b]}' leaves from {stations['origin'][b].as_py()}",
            file=path, row=i + 1, column="legs")


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------

def check_instance(inst: Instance) -> None:
    """The checks of :func:`read_instance` on an in-memory instance (rows 1-based, no file).

    :func:`write_instance` runs it first, so an invalid instance is never written.
    """
    leg_ids = _objects(_ids(_as_arrow(inst.leg_ids), None, "leg", "leg"))
    _ids(_as_arrow(inst.product_ids), None, "product", "product")
    stations = {}
    for col, vals in (("origin", inst.leg_origin), ("destination", inst.leg_destination)):
        st = _as_arrow(vals)
        empty = pc.equal(pc.utf8_length(pc.utf8_trim_whitespace(st)), 0).to_numpy(zero_copy_only=False)
        if empty.any():
            raise InstanceError("empty station code", row=int(np.argmax(empty)) + 1, column=col)
        stations[col] = st
    for col, vals, ok, why in (
            ("capacity", inst.capacity, inst.capacity >= 0, "capacity must be >= 0"),
            ("fare", inst.fare, inst.fare > 0, "fare must be > 0"),
            ("mean", inst.mean, inst.mean >= 0, "demand mean must be >= 0"),
            ("std", inst.std, inst.std >= 0, "demand std must be >= 0")):
        finite = np.isfinite(vals)
        _check_range(vals, finite, None, col, "NaN or infinite value")
        _check_range(vals, ok, None, col, why)
    _check_stations(stations, None)
    for col, vals, limit, unit in (("capacity", inst.capacity, MAX_CAPACITY, "seats (for an unlimited leg write 1e12)"),
                                   ("fare", inst.fare, MAX_FARE, "fare units"),
                                   ("mean", inst.mean, MAX_DEMAND, "passengers per product"),
                                   ("std", inst.std, MAX_DEMAND, "passengers per product")):
        _check_limit(vals, limit, None, col, unit)
    empty = np.diff(inst.leg_ptr) == 0
    if empty.any():
        raise InstanceError("empty legs field: a product needs at least one leg",
                            row=int(np.argmax(empty)) + 1, column="legs")
    _check_each_leg_once(inst.leg_ptr, inst.leg_index, None, leg_ids)
    _check_connected(inst.leg_ptr, inst.leg_index, stations, None, leg_ids)
    _check_negbin(None if inst.distribution is None else inst.distribution.astype(str),
                  inst.meta.get("distribution", "normal"), inst.mean, inst.std, None)
    if inst.distribution is not None:
        known = np.isin(inst.distribution.astype(str), DISTRIBUTIONS)
        if not known.all():
            i = int(np.argmax(~known))
            raise InstanceError(f"unknown demand distribution; known: {', '.join(DISTRIBUTIONS)}",
                                row=i + 1, column="distribution", value=str(inst.distribution[i]))
    from .choice.data import check as check_markets    # customer choice: the markets, when there are some

    check_markets(inst)


def _as_arrow(values) -> pa.Array:
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


def _tables(inst: Instance) -> tuple[pa.Table, pa.Table]:
    leg_ids = pa.array(inst.leg_ids, pa.string())
    legs = {"leg": leg_ids, "origin": pa.array(inst.leg_origin, pa.string()),
            "destination": pa.array(inst.leg_destination, pa.string()),
            "capacity": pa.array(inst.capacity, pa.float64())}
    for k, v in inst.leg_extra.items():
        legs[k] = _as_arrow(v)
    tokens = pc.take(leg_ids, pa.array(inst.leg_index))
    lists = pa.ListArray.from_arrays(pa.array(inst.leg_ptr.astype(np.int32)
                                              if len(inst.leg_index) < 2**31 else inst.leg_ptr), tokens)
    products = {"product": pa.array(inst.product_ids, pa.string()),
                "legs": pc.binary_join(lists, " "),
                "fare": pa.array(inst.fare, pa.float64()),
                "mean": pa.array(inst.mean, pa.float64()),
                "std": pa.array(inst.std, pa.float64())}
    if inst.distribution is not None:
        products["distribution"] = pa.array(inst.distribution, pa.string())
    for k, v in inst.product_extra.items():
        products[k] = _as_arrow(v)
    return pa.table(legs), pa.table(products)


_NEEDS_QUOTES = r'[,"\r\n]|^\s|\s$'


def _csv_field(arr: pa.Array) -> pa.Array:
    """Text of one column for CSV: numbers in shortest round-trip form, text quoted when needed."""
    if pa.types.is_string(arr.type):
        arr = pc.fill_null(arr, "")          # a missing extra value is an empty field
        need = pc.match_substring_regex(arr, _NEEDS_QUOTES)
        if not pc.any(need).as_py():
            return arr
        quoted = pc.binary_join_element_wise('"', pc.replace_substring(arr, '"', '""'), '"', "")
        return pc.if_else(need, quoted, arr)
    if pa.types.is_boolean(arr.type):
        return pc.fill_null(pc.cast(arr, pa.string()), "")
    return pc.fill_null(pc.cast(arr, pa.string()), "")   # floats: shortest text that reads back exactly


def _csv_bytes(table: pa.Table) -> bytes:
    header = ",".join(f'"{n}"' if any(c in n for c in ',"\r\n') else n for n in table.column_names)
    cols = [_csv_field(table.column(i).combine_chunks()) for i in range(table.num_columns)]
    lines = pc.binary_join_element_wise(*cols, ",") if len(cols) > 1 else cols[0]
    lines = pc.binary_join_element_wise(lines.cast(pa.large_string()), pa.scalar("", pa.large_string()),
                                        pa.scalar("\n", pa.large_string()))
    _, offsets, data = lines.buffers()
    off = np.frombuffer(offsets, dtype=np.int64)[lines.offset:lines.offset + len(lines) + 1]
    return (header + "\n").encode() + data.to_pybytes()[off[0]:off[-1]]


def _write_meta(inst: Instance, path: pathlib.Path):
    path.write_text(json.dumps(dict(inst.meta), indent=2, sort_keys=True, default=_json_default) + "\n",
                    encoding="utf-8")


def _json_default(o):
    if isinstance(o, np.generic):
        return o.item()
    if isinstance(o, np.ndarray):
        return o.tolist()
    raise TypeError(f"meta value of type {type(o).__name__} cannot be written as JSON")


def write_instance(inst: Instance, path, format: str = "csv") -> pathlib.Path:
    """Write ``inst`` as an instance folder (``format`` ``"csv"`` or ``"parquet"``) plus meta.json.

    Atomic: the tables go into a temporary folder beside ``path``, which then
    replaces ``path``; on any error nothing at ``path`` changes. The instance
    is checked first (:func:`check_instance`): an invalid one raises
    InstanceError and nothing is written. An existing
    ``path`` is replaced only if it holds nothing but instance files. Numbers
    are written in the shortest form that reads back to the same float, so
    :func:`read_instance` gives the same arrays back.
    """
    if format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS}, got {format!r}")
    target = pathlib.Path(path)
    if target.exists():
        if not target.is_dir():
            raise FileExistsError(f"{target} exists and is not a folder; not overwriting it")
        foreign = sorted(p.name for p in target.iterdir() if p.name not in _INSTANCE_FILES)
        if foreign:
            raise FileExistsError(f"{target} holds other files ({', '.join(foreign[:3])}); "
                                  "write the instance to a new or instance-only folder")
    check_instance(inst)
    target.parent.mkdir(parents=True, exist_ok=True)
    legs, products = _tables(inst)
    tmp = pathlib.Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent))
    try:
        os.chmod(tmp, 0o755)               # mkdtemp makes it private; an instance folder is not
        if format == "csv":
            (tmp / "legs.csv").write_bytes(_csv_bytes(legs))
            (tmp / "products.csv").write_bytes(_csv_bytes(products))
        else:
            for name, table in (("legs", legs), ("products", products)):
                pq.write_table(table, tmp / f"{name}.parquet", compression="zstd")
        _write_meta(inst, tmp / META_FILE)
        from .choice.data import write_markets   # customer choice: markets.csv, when there are markets

        write_markets(inst, tmp, format)
        _replace_dir(tmp, target)
    except BaseException:
        shutil.rmtree(tmp, ignore_errors=True)
        raise
    return target


def _replace_dir(tmp: pathlib.Path, target: pathlib.Path, attempts: int = 5):
    """Move the finished folder ``tmp`` to ``target``, replacing an old one.

    Another process may write the same target at the same time (two jobs
    regenerating one ladder rung): each attempt either renames into a free
    place or moves the current folder aside first; the last writer wins and
    the target is always a complete folder.
    """
    for _ in range(attempts):
        try:
            os.rename(tmp, target)
            return
        except OSError:
            if not target.exists():
                raise
        old = pathlib.Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".old", dir=target.parent))
        os.rmdir(old)
        try:
            os.rename(target, old)
        except FileNotFoundError:
            continue                       # someone else moved it meanwhile; try again
        try:
            os.rename(tmp, target)
        except OSError:
            with contextlib.suppress(OSError):
                os.rename(old, target)
            shutil.rmtree(old, ignore_errors=True)
            continue
        shutil.rmtree(old, ignore_errors=True)
        return
    raise OSError(f"could not replace {target}: it keeps changing under another writer")


def validate(path) -> Instance:
    """Read ``path`` with every check on; return the instance or raise InstanceError."""
    return read_instance(path)
