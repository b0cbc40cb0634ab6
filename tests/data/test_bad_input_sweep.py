"""A sweep of bad instance folders through ``decomp validate``: every one must end with exit 2 and a
message naming the file (and the row and column where there is one), in printable text, never a
traceback and never "valid". The inputs are variations of the hand-written tables of
tests/support/tables.py: the hand-picked cases (``CASES``, ``SPECIAL``) and the
generated families (``GENERATED``: every number column against every kind of bad number, in CSV
and in Parquet; every id and station column against every refused character; itineraries; the
files themselves; meta.json), made programmatically from the same small base, and the same
families for the markets of issue 27 (markets.csv and the product columns market and
preference_weight).

``sweep()`` is also what the counts in the issue notes come from (run this file with
``PYTHONPATH=tests python tests/data/test_bad_input_sweep.py`` to print them: kinds, tracebacks, silently accepted).
"""

from __future__ import annotations

import decimal
import json
import math
import os
import pathlib
import tempfile

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

from support.tables import LEGS, PRODUCTS, with_field


def _write(d: pathlib.Path, legs=LEGS, products=PRODUCTS, meta=None, raw_products=None, raw_legs=None):
    d.mkdir(parents=True)
    if raw_legs is not None:
        (d / "legs.csv").write_bytes(raw_legs)
    elif legs is not None:
        (d / "legs.csv").write_text("\n".join(legs) + "\n")
    if raw_products is not None:
        (d / "products.csv").write_bytes(raw_products)
    elif products is not None:
        (d / "products.csv").write_text("\n".join(products) + "\n")
    if meta is not None:
        (d / "meta.json").write_text(meta)


def _p(row, col, value):
    return {"products": with_field(PRODUCTS, row, col, value)}


def _l(row, col, value):
    return {"legs": with_field(LEGS, row, col, value)}


