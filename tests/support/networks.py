"""Small networks with known answers (invented stations of a fictional carrier).

- ``LEGS``, ``PRODUCTS``: the worked example, four legs and five products as DataFrames, whose DLP
  is solved by hand below (``HAND_REVENUE``, ``HAND_ALLOCATION``);
- :func:`series`: two legs in series and one product, whose DLP duals are worked out by hand.
"""

from __future__ import annotations

import pandas as pd

from decomp.instance import Instance

# Two legs through a hub, a zero-capacity leg and a leg with room to spare.
LEGS = pd.DataFrame({"leg": ["A1", "A2", "A3", "A4"], "origin": ["AAA", "HUB", "HUB", "HUB"],
                     "destination": ["HUB", "BBB", "CCC", "DDD"], "capacity": [100.0, 80.0, 0.0, 1000.0]})
PRODUCTS = pd.DataFrame({"product": ["p1", "p2", "p3", "p4", "p5"],
                         "legs": ["A1 A2", "A1", "A2", "A3", "A4"],
                         "fare": [300.0, 150.0, 180.0, 100.0, 90.0], "mean": [60.0, 70.0, 50.0, 10.0, 20.0],
                         "std": [20.0, 25.0, 15.0, 3.0, 5.0]})
# Hand solution of the DLP (max f x, A x <= c, 0 <= x <= mean): p2 and p3 (330 for a seat on each
# leg) beat p1 (300 for the same two seats), so x2 = 70, x3 = 50 at their demand and p1 takes the
# 30 seats left on both legs: A1 100 of 100, A2 80 of 80; p4 gets no seat (A3 has none) and p5
# its demand of 20 on A4: revenue 300*30 + 150*70 + 180*50 + 90*20 = 30,300.
# x1 strictly between its bounds makes its reduced cost zero: pi_A1 + pi_A2 = 300 (LP duality);
# A4 carries 20 of 1000 seats, so pi_A4 = 0 (complementary slackness).
HAND_REVENUE = 30_300.0
HAND_ALLOCATION = {"p1": 30.0, "p2": 70.0, "p3": 50.0, "p4": 0.0, "p5": 20.0}


def series() -> Instance:
    """Two legs in series (capacities 10), one product over both (fare 100, mean 20, std 5): the DLP
    optimum is 100 * 10 = 1000 and its optimal duals are exactly pi1 + pi2 = 100, pi >= 0 (LP
    duality; dual objective 10 pi1 + 10 pi2 + 20 (100 - pi1 - pi2)^+, worked out by hand)."""
    return Instance.from_lists(
        [("QAAQHX", "QAA", "QHX", 10.0), ("QHXQAB", "QHX", "QAB", 10.0)],
        [("QAAQHXQAB-Y", ["QAAQHX", "QHXQAB"], 100.0, 20.0, 5.0)],
        meta={"name": "series"})
