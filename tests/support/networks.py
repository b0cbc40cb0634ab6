"""Small networks with known answers (invented stations of a fictional carrier).

- ``LEGS``, ``PRODUCTS``: the worked example, four legs and five products as DataFrames, whose DLP
  is solved by hand below (``HAND_REVENUE``, ``HAND_ALLOCATION``);
- :func:`series`: two legs in series and one product, whose DLP duals are worked out by hand;
- ``CANNED``: networks (one with markets: customer choice) with their optimum worked out by hand (objective, allocation, the bid prices
  where the optimum fixes them), each for the models it answers; tests/methods/test_canned_networks.py
  checks every method on every one of its models.
"""

from __future__ import annotations

import dataclasses
from typing import Callable

import pandas as pd
from scipy import integrate, stats

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


@dataclasses.dataclass(frozen=True)
class Canned:
    """A network whose optimum is known, and what is known of it.

    ``bid_prices``: the legs whose optimal bid price is unique, with it; ``price_sums``: sums of bid
    prices the optimum fixes where the single ones are not (an itinerary sold strictly between 0
    and its demand prices its legs at exactly its fare: its reduced cost is zero, LP duality)."""

    name: str
    models: tuple
    build: Callable[[], Instance]
    objective: float
    allocation: dict
    bid_prices: dict
    price_sums: dict = dataclasses.field(default_factory=dict)


def _two_legs_known_demand() -> Instance:
    return Instance.from_lists([("A", "AAA", "HUB", 10.0), ("B", "HUB", "BBB", 5.0)],
                               [("p1", ["A"], 100.0, 8.0, 0.0), ("p2", ["A", "B"], 150.0, 6.0, 0.0),
                                ("p3", ["B"], 120.0, 4.0, 0.0)])


def _two_newsvendors() -> Instance:
    return Instance.from_lists([("A", "AAA", "HUB", 10.0), ("B", "HUB", "BBB", 20.0)],
                               [("pa", ["A"], 100.0, 15.0, 5.0), ("pb", ["B"], 80.0, 10.0, 4.0)])


def _two_markets() -> Instance:
    from decomp.choice import with_markets

    legs = pd.DataFrame({"leg": ["A", "B"], "origin": ["AAA", "HUB"], "destination": ["HUB", "BBB"],
                         "capacity": [30.0, 100.0]})
    products = pd.DataFrame({"product": ["H", "L", "C"], "legs": ["A", "A", "B"], "fare": [200.0, 100.0, 80.0],
                             "mean": [100 * 0.5 / 3, 100 * 1.5 / 3, 20.0], "std": [4.0, 7.0, 4.0],
                             "market": ["M1", "M1", "M2"], "preference_weight": [0.5, 1.5, 1.0]})
    markets = pd.DataFrame({"market": ["M1", "M2"], "arrivals": [100.0, 40.0], "no_purchase_weight": [1.0, 1.0]})
    return with_markets(Instance.from_frames(legs, products), markets)


def _expected_sales(x: float, mean: float, std: float) -> float:
    """E[min(max(D, 0), x)] for D ~ N(mean, std) as the integral of P(D > t) over [0, x] (a fact of
    nonnegative random variables), by scipy.integrate.quad on scipy.stats.norm.sf."""
    return integrate.quad(lambda t: stats.norm.sf(t, mean, std), 0.0, x, epsabs=1e-13, epsrel=1e-13)[0]


CANNED = (
    # By hand: legs A (10 seats), B (5); p1 on A, fare 100, mean 8; p2 on A+B, fare 150, mean 6;
    # p3 on B, fare 120, mean 4; every demand known (std 0). With t = x2: x1 = min(8, 10 - t),
    # x3 = min(4, 5 - t); revenue 1280 + 150t on [0, 1], 1400 + 30t on [1, 2], 1600 - 70t on
    # [2, 5]: optimum t = 2, x = (8, 2, 3), revenue 1460. x2 and x3 strictly between their bounds
    # give pi_A + pi_B = 150 and pi_B = 120, so pi = (30, 120) (LP duality). Known demand makes
    # the PNLP this LP (E[min(D, x)] = min(mean, x)) and the PWL model too (one segment of slope 1).
    Canned("two legs, known demand", ("dlp", "pnlp", "pwl"), _two_legs_known_demand, 1460.0,
           {"p1": 8.0, "p2": 2.0, "p3": 3.0}, {"A": 30.0, "B": 120.0}),
    # By hand: two separate legs, one product each, so each leg is a newsvendor with x = capacity
    # (expected sales increase in x) and bid price f P(D > c): leg A: c = 10, D ~ N(15, 5), f = 100
    # -> 100 Phi(1) = 84.13; leg B: c = 20, D ~ N(10, 4), f = 80 -> 80 P(Z > 2.5) = 0.497 (printed
    # normal tables: Phi(1) = 0.8413, P(Z > 2.5) = 0.0062; exact values from scipy.stats.norm).
    Canned("two newsvendors", ("pnlp",), _two_newsvendors,
           100.0 * _expected_sales(10.0, 15.0, 5.0) + 80.0 * _expected_sales(20.0, 10.0, 4.0),
           {"pa": 10.0, "pb": 20.0}, {"A": 100.0 * stats.norm.cdf(1.0), "B": 80.0 * stats.norm.sf(2.5)}),
    # The worked example above: the DLP optimum 30,300 by hand; p1 sold strictly between its bounds
    # fixes pi_A1 + pi_A2 = 300, A4 has room to spare (pi_A4 = 0, complementary slackness); A3 has
    # no seat, so its bid price is not unique (README, "Closed legs").
    Canned("worked example", ("dlp",), lambda: Instance.from_frames(LEGS, PRODUCTS, meta={"name": "hand"}),
           HAND_REVENUE, HAND_ALLOCATION, {"A4": 0.0}, {("A1", "A2"): 300.0}),
    # series(): one product over both legs, 10 seats each: revenue 100 * 10, pi1 + pi2 = 100.
    Canned("series", ("dlp",), series, 1000.0, {"QAAQHXQAB-Y": 10.0}, {}, {("QAAQHX", "QHXQAB"): 100.0}),
    # By hand, the sales LP under the multinomial logit (decomp.choice.lp): market M1 (100 arrivals,
    # no-purchase weight 1) buys H (fare 200, weight 0.5) or L (fare 100, weight 1.5) on leg A (30
    # seats); market M2 (40 arrivals, weight 1) buys C (fare 80, weight 1) on leg B (100 seats). M2:
    # x_C <= y_2 and x_C + y_2 = 40 give x_C = 20 < 100 seats, so pi_B = 0 (complementary slackness).
    # M1: leg A is worth 200 a seat for H against 100 for L; x_H <= 0.5 y_1 = 0.5 (100 - x_H) allows
    # 33.3 > 30, so x_H = 30, x_L = 0, y_1 = 70. With H's ratio row slack, its balance row's dual is
    # 0 (y_1 is basic at cost 0), so pi_A = 200 (x_H basic: LP duality); revenue 6000 + 1600 = 7600.
    Canned("two markets", ("sblp",), _two_markets, 7600.0, {"H": 30.0, "L": 0.0, "C": 20.0},
           {"A": 200.0, "B": 0.0}),
)
