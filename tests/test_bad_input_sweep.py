"""A sweep of bad instance folders through ``decomp validate``: every one must end with exit 2 and a
message naming the file (and the row and column where there is one), never a traceback and never
"valid". The inputs are variations of the hand-written tables of tests/test_validation.py.

``sweep()`` is also what the counts in the issue-13 note come from (run this file with
``python tests/test_bad_input_sweep.py`` to print them).
"""

from __future__ import annotations

import json
import os
import pathlib
import sys
import tempfile

import pyarrow as pa
import pyarrow.parquet as pq
import pytest

sys.path.insert(0, str(pathlib.Path(__file__).resolve().parent))
from test_validation import LEGS, PRODUCTS, with_field  # noqa: E402


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


def _special(name: str, d: pathlib.Path) -> None:
    """Inputs that are not text tables: links, folders, FIFOs, damaged Parquet."""
    _write(d, products=None)
    p = d / "products.csv"
    if name == "products.csv a symlink loop":
        p.symlink_to(p)
    elif name == "products.csv a folder":
        p.mkdir()
    elif name == "products.csv a FIFO":
        os.mkfifo(p)
    elif name == "products.csv a broken symlink":
        p.symlink_to(d / "nowhere.csv")
    elif name.startswith("Parquet"):
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
    ok = rc == 2 and file in text and len(text) < 2000 and (row is None or f"row {row}" in text)
    return ("clear" if ok else "unclear"), text[:300]


def sweep(root: pathlib.Path) -> dict:
    out = {}
    for name, (kw, file, row) in CASES.items():
        d = root / f"c{len(out)}"
        _write(d, **kw)
        out[name] = classify(d, file, row)
    for name in SPECIAL:
        d = root / f"c{len(out)}"
        _special(name, d)
        out[name] = classify(d, "products.", None)
    return out


@pytest.mark.parametrize("name", list(CASES) + SPECIAL)
def test_bad_input_gets_a_clear_error(tmp_path, name):
    if name in CASES:
        kw, file, row = CASES[name]
        _write(tmp_path / "i", **kw)
    else:
        file, row = "products.", None
        _special(name, tmp_path / "i")
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
    print(f"{len(res)} bad inputs: {counts}")
