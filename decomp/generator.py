"""Synthetic hub-and-spoke networks of a fictional carrier.

The network: ``hubs`` hub stations, ``spokes`` spoke stations (each attached
to one home hub, round robin), and ``banks`` departure banks a day. Every bank
has a leg from each spoke to its hub and back, and a leg between every ordered
pair of hubs, so there are ``banks * (2 * spokes + hubs * (hubs - 1))`` legs.

Itineraries (paths of legs, each leg departing in the same bank as the one
before it or the next bank):

* local: one leg (spoke-hub, hub-spoke, hub-hub);
* one-stop: spoke-hub-spoke through the common home hub, spoke-hub-hub and
  hub-hub-spoke;
* two-stop (``two_stop``): spoke-hub-hub-spoke over two hubs.

Each itinerary is sold in ``fare_classes`` fare classes with a fare ladder:
class ``k`` (``k = 0`` the highest) costs ``top * fare_ratio**k``, where the top
fare grows with the straight-line distance of the market. Lower classes get
more demand (``class_growth``). Demand means come from invented station sizes,
standard deviations from a coefficient of variation drawn in ``cv``, and each
leg's capacity is set so that mean demand over capacity (the demand factor)
is a draw in ``demand_factor``.

Every local itinerary is sold, so every leg is used whenever there are at
least as many itineraries as legs; connections are then picked at random
(two-stops less often) until there are exactly ``n_products`` products.

Station codes are invented: a consonant, a vowel and a digit ("KA3", "BO7"),
or two letters and a digit for very large networks. They are not checked
against any list; they cannot be IATA airport codes, which (as common
practice has it, quoted from memory) use letters only. Leg ids are
``<flight>-<origin>-<destination>`` ("K0101-KA3-BO7") and product ids
``<flights joined by '.'>-<fare class letter>`` ("K0101.K0245-B").

Everything is numpy over arrays: the cost is a few passes over the products.
Same parameters and seed give the same instance, and so byte-identical files.
"""

from __future__ import annotations

import dataclasses
import logging
import math

import numpy as np
import pyarrow as pa
import pyarrow.compute as pc

from .errors import ConfigError
from .instance import Instance

log = logging.getLogger(__name__)

GENERATOR_NAME = "decomp.generator/2"

_CONSONANTS = "BDFGHJKLMNPRSTVWZ"
_VOWELS = "AEIOU"
_CLASS_LETTERS = "ABCDEFGHJKLMNPQRSTUVWXYZ"


