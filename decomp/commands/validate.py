"""``decomp validate``: check an instance folder.

Exit 0 when the instance is valid (warnings, such as legs no product uses, are
printed), 2 with the first problem (file, row, column, value) when it is not.
"""

from __future__ import annotations

import time
import warnings


def register(sub):
    p = sub.add_parser("validate", help="check an instance folder (exit 0 valid, 2 invalid)",
                       description=__doc__)
    p.add_argument("instance", metavar="INSTANCE", help="instance folder (legs/products as CSV or Parquet)")
    p.set_defaults(func=run)


def run(args) -> int:
    from ..io import read_instance

    t0 = time.perf_counter()
    with warnings.catch_warnings(record=True) as caught:
        warnings.simplefilter("always")
        inst = read_instance(args.instance)      # InstanceError -> exit 2 (decomp.cli)
    seconds = time.perf_counter() - t0
    for w in caught:
        print(f"warning: {w.message}")
    print(f"valid: {args.instance}: {inst.n_legs} legs, {inst.n_products} products, "
          f"{len(inst.leg_index)} product-leg pairs (read and checked in {seconds:.2f} s)")
    return 0
