"""The booking process: when requests for each product arrive, and how many.

A sample path draws, for every product, a total number of requests whose mean
and standard deviation match the product's forecast, and gives each request an
arrival time over the booking horizon from a Beta-shaped density that depends
on the product's fare rank (low fares book early, high fares late, by
default). Requests are then put in time order.

Totals (``m`` the mean, ``v = s^2`` the variance of the forecast):

* ``v > m``: gamma-Poisson mixture (negative binomial): ``Lambda ~ Gamma(k,
  theta)`` with ``k = m^2 / (v - m)``, ``theta = (v - m) / m``, then
  ``N ~ Poisson(Lambda)``; mean ``m`` and variance ``v`` exactly.
* ``v == m`` (relative 1e-9): Poisson(m).
* ``v < m``: a count cannot be less variable than this without being
  binomial: ``N ~ Binomial(n, p)`` with ``n = max(ceil(m), round(m^2 / (m -
  v)))`` and ``p = m / n``. The mean is exact; the variance ``m (1 - p)`` is the
  closest a binomial with integer ``n`` gets, which is above ``v`` when ``v`` is
  below ``m (ceil(m) - m) / ceil(m)`` (e.g. ``v = 0`` with a fractional mean).
  With ``v = 0`` and an integer mean the total is exactly the mean.

Remaining demand seen from day ``t`` (what the optimizer is told before it
re-optimizes): with ``q`` the share of the product's arrival density still
ahead, the unconditional remaining count has mean ``q m`` and variance
``q m + q^2 (v - m)`` (thinning of each of the three laws above gives this one
formula). Bookings observed so far are not used to update it.

Everything is vectorized over products; each path has its own
:class:`numpy.random.Generator` from ``SeedSequence(seed, spawn_key=(0,
path))``, so a path's requests do not depend on how paths are split across
workers or batches.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy import stats

from .errors import SimulationConfigError

#: spawn_key prefixes of the random streams (demand paths; forecast-error draws).
STREAM_PATHS = 0
STREAM_FORECAST = 1


@dataclasses.dataclass(frozen=True)
class BookingCurve:
    """Arrival-time densities by fare rank, on the horizon scaled to [0, 1].

    A product of normalized fare rank ``r`` (0 = lowest fare of its group, 1 =
    highest) books at times ``start + (end - start) * Beta(a, b)``, each of
    ``a``, ``b``, ``start``, ``end`` interpolated linearly in ``r`` between the
    ``low_*`` and ``high_*`` values. The defaults put the low fares' mean
    arrival at 2/7 of the horizon and the high fares' at 5/7; windows such as
    ``low_window=(0, .5), high_window=(.5, 1)`` make low-fare demand arrive
    strictly before high-fare demand.
    """

    low_shape: tuple = (2.0, 5.0)
    high_shape: tuple = (5.0, 2.0)
    low_window: tuple = (0.0, 1.0)
    high_window: tuple = (0.0, 1.0)

    def __post_init__(self):
        for name in ("low_shape", "high_shape"):
            v = tuple(float(x) for x in getattr(self, name))
            if len(v) != 2 or not all(np.isfinite(v)) or min(v) <= 0:
                raise SimulationConfigError(f"BookingCurve.{name} must be two positive Beta parameters (a, b), got {getattr(self, name)!r}")
            object.__setattr__(self, name, v)
        for name in ("low_window", "high_window"):
            v = tuple(float(x) for x in getattr(self, name))
            if len(v) != 2 or not (0.0 <= v[0] < v[1] <= 1.0):
                raise SimulationConfigError(f"BookingCurve.{name} must be (start, end) with 0 <= start < end <= 1, got {getattr(self, name)!r}")
            object.__setattr__(self, name, v)

    def parameters(self, rank: np.ndarray):
        """Per-product (a, b, start, end) for normalized fare ranks in [0, 1]."""
        r = np.clip(np.asarray(rank, dtype=np.float64), 0.0, 1.0)
        lerp = lambda lo, hi: lo + r * (hi - lo)  # noqa: E731
        a = lerp(self.low_shape[0], self.high_shape[0])
        b = lerp(self.low_shape[1], self.high_shape[1])
        start = lerp(self.low_window[0], self.high_window[0])
        end = lerp(self.low_window[1], self.high_window[1])
        return a, b, start, end

    def to_dict(self) -> dict:
        return dataclasses.asdict(self)


def fare_rank(instance) -> np.ndarray:
    """Normalized fare rank per product in [0, 1] (0 lowest, 1 highest).

    With a ``fare_class`` column in ``instance.product_extra`` the classes are
    ordered by their mean fare over the instance and spread evenly on [0, 1].
    Otherwise products are grouped by itinerary (the same legs in the same
    order) and ranked by fare within it; a product alone on its itinerary gets 0.
    """
    P = instance.n_products
    if P == 0:
        return np.zeros(0)
    fare = instance.fare
    if "fare_class" in instance.product_extra:
        cls = np.asarray(instance.product_extra["fare_class"]).astype(str)
        names, inv = np.unique(cls, return_inverse=True)
        mean_fare = np.bincount(inv, weights=fare) / np.bincount(inv)
        order = np.argsort(mean_fare, kind="stable")
        pos = np.empty(len(names), dtype=np.float64)
        pos[order] = np.arange(len(names))
        return pos[inv] / max(1, len(names) - 1)
    group = itinerary_groups(instance)
    order = np.lexsort((fare, group))
    g_sorted = group[order]
    first = np.r_[0, np.flatnonzero(np.diff(g_sorted)) + 1]
    sizes = np.diff(np.r_[first, P])
    start_of = np.repeat(first, sizes)
    pos = np.empty(P, dtype=np.float64)
    pos[order] = np.arange(P) - start_of
    size_of = np.empty(P, dtype=np.float64)
    size_of[order] = np.repeat(sizes, sizes)
    return pos / np.maximum(1.0, size_of - 1.0)


def leg_matrix(instance, pad: int) -> np.ndarray:
    """Products' legs as a (P, max legs) int array, short rows padded with ``pad``."""
    P = instance.n_products
    n = instance.legs_per_product
    width = max(1, int(n.max()) if P else 1)
    out = np.full((P, width), pad, dtype=np.int64)
    rows = np.repeat(np.arange(P), n)
    cols = np.arange(len(instance.leg_index)) - np.repeat(instance.leg_ptr[:-1], n)
    out[rows, cols] = instance.leg_index
    return out


