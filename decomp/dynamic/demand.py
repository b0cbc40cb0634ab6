"""Demand over booking periods: the probability of a request for each product in each period.

The dynamic programs of this package (Talluri and van Ryzin 2004, section 3.4;
Topaloglu 2009) cut the booking horizon into ``T`` periods and let
``prob[t, j]`` be the probability that a request for product ``j`` arrives in
period ``t``; period 0 opens the horizon, period ``T - 1`` closes it.

Where the periods come from:

* The published hub-and-spoke problems give ``prob`` directly (at most one
  request per period in the whole network).
* The project's own instances carry a mean (and std) per product. The
  simulation books product ``j``'s requests at times with the Beta density of
  its fare rank (:class:`decomp.simulation.BookingCurve`), so the expected
  number of its requests in period ``t`` is
  ``mean_j * (F_j((t + 1) / T) - F_j(t / T))`` with ``F_j`` that density's CDF
  over the horizon scaled to [0, 1]. Those expectations are used as ``prob``;
  they add up to ``mean_j`` over the periods (checked, to 1e-9). On a busy leg
  they may add up to more than one request per period; the single-leg
  programs then take the period in several equal steps
  (:func:`steps_per_period`), each with at most one request on the leg.

Sampling: :meth:`PeriodDemand.sample_paths` draws, for each period, at most one
request in the whole network (requires ``sum_j prob[t, j] <= 1``), for the
booking simulation of problems given this way. Requests are put at the middle
of their period, ``(t + 1/2) / T`` of the horizon.
"""

from __future__ import annotations

import dataclasses
import math

import numpy as np
from scipy import stats

from ..errors import DecompError

#: Slack on "at most one request per period" (probabilities read from text files).
ONE_REQUEST_SLACK = 1e-9


class DemandError(DecompError, ValueError):
    """Per-period demand that does not fit the instance or the model."""


@dataclasses.dataclass(frozen=True, eq=False)
class PeriodDemand:
    """``prob[t, j]``: expected requests for product ``j`` in period ``t`` (``T x P``, >= 0)."""

    prob: np.ndarray
    source: str = ""

    def __post_init__(self):
        p = np.array(self.prob, dtype=np.float64, copy=True)
        if p.ndim != 2 or p.shape[0] < 1:
            raise DemandError(f"per-period demand must be a (periods x products) array, got shape {p.shape}")
        if not np.all(np.isfinite(p)) or np.any(p < 0):
            t, j = np.argwhere(~np.isfinite(p) | (p < 0))[0]
            raise DemandError(f"per-period demand of product {j} in period {t} is {p[t, j]!r}; "
                              "expected a finite number >= 0")
        p.setflags(write=False)
        object.__setattr__(self, "prob", p)

    @property
    def periods(self) -> int:
        return self.prob.shape[0]

    @property
    def n_products(self) -> int:
        return self.prob.shape[1]

    def totals(self) -> np.ndarray:
        """Expected requests per product over the horizon."""
        return self.prob.sum(axis=0)

    def check(self, instance) -> None:
        if self.n_products != instance.n_products:
            raise DemandError(f"per-period demand has {self.n_products} products, the instance "
                              f"{instance.name} has {instance.n_products}")

    def at_most_one_request(self) -> bool:
        """True when every period has at most one request in the whole network."""
        return bool(self.prob.sum(axis=1).max() <= 1.0 + ONE_REQUEST_SLACK)

    def require_at_most_one_request(self, what: str, fewest: int | None = None) -> None:
        """DemandError unless every period expects at most one request in the network. The message
        says how many periods are needed: ``fewest`` when the caller found it (:func:`fewest_periods`),
        else at least one per expected request and about periods x the busiest period's requests."""
        total = self.prob.sum(axis=1)
        t = int(np.argmax(total))
        if total[t] > 1.0 + ONE_REQUEST_SLACK:
            if fewest is not None:
                need = f"with these arrival curves {fewest:,} periods are the fewest that do; use --periods {fewest}"
            else:
                low = max(self.periods + 1, math.ceil(self.prob.sum() - ONE_REQUEST_SLACK))
                about = max(low, math.ceil(self.periods * total[t]))
                need = (f"it needs at least {low:,} periods (one per expected request), about {about:,} "
                        f"with these arrival curves")
            raise DemandError(
                f"{what} needs at most one request per period in the whole network; period {t} of "
                f"{self.periods:,} expects {total[t]:.6g} requests (the network expects {self.prob.sum():,.0f} "
                f"requests in all): {need}")

    def sample_paths(self, instance, paths, seed: int):
        """Requests of the given sample paths (at most one per period), as the simulation's RequestPaths.

        Path ``k`` draws from ``SeedSequence(seed, spawn_key=(2, k))``, so a
        path's requests do not depend on how paths are split into batches.
        """
        from ..simulation.booking import RequestPaths

        self.check(instance)
        self.require_at_most_one_request("sampling one request per period")
        paths = np.asarray(paths, dtype=np.int64)
        T, P = self.prob.shape
        cum = np.cumsum(self.prob, axis=1)                      # (T, P)
        mid = (np.arange(T) + 0.5) / T
        prods = np.full((len(paths), T), P, dtype=np.int64)
        times = np.full((len(paths), T), np.inf)
        counts = np.zeros(len(paths), dtype=np.int64)
        demand = np.zeros((len(paths), P), dtype=np.int64)
        for r, path in enumerate(paths):      # one Python step per path; numpy over periods and products
            rng = np.random.default_rng(np.random.SeedSequence(int(seed), spawn_key=(STREAM_PERIODS, int(path))))
            u = rng.random(T)
            j = (cum < u[:, None]).sum(axis=1)                  # product index, P when no request
            hit = j < P
            n = int(hit.sum())
            prods[r, :n] = j[hit]
            times[r, :n] = mid[hit]
            counts[r] = n
            demand[r] = np.bincount(j[hit], minlength=P)
        return RequestPaths(paths=paths, products=prods, times=times, counts=counts, demand=demand)