@dataclasses.dataclass(frozen=True)
class GeneratorParams:
    """Parameters of :func:`generate`. ``None`` means: chosen from the size.

    hubs, spokes, banks, fare_classes: network shape (see the module docstring).
    two_stop: sell spoke-hub-hub-spoke itineraries (default: when hubs >= 2).
    demand_factor: (low, high) range of the per-leg target mean demand over capacity.
    cv: (low, high) range of the per-product coefficient of variation std/mean.
    fare_ratio: fare of class k+1 over fare of class k (the ladder step), in (0, 1).
    class_growth: demand of class k+1 over demand of class k (> 0).
    seats: median mean demand per leg, in seats, before the demand factor.
    two_stop_weight, one_stop_weight: relative chance that a connection of
        that kind is picked, against each other.
    carrier: the flight number prefix (one or two letters).
    demand: the demand model, as the text of a :class:`decomp.demand_mix.DemandMix`
        (the families' shares and spreads) or one of its named mixes; None is normal
        demand with the CV drawn in ``cv``. Drawn from a random stream of its own, so the
        network, fares and means are the same with or without it.
    """

    hubs: int | None = None
    spokes: int | None = None
    banks: int | None = None
    fare_classes: int | None = None
    two_stop: bool | None = None
    demand_factor: tuple[float, float] = (0.8, 1.4)
    cv: tuple[float, float] = (0.25, 0.6)
    fare_ratio: float = 0.72
    class_growth: float = 1.35
    seats: float = 150.0
    one_stop_weight: float = 1.0
    two_stop_weight: float = 0.3
    carrier: str = "K"
    demand: str | None = None

    def validated(self) -> "GeneratorParams":
        def rng_pair(name, lo_min, strict_lo=False):
            lo, hi = (float(v) for v in getattr(self, name))
            bad = lo < lo_min or (strict_lo and lo <= lo_min) or hi < lo or not math.isfinite(hi)
            if bad:
                raise ConfigError(f"generator: {name} must be a range (low, high) with "
                                  f"{'>' if strict_lo else '>='} {lo_min} <= low <= high, got {(lo, hi)}")
            return (lo, hi)

        for name, lo in (("hubs", 1), ("spokes", 2), ("banks", 1), ("fare_classes", 1)):
            v = getattr(self, name)
            if v is not None and (int(v) != v or v < lo):
                raise ConfigError(f"generator: {name} must be an integer >= {lo}, got {v!r}")
        if self.fare_classes is not None and self.fare_classes > len(_CLASS_LETTERS):
            raise ConfigError(f"generator: at most {len(_CLASS_LETTERS)} fare classes, got {self.fare_classes}")
        if not 0 < self.fare_ratio < 1:
            raise ConfigError(f"generator: fare_ratio must be in (0, 1), got {self.fare_ratio}")
        for name in ("class_growth", "seats", "one_stop_weight", "two_stop_weight"):
            v = getattr(self, name)
            if not (math.isfinite(v) and v > 0):
                raise ConfigError(f"generator: {name} must be > 0, got {v!r}")
        if not (isinstance(self.carrier, str) and 1 <= len(self.carrier) <= 2 and self.carrier.isalpha()):
            raise ConfigError(f"generator: carrier must be one or two letters, got {self.carrier!r}")
        demand = self.demand
        if demand is not None:
            from .demand_mix import DemandMix

            mix = DemandMix.parse(demand)
            demand = None if mix.is_plain_normal else mix.text()
        return dataclasses.replace(
            self, demand_factor=rng_pair("demand_factor", 0.0, strict_lo=True),
            cv=rng_pair("cv", 0.0), demand=demand)

    def to_dict(self) -> dict:
        d = dataclasses.asdict(self)
        d["demand_factor"] = list(self.demand_factor)
        d["cv"] = list(self.cv)
        if self.demand is None:
            del d["demand"]                     # files of normal demand stay as they were
        return d


def _auto_shape(n: int, p: GeneratorParams):
    """Hubs, banks, fare classes, two-stop flag and a target leg count for ``n`` products.

    The leg target grows like n**0.56: about 150 legs at 10,000 products and
    about 2,000 at 1,000,000.
    """
    hubs = p.hubs if p.hubs is not None else (1 if n < 200 else 2 if n < 2000 else 3 if n < 50_000 else 4)
    banks = p.banks if p.banks is not None else (1 if n < 1000 else 2 if n < 20_000 else 3 if n < 200_000 else 4)
    classes = p.fare_classes if p.fare_classes is not None else (
        2 if n < 50 else 3 if n < 500 else 4 if n < 20_000 else 5)
    two_stop = p.two_stop if p.two_stop is not None else hubs >= 2
    leg_target = 150.0 * (n / 1e4) ** 0.56
    return int(hubs), int(banks), int(classes), bool(two_stop), leg_target


def round_sig(x: np.ndarray, digits: int) -> np.ndarray:
    """Round to ``digits`` significant digits, as the nearest float to a short decimal."""
    x = np.asarray(x, dtype=np.float64)
    out = np.zeros_like(x)
    nz = x != 0
    m = digits - 1 - np.floor(np.log10(np.abs(x[nz]))).astype(np.int64)
    scaled = np.round(x[nz] * 10.0 ** m)
    # k / 10**m is the float nearest the decimal k * 10**-m when 10**m is exact (m <= 22)
    out[nz] = np.where(m >= 0, scaled / 10.0 ** np.maximum(m, 0), scaled * 10.0 ** np.maximum(-m, 0))
    return out


