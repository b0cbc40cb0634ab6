"""Small inputs shared by the command-line, validation and baseline tests (invented data: a
fictional carrier's three stations KA1, HU2, BO3)."""

from __future__ import annotations

import json
import pathlib

from decomp.instance import Instance

#: A 5,000-digit integer: more digits than CPython converts to int (4,300, sys.get_int_max_str_digits,
#: Python 3.11 documentation), so json.loads raises ValueError on it.
HUGE_INT = "1" * 5000

LEGS_CSV = "leg,origin,destination,capacity\nL1,KA1,HU2,100\nL2,HU2,BO3,80\n"
PRODUCTS_CSV = "product,legs,fare,mean,std\nP1,L1,100,60,9\nP2,L1 L2,150,50,8\nP3,L2,90,45,7\n"


def write_tiny(folder: pathlib.Path, legs: str | None = None, products: str | None = None) -> pathlib.Path:
    """A two-leg, three-product instance folder (or the given table texts)."""
    folder.mkdir(parents=True)
    (folder / "legs.csv").write_text(legs or LEGS_CSV)
    (folder / "products.csv").write_text(products or PRODUCTS_CSV)
    return folder


#: The same network with customer choice (issue 27): P1 and P2 sold in market MA, P3 in MB; means are
#: the sales with everything open (arrivals x w / (w0 + sum w)).
MARKET_PRODUCTS_CSV = ("product,legs,fare,mean,std,market,preference_weight\n"
                       "P1,L1,100,40,6.325,MA,2\nP2,L1 L2,150,20,4.472,MA,1\nP3,L2,90,40,6.325,MB,1\n")
MARKETS_CSV = "market,arrivals,no_purchase_weight\nMA,80,1\nMB,60,0.5\n"


def write_tiny_markets(folder: pathlib.Path) -> pathlib.Path:
    """The two-leg network of :func:`write_tiny` with its products sold in two markets."""
    write_tiny(folder, products=MARKET_PRODUCTS_CSV)
    (folder / "markets.csv").write_text(MARKETS_CSV)
    return folder


def write_benchmark(path: pathlib.Path) -> pathlib.Path:
    """A benchmark.json of three sizes timed t = 2e-6 n (what ``decomp size`` fits), tol 1e-9."""
    path.parent.mkdir(parents=True, exist_ok=True)
    path.write_text(json.dumps({"machine_info": {}, "benchmarks": [
        {"name": f"test_solve[pnlp-lagrangian-{n}-1e-09]",
         "extra_info": {"kind": "solve", "model": "pnlp", "method": "lagrangian", "label": "lagrangian-newton",
                        "knobs": {"tol": 1e-9}, "n_products": n, "accuracy_failures": [], "termination": "optimal"},
         "stats": {"median": 2e-6 * n, "mean": 2e-6 * n, "min": 2e-6 * n}} for n in (1_000, 10_000, 100_000)]}))
    return path


#: Two light products on the tiny network's legs (demand far below capacity).
LIGHT_PRODUCTS_CSV = "product,legs,fare,mean,std\nP1,L1,100,10,3\nP2,L1 L2,150,5,2\n"


def write_light(parent: pathlib.Path, name: str = "t", legs: str | None = None,
                products: str | None = None) -> pathlib.Path:
    """``parent / name``: the tiny network's legs with two light products (or the given tables)."""
    return write_tiny(parent / name, legs, products or LIGHT_PRODUCTS_CSV)


def tiny_instance() -> Instance:
    """The tiny network's two legs with three products, as an Instance."""
    return Instance.from_lists([("L1", "KA1", "HU2", 100.0), ("L2", "HU2", "BO3", 80.0)],
                               [("P1", ["L1"], 100.0, 10.0, 3.0), ("P2", ["L1", "L2"], 150.0, 30.0, 2.0),
                                ("P3", ["L2"], 90.0, 8.0, 2.5)])