#: spawn_key prefix of the per-period request streams (0 and 1 are the simulation's).
STREAM_PERIODS = 2


def from_arrival_curves(instance, periods: int, mean=None, curve=None) -> PeriodDemand:
    """Per-period expected requests from the simulation's arrival curves (see the module docstring).

    ``mean``: the forecast to spread over the periods (default: the instance's).
    """
    from ..simulation.booking import BookingCurve, fare_rank

    if not isinstance(periods, (int, np.integer)) or isinstance(periods, bool) or periods < 1:
        raise DemandError(f"number of periods must be a positive integer, got {periods!r}")
    curve = BookingCurve() if curve is None else curve
    mean = np.asarray(instance.mean if mean is None else mean, dtype=np.float64)
    a, b, start, end = curve.parameters(fare_rank(instance))
    edges = np.linspace(0.0, 1.0, periods + 1)
    u = np.clip((edges[:, None] - start[None, :]) / (end - start)[None, :], 0.0, 1.0)    # (T+1, P)
    cdf = stats.beta.cdf(u, a[None, :], b[None, :])
    share = np.diff(cdf, axis=0)                                                         # (T, P)
    prob = np.maximum(share, 0.0) * np.maximum(mean, 0.0)[None, :]
    d = PeriodDemand(prob, source=f"arrival curves, {periods} periods")
    err = np.abs(d.totals() - np.maximum(mean, 0.0))
    if err.size and err.max() > 1e-9 * max(1.0, float(np.max(mean))):
        raise DemandError(f"per-period demand does not add up to the forecast (largest error {err.max():.3g})")
    return d


def fewest_periods(instance, periods: int, mean=None, curve=None, max_cells: float = 2e8) -> int | None:
    """The fewest periods in which :func:`from_arrival_curves` expects at most one request per period
    in the whole network, searched up from ``periods`` (which has more); None when the search would
    spread more than ``max_cells`` (periods x products) values at a time.

    Bisection between a count known to fail and one known to pass, each checked by spreading the
    demand anew, so the answer passes and one period fewer was seen to fail.
    """
    n_products = max(1, instance.n_products)

    def passes(n: int) -> bool:
        return from_arrival_curves(instance, n, mean=mean, curve=curve).at_most_one_request()

    mean_ = np.maximum(np.asarray(instance.mean if mean is None else mean, dtype=np.float64), 0.0)
    lo = max(int(periods), math.ceil(float(mean_.sum()) - ONE_REQUEST_SLACK) - 1)   # fails (or is below the bound)
    d = from_arrival_curves(instance, int(periods), mean=mean, curve=curve)
    hi = max(lo + 1, math.ceil(int(periods) * float(d.prob.sum(axis=1).max())))
    while True:
        if hi * n_products > max_cells:
            return None
        if passes(hi):
            break
        lo, hi = hi, math.ceil(hi * 1.25) + 1
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if mid * n_products > max_cells:
            return None
        lo, hi = (lo, mid) if passes(mid) else (mid, hi)
    return hi


def steps_per_period(leg_prob: np.ndarray) -> np.ndarray:
    """Steps per period of a single-leg program so that each step has at most one request on the leg.

    ``leg_prob``: (T, J) expected requests of the leg's products per period;
    returns ``max(1, ceil(sum_j leg_prob[t, j]))`` per period (the period is
    cut into that many equal steps).
    """
    total = leg_prob.sum(axis=1)
    return np.maximum(1, np.ceil(total - ONE_REQUEST_SLACK)).astype(np.int64)
