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
    ``source_status``: the status of the solve the bid prices came from
    (``termination/solution_status``, or ``unknown`` for a bid-price table that
    carries none); ``source_ok``: whether it was certified optimal (None:
    unknown). A decision from a source that is not certified optimal carries a
    ``warning``, in its text and its dict alike.
    """

    legs: tuple
    fare: float
    bid_prices: tuple
    displacement: float
    margin: float
    accept: bool
    source_status: str = "unknown"
    source_ok: bool | None = None

    @property
    def verdict(self) -> str:
        return "accept" if self.accept else "reject"

    @property
    def warning(self) -> str | None:
        if self.source_ok is False:
            return (f"the bid prices come from a solve that is not certified optimal ({self.source_status}); "
                    f"this decision may be wrong")
        if self.source_ok is None:
            return "the bid prices carry no solve status (a bid-price table): their optimality is unknown"
        return None

    def to_dict(self) -> dict:
        return {"verdict": self.verdict, "accept": self.accept, "fare": self.fare,
                "displacement": self.displacement, "margin": self.margin,
                "source_status": self.source_status, "source_optimal": self.source_ok, "warning": self.warning,
                "legs": [{"leg": leg, "bid_price": bp} for leg, bp in zip(self.legs, self.bid_prices)]}

    def __str__(self) -> str:
        return self.text()

    def text(self) -> str:
        width = max(3, *(len(str(leg)) for leg in self.legs))
        lines = [f"{self.verdict.upper()}: fare {self.fare:,.2f} "
                 f"{'>=' if self.accept else '<'} displacement {self.displacement:,.2f} "
                 f"(margin {self.margin:+,.2f})"]
        if self.warning:
            lines.append(f"  {'WARNING' if self.source_ok is False else 'note'}: {self.warning}")
        lines += [f"  {str(leg):<{width}}  bid price {bp:12,.4f}" for leg, bp in zip(self.legs, self.bid_prices)]
        lines.append(f"  {'sum':<{width}}  {'':>9} {self.displacement:12,.4f}")
        return "\n".join(lines)


def itinerary_legs(legs) -> tuple:
    """Leg ids from a text of ids separated by spaces, or from a sequence of ids; each leg once."""
    if isinstance(legs, str):
        out = tuple(legs.split())
    else:
        out = tuple(str(leg) for leg in legs)
    if not out:
        raise InstanceError("an itinerary needs at least one leg", column="legs", value=legs)
    seen = set()
    for leg in out:
        if leg in seen:
            raise InstanceError(f"leg '{leg}' appears twice in the itinerary (a request takes one seat per leg)",
                                column="legs", value=" ".join(out))
        seen.add(leg)
    return out


def leg_bid_prices(leg_ids, bid_price_array, legs) -> tuple:
    """(leg ids, their bid prices) for an itinerary; an unknown leg, or a bid price that is NaN,
    infinite or negative (no bid price is below 0), is an InstanceError."""
    legs = itinerary_legs(legs)
    if bid_price_array is None:
        raise InstanceError("the result has no bid prices (the solve returned none)", column="bid_prices")
    ids = [str(x) for x in np.asarray(leg_ids).tolist()]
    pos = {leg: i for i, leg in enumerate(ids)}
    if len(pos) < len(ids):
        dup = next(leg for i, leg in enumerate(ids) if pos[leg] != i)
        raise InstanceError(f"leg '{dup}' has two bid prices: which one is meant is ambiguous",
                            column="bid_prices", value=dup)
    unknown = [leg for leg in legs if leg not in pos]
    if unknown:
        raise InstanceError(f"unknown leg id '{unknown[0]}' (the result has {len(pos)} legs, e.g. "
                            f"{', '.join(list(pos)[:3])})", column="legs", value=" ".join(legs))
    bps = tuple(float(bid_price_array[pos[leg]]) for leg in legs)
    for leg, bp in zip(legs, bps):
        if not np.isfinite(bp) or bp < 0:
            raise InstanceError(f"the bid price of leg '{leg}' is {bp!r}: a bid price is a finite number >= 0, "
                                f"so this source cannot price a request", column="bid_prices", value=bp)
    return legs, bps


def decide(leg_ids, bid_price_array, legs, fare, *, source_status: str = "unknown",
           source_ok: bool | None = None) -> Decision:
    """The bid-price rule for one itinerary (leg ids) and fare. ``source_status`` / ``source_ok``:
    the status of the solve the bid prices came from (see :class:`Decision`)."""
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
                    accept=bool(margin >= 0), source_status=source_status, source_ok=source_ok)