def _station_codes(n: int, rng) -> np.ndarray:
    if n <= len(_CONSONANTS) * len(_VOWELS) * 10 // 2:
        pool = [c + v + d for c in _CONSONANTS for v in _VOWELS for d in "0123456789"]
    else:
        letters = "ABCDEFGHIJKLMNOPQRSTUVWXYZ"
        pool = [a + b + d for a in letters for b in letters for d in "0123456789"]
    if n > len(pool):
        raise ConfigError(f"generator: at most {len(pool)} stations, asked for {n}")
    return np.array(pool, dtype=object)[rng.choice(len(pool), size=n, replace=False)]


class _Network:
    """Stations and legs of one network shape (small: a few thousand legs)."""

    def __init__(self, hubs: int, spokes: int, banks: int):
        self.H, self.S, self.B = hubs, spokes, banks
        H, S, B = hubs, spokes, banks
        self.home = np.arange(S) % H                      # home hub of each spoke
        # per bank: S spoke->hub legs, S hub->spoke legs, H(H-1) hub->hub legs
        per_bank = 2 * S + H * (H - 1)
        self.per_bank = per_bank
        self.n_legs = B * per_bank
        hh_o, hh_d = np.nonzero(~np.eye(H, dtype=bool))   # ordered hub pairs, row-major
        self._hh_pos = np.full((H, H), -1, dtype=np.int64)
        self._hh_pos[hh_o, hh_d] = np.arange(len(hh_o))
        spoke_st = H + np.arange(S)
        o_bank = np.concatenate([spoke_st, self.home, hh_o])
        d_bank = np.concatenate([self.home, spoke_st, hh_d])
        self.leg_origin = np.tile(o_bank, B)
        self.leg_destination = np.tile(d_bank, B)
        self.leg_bank = np.repeat(np.arange(B), per_bank)

    def out_leg(self, s, b):
        return b * self.per_bank + s

    def in_leg(self, s, b):
        return b * self.per_bank + self.S + s

    def hh_leg(self, h1, h2, b):
        return b * self.per_bank + 2 * self.S + self._hh_pos[h1, h2]


def _bank_paths(B: int, n_legs: int) -> np.ndarray:
    """All bank sequences of ``n_legs`` legs, each step staying or moving one bank later."""
    seqs = np.zeros((B, 1), dtype=np.int64) + np.arange(B)[:, None]
    for _ in range(n_legs - 1):
        stay = seqs
        move = seqs[seqs[:, -1] + 1 < B]
        seqs = np.vstack([np.hstack([stay, stay[:, -1:]]), np.hstack([move, move[:, -1:] + 1])])
    return seqs


def _cross(a: np.ndarray, b: np.ndarray):
    """Row-wise cartesian product of two index arrays (a major)."""
    return np.repeat(a, len(b), axis=0), np.tile(b, (len(a),) + (1,) * (b.ndim - 1))


