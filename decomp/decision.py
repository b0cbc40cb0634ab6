"""The bid-price rule: accept a request when its fare is at least the sum of its legs' bid prices.

The sum of an itinerary's bid prices is its displacement cost: the expected
revenue the seats it takes would earn elsewhere in the network (the first-order
value of one seat less on each leg; the bid-price control of network revenue
management, a common-practice rule). A request whose fare equals the sum is
accepted, as in :class:`decomp.result.SolveResult`'s sign convention.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .errors import InstanceError


@dataclasses.dataclass(frozen=True)
class Decision:
    """Accept or reject one request for ``legs`` at ``fare``.

    ``bid_prices``: each leg's bid price in travel order; ``displacement``:
    their sum; ``margin``: fare minus displacement; ``accept``: margin >= 0.
    """

    legs: tuple
    fare: float
    bid_prices: tuple
    displacement: float
    margin: float
    accept: bool

    @property
    def verdict(self) -> str:
        return "accept" if self.accept else "reject"

    def to_dict(self) -> dict:
        return {"verdict": self.verdict, "accept": self.accept, "fare": self.fare,
                "displacement": self.displacement, "margin": self.margin,
                "legs": [{"leg": leg, "bid_price": bp} for leg, bp in zip(self.legs, self.bid_prices)]}

    def __str__(self) -> str:
        return self.text()

    def text(self) -> str:
        width = max(3, *(len(str(leg)) for leg in self.legs))
        lines = [f"{self.verdict.upper()}: fare {self.fare:,.2f} "
                 f"{'>=' if self.accept else '<'} displacement {self.displacement:,.2f} "
                 f"(margin {self.margin:+,.2f})"]
        lines += [f"  {str(leg):<{width}}  bid price {bp:12,.4f}" for leg, bp in zip(self.legs, self.bid_prices)]
        lines.append(f"  {'sum':<{width}}  {'':>9} {self.displacement:12,.4f}")
        return "\n".join(lines)


def itinerary_legs(legs) -> tuple:
    """Leg ids from a text of ids separated by spaces, or from a sequence of ids."""
    if isinstance(legs, str):
        out = tuple(legs.split())
    else:
        out = tuple(str(leg) for leg in legs)
    if not out:
        raise InstanceError("an itinerary needs at least one leg", column="legs", value=legs)
    return out


def leg_bid_prices(leg_ids, bid_price_array, legs) -> tuple:
    """(leg ids, their bid prices) for an itinerary; an unknown leg is an InstanceError."""
    legs = itinerary_legs(legs)
    if bid_price_array is None:
        raise InstanceError("the result has no bid prices (the solve returned none)", column="bid_prices")
    pos = {str(leg): i for i, leg in enumerate(np.asarray(leg_ids).tolist())}
    unknown = [leg for leg in legs if leg not in pos]
    if unknown:
        raise InstanceError(f"unknown leg id '{unknown[0]}' (the result has {len(pos)} legs, e.g. "
                            f"{', '.join(list(pos)[:3])})", column="legs", value=" ".join(legs))
    return legs, tuple(float(bid_price_array[pos[leg]]) for leg in legs)


def decide(leg_ids, bid_price_array, legs, fare) -> Decision:
    """The bid-price rule for one itinerary (leg ids) and fare."""
    try:
        fare = float(fare)
    except (TypeError, ValueError) as exc:
        raise InstanceError("fare is not a number", column="fare", value=fare) from exc
    if not (np.isfinite(fare) and fare >= 0):
        raise InstanceError("fare must be a finite number >= 0", column="fare", value=fare)
    legs, bps = leg_bid_prices(leg_ids, bid_price_array, legs)
    displacement = float(sum(bps))
    margin = fare - displacement
    return Decision(legs=legs, fare=fare, bid_prices=bps, displacement=displacement, margin=margin,
                    accept=bool(margin >= 0))
