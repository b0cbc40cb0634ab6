"""Reading and writing instance folders.

An instance is a folder with two tables and an optional ``meta.json``:

* ``legs.csv`` (or ``legs.parquet``), columns ``leg,origin,destination,capacity``;
* ``products.csv`` (or ``products.parquet``), columns ``product,legs,fare,mean,std``,
  where ``legs`` holds the product's leg ids in travel order, separated by
  single spaces;
* ``meta.json``: a JSON object (name, generator, seed, parameters, ...);
* ``markets.csv`` (or ``markets.parquet``), optional: the markets customers choose in, with the
  product columns ``market`` and ``preference_weight`` (:mod:`decomp.choice.data`);
* ``.decomp``: the marker decomp writes into every folder it writes (:mod:`decomp.paths`);
  an existing folder is replaced only when it carries one.

Further columns are allowed and kept (``Instance.leg_extra`` /
``Instance.product_extra``): a column whose every value is an integer or a
number written in canonical form becomes int64 / float64, anything else
stays text, so writing gives the same text back. An optional product column
``distribution`` names each product's demand distribution (one of
:data:`decomp.validation.DISTRIBUTIONS`).

This module reads the files into Arrow tables and writes them; what the
tables must hold -- the limits, the ids, the itineraries -- is
:mod:`decomp.validation`, the one copy of the rules, shared with DataFrames,
lists and in-memory instances. What is read here on purpose: comma-separated
UTF-8 text (a byte-order mark is skipped), one trailing blank line; an extra
Parquet column with nulls keeps them (None); a nested one (list, struct) is kept
as the JSON text of each value. A file that uses ';' or a tab between fields is
refused, naming the separator.

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
import os
import pathlib
import shutil
import stat
import tempfile

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc
import pyarrow.csv as pcsv
import pyarrow.parquet as pq

from . import jsonfile, paths
from .errors import InstanceError, OutputPathError, printable
from .instance import Instance
from .validation import (LEG_COLUMNS, MAX_CAPACITY, MAX_DEMAND, MAX_FARE, MAX_LEGS_PER_ITINERARY,  # noqa: F401
                         PRODUCT_COLUMNS, UnusedLegWarning, Where, as_arrow, check_instance, check_names,
                         fields_from_tables)

log = logging.getLogger(__name__)

META_FILE = "meta.json"
FORMATS = ("csv", "parquet")
INSTANCE_FILES = {"legs.csv", "products.csv", "legs.parquet", "products.parquet", META_FILE,
                  "markets.csv", "markets.parquet"}      # markets: decomp.choice.data


# ---------------------------------------------------------------------------
# reading tables
# ---------------------------------------------------------------------------

def not_a_file(path: pathlib.Path) -> str | None:
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


def find_table(folder: pathlib.Path, stem: str) -> tuple[pathlib.Path, str]:
    csv_path, pq_path = folder / f"{stem}.csv", folder / f"{stem}.parquet"
    for p in (csv_path, pq_path):
        why = not_a_file(p)
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


def read_csv_table(path: pathlib.Path, required) -> pa.Table:
    names = _csv_header(path)
    _check_delimiter(names, required, path)
    check_names(names, required, path)
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


def _check_delimiter(names, required, path) -> None:
    """A header that reads as one field holding ';' or a tab: say so, rather than 'missing column'."""
    if len(names) == 1 and names[0] not in required:
        for sep, what in ((";", "';' (semicolons)"), ("\t", "tabs"), ("|", "'|'")):
            if sep in names[0] and all(n in names[0].split(sep) for n in required[:2]):
                raise InstanceError(f"the file separates its fields with {what}; decomp reads comma-separated "
                                    f"files: save it as CSV with ',' between fields", file=path, row=0,
                                    value=names[0])


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


def read_parquet_table(path: pathlib.Path, required) -> pa.Table:
    try:
        with pq.ParquetFile(path) as parquet:   # not pq.read_table: that imports pyarrow.dataset, a slow import
            table = parquet.read()
        names = table.column_names             # a damaged footer can hold names that are not UTF-8
        table.validate(full=True)              # and string data that is not (checked once, here)
    except (pa.ArrowException, OSError) as exc:
        raise InstanceError(f"cannot read the Parquet file: {exc}", file=path) from exc
    except UnicodeDecodeError as exc:
        raise InstanceError(f"the Parquet file holds text that is not valid UTF-8 ({exc.reason})",
                            file=path) from exc
    check_names(names, required, path)
    return table


def _read_table(folder, stem, required):
    """(path, Arrow table, whether its columns carry types: Parquet yes, CSV no)."""
    path, fmt = find_table(folder, stem)
    table = read_csv_table(path, required) if fmt == "csv" else read_parquet_table(path, required)
    if table.num_rows == 0:
        raise InstanceError("the table has no rows", file=path)
    return path, table, fmt == "parquet"


def read_instance(path) -> Instance:
    """Read and validate an instance folder (CSV or Parquet tables, optional meta.json).

    Raises :class:`~decomp.errors.InstanceError` naming the file, the row
    (1-based data row, header excluded), the column and the value of the first
    problem found. A leg that no product uses gives an
    :class:`~decomp.validation.UnusedLegWarning` (``warnings.warn``; not logged as well, so it shows once).
    """
    folder = pathlib.Path(path)
    if not folder.exists():
        raise InstanceError("no such instance folder", file=folder)
    if not folder.is_dir():
        raise InstanceError("an instance is a folder holding legs.csv and products.csv "
                            "(or the .parquet pair)", file=folder)
    meta_path, meta = _read_meta(folder)
    legs_path, legs, legs_typed = _read_table(folder, "legs", LEG_COLUMNS)
    prod_path, prods, prods_typed = _read_table(folder, "products", PRODUCT_COLUMNS)
    meta.setdefault("name", printable(folder.resolve().name))   # a folder's name is not the file's to police
    fields = fields_from_tables(legs, prods, meta=meta, where=Where(legs_path, prod_path, meta_path),
                                typed=(legs_typed, prods_typed))
    from .choice.data import read_markets       # customer choice: markets.csv, when there is one

    return read_markets(folder, Instance(**fields), products_name=prod_path)


def _read_meta(folder: pathlib.Path) -> tuple:
    """(path, the meta data) of ``folder/meta.json``; ({} when there is none). A link that leads
    nowhere, a folder, a device: refused, as for the tables."""
    path = folder / META_FILE
    why = not_a_file(path)
    if why is not None:
        raise InstanceError(f"{META_FILE} is {why}", file=path)
    if not path.exists():
        return path, {}
    meta = jsonfile.read(path)
    if not isinstance(meta, dict):
        raise InstanceError("meta.json must hold a JSON object", file=path)
    return path, meta


# ---------------------------------------------------------------------------
# writing
# ---------------------------------------------------------------------------

def _tables(inst: Instance) -> tuple[pa.Table, pa.Table]:
    leg_ids = pa.array(inst.leg_ids, pa.string())
    legs = {"leg": leg_ids, "origin": pa.array(inst.leg_origin, pa.string()),
            "destination": pa.array(inst.leg_destination, pa.string()),
            "capacity": pa.array(inst.capacity, pa.float64())}
    for k, v in inst.leg_extra.items():
        legs[k] = as_arrow(v)
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
        products[k] = as_arrow(v)
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


def csv_bytes(table: pa.Table) -> bytes:
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


def write_instance(inst: Instance, path, format: str = "csv", *, option: str = "path",
                   replace_unmarked: bool = False) -> pathlib.Path:
    """Write ``inst`` as an instance folder (``format`` ``"csv"`` or ``"parquet"``) plus meta.json
    and decomp's marker (:data:`decomp.paths.MARKER`).

    Atomic: the tables go into a temporary folder beside ``path``, which then
    replaces ``path``; on any error nothing at ``path`` changes. The instance
    is checked first (:func:`~decomp.validation.check_instance`): an invalid one raises
    InstanceError and nothing is written. An existing ``path`` is replaced only
    when it is empty, or carries decomp's instance marker and holds nothing but
    instance files; anything else is an :class:`~decomp.errors.OutputPathError`
    naming it (``option`` names the path there, e.g. ``--out``).
    ``replace_unmarked`` also replaces an unmarked folder of instance files only
    (the ladder's own folders, written before markers existed). Numbers are
    written in the shortest form that reads back to the same float, so
    :func:`read_instance` gives the same arrays back. A full disk or a read-only
    folder is :class:`~decomp.errors.EnvironmentRefusedError` naming ``path``.
    """
    if format not in FORMATS:
        raise ValueError(f"format must be one of {FORMATS}, got {format!r}")
    target = check_instance_folder(path, option, replace_unmarked=replace_unmarked)
    check_instance(inst)
    legs, products = _tables(inst)
    with paths.refusing(target):
        target.parent.mkdir(parents=True, exist_ok=True)
        tmp = pathlib.Path(tempfile.mkdtemp(prefix=f".{target.name}.", suffix=".tmp", dir=target.parent))
        try:
            os.chmod(tmp, 0o755)               # mkdtemp makes it private; an instance folder is not
            if format == "csv":
                (tmp / "legs.csv").write_bytes(csv_bytes(legs))
                (tmp / "products.csv").write_bytes(csv_bytes(products))
            else:
                for name, table in (("legs", legs), ("products", products)):
                    pq.write_table(table, tmp / f"{name}.parquet", compression="zstd")
            _write_meta(inst, tmp / META_FILE)
            from .choice.data import write_markets   # customer choice: markets.csv, when there are markets

            write_markets(inst, tmp, format)
            paths.write_marker(tmp, "instance")
            _replace_dir(tmp, target)
        except BaseException:
            shutil.rmtree(tmp, ignore_errors=True)
            raise
    return target


def check_instance_folder(path, option: str = "--out", *, replace_unmarked: bool = False) -> pathlib.Path:
    """Check ``path`` as an instance folder to write, before the instance is made: a new or empty
    folder, or one decomp wrote (its marker) holding instance files only. OutputPathError otherwise."""
    def legacy(p):
        return replace_unmarked and (p / META_FILE).is_file()

    target = paths.output_folder(path, option, replace="instance", legacy=legacy)
    if target.is_dir():
        foreign = sorted(p.name for p in target.iterdir() if p.name not in INSTANCE_FILES | {paths.MARKER})
        if foreign:
            raise OutputPathError(f"holds other files ({', '.join(foreign[:3])}); write the instance to a new "
                                  f"or instance-only folder", path=target, option=option)
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
