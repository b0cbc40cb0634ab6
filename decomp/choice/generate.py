"""Networks with markets: the generator's hub-and-spoke network, customers choosing by logit.

:func:`generate_choice` takes the network of :func:`decomp.generator.generate`
(same size, seed and shape options) and groups its products into markets: a
market is an origin-destination pair and the departure bank of its first leg
(customers who want to travel between two stations in one part of the day), and
holds every itinerary and fare class sold there. Then, with its own random stream
(so the network itself is the generator's):

* preference weights fall with the fare: ``w_j = (top fare of the market / f_j)^slope``
  times a jitter in [0.9, 1.1];
* each market is a *strong* buy-down market with probability ``strong_share``, else a
  *weak* one: its no-purchase weight is ``ratio * sum of its weights``, the ratio drawn
  from ``strong_no_purchase`` or ``weak_no_purchase``. A small ratio means almost
  every customer buys something, and the cheapest open fare takes most of them
  (strong buy-down); a large one means a customer whose product is closed mostly
  leaves, which is close to independent demand (weak buy-down). The markets table
  says which (column ``buy_down``);
* arrivals are set so that the expected sales with everything open add up to the
  generator's demand of the market;
* each product's ``mean`` is its expected sales with everything open and its ``std``
  their Poisson spread (sqrt(mean)): what an independent-demand forecast estimated
  from such sales says;
* leg capacities are set again from those means and a demand factor drawn per leg.

Deterministic in (size, seed, options); written files are byte-identical.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from ..errors import ConfigError
from .data import Markets

GENERATOR_NAME = "decomp.choice.generate/1"
#: spawn_key of the choice draws (apart from the network generator's stream).
CHOICE_STREAM = 27


@dataclasses.dataclass(frozen=True)
class ChoiceParams:
    """Options of :func:`generate_choice` (see the module docstring)."""

    weight_slope: float = 2.0
    strong_share: float = 0.5
    strong_no_purchase: tuple = (0.1, 0.3)
    weak_no_purchase: tuple = (2.0, 6.0)

    def validated(self) -> "ChoiceParams":
        if not (math.isfinite(self.weight_slope) and self.weight_slope >= 0):
            raise ConfigError(f"choice generator: weight_slope must be >= 0, got {self.weight_slope!r}")
        if not 0 <= self.strong_share <= 1:
            raise ConfigError(f"choice generator: strong_share must be in [0, 1], got {self.strong_share!r}")
        out = {}
        for name in ("strong_no_purchase", "weak_no_purchase"):
            lo, hi = (float(v) for v in getattr(self, name))
            if not (0 < lo <= hi and math.isfinite(hi)):
                raise ConfigError(f"choice generator: {name} must be a range (low, high) with 0 < low <= high, "
                                  f"got {(lo, hi)}")
            out[name] = (lo, hi)
        return dataclasses.replace(self, **out)

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["strong_no_purchase"] = list(self.strong_no_purchase)
        d["weak_no_purchase"] = list(self.weak_no_purchase)
        return d


def market_keys(instance) -> tuple[np.ndarray, np.ndarray]:
    """(market index per product, market ids): origin, destination and the first leg's bank."""
    origin = pa.array(instance.product_extra["origin"].tolist(), pa.string())
    destination = pa.array(instance.product_extra["destination"].tolist(), pa.string())
    bank = np.asarray(instance.leg_extra["bank"])[instance.leg_index[instance.leg_ptr[:-1]]]
    key = pc.binary_join_element_wise(origin, destination, pc.cast(pa.array(bank), pa.string()), "-")
    enc = pc.dictionary_encode(key)
    ids = np.asarray(enc.dictionary.to_numpy(zero_copy_only=False), dtype=object)
    index = enc.indices.to_numpy(zero_copy_only=False).astype(np.int64)
    order = np.argsort(ids.astype(str), kind="stable")          # markets in id order
    rank = np.empty_like(order)
    rank[order] = np.arange(len(order))
    return rank[index], ids[order]


def generate_choice(n_products: int, seed: int = 0, params=None, choice: ChoiceParams | None = None,
                    **overrides):
    """A hub-and-spoke network whose products are sold in markets (see the module docstring).

    ``params`` and ``overrides``: the network generator's (:func:`decomp.generator.generate`);
    ``choice``: a :class:`ChoiceParams`.
    """
    from ..generator import round_sig, generate

    c = (choice or ChoiceParams()).validated()
    if overrides.get("demand") is not None:
        raise ConfigError("a network with markets takes its products' demand from the logit (a Poisson spread); "
                          "it has no demand model (demand=)")
    base = generate(n_products, seed=seed, params=params, **overrides)
    rng = np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(CHOICE_STREAM,)))
    market, ids = market_keys(base)
    M = len(ids)
    fare = base.fare
    top = np.zeros(M)
    np.maximum.at(top, market, fare)
    weight = round_sig((top[market] / fare) ** c.weight_slope * rng.uniform(0.9, 1.1, len(fare)), 4)
    total = np.bincount(market, weights=weight, minlength=M)
    strong = rng.random(M) < c.strong_share
    ratio = np.where(strong, rng.uniform(*c.strong_no_purchase, M), rng.uniform(*c.weak_no_purchase, M))
    w0 = round_sig(ratio * total, 4)
    base_demand = np.bincount(market, weights=base.mean, minlength=M)
    arrivals = round_sig(np.maximum(base_demand * (w0 + total) / total, 1e-3), 4)
    mean = round_sig(np.maximum(arrivals[market] * weight / (w0 + total)[market], 1e-6), 4)
    std = round_sig(np.sqrt(mean), 4)
    load = np.bincount(base.leg_index, weights=np.repeat(mean, base.legs_per_product), minlength=base.n_legs)
    lo, hi = base.meta["params"]["demand_factor"]
    capacity = np.maximum(1.0, np.round(load / rng.uniform(lo, hi, base.n_legs)))

    markets = Markets(market_ids=ids, arrivals=arrivals, no_purchase_weight=w0, product_market=market,
                      weight=weight, extra={"buy_down": np.where(strong, "strong", "weak").astype(object)})
    meta = dict(base.meta)
    meta.update(name=f"{base.meta['name']}-mnl", choice_generator=GENERATOR_NAME, choice=c.to_dict(),
                n_markets=M)
    extra = dict(base.product_extra)
    extra["market"] = ids[market]
    extra["preference_weight"] = weight
    return dataclasses.replace(base, capacity=capacity, mean=mean, std=std, product_extra=extra, meta=meta,
                               markets=markets)
