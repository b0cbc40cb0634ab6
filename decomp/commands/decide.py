"""``decomp decide``: accept or reject one request under a result's bid prices.

The bid-price rule: accept when the fare is at least the sum of the bid prices
of the itinerary's legs (its displacement cost). Prints the verdict with each
leg's bid price, the sum and the margin (fare - sum); ``--json`` prints the
same as JSON for scripts. RESULT is anything decomp writes bid prices to: a
``decomp solve`` result JSON, a ``decomp run`` task (folder or result.json), a
baseline case, or a leg,bid_price table (.csv / .parquet).
Exit 0 whether the verdict is accept or reject; 2 on bad input (a missing
file, an unknown leg, a fare that is not a number).
"""

from __future__ import annotations

import argparse


def register(sub):
    p = sub.add_parser("decide", help="accept or reject an itinerary at a fare under a result's bid prices",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("result", metavar="RESULT", help="result JSON, run task folder, baseline case, or bid-price table")
    p.add_argument("--legs", required=True, metavar='"L1 L2"',
                   help="the itinerary's leg ids in travel order, separated by spaces")
    p.add_argument("--fare", required=True, type=float, metavar="FARE", help="the request's fare")
    p.add_argument("--json", action="store_true", help="print the decision as JSON (default: text)")
    p.set_defaults(func=run)


def run(args) -> int:
    import json

    import numpy as np

    from ..decision import decide
    from ..result import read_bid_prices

    prices = read_bid_prices(args.result)
    d = decide(np.array(list(prices), dtype=object), np.array(list(prices.values()), dtype=np.float64),
               args.legs, args.fare)
    print(json.dumps(d.to_dict(), indent=2) if args.json else d.text())
    return 0