def itinerary_groups(instance) -> np.ndarray:
    """An integer per product, equal for products on the same leg sequence."""
    if instance.n_products == 0:
        return np.zeros(0, dtype=np.int64)
    _, inv = np.unique(leg_matrix(instance, -1), axis=0, return_inverse=True)
    return np.asarray(inv).reshape(-1)


def remaining_share(curve_params, t_frac: float) -> np.ndarray:
    """Share of each product's arrival density after time ``t_frac`` (in [0, 1])."""
    a, b, start, end = curve_params
    u = np.clip((t_frac - start) / (end - start), 0.0, 1.0)
    return stats.beta.sf(u, a, b)


def remaining_forecast(mean, std, share):
    """Mean and std of the remaining count when a share ``q`` of the arrivals is ahead."""
    mean = np.asarray(mean, dtype=np.float64)
    var = np.square(np.asarray(std, dtype=np.float64))
    q = np.asarray(share, dtype=np.float64)
    m = q * mean
    v = np.maximum(q * mean + q * q * (var - mean), 0.0)
    return m, np.sqrt(v)


def path_rng(seed: int, path: int) -> np.random.Generator:
    """The generator of sample path ``path`` (independent of workers and batches)."""
    return np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(STREAM_PATHS, int(path))))


def sample_totals(rng: np.random.Generator, mean, std) -> np.ndarray:
    """Request totals per product with the given mean and std (see the module docstring)."""
    m = np.maximum(np.asarray(mean, dtype=np.float64), 0.0)
    v = np.square(np.asarray(std, dtype=np.float64))
    out = np.zeros(m.shape, dtype=np.int64)
    pos = m > 0
    over = pos & (v > m * (1 + 1e-9))
    under = pos & (v < m * (1 - 1e-9))
    pois = pos & ~over & ~under
    if np.any(over):
        mo, vo = m[over], v[over]
        lam = rng.gamma(mo * mo / (vo - mo), (vo - mo) / mo)
        out[over] = rng.poisson(lam)
    if np.any(pois):
        out[pois] = rng.poisson(m[pois])
    if np.any(under):
        mu, vu = m[under], v[under]
        n = np.maximum(np.ceil(mu - 1e-12), np.round(mu * mu / (mu - vu)))
        out[under] = rng.binomial(n.astype(np.int64), np.minimum(mu / n, 1.0))
    return out


@dataclasses.dataclass(frozen=True, eq=False)
class RequestPaths:
    """The requests of a set of sample paths, each path in time order.

    ``products[k, :counts[k]]`` are the products requested on path ``k`` and
    ``times[k, :counts[k]]`` their arrival times (fraction of the horizon);
    beyond ``counts[k]`` products hold the padding index ``P`` and times
    ``inf``. ``demand[k, j]`` is the realized total of product ``j``.
    """

    paths: np.ndarray
    products: np.ndarray
    times: np.ndarray
    counts: np.ndarray
    demand: np.ndarray

    def period_bounds(self, t_fracs) -> np.ndarray:
        """Per path, the index of the first request at or after each time: (n, len(t_fracs))."""
        t = np.asarray(t_fracs, dtype=np.float64)
        return np.stack([np.searchsorted(row, t, side="left") for row in self.times]) if len(self.times) else np.zeros((0, len(t)), dtype=np.int64)


def sample_paths(instance, paths, seed: int, curve: BookingCurve, rank=None) -> RequestPaths:
    """Draw the requests of the given path indices from the instance's (true) forecast."""
    paths = np.asarray(paths, dtype=np.int64)
    P = instance.n_products
    rank = fare_rank(instance) if rank is None else rank
    a, b, start, end = curve.parameters(rank)
    prods, times, counts, demand = [], [], [], []
    for path in paths:       # one Python step per path, numpy over products and requests
        rng = path_rng(seed, path)
        n = sample_totals(rng, instance.mean, instance.std)
        j = np.repeat(np.arange(P, dtype=np.int64), n)
        t = start[j] + (end[j] - start[j]) * rng.beta(a[j], b[j])
        order = np.argsort(t, kind="stable")
        prods.append(j[order])
        times.append(t[order])
        counts.append(len(j))
        demand.append(n)
    K = max(counts, default=0)
    n_paths = len(paths)
    products = np.full((n_paths, K), P, dtype=np.int64)
    tt = np.full((n_paths, K), np.inf)
    for k in range(n_paths):
        products[k, :counts[k]] = prods[k]
        tt[k, :counts[k]] = times[k]
    return RequestPaths(paths=paths, products=products, times=tt,
                        counts=np.asarray(counts, dtype=np.int64),
                        demand=np.asarray(demand, dtype=np.int64).reshape(n_paths, P))
