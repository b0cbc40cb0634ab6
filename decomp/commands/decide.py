"""``decomp decide``: accept or reject one request under a result's bid prices.

The bid-price rule: accept when the fare is at least the sum of the bid prices
of the itinerary's legs (its displacement cost). Prints the verdict with each
leg's bid price, the sum and the margin (fare - sum); ``--json`` prints the
same as JSON for scripts. RESULT is anything decomp writes bid prices to: a
``decomp solve`` result JSON, a ``decomp run`` task (folder or result.json), a
baseline case, or a leg,bid_price table (.csv / .parquet).
The verdict carries the status of the solve the bid prices came from: from a
result that is not certified optimal (an iteration or time limit, numerical
trouble) it is marked WARNING in the text, ``warning`` in the JSON and on
stderr; a bid-price table carries no status (noted as unknown). An ambiguous
source is refused: a leg listed twice (a table of ``decomp tables``, by period
and seats left, is not a bid-price vector), a leg repeated in --legs, a
negative, NaN or infinite bid price.
Exit 0 whether the verdict is accept or reject; 1 when the bid prices come from
a solve that is not certified optimal (the verdict is still printed, marked); 2
on bad input (a missing file, an unknown or repeated leg, an ambiguous table, a
fare that is not a number).
"""

from __future__ import annotations

import argparse
import sys

from ._options import number


def register(sub):
    p = sub.add_parser("decide", help="accept or reject an itinerary at a fare under a result's bid prices",
                       description=__doc__, formatter_class=argparse.RawDescriptionHelpFormatter)
    p.add_argument("result", metavar="RESULT", help="result JSON, run task folder, baseline case, or bid-price table")
    p.add_argument("--legs", required=True, metavar='"L1 L2"',
                   help="the itinerary's leg ids in travel order, separated by spaces (required)")
    p.add_argument("--fare", required=True, type=number(0.0), metavar="FARE", help="the request's fare (required)")
    p.add_argument("--json", action="store_true", help="print the decision as JSON (default: text)")
    p.set_defaults(func=run)


def run(args) -> int:
    import json

    import numpy as np

    from ..decision import decide
    from ..result import read_bid_price_source

    source = read_bid_price_source(args.result)
    prices = source.prices
    d = decide(np.array(list(prices), dtype=object), np.array(list(prices.values()), dtype=np.float64),
               args.legs, args.fare, source_status=source.status, source_ok=source.ok)
    print(json.dumps(d.to_dict(), indent=2) if args.json else d.text())
    if d.source_ok is False:
        print(f"decomp decide: warning: {d.warning}", file=sys.stderr)
        return 1
    return 0
