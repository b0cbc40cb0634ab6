"""Demand distributions of the PNLP's product subproblems.

Every product j has the subproblem max_{0 <= x <= u} f_j S_j(x) - a_j x with
S_j(x) = E[min(max(D_j, 0), x)] its expected sales and a_j the sum of its legs' bid
prices; its solution is the newsvendor fractile. One class per family holds its
products' parameters and per-product precomputation:

- :class:`.normal.NormalDemand` (the default family);
- :class:`.gamma.GammaDemand` (shape (m/s)^2, scale s^2/m);
- :class:`.discrete.DiscreteDemand` (Poisson, negative binomial; expected sales piecewise
  linear between whole seats);
- :class:`.known.KnownDemand` (std = 0: S(x) = min(x, m)).

:class:`.products.Products` combines them for an instance's products and keeps every
piecewise-linear part in one :class:`.kinks.KinkTable`. The module-level functions
below are the instance-level helpers the rest of the project uses.
"""

from __future__ import annotations

import dataclasses

import numpy as np

from .discrete import DiscreteDemand, negbin_params
from .gamma import RATIO_MIN, GammaDemand, GammaSubset
from .kinks import KinkTable
from .known import KnownDemand
from .normal import MIN_RATIO, NormalDemand
from .products import FAMILIES, GAMMA, NEGBIN, NORMAL, POISSON, Products, Response, family_codes

__all__ = ["NORMAL", "GAMMA", "POISSON", "NEGBIN", "FAMILIES", "MIN_RATIO", "Products", "Response",
           "KinkTable", "NormalDemand", "GammaDemand", "DiscreteDemand", "KnownDemand", "family_codes",
           "gamma_params", "gamma_expected_sales", "gamma_fractile", "negbin_params", "discrete_sf",
           "discrete_expected_sales", "discrete_fractile", "Subproblems", "subproblems", "expected_sales",
           "marginal_sales", "marginal_sales_bounds"]


# ---------------------------------------------------------------------------
# Single-family helpers (arrays broadcast)
# ---------------------------------------------------------------------------
def gamma_params(mean, std):
    """Shape k and scale theta of the gamma distribution with this mean and std."""
    mean = np.asarray(mean, dtype=np.float64)
    std = np.asarray(std, dtype=np.float64)
    return (mean / std) ** 2, std * std / mean


def _gamma(mean, std, like):
    m, s = np.broadcast_arrays(np.asarray(mean, dtype=np.float64), np.asarray(std, dtype=np.float64),
                               np.asarray(like, dtype=np.float64))[:2]
    return GammaDemand(np.ones(m.size), m.ravel(), s.ravel())


def gamma_expected_sales(x, mean, std):
    """E[min(D, x)] for gamma D with this mean and std (x >= 0)."""
    x = np.asarray(x, dtype=np.float64)
    g = _gamma(mean, std, x)
    return g.sales(np.broadcast_to(x, np.broadcast(x, mean, std).shape).ravel()).reshape(
        np.broadcast(x, mean, std).shape)


def gamma_fractile(ratio, mean, std):
    """x with P(D > x) = ratio (0 for ratio >= 1), and dx/d(ratio) (<= 0)."""
    ratio = np.asarray(ratio, dtype=np.float64)
    shape = np.broadcast(ratio, mean, std).shape
    g = _gamma(mean, std, ratio)
    r = np.broadcast_to(ratio, shape).ravel()
    inside = r < 1.0
    y = np.zeros(len(r))
    if np.any(inside):
        i = np.flatnonzero(inside)
        y[i] = GammaSubset(g, i).quantile(np.maximum(r[i], RATIO_MIN), 1.0 - r[i])
    x = g.theta * y
    dens = g.density(x)
    with np.errstate(divide="ignore"):
        dxdr = np.where(inside & (dens > 0), -1.0 / dens, 0.0)
    return x.reshape(shape), dxdr.reshape(shape)


def _discrete(family, mean, std, like):
    fam, m, s, _ = np.broadcast_arrays(np.asarray(family), np.asarray(mean, dtype=np.float64),
                                       np.asarray(std, dtype=np.float64), np.asarray(like, dtype=np.float64))
    nb = fam.ravel() == NEGBIN
    return DiscreteDemand(np.ones(m.size), m.ravel(), np.where(nb, s.ravel(), 0.0), nb), fam.shape


