"""``decomp validate``: check an instance folder.

Exit 0 when the instance is valid (warnings, such as legs no product uses, are
printed), 2 with the first problem (file, row, column, value) when it is not.
``--json`` prints the same as one JSON object (``valid``, counts, ``warnings``,
or ``error`` with file, row, column, value and reason).
"""

from __future__ import annotations

import time
import warnings


def register(sub):
    p = sub.add_parser("validate", help="check an instance folder (exit 0 valid, 2 invalid)",
                       description=__doc__)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder (legs/products as CSV or Parquet)")
    p.add_argument("--json", action="store_true", help="print the outcome as JSON (default: text)")
    p.set_defaults(func=run)


def run(args) -> int:
    import json

    from ..errors import InstanceError
    from ..io import read_instance

    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        try:
            inst = read_instance(args.instance)      # InstanceError -> exit 2 (decomp.cli)
        except InstanceError as exc:
            if not args.json:
                raise
            print(json.dumps({"valid": False, "path": str(args.instance), "error": {
                "file": exc.file, "row": exc.row, "column": exc.column,
                "value": None if exc.value is None else str(exc.value), "reason": exc.reason,
                "message": str(exc)}}, indent=2))
            return 2
    seconds = time.perf_counter() - t0
    if args.json:
        print(json.dumps({"valid": True, "path": str(args.instance), "n_legs": inst.n_legs,
                          "n_products": inst.n_products, "n_product_legs": int(len(inst.leg_index)),
                          "n_markets": None if inst.markets is None else inst.markets.n_markets,
                          "seconds": seconds, "warnings": [str(w.message) for w in caught]}, indent=2))
        return 0
    for w in caught:
        print(f"warning: {w.message}")
    markets = "" if inst.markets is None else f", {inst.markets.n_markets} markets"
    print(f"valid: {args.instance}: {inst.n_legs} legs, {inst.n_products} products{markets}, "
          f"{len(inst.leg_index)} product-leg pairs (read and checked in {seconds:.2f} s)")
    return 0