#: name -> (keyword arguments of _write, file the message must name, row or None)
CASES = {
    "legs.csv missing": ({"legs": None}, "legs.csv", None),
    "products.csv missing": ({"products": None}, "products.csv", None),
    "legs.csv empty": ({"raw_legs": b""}, "legs.csv", None),
    "products header only": ({"products": PRODUCTS[:1]}, "products.csv", None),
    "missing column fare": ({"products": [l.rsplit(",", 3)[0] + "," + l.rsplit(",", 2)[1] + "," + l.rsplit(",", 1)[1]
                                          for l in PRODUCTS]}, "products.csv", None),
    "duplicate header column": ({"legs": [LEGS[0] + ",leg"] + [r + ",x" for r in LEGS[1:]]}, "legs.csv", None),
    "row with too many fields": ({"products": PRODUCTS[:2] + [PRODUCTS[2] + ",9"] + PRODUCTS[3:]}, "products.csv", 2),
    "row with too few fields": ({"products": PRODUCTS[:2] + ["P2,L1 L2,150"] + PRODUCTS[3:]}, "products.csv", 2),
    "blank line in the middle": ({"products": PRODUCTS[:3] + [""] + PRODUCTS[3:]}, "products.csv", 3),
    "two trailing blank lines": ({"raw_products": ("\n".join(PRODUCTS) + "\n\n\n").encode()}, "products.csv", None),
    "fare not a number": (_p(2, "fare", "twelve"), "products.csv", 2),
    "fare empty": (_p(2, "fare", ""), "products.csv", 2),
    "fare zero": (_p(2, "fare", "0"), "products.csv", 2),
    "fare negative": (_p(2, "fare", "-5"), "products.csv", 2),
    "fare NaN": (_p(2, "fare", "nan"), "products.csv", 2),
    "fare inf": (_p(2, "fare", "inf"), "products.csv", 2),
    "fare 1e308": (_p(2, "fare", "1e308"), "products.csv", 2),
    "mean negative": (_p(3, "mean", "-1"), "products.csv", 3),
    "mean 1e308": (_p(3, "mean", "1e308"), "products.csv", 3),
    "std negative": (_p(4, "std", "-0.5"), "products.csv", 4),
    "std 1e308": (_p(4, "std", "1e308"), "products.csv", 4),
    "capacity negative": (_l(2, "capacity", "-1"), "legs.csv", 2),
    "capacity text": (_l(2, "capacity", "many"), "legs.csv", 2),
    "capacity 1e308": (_l(2, "capacity", "1e308"), "legs.csv", 2),
    "capacity inf": (_l(2, "capacity", "inf"), "legs.csv", 2),
    "duplicate leg id": (_l(2, "leg", "L1"), "legs.csv", 2),
    "duplicate product id": (_p(3, "product", "P1"), "products.csv", 3),
    "empty leg id": (_l(1, "leg", ""), "legs.csv", 1),
    "leg id with a space": (_l(1, "leg", "L 1"), "legs.csv", 1),
    "leg id with NUL": (_l(3, "leg", "L\x003"), "legs.csv", 3),
    "product id with NUL": (_p(1, "product", "P\x001"), "products.csv", 1),
    "product id with a tab": (_p(1, "product", "P\t1"), "products.csv", 1),
    "station with NUL": (_l(2, "origin", "HU\x002"), "legs.csv", 2),
    "empty station": (_l(2, "destination", ""), "legs.csv", 2),
    "origin equals destination": (_l(3, "destination", "BO3"), "legs.csv", 3),
    "unknown leg in itinerary": (_p(2, "legs", "L1 L9"), "products.csv", 2),
    "empty itinerary": (_p(2, "legs", ""), "products.csv", 2),
    "legs separated by two spaces": (_p(2, "legs", "L1  L2"), "products.csv", 2),
    "legs that do not connect": (_p(2, "legs", "L2 L1"), "products.csv", 2),
    "itinerary flies a leg twice": ({"products": PRODUCTS + ["P5,L2 L3 L2,100,5,1"]}, "products.csv", 5),
    "unknown distribution": ({"products": [PRODUCTS[0] + ",distribution"] + [p + ",lognormal" for p in PRODUCTS[1:]]},
                             "products.csv", 1),
    "negbin with std^2 <= mean": ({"products": [PRODUCTS[0] + ",distribution"] + [p + ",negbin" for p in PRODUCTS[1:]]},
                                  "products.csv", 1),
    "meta.json not JSON": ({"meta": "{name: x"}, "meta.json", None),
    "meta.json a list": ({"meta": "[1, 2]"}, "meta.json", None),
    "meta.json nested 1500 deep": ({"meta": '{"a": ' + "[" * 1500 + "]" * 1500 + "}"}, "meta.json", None),
    "meta.json unknown distribution": ({"meta": json.dumps({"distribution": "lognormal"})}, "meta.json", None),
    "meta.json distribution not text": ({"meta": json.dumps({"distribution": 3})}, "meta.json", None),
    "meta.json negbin with std^2 <= mean": ({"meta": json.dumps({"distribution": "negbin"})}, "products.csv", 1),
    "header field of 140,000 characters": ({"products": [PRODUCTS[0] + "," + "x" * 140_000] +
                                            [p + ",1" for p in PRODUCTS[1:]]}, "products.csv", None),
    "10 MB bad value": (_p(2, "fare", "x" * 10_000_000), "products.csv", 2),
    "latin-1 byte in a row": ({"raw_products": ("\n".join(PRODUCTS) + "\n").replace("P3", "P\xe93").encode("latin-1")},
                              "products.csv", 3),
    "binary garbage": ({"raw_products": bytes(range(256)) * 4}, "products.csv", None),
    "UTF-16 file": ({"raw_products": ("\n".join(PRODUCTS) + "\n").encode("utf-16")}, "products.csv", None),
}


def _not_a_table(p: pathlib.Path, kind: str) -> bool:
    """Make ``p`` something that is not a readable file (``kind``); False for another kind."""
    if kind == "a symlink loop":
        p.symlink_to(p)
    elif kind == "a folder":
        p.mkdir()
    elif kind == "a FIFO":
        os.mkfifo(p)
    elif kind in ("a broken symlink", "a link to nothing"):
        p.symlink_to(p.parent / f"nowhere{p.suffix}")
    else:
        return False
    return True