def discrete_sf(n, family, mean, std):
    """P(D > n) for integer-valued n (arrays broadcast); 1 for n < 0."""
    d, shape = _discrete(family, mean, std, n)
    return d.sf(np.broadcast_to(np.asarray(n, dtype=np.float64), shape).ravel()).reshape(shape)


def discrete_expected_sales(x, family, mean, std):
    """Expected sales, piecewise linear between integers: S(n) = sum_{k<n} P(D > k)."""
    d, shape = _discrete(family, mean, std, x)
    return d.sales(np.broadcast_to(np.asarray(x, dtype=np.float64), shape).ravel()).reshape(shape)


def discrete_fractile(ratio, family, mean, std):
    """Smallest integer n >= 0 with P(D > n) <= ratio (vectorized bisection)."""
    d, shape = _discrete(family, mean, std, ratio)
    r = np.maximum(np.broadcast_to(np.asarray(ratio, dtype=np.float64), shape).ravel(), MIN_RATIO)
    var = np.where(d.negbin, d.std ** 2, d.mean)
    lo = np.full(len(r), -1.0)
    hi = np.ceil(d.mean + 10.0 * np.sqrt(var) + 10.0)
    bad = d.sf(hi) > r
    while np.any(bad):
        lo = np.where(bad, hi, lo)
        hi = np.where(bad, 2.0 * hi + 1.0, hi)
        bad = d.sf(hi) > r
    while True:
        idx = np.flatnonzero(hi - lo > 1)
        if not len(idx):
            break
        mid = np.floor(0.5 * (lo[idx] + hi[idx]))
        ok = d.sf(mid, idx) <= r[idx]
        hi[idx] = np.where(ok, mid, hi[idx])
        lo[idx] = np.where(ok, lo[idx], mid)
    return hi.reshape(shape)


# ---------------------------------------------------------------------------
# Instance-level helpers and the old evaluation interface
# ---------------------------------------------------------------------------
@dataclasses.dataclass(frozen=True, eq=False)
class SubproblemValues:
    """The product subproblems at one vector a: solutions x, w = -dx/da, and
    sum_j f_j S_j(x_j) - a_j x_j (``value`` = ``exact_value``) and sum_j f_j S_j(x_j)."""

    x: np.ndarray
    w: np.ndarray
    value: float
    revenue: float
    exact_value: float


class Subproblems:
    """The exact subproblems of a set of products (a thin interface over :class:`Products`)."""

    def __init__(self, fare, mean, std, codes=None, upper=None):
        self.products = Products(fare, mean, std, codes, upper)
        self.fare = self.products.fare
        self.n = self.products.n

    @classmethod
    def from_instance(cls, instance, products=None):
        codes = family_codes(instance)
        idx = slice(None) if products is None else products
        return cls(instance.fare[idx], instance.mean[idx], instance.std[idx], None if codes is None else codes[idx])

    def evaluate(self, a) -> SubproblemValues:
        r = self.products.respond(np.asarray(a, dtype=np.float64))
        a = np.asarray(a, dtype=np.float64)
        return SubproblemValues(x=r.x, w=r.w, value=r.exact, revenue=r.exact + float(a @ r.x), exact_value=r.exact)

    def expected_sales(self, x):
        return self.products.expected_sales(x)

    def marginal_sales(self, x):
        return self.products.marginal_sales(x)

    def revenue(self, x):
        return float(self.fare @ self.products.expected_sales(x))

    def zero_threshold(self):
        return self.products.closing()


def subproblems(instance, a):
    """Per-product solutions x_j(a_j) and dx_j/da_j, by each product's distribution."""
    v = Subproblems.from_instance(instance).evaluate(a)
    return v.x, -v.w


def expected_sales(instance, x):
    return Products.from_instance(instance).expected_sales(x)


def marginal_sales(instance, x):
    """S_j'(x_j) (the right derivative where S_j has a kink)."""
    return Products.from_instance(instance).marginal_sales(x)[0]


def marginal_sales_bounds(instance, x):
    """(S_j'(x_j+), S_j'(x_j-)): the right and left derivatives of expected sales.

    They differ where S_j has a kink: at the integers for Poisson and negative
    binomial demand (S piecewise linear), at the mean for std = 0. The
    subproblem's optimality condition there is S'(x+) <= a/f <= S'(x-).
    """
    return Products.from_instance(instance).marginal_sales(x)