def _itineraries(net: _Network, two_stop: bool):
    """All itineraries: (legs (n, 3) padded with -1, kind 0/1/2 = stops, origin, destination station)."""
    H, S, B = net.H, net.S, net.B
    parts, kinds = [], []
    # local: every leg
    loc = np.full((net.n_legs, 3), -1, dtype=np.int64)
    loc[:, 0] = np.arange(net.n_legs)
    parts.append(loc)
    kinds.append(np.zeros(net.n_legs, dtype=np.int8))
    b2 = _bank_paths(B, 2)
    # spoke -> hub -> spoke, same home hub
    sa, sb = _cross(np.arange(S), np.arange(S))
    keep = (net.home[sa] == net.home[sb]) & (sa != sb)
    sa, sb = sa[keep], sb[keep]
    pair, bk = _cross(np.stack([sa, sb], 1), b2)
    one = np.full((len(pair), 3), -1, dtype=np.int64)
    one[:, 0] = net.out_leg(pair[:, 0], bk[:, 0])
    one[:, 1] = net.in_leg(pair[:, 1], bk[:, 1])
    parts.append(one)
    if H >= 2:
        # spoke -> hub -> other hub, and other hub -> hub -> spoke
        s, h2 = _cross(np.arange(S), np.arange(H))
        keep = net.home[s] != h2
        s, h2 = s[keep], h2[keep]
        pair, bk = _cross(np.stack([s, h2], 1), b2)
        a = np.full((len(pair), 3), -1, dtype=np.int64)
        a[:, 0] = net.out_leg(pair[:, 0], bk[:, 0])
        a[:, 1] = net.hh_leg(net.home[pair[:, 0]], pair[:, 1], bk[:, 1])
        c = np.full((len(pair), 3), -1, dtype=np.int64)
        c[:, 0] = net.hh_leg(pair[:, 1], net.home[pair[:, 0]], bk[:, 0])
        c[:, 1] = net.in_leg(pair[:, 0], bk[:, 1])
        parts += [a, c]
    n_one = sum(len(x) for x in parts[1:])
    kinds.append(np.ones(n_one, dtype=np.int8))
    if two_stop and H >= 2:
        sa, sb = _cross(np.arange(S), np.arange(S))
        keep = net.home[sa] != net.home[sb]
        sa, sb = sa[keep], sb[keep]
        b3 = _bank_paths(B, 3)
        pair, bk = _cross(np.stack([sa, sb], 1), b3)
        two = np.empty((len(pair), 3), dtype=np.int64)
        two[:, 0] = net.out_leg(pair[:, 0], bk[:, 0])
        two[:, 1] = net.hh_leg(net.home[pair[:, 0]], net.home[pair[:, 1]], bk[:, 1])
        two[:, 2] = net.in_leg(pair[:, 1], bk[:, 2])
        parts.append(two)
        kinds.append(np.full(len(two), 2, dtype=np.int8))
    legs = np.vstack(parts)
    kind = np.concatenate(kinds)
    last = np.where(legs[:, 2] >= 0, legs[:, 2], np.where(legs[:, 1] >= 0, legs[:, 1], legs[:, 0]))
    return legs, kind, net.leg_origin[legs[:, 0]], net.leg_destination[last]


def _pool_size(hubs, spokes, banks, two_stop) -> int:
    net = _Network(hubs, spokes, banks)
    return len(_itineraries(net, two_stop)[0])