def _special(name: str, d: pathlib.Path) -> None:
    """Inputs that are not text tables: links, folders, FIFOs, damaged Parquet."""
    _write(d, products=None)
    p = d / "products.csv"
    if not _not_a_table(p, name.removeprefix("products.csv ")) and name.startswith("Parquet"):
        (d / "products.csv").unlink(missing_ok=True)
        t = pa.table({"product": ["P1", None], "legs": ["L1", "L1"], "fare": [100.0, 90.0], "mean": [1.0, 2.0],
                      "std": [0.5, 0.5]})
        if name == "Parquet truncated":
            pq.write_table(t.slice(0, 1), d / "products.parquet")
            data = (d / "products.parquet").read_bytes()
            (d / "products.parquet").write_bytes(data[: len(data) // 2])
        elif name == "Parquet null id":
            pq.write_table(t, d / "products.parquet")
        elif name == "Parquet fare as text":
            pq.write_table(t.slice(0, 1).set_column(2, "fare", pa.array(["cheap"])), d / "products.parquet")
        elif name == "Parquet and CSV both":
            pq.write_table(t.slice(0, 1), d / "products.parquet")
            (d / "products.csv").write_text("\n".join(PRODUCTS) + "\n")


SPECIAL = ["products.csv a symlink loop", "products.csv a folder", "products.csv a FIFO",
           "products.csv a broken symlink", "Parquet truncated", "Parquet null id", "Parquet fare as text",
           "Parquet and CSV both"]


# ---------------------------------------------------------------------------- generated families
HUGE_INT = "1" * 5000           # more digits than CPython converts (4,300)

#: Number columns: (file, column, the row the bad value goes to).
NUMBER_COLUMNS = [("legs.csv", "capacity", 2), ("products.csv", "fare", 3), ("products.csv", "mean", 1),
                  ("products.csv", "std", 4)]
#: Text that is not a number decomp accepts, whatever the column (CSV).
BAD_NUMBER_TEXTS = ["twelve", "", " ", "nan", "NaN", "inf", "-inf", "Infinity", "-1", "-0.5", "1e308", "1e999",
                    "1e-320", "0x10", "1,200", "1.200,50", "$100", "100 EUR", "1e", "--1", "1 2", "true",
                    HUGE_INT, "1_000", "\u00bd"]
#: Typed values that are not a number decomp accepts (Parquet).
BAD_NUMBER_ARRAYS = {
    "text that reads as a number": lambda n, k: pa.array(["100"] * n),
    "text": lambda n, k: pa.array(["abc"] * n),
    "null": lambda n, k: pa.array([None if i == k else 1.0 for i in range(n)], pa.float64()),
    "NaN": lambda n, k: pa.array([math.nan if i == k else 1.0 for i in range(n)]),
    "inf": lambda n, k: pa.array([math.inf if i == k else 1.0 for i in range(n)]),
    "negative": lambda n, k: pa.array([-1.0 if i == k else 1.0 for i in range(n)]),
    "1e308": lambda n, k: pa.array([1e308 if i == k else 1.0 for i in range(n)]),
    "subnormal": lambda n, k: pa.array([1e-320 if i == k else 1.0 for i in range(n)]),
    "int64 2**62": lambda n, k: pa.array([2**62 if i == k else 1 for i in range(n)], pa.int64()),
    "uint64 max": lambda n, k: pa.array([2**64 - 1 if i == k else 1 for i in range(n)], pa.uint64()),
    "boolean": lambda n, k: pa.array([True] * n),
    "decimal 1e30": lambda n, k: pa.array([decimal.Decimal(10) ** 30 if i == k else decimal.Decimal(1)
                                           for i in range(n)], pa.decimal128(38, 0)),
    "timestamp": lambda n, k: pa.array([0] * n, pa.timestamp("s")),
    "binary": lambda n, k: pa.array([b"1"] * n),
    "list": lambda n, k: pa.array([[1.0]] * n),
}
#: Characters an id or a station code may not hold (C0, DEL, C1, separators, bidirectional controls,
#: and the spaces an id may not hold).
REFUSED_CHARS = {"NUL": "\x00", "tab": "\t", "ESC": "\x1b", "DEL": "\x7f", "U+0085": "\u0085",
                 "U+2028": "\u2028", "U+2029": "\u2029", "U+202E (RLO)": "\u202e", "U+200F (RLM)": "\u200f",
                 "U+2066 (LRI)": "\u2066", "U+061C (ALM)": "\u061c", "space": " ", "U+00A0": "\u00a0",
                 "U+3000": "\u3000"}
#: Itineraries (products row 2, travel order matters): what each must be refused for.
BAD_ITINERARIES = {"empty": "", "blank": " ", "two spaces": "L1  L2", "leading space": " L1",
                   "trailing space": "L1 ", "unknown leg": "L9", "unknown leg, case": "l1",
                   "legs that do not connect": "L2 L1", "a leg twice": "L1 L2 L3 L2",
                   "comma-separated": "L1,L2", "tab-separated": "L1\tL2", "17 legs": "CHAIN17"}


def _number_case(file, column, row, value):
    lines = LEGS if file == "legs.csv" else PRODUCTS
    quoted = '"' + value.replace('"', '""') + '"' if ("," in value or '"' in value) else value
    out = with_field(lines, row, column, quoted)
    return ({"legs" if file == "legs.csv" else "products": out}, file, row)


def _parquet_case(file, column, row, make):
    def build(d):
        legs = {"leg": ["L1", "L2", "L3"], "origin": ["KA1", "HU2", "BO3"], "destination": ["HU2", "BO3", "HU2"],
                "capacity": pa.array([100.0, 80.0, 50.0])}
        prods = {"product": ["P1", "P2", "P3", "P4"], "legs": ["L1", "L1 L2", "L2", "L3"],
                 "fare": pa.array([100.0, 150.0, 90.0, 60.0]), "mean": pa.array([10.0, 5.0, 8.0, 4.0]),
                 "std": pa.array([3.0, 2.0, 2.5, 1.0])}
        table = legs if file == "legs.parquet" else prods
        table[column] = make(len(table[column]), row - 1)
        d.mkdir(parents=True)
        pq.write_table(pa.table(legs), d / "legs.parquet")
        pq.write_table(pa.table(prods), d / "products.parquet")
    return build


def _chain17(d):
    legs = ["leg,origin,destination,capacity"] + [f"C{k},S{k},S{k + 1},10" for k in range(17)]
    prods = list(PRODUCTS[:2]) + ["P2," + " ".join(f"C{k}" for k in range(17)) + ",500,1,1"]
    _write(d, legs=LEGS + legs[1:], products=prods)


def _generated() -> dict:
    """name -> (builder of the folder (callable) or _write keyword arguments, file named, row named)."""
    out = {}
    for file, column, row in NUMBER_COLUMNS:
        for value in BAD_NUMBER_TEXTS:
            if column == "std" and value in ("-0.5",):
                continue                                   # the same as -1 there
            shown = value if len(value) < 20 else f"{value[:8]}... ({len(value)} characters)"
            out[f"{file} {column} = {shown!r}"] = _number_case(file, column, row, value)
        if column == "fare":
            for value in ("0", "0.0", "-0"):
                out[f"{file} fare = {value!r}"] = _number_case(file, column, row, value)
        pfile = file.replace(".csv", ".parquet")
        for kind, make in BAD_NUMBER_ARRAYS.items():
            row_named = row if kind not in ("text that reads as a number", "text", "boolean", "timestamp",
                                            "binary", "list") else 1
            out[f"{pfile} {column} as {kind}"] = (_parquet_case(pfile, column, row, make), pfile, row_named)
    for file, column, row in (("legs.csv", "leg", 2), ("products.csv", "product", 3), ("legs.csv", "origin", 1),
                              ("legs.csv", "destination", 3)):
        lines = LEGS if file == "legs.csv" else PRODUCTS
        base = lines[row].split(",")[lines[0].split(",").index(column)]
        for what, ch in REFUSED_CHARS.items():
            if column in ("origin", "destination") and what in ("space", "U+00A0", "U+3000", "tab"):
                continue                                   # station codes are trimmed, spaces inside allowed
            value = base[:1] + ch + base[1:]
            out[f"{file} {column} with {what}"] = ({"legs" if file == "legs.csv" else "products":
                                                   with_field(lines, row, column, value)}, file, row)
        if column in ("leg", "product"):
            out[f"{file} {column} empty"] = ({"legs" if file == "legs.csv" else "products":
                                             with_field(lines, row, column, "")}, file, row)
    for what, value in BAD_ITINERARIES.items():
        if value == "CHAIN17":
            out[f"products.csv itinerary of {what}"] = (_chain17, "products.csv", 2)
            continue
        q = '"' + value + '"' if "," in value else value
        out[f"products.csv itinerary {what}"] = (_p(2, "legs", q), "products.csv", 2)
    sep_legs = {";": ";", "tab": "\t", "|": "|"}
    for what, sep in sep_legs.items():
        out[f"legs.csv separated by {what}"] = ({"legs": [ln.replace(",", sep) for ln in LEGS]}, "legs.csv", None)
        out[f"products.csv separated by {what}"] = ({"products": [ln.replace(",", sep) for ln in PRODUCTS]},
                                                    "products.csv", None)
    for col in ("leg", "origin", "destination", "capacity"):
        k = LEGS[0].split(",").index(col)
        out[f"legs.csv without column {col}"] = ({"legs": [",".join(f for i, f in enumerate(ln.split(",")) if i != k)
                                                           for ln in LEGS]}, "legs.csv", None)
    for col in ("product", "legs", "fare", "mean", "std"):
        k = PRODUCTS[0].split(",").index(col)
        out[f"products.csv without column {col}"] = ({"products": [",".join(f for i, f in enumerate(ln.split(","))
                                                                            if i != k) for ln in PRODUCTS]},
                                                     "products.csv", None)
    out["legs.csv header only"] = ({"legs": LEGS[:1]}, "legs.csv", None)
    out["legs.csv blank line in the middle"] = ({"legs": LEGS[:2] + [""] + LEGS[2:]}, "legs.csv", 2)
    out["legs.csv row with too many fields"] = ({"legs": LEGS[:2] + [LEGS[2] + ",7"] + LEGS[3:]}, "legs.csv", 2)
    out["legs.csv UTF-16"] = ({"raw_legs": ("\n".join(LEGS) + "\n").encode("utf-16")}, "legs.csv", None)
    out["legs.csv latin-1 byte"] = ({"raw_legs": ("\n".join(LEGS) + "\n").replace("BO3", "B\xd63").encode("latin-1")},
                                    "legs.csv", 2)
    out["products.csv distribution empty"] = ({"products": [PRODUCTS[0] + ",distribution"] +
                                               [p + "," for p in PRODUCTS[1:]]}, "products.csv", 1)
    out["products.csv distribution in capitals"] = ({"products": [PRODUCTS[0] + ",distribution"] +
                                                     [p + ",Normal" for p in PRODUCTS[1:]]}, "products.csv", 1)
    metas = {"a 5,000-digit integer": '{"seed": ' + HUGE_INT + "}", "a key twice": '{"name": "a", "name": "b"}',
             "null": "null", "a number": "3", "a string": '"net"', "empty": "",
             "name with ESC": json.dumps({"name": "n\x1b[2Jx"}), "name with RLO": json.dumps({"name": "n\u202ex"}),
             "nested text with BEL": json.dumps({"params": {"note": ["ok", "\x07"]}}),
             "a key with a line separator": json.dumps({"na\u2028me": 1}),
             "not UTF-8": None}
    for what, text in metas.items():
        if text is None:
            out[f"meta.json {what}"] = (lambda d: (_write(d), (d / "meta.json").write_bytes(b'{"name": "\xff"}')),
                                        "meta.json", None)
        else:
            out[f"meta.json {what}"] = ({"meta": text}, "meta.json", None)
    return out


def _special_meta(kind):
    def build(d):
        _write(d)
        _not_a_table(d / "meta.json", kind)
    return build


def _special_legs(kind):
    def build(d):
        _write(d, legs=None)
        if _not_a_table(d / "legs.csv", kind):
            return
        if kind == "Parquet with no rows":
            pq.write_table(pa.table({"leg": pa.array([], pa.string()), "origin": pa.array([], pa.string()),
                                     "destination": pa.array([], pa.string()),
                                     "capacity": pa.array([], pa.float64())}), d / "legs.parquet")
        elif kind == "Parquet without column capacity":
            pq.write_table(pa.table({"leg": ["L1"], "origin": ["KA1"], "destination": ["HU2"]}), d / "legs.parquet")
        elif kind == "Parquet naming a column twice":
            pq.write_table(pa.Table.from_arrays([pa.array(["L1"]), pa.array(["KA1"]), pa.array(["HU2"]),
                                                 pa.array([10.0]), pa.array([1.0])],
                                                names=["leg", "origin", "destination", "capacity", "leg"]),
                           d / "legs.parquet")
        elif kind == "not Parquet at all":
            (d / "legs.parquet").write_bytes(b"PAR1 but not really")
    return build


for _k in ("a symlink loop", "a link to nothing", "a folder", "a FIFO"):
    GENERATED_SPECIAL = globals().setdefault("GENERATED_SPECIAL", {})
    GENERATED_SPECIAL[f"meta.json {_k}"] = (_special_meta(_k), "meta.json", None)
for _k in ("a symlink loop", "a folder", "a FIFO", "a link to nothing", "Parquet with no rows",
           "Parquet without column capacity", "Parquet naming a column twice", "not Parquet at all"):
    GENERATED_SPECIAL[f"legs {_k}"] = (_special_legs(_k), "legs.", None)


# ---------------------------------------------------------------------------- issue 27: markets (customer choice)
#: The base tables with markets: products.csv with a market and a preference weight (P4 outside every
#: market), and markets.csv.
MARKET_PRODUCTS = [PRODUCTS[0] + ",market,preference_weight", PRODUCTS[1] + ",MA,1", PRODUCTS[2] + ",MA,2",
                   PRODUCTS[3] + ",MB,1", PRODUCTS[4] + ",,"]
MARKETS = ["market,arrivals,no_purchase_weight", "MA,30,1.5", "MB,20,0.8"]
#: Number columns of the markets: (file, column, the row the bad value goes to).
MARKET_NUMBER_COLUMNS = [("markets.csv", "arrivals", 2), ("markets.csv", "no_purchase_weight", 1),
                         ("products.csv", "preference_weight", 2)]


def _with_markets(products=None, markets=None, markets_table=None, markets_file="markets.csv"):
    """A builder of a folder with markets: the base tables, or the given lines (None: no such file)."""
    def build(d):
        _write(d, products=MARKET_PRODUCTS if products is None else products)
        if markets_table is not None:
            pq.write_table(markets_table, d / "markets.parquet")
        elif markets is not False:
            (d / markets_file).write_text("\n".join(MARKETS if markets is None else markets) + "\n")
    return build


def _market_field(file, row, column, value):
    quoted = '"' + value.replace('"', '""') + '"' if ("," in value or '"' in value) else value
    if file == "markets.csv":
        return _with_markets(markets=with_field(MARKETS, row, column, quoted))
    return _with_markets(products=with_field(MARKET_PRODUCTS, row, column, quoted))


def _market_parquet(column, row, make):
    cols = {"market": pa.array(["MA", "MB"]), "arrivals": pa.array([30.0, 20.0]),
            "no_purchase_weight": pa.array([1.5, 0.8])}
    cols[column] = make(2, row - 1)
    return _with_markets(markets_table=pa.table(cols))


def _markets_generated() -> dict:
    """name -> (builder, file named, row named): the markets table and the product columns market and
    preference_weight, checked by decomp.validation as the other tables are."""
    out = {}
    for file, column, row in MARKET_NUMBER_COLUMNS:
        for value in BAD_NUMBER_TEXTS + ["0"] * (column != "arrivals"):
            shown = value if len(value) < 20 else f"{value[:8]}... ({len(value)} characters)"
            out[f"{file} {column} = {shown!r}"] = (_market_field(file, row, column, value), file, row)
        if file == "markets.csv":
            for kind, make in BAD_NUMBER_ARRAYS.items():
                row_named = row if kind not in ("text that reads as a number", "text", "boolean", "timestamp",
                                                "binary", "list") else 1
                out[f"markets.parquet {column} as {kind}"] = (_market_parquet(column, row, make), "markets.parquet",
                                                              row_named)
    for what, ch in REFUSED_CHARS.items():
        out[f"markets.csv market with {what}"] = (_market_field("markets.csv", 2, "market", "M" + ch + "B"),
                                                  "markets.csv", 2)
        out[f"products.csv market with {what}"] = (_market_field("products.csv", 3, "market", "M" + ch + "B"),
                                                   "products.csv", 3)
    out["markets.csv market empty"] = (_market_field("markets.csv", 1, "market", ""), "markets.csv", 1)
    out["markets.csv market twice"] = (_market_field("markets.csv", 2, "market", "MA"), "markets.csv", 2)
    out["products.csv unknown market"] = (_market_field("products.csv", 3, "market", "MZ"), "products.csv", 3)
    out["products.csv weight without a market"] = (_market_field("products.csv", 4, "preference_weight", "2"),
                                                   "products.csv", 4)
    out["products.csv weight 1e7 times the no-purchase weight"] = (
        _market_field("products.csv", 2, "preference_weight", "1.5e7"), "products.csv", 2)
    out["products.csv market column, no markets.csv"] = (_with_markets(markets=False), "products.csv", None)
    out["markets.csv, products without the market columns"] = (_with_markets(products=PRODUCTS), "products.csv",
                                                               None)
    out["markets.csv header only"] = (_with_markets(markets=MARKETS[:1]), "markets.csv", None)
    for col in ("market", "arrivals", "no_purchase_weight"):
        k = MARKETS[0].split(",").index(col)
        out[f"markets.csv without column {col}"] = (
            _with_markets(markets=[",".join(f for i, f in enumerate(ln.split(",")) if i != k) for ln in MARKETS]),
            "markets.csv", None)
    out["markets.csv separated by ;"] = (_with_markets(markets=[ln.replace(",", ";") for ln in MARKETS]),
                                         "markets.csv", None)
    out["markets.csv and markets.parquet both"] = (
        lambda d: (_with_markets()(d), pq.write_table(pa.table({"market": ["MA"], "arrivals": [1.0],
                                                                "no_purchase_weight": [1.0]}),
                                                      d / "markets.parquet")), "markets.", None)
    for kind in ("a symlink loop", "a link to nothing", "a folder", "a FIFO"):
        out[f"markets.csv {kind}"] = (
            lambda d, kind=kind: (_with_markets(markets=False)(d), _not_a_table(d / "markets.csv", kind)),
            "markets.csv", None)
    return out


GENERATED = {**_generated(), **GENERATED_SPECIAL, **_markets_generated()}


def classify(d: pathlib.Path, file: str, row) -> tuple:
    """('clear' | 'unclear' | 'crash' | 'accepted', message) of ``decomp validate d``."""
    import contextlib
    import io

    from decomp.cli import main

    err = io.StringIO()
    try:
        with contextlib.redirect_stderr(err), contextlib.redirect_stdout(io.StringIO()):
            rc = main(["validate", str(d)])
    except BaseException as exc:  # noqa: BLE001 - a traceback is what the sweep looks for
        return "crash", f"{type(exc).__name__}: {str(exc)[:200]}"
    text = err.getvalue()
    if rc == 0:
        return "accepted", ""
    printable = all(c.isprintable() or c in "\n" for c in text)     # no input can drive the terminal
    ok = rc == 2 and file in text and len(text) < 2000 and (row is None or f"row {row}" in text) and printable
    return ("clear" if ok else "unclear"), text[:300]


def _build(name: str, d: pathlib.Path) -> tuple:
    """Write case ``name`` into ``d``; returns (file the message must name, row or None)."""
    if name in SPECIAL:
        _special(name, d)
        return "products.", None
    spec, file, row = CASES[name] if name in CASES else GENERATED[name]
    if callable(spec):
        spec(d)
    else:
        _write(d, **spec)
    return file, row


ALL = list(CASES) + SPECIAL + list(GENERATED)


def sweep(root: pathlib.Path) -> dict:
    out = {}
    for name in ALL:
        d = root / f"c{len(out)}"
        file, row = _build(name, d)
        out[name] = classify(d, file, row)
    return out


def test_the_sweep_has_at_least_250_kinds():
    assert len(set(ALL)) == len(ALL) >= 250


@pytest.mark.parametrize("name", ALL)
def test_bad_input_gets_a_clear_error(tmp_path, name):
    file, row = _build(name, tmp_path / "i")
    verdict, text = classify(tmp_path / "i", file, row)
    assert verdict == "clear", (verdict, text)


if __name__ == "__main__":
    with tempfile.TemporaryDirectory() as tmp:
        res = sweep(pathlib.Path(tmp))
    counts = {}
    for name, (verdict, text) in res.items():
        counts[verdict] = counts.get(verdict, 0) + 1
        if verdict != "clear":
            print(f"{verdict:9s} {name}: {text}")
    print(f"{len(res)} kinds of bad instance folders: {counts} (crash = traceback, accepted = silently accepted)")