def generate(n_products: int, seed: int = 0, params: GeneratorParams | None = None, **overrides) -> Instance:
    """A hub-and-spoke instance with exactly ``n_products`` products.

    ``params`` (a :class:`GeneratorParams`) and/or keyword overrides of its
    fields set the shape; the rest is chosen from the size. Deterministic in
    (``n_products``, ``seed``, parameters). ``meta`` records the generator,
    seed and the resolved parameters, so :func:`generate` with
    ``**meta["params"]`` gives the same instance again.

    The steps below draw from one random stream in a fixed order (stations, itineraries, fares,
    demand, capacities): a change of that order changes every generated instance.
    """
    n, seed, p = _checked(n_products, seed, params, overrides)
    rng = np.random.default_rng(seed)
    net, its, resolved = _network(n, p)
    H, S, B, C = resolved.hubs, resolved.spokes, resolved.banks, resolved.fare_classes
    codes, xy, size = _stations(H + S, H, rng)
    its = its.take(_pick_itineraries(-(-n // C), its.kind, net, p, rng))

    # products: itinerary-major, class-minor, the first n
    it_of = np.repeat(np.arange(len(its.legs)), C)[:n]
    cls = np.tile(np.arange(C), len(its.legs))[:n]
    nleg = (its.legs >= 0).sum(1)[it_of]
    leg_ptr = np.zeros(n + 1, dtype=np.int64)
    np.cumsum(nleg, out=leg_ptr[1:])
    leg_index = its.legs[it_of][its.legs[it_of] >= 0]        # row-major keeps travel order

    dist = np.hypot(*(xy[its.origin] - xy[its.destination]).T)
    fare = _fares(dist, its.kind, it_of, cls, p, rng)
    mean, std, capacity = _demand(dist, size, its, net, it_of, cls, nleg, leg_index, B, p, rng)
    leg_ids, product_ids, product_extra = _ids(net, codes, its, it_of, cls, C, p)
    inst = Instance(
        leg_ids=leg_ids, leg_origin=codes[net.leg_origin], leg_destination=codes[net.leg_destination],
        capacity=capacity, product_ids=product_ids, leg_ptr=leg_ptr, leg_index=leg_index,
        fare=fare, mean=mean, std=std, leg_extra={"bank": net.leg_bank + 1}, product_extra=product_extra,
        meta={"name": f"hub{H}x{S}-p{n}-s{seed}", "generator": GENERATOR_NAME, "seed": seed,
              "n_products": n, "params": resolved.to_dict()},
    )
    if p.demand is not None:
        from . import demand_mix

        inst = demand_mix.apply(inst, demand_mix.DemandMix.parse(p.demand), seed)
    return inst


def _checked(n_products, seed, params, overrides) -> tuple:
    """(n, seed, the validated parameters with ``overrides`` applied); ConfigError otherwise."""
    if int(n_products) != n_products or n_products < 1:
        raise ConfigError(f"generator: n_products must be a positive integer, got {n_products!r}")
    if int(seed) != seed or seed < 0:
        raise ConfigError(f"generator: seed must be a non-negative integer, got {seed!r}")
    p = params if params is not None else GeneratorParams()
    unknown = set(overrides) - {f.name for f in dataclasses.fields(GeneratorParams)}
    if unknown:
        raise ConfigError(f"generator: unknown parameter(s) {sorted(unknown)}; "
                          f"valid: {[f.name for f in dataclasses.fields(GeneratorParams)]}")
    for k in ("demand_factor", "cv"):
        if k in overrides:
            overrides[k] = tuple(overrides[k])
    return int(n_products), int(seed), dataclasses.replace(p, **overrides).validated()


@dataclasses.dataclass(frozen=True)
class _Itineraries:
    """Itineraries as rows: up to three leg indices (-1 where none), kind (0 local, 1 one stop,
    2 two stops), origin and destination stations."""

    legs: np.ndarray
    kind: np.ndarray
    origin: np.ndarray
    destination: np.ndarray

    def take(self, rows) -> "_Itineraries":
        return _Itineraries(self.legs[rows], self.kind[rows], self.origin[rows], self.destination[rows])


def _network(n: int, p: GeneratorParams) -> tuple:
    """(network, every itinerary it offers, the parameters resolved from the size) for n products."""
    H, B, C, two_stop, leg_target = _auto_shape(n, p)
    need = -(-n // C)                                   # itineraries to sell
    if p.spokes is not None:
        S = int(p.spokes)
    else:
        S = max(2, int(round((leg_target / B - H * (H - 1)) / 2)))
        while _pool_size(H, S, B, two_stop) < need:
            S = max(S + 1, int(S * 1.1))
    net = _Network(H, S, B)
    its = _Itineraries(*_itineraries(net, two_stop))
    if len(its.legs) < need:
        raise ConfigError(
            f"generator: the network (hubs={H}, spokes={S}, banks={B}, two_stop={two_stop}) has only "
            f"{len(its.legs)} itineraries, {need} needed for {n} products in {C} fare classes; "
            "raise spokes, banks or fare_classes")
    return net, its, dataclasses.replace(p, hubs=H, spokes=S, banks=B, fare_classes=C, two_stop=two_stop)


def _stations(n_st: int, hubs: int, rng) -> tuple:
    """(codes, positions in km on a plane, sizes) of the stations, the hubs first: near the
    centre and four times larger."""
    codes = _station_codes(n_st, rng)
    ang = rng.uniform(0, 2 * np.pi, n_st)
    rad = np.where(np.arange(n_st) < hubs, rng.uniform(0, 300, n_st), rng.uniform(300, 2500, n_st))
    xy = np.stack([rad * np.cos(ang), rad * np.sin(ang)], 1)
    size = rng.lognormal(0.0, 0.6, n_st)
    size[:hubs] *= 4.0
    return codes, xy, size


def _pick_itineraries(need: int, kind, net, p: GeneratorParams, rng) -> np.ndarray:
    """The rows of the ``need`` itineraries sold: every local one first, then connections drawn
    by weight without replacement (Efraimidis-Spirakis keys)."""
    n_loc = int((kind == 0).sum())
    if need <= n_loc:
        if need < net.n_legs:
            log.warning("generator: %d legs but only %d itineraries; some legs carry no product",
                        net.n_legs, need)
        return np.sort(rng.choice(n_loc, size=need, replace=False))
    w = np.where(kind[n_loc:] == 1, p.one_stop_weight, p.two_stop_weight)
    keys = np.log(rng.uniform(1e-300, 1.0, len(w))) / w
    k = need - n_loc
    top = np.argpartition(-keys, k - 1)[:k] if k < len(w) else np.arange(len(w))
    return np.concatenate([np.arange(n_loc), n_loc + np.sort(top)])


def _fares(dist, kind, it_of, cls, p: GeneratorParams, rng) -> np.ndarray:
    """The top fare of a market from its distance, laddered down by fare_ratio per class."""
    top = (60.0 + 0.22 * dist) * np.array([1.0, 0.92, 0.85])[kind] * rng.uniform(0.9, 1.1, len(kind))
    jitter = rng.uniform(0.96, 1.04, len(it_of))
    return np.maximum(1.0, np.round(top[it_of] * p.fare_ratio ** cls * jitter))


def _demand(dist, size, its, net, it_of, cls, nleg, leg_index, banks: int, p: GeneratorParams, rng) -> tuple:
    """(mean, std, capacity): a gravity-like market weight, more demand in the lower classes,
    scaled so the median leg sees ``seats``; capacities set each leg's demand factor."""
    bank_pref = rng.uniform(0.6, 1.4, banks)
    first_bank = net.leg_bank[its.legs[:, 0]]
    market = (size[its.origin] * size[its.destination] / np.sqrt(50.0 + dist)
              * np.array([1.0, 0.5, 0.25])[its.kind] * bank_pref[first_bank] * rng.lognormal(0.0, 0.4, len(dist)))
    raw = market[it_of] * p.class_growth ** cls * rng.uniform(0.7, 1.3, len(it_of))
    raw_load = np.bincount(leg_index, weights=np.repeat(raw, nleg), minlength=net.n_legs)
    used = raw_load > 0
    scale = p.seats / np.median(raw_load[used]) if used.any() else 1.0
    mean = round_sig(np.maximum(raw * scale, 1e-6), 4)
    cv = rng.uniform(p.cv[0], p.cv[1], len(it_of))
    std = round_sig(mean * cv, 4)
    load = np.bincount(leg_index, weights=np.repeat(mean, nleg), minlength=net.n_legs)
    target_df = rng.uniform(p.demand_factor[0], p.demand_factor[1], net.n_legs)
    return mean, std, np.maximum(1.0, np.round(load / target_df))


def _ids(net, codes, its, it_of, cls, C: int, p: GeneratorParams) -> tuple:
    """(leg ids ``<flight>-<origin>-<destination>``, product ids ``<flights>-<class letter>``, the
    products' origin, destination and fare-class columns)."""
    width = max(4, len(str(100 + net.n_legs)))
    flights = np.array([f"{p.carrier}{100 + i + 1:0{width}d}" for i in range(net.n_legs)], dtype=object)
    leg_ids = np.array([f"{f}-{codes[o]}-{codes[d]}" for f, o, d in
                        zip(flights, net.leg_origin, net.leg_destination)], dtype=object)
    fl = pa.array(flights.tolist(), pa.string())
    cols = [pc.take(fl, pa.array(np.where(its.legs[:, k] >= 0, its.legs[:, k], 0),
                                 mask=its.legs[:, k] < 0)) for k in range(3)]
    itin_id = pc.binary_join_element_wise(*cols, ".", null_handling="skip")
    letters = pa.array(list(_CLASS_LETTERS[:C]), pa.string())
    prod_id = pc.binary_join_element_wise(pc.take(itin_id, pa.array(it_of)),
                                          pc.take(letters, pa.array(cls)), "-")
    code_arr = pa.array(codes.tolist(), pa.string())

    def strings(arr):
        return np.asarray(arr.to_numpy(zero_copy_only=False), dtype=object)

    extra = {"origin": strings(pc.take(code_arr, pa.array(its.origin[it_of]))),
             "destination": strings(pc.take(code_arr, pa.array(its.destination[it_of]))),
             "fare_class": strings(pc.take(letters, pa.array(cls)))}
    return leg_ids, strings(prod_id), extra
