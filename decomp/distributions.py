"""Demand distributions in the PNLP subproblems, dispatched per product.

Every product ``j`` has a subproblem ``max_{x >= 0} f_j S_j(x) - a_j x`` with
``S_j(x) = E[min(max(D_j, 0), x)]`` its expected sales and ``a_j`` the sum of
its legs' bid prices. Its solution is the newsvendor fractile: the ``x`` where
the marginal sales ``S_j'(x) = P(D_j > x)`` equal ``a_j / f_j`` (0 when
``a_j >= f_j S_j'(0)``). Four families are supported (column ``distribution``):

``normal`` (default)
    D ~ N(mean, std^2), demand floored at zero (see :mod:`decomp.normal`).
``gamma``
    shape k = (mean/std)^2, scale theta = std^2/mean, so that mean and std are
    the product's. S(x) = mean P(k+1, x/theta) + x Q(k, x/theta) with P, Q the
    regularized incomplete gamma functions; the fractile is
    x = theta Q^{-1}(k, a/f) (the upper-tail inverse, no cancellation).
``poisson`` (mean) and ``negbin`` (mean and std, std^2 > mean; parameters
    r = mean^2/(std^2 - mean), p = mean/std^2 as in scipy.stats.nbinom)
    Discrete demand. Expected sales are taken piecewise linear between the
    integers, S(n) = sum_{k<n} P(D > k), which is exactly the expected sales of
    an integer allocation, and the subproblem is then a concave piecewise-linear
    maximization solved exactly at the integer n = smallest n with
    f P(D > n) <= a. The dual stays exact for this model, but it is piecewise
    linear in a (dx/da = 0 between breakpoints).

Products with std = 0 (any continuous family, or a discrete family with mean
0) are deterministic: S(x) = min(x, max(mean, 0)) and x = mean when a < f.

Non-smooth products (deterministic and discrete) make the dual piecewise
linear in their a_j; the Lagrangian method smooths those parts itself
(:mod:`decomp.lagrangian.segments`) and certifies with the exact dual computed here.
"""

from __future__ import annotations

import dataclasses

import numpy as np
from scipy import special

from . import normal
from .errors import InstanceError

#: Family codes, in the order of :data:`decomp.instance.DISTRIBUTIONS`.
NORMAL, GAMMA, POISSON, NEGBIN = 0, 1, 2, 3
FAMILIES = ("normal", "gamma", "poisson", "negbin")

#: Smallest ratio a/f used in a fractile (a = 0 would mean an unbounded allocation).
MIN_RATIO = normal.MIN_RATIO
_INV_SQRT_2PI = 1.0 / np.sqrt(2.0 * np.pi)
#: 1 - (largest double below 1): the closest a/f gets to 1 short of it.
_TOP_RATIO_GAP = 2.0 ** -53


# ---------------------------------------------------------------------------
# Gamma demand
# ---------------------------------------------------------------------------
def gamma_params(mean, std):
    """Shape k and scale theta of the gamma distribution with this mean and std."""
    mean = np.asarray(mean, dtype=np.float64)
    std = np.asarray(std, dtype=np.float64)
    return (mean / std) ** 2, std * std / mean


def gamma_expected_sales(x, mean, std):
    """E[min(D, x)] for gamma D with this mean and std (x >= 0)."""
    k, theta = gamma_params(mean, std)
    x = np.asarray(x, dtype=np.float64)
    y = x / theta
    return mean * special.gammainc(k + 1.0, y) + x * special.gammaincc(k, y)


def gamma_fractile(ratio, mean, std):
    """x with P(D > x) = ratio (0 for ratio >= 1), and dx/d(ratio) (<= 0)."""
    k, theta = gamma_params(mean, std)
    ratio = np.asarray(ratio, dtype=np.float64)
    r = np.clip(ratio, MIN_RATIO, 1.0)
    y = special.gammainccinv(k, r)
    x = theta * y
    logpdf = special.xlogy(k - 1.0, y) - y - special.gammaln(k) - np.log(theta)
    with np.errstate(over="ignore", divide="ignore"):
        dxdr = np.where((r < 1.0) & (y > 0), -np.exp(-logpdf), 0.0)
    x = np.where(r < 1.0, x, 0.0)
    return x, dxdr


# ---------------------------------------------------------------------------
# Discrete demand (Poisson, negative binomial)
# ---------------------------------------------------------------------------
def negbin_params(mean, std):
    """(r, p) of scipy.stats.nbinom with this mean and std (std^2 > mean)."""
    mean = np.asarray(mean, dtype=np.float64)
    var = np.asarray(std, dtype=np.float64) ** 2
    return mean * mean / (var - mean), mean / var


def discrete_sf(n, family, mean, std):
    """P(D > n) for integer-valued n (arrays broadcast); 1 for n < 0."""
    n = np.asarray(n, dtype=np.float64)
    family = np.asarray(family)
    mean = np.asarray(mean, dtype=np.float64)
    std = np.asarray(std, dtype=np.float64)
    n, family, mean, std = np.broadcast_arrays(n, family, mean, std)
    out = np.ones(n.shape)
    pos = n >= 0
    po = pos & (family == POISSON)
    if np.any(po):
        out[po] = special.gammainc(n[po] + 1.0, mean[po])
    nb = pos & (family == NEGBIN)
    if np.any(nb):
        r, p = negbin_params(mean[nb], std[nb])
        out[nb] = special.betainc(n[nb] + 1.0, r, 1.0 - p)
    return out


def discrete_expected_sales(x, family, mean, std):
    """Expected sales, piecewise linear between integers: S(n) = sum_{k<n} P(D > k).

    At integers this is E[min(D, n)]; in closed form S(n) = mean (1 - P(D* >= n))
    + n P(D > n), with D* = D for Poisson and D* ~ NB(r + 1, p) for the
    negative binomial (from k p_r(k) = mean p_{r+1}(k - 1)).
    """
    x = np.asarray(x, dtype=np.float64)
    family = np.asarray(family)
    mean = np.asarray(mean, dtype=np.float64)
    std = np.asarray(std, dtype=np.float64)
    x, family, mean, std = np.broadcast_arrays(x, family, mean, std)
    n = np.floor(np.maximum(x, 0.0))
    sf_n = discrete_sf(n, family, mean, std)
    tail = np.ones(n.shape)  # P(D* > n - 1)
    pos = n >= 1
    po = pos & (family == POISSON)
    if np.any(po):
        tail[po] = special.gammainc(n[po], mean[po])
    nb = pos & (family == NEGBIN)
    if np.any(nb):
        r, p = negbin_params(mean[nb], std[nb])
        tail[nb] = special.betainc(n[nb], r + 1.0, 1.0 - p)
    s_n = mean * (1.0 - tail) + n * sf_n
    return s_n + (np.maximum(x, 0.0) - n) * sf_n


def discrete_fractile(ratio, family, mean, std):
    """Smallest integer n >= 0 with P(D > n) <= ratio (vectorized bisection)."""
    ratio = np.asarray(ratio, dtype=np.float64)
    family, mean, std = (np.asarray(v) for v in (family, mean, std))
    ratio, family, mean, std = np.broadcast_arrays(ratio, family, mean, std)
    ratio = np.maximum(ratio, MIN_RATIO)
    var = np.where(family == POISSON, mean, np.asarray(std, dtype=np.float64) ** 2)
    lo = np.full(ratio.shape, -1.0)                    # sf(lo) > ratio
    hi = np.ceil(mean + 10.0 * np.sqrt(var) + 10.0)    # grown until sf(hi) <= ratio
    bad = discrete_sf(hi, family, mean, std) > ratio
    while np.any(bad):
        lo = np.where(bad, hi, lo)
        hi = np.where(bad, 2.0 * hi + 1.0, hi)
        bad = discrete_sf(hi, family, mean, std) > ratio
    while True:
        open_ = hi - lo > 1
        if not np.any(open_):
            break
        mid = np.floor(0.5 * (lo + hi))
        idx = np.nonzero(open_)[0]
        sf_mid = discrete_sf(mid[idx], family[idx], mean[idx], std[idx])
        ok = sf_mid <= ratio[idx]
        hi[idx] = np.where(ok, mid[idx], hi[idx])
        lo[idx] = np.where(ok, lo[idx], mid[idx])
    return hi


# ---------------------------------------------------------------------------
# Per-product dispatch
# ---------------------------------------------------------------------------
def _loss_at_minus(t):
    """G(-t) = pdf(t) + t Phi(t) (normal loss); direct where t >= 0 (no cancellation)."""
    t = np.asarray(t, dtype=np.float64)
    out = np.exp(-0.5 * t * t)
    out *= _INV_SQRT_2PI
    out += t * special.ndtr(t)
    neg = t < 0
    if np.any(neg):
        out[neg] = normal.loss(-t[neg])
    return out


def family_codes(instance) -> np.ndarray | None:
    """Per-product family code (int8), or None when every product is normal.

    Raises InstanceError naming the first row with an unknown name.
    """
    names = instance.distribution
    if names is None:
        default = str(instance.meta.get("distribution", "normal")).strip().lower()
        if default not in FAMILIES:
            raise InstanceError(f"unknown demand distribution in meta; use one of {', '.join(FAMILIES)}",
                                column="distribution", value=default)
        code = FAMILIES.index(default)
        return None if code == NORMAL else np.full(instance.n_products, code, dtype=np.int8)
    names = np.asarray(names, dtype=object)
    codes = np.full(len(names), -1, dtype=np.int8)
    for code, fam in enumerate(FAMILIES):          # a loop over 4 names, not over products
        codes[names == fam] = code
    left = np.nonzero(codes < 0)[0]
    if len(left):                                  # other spellings ("Normal ", "GAMMA")
        uniq, inv = np.unique(np.asarray(names[left], dtype=str), return_inverse=True)
        inv = inv.reshape(-1)
        fixed = np.empty(len(uniq), dtype=np.int8)
        for i, name in enumerate(uniq):
            key = name.strip().lower()
            if key not in FAMILIES:
                j = int(left[np.nonzero(inv == i)[0][0]])
                raise InstanceError(f"unknown demand distribution; use one of {', '.join(FAMILIES)}",
                                    row=j + 1, column="distribution", value=name)
            fixed[i] = FAMILIES.index(key)
        codes[left] = fixed[inv]
    return None if not np.any(codes != NORMAL) else codes


@dataclasses.dataclass(frozen=True, eq=False)
class SubproblemValues:
    """The product subproblems at one vector a of bid-price sums.

    ``x``: solutions; ``w``: -dx/da (>= 0; 0 for piecewise-linear products);
    ``value`` and ``exact_value`` (the same number, kept for callers of either name):
    sum_j f_j S_j(x_j) - a_j x_j, the dual's product terms; ``revenue``:
    sum_j f_j S_j(x_j) (exact, at x).
    """

    x: np.ndarray
    w: np.ndarray
    value: float
    revenue: float
    exact_value: float
    density: np.ndarray | None = None   # all-normal: exp(-z^2/2) at x (0 where x = 0)


class Subproblems:
    """The product subproblems of an instance (or of a subset of its products).

    Built once per solve: groups the products by family, checks parameters and
    precomputes per-product constants, so that :meth:`evaluate` does only
    array arithmetic. Hot-path arrays are views when every product is normal.
    """

    def __init__(self, fare, mean, std, codes=None):
        fare = np.asarray(fare, dtype=np.float64)
        mean = np.asarray(mean, dtype=np.float64)
        std = np.asarray(std, dtype=np.float64)
        self.n = n = len(fare)
        self.fare, self.mean, self.std = fare, mean, std
        self.codes = None if codes is None else np.asarray(codes, dtype=np.int8)
        if not np.all(fare > 0):
            j = int(np.nonzero(~(fare > 0))[0][0])
            raise InstanceError("fare must be positive", row=j + 1, column="fare", value=float(fare[j]))
        if codes is None and np.all(std > 0):
            self.all_normal = True
            self.i_norm = None
            self._set_normal(fare, mean, std)
            empty = np.zeros(0, dtype=np.int64)
            self.i_gam = self.i_dis = self.i_det = empty
            return
        if codes is None:
            codes = np.zeros(n, dtype=np.int8)
        codes = np.asarray(codes, dtype=np.int8)
        disc = (codes == POISSON) | (codes == NEGBIN)
        det = (((codes == NORMAL) & ~(std > 0))
               | ((codes == GAMMA) & ~((std > 0) & (mean > 0)))
               | (disc & ~(mean > 0)))
        nb = (codes == NEGBIN) & ~det
        badnb = nb & ~(std * std > mean * (1.0 + 1e-12))
        if np.any(badnb):
            j = int(np.nonzero(badnb)[0][0])
            raise InstanceError("negative binomial demand needs std^2 > mean (use poisson when equal)",
                                row=j + 1, column="std", value=float(std[j]))
        self.all_normal = False
        self.i_norm = np.nonzero((codes == NORMAL) & ~det)[0]
        i = self.i_norm
        self._set_normal(fare[i], mean[i], std[i])
        # -- gamma -------------------------------------------------------------
        self.i_gam = np.nonzero((codes == GAMMA) & ~det)[0]
        self.g_f, self.g_m, self.g_s = fare[self.i_gam], mean[self.i_gam], std[self.i_gam]
        # -- discrete ------------------------------------------------------------
        self.i_dis = np.nonzero(disc & ~det)[0]
        self.d_fam = codes[self.i_dis]
        self.d_f, self.d_m, self.d_s = fare[self.i_dis], mean[self.i_dis], std[self.i_dis]
        self.d_u = np.full(len(self.i_dis), np.inf)    # allocation bounds (whole seats), see set_upper
        # -- deterministic (point mass at max(mean, 0)) ---------------------------
        self.i_det = np.nonzero(det)[0]
        self.t_f = fare[self.i_det]
        self.t_m = np.maximum(mean[self.i_det], 0.0)

    def _set_normal(self, f, m, s):
        self.n_f, self.n_m, self.n_s = f, m, s
        self._n_const = None
        # In double precision a/f cannot come closer to 1 than 2^-53, so the
        # fractile cannot go below m + s ndtri(2^-53) = m - 8.2 s before it drops
        # to 0 at a = f: for std < mean / 8.2 that is a jump, and the dual has a
        # kink there like a deterministic product's (smoothed the same way).
        self.n_jump = np.maximum(m + s * special.ndtri(_TOP_RATIO_GAP), 0.0)
        self.n_has_jump = bool(np.any(self.n_jump > 0))

    def _normal_constants(self):
        """Per-product constants of the normal fast path (computed on first use)."""
        if self._n_const is None:
            f, m, s = self.n_f, self.n_m, self.n_s
            fs = f * s
            sof = (s / f) * np.sqrt(2.0 * np.pi)
            self._n_const = dict(
                cap_w=bool(len(f) and sof.max() > 1.0),
                invf=1.0 / f,
                fs_pdf=fs * _INV_SQRT_2PI,                                   # f s / sqrt(2 pi)
                fsG0=fs * _loss_at_minus(m / s),                             # f s G(-m/s)
                sof_pdf=(s / f) * np.sqrt(2.0 * np.pi),                       # w = this / exp(-z^2/2)
                invs=1.0 / s,
            )
        return self._n_const

    @classmethod
    def from_instance(cls, instance, products=None):
        codes = family_codes(instance)
        if products is None:
            return cls(instance.fare, instance.mean, instance.std, codes)
        return cls(instance.fare[products], instance.mean[products], instance.std[products],
                   None if codes is None else codes[products])

    def subset(self, idx) -> "Subproblems":
        """The subproblems of the products ``idx`` (without allocation bounds)."""
        codes = None if self.codes is None else self.codes[idx]
        return Subproblems(self.fare[idx], self.mean[idx], self.std[idx], codes)

    # -- solutions ---------------------------------------------------------------
    def evaluate(self, a) -> SubproblemValues:
        """Solve every subproblem at bid-price sums ``a`` (one per product)."""
        a = np.asarray(a, dtype=np.float64)
        if self.all_normal:
            x, w, value, rev, dens = self._normal(a)
            return SubproblemValues(x, w, value, rev, value, dens)
        x = np.zeros(self.n)
        w = np.zeros(self.n)
        rev = value = 0.0
        for idx, fn in ((self.i_norm, self._normal), (self.i_gam, self._gamma),
                        (self.i_dis, self._discrete), (self.i_det, self._deterministic)):
            if len(idx):
                xs, ws, v, rs, *_ = fn(a[idx])
                x[idx], w[idx] = xs, ws
                rev += rs
                value += v
        return SubproblemValues(x, w, value, rev, value)

    def _normal(self, a):
        """x = max(0, m - s ndtri(a/f)) and, on the inside (x > 0, f ratio = a),
        f S(x) - a x = f s (G(-m/s) - pdf(z)) - a m, w = s / (f pdf(z))."""
        n = len(a)
        x, w, e = np.empty(n), np.empty(n), np.empty(n)
        value, rev = self.normal_slice(a, 0, n, x, w, e)
        return x, w, value, rev, e

    def normal_slice(self, a, lo, hi, x, w, e):
        """The normal fast path on the products lo:hi (``a`` their bid-price
        sums, the outputs ``x``, ``w`` and ``e`` = exp(-z^2/2), zero outside,
        written at lo:hi); returns (value, revenue) of the slice. Slices are
        independent (numpy releases the GIL on them: threads may run several)."""
        k = self._normal_constants()
        sl = slice(lo, hi)
        f_inv, n_s, n_m = k["invf"][sl], self.n_s[sl], self.n_m[sl]
        xs, ws, es = x[sl], w[sl], e[sl]
        r = np.multiply(a, f_inv, out=es)
        np.clip(r, MIN_RATIO, 1.0, out=r)
        z = special.ndtri(r, out=r)          # ndtri(ratio) = -(the usual z)
        np.multiply(n_s, z, out=xs)
        np.subtract(n_m, xs, out=xs)
        np.maximum(xs, 0.0, out=xs)
        inside = xs > 0
        np.square(z, out=z)
        z *= -0.5
        np.exp(z, out=es)                    # exp(-z^2/2) = sqrt(2 pi) pdf(z)
        insf = inside.astype(np.float64)
        es *= insf
        am = np.multiply(a, n_m, out=ws)
        value = float(k["fsG0"][sl] @ insf) - float(k["fs_pdf"][sl] @ es) - float(am @ insf)
        rev = value + float(a @ xs)
        np.maximum(es, 1e-300, out=ws)       # w = 0 outside
        np.divide(k["sof_pdf"][sl], ws, out=ws)
        ws *= insf
        if k["cap_w"]:
            np.minimum(ws, 1e300, out=ws)
        return value, rev

    def _gamma(self, a):
        ratio = a / self.g_f
        x, dxdr = gamma_fractile(ratio, self.g_m, self.g_s)
        w = np.minimum(-dxdr / self.g_f, 1e300)
        rev = self.g_f * gamma_expected_sales(x, self.g_m, self.g_s)
        return x, w, float(np.sum(rev - a * x)), float(rev.sum())

    def _deterministic(self, a):
        f, m = self.t_f, self.t_m
        x = np.where(a < f, m, 0.0)
        exact = float(np.sum(m * np.maximum(f - a, 0.0)))
        return x, np.zeros(len(a)), exact, float(f @ np.minimum(x, m))

    def set_upper(self, upper):
        """Bound every product's allocation by ``upper`` (per product). Exact for
        deterministic products (min(x, m) with x <= u is min(x, min(m, u))) and for
        discrete ones (whole seats: pass whole numbers); the caller clips smooth
        families' fractiles."""
        upper = np.asarray(upper, dtype=np.float64)
        if len(self.i_det):
            self.t_m = np.minimum(self.t_m, upper[self.i_det])
        if len(self.i_dis):
            self.d_u = upper[self.i_dis]

    def _discrete_allocation(self, b, f, fam, m, s, u):
        """min(u, smallest n with f P(D > n) <= b): the bounded subproblem's solution."""
        return np.minimum(discrete_fractile(b / f, fam, m, s), u)

    def _discrete(self, a):
        """Discrete demand: the bounded subproblem's solution n = min(u, smallest n with
        f P(D > n) <= a); the term f S(n) - a n is piecewise linear in a (w = 0)."""
        f, m, s, fam, u = self.d_f, self.d_m, self.d_s, self.d_fam, self.d_u
        n = self._discrete_allocation(a, f, fam, m, s, u)
        value = float(np.sum(f * discrete_expected_sales(n, fam, m, s) - a * n))
        return n, np.zeros(len(a)), value, value + float(a @ n)

    def revenue(self, y):
        """sum_j f_j S_j(y_j), exactly (normal fast path: f s (G(-m/s) - G(z)))."""
        if not self.all_normal:
            return float(self.fare @ self.expected_sales(y))
        k = self._normal_constants()
        z = y - self.n_m
        z *= k["invs"]
        return float(k["fsG0"].sum() - self.n_f @ (self.n_s * normal.loss(z)))

    # -- expected sales and marginal sales --------------------------------------
    def expected_sales(self, x):
        """S_j(x_j) for every product (demand floored at zero)."""
        x = np.asarray(x, dtype=np.float64)
        if self.all_normal:
            return normal.expected_sales(x, self.mean, self.std)
        out = np.zeros(self.n)
        if len(self.i_norm):
            i = self.i_norm
            out[i] = normal.expected_sales(x[i], self.n_m, self.n_s)
        if len(self.i_gam):
            out[self.i_gam] = gamma_expected_sales(x[self.i_gam], self.g_m, self.g_s)
        if len(self.i_dis):
            out[self.i_dis] = discrete_expected_sales(x[self.i_dis], self.d_fam, self.d_m, self.d_s)
        if len(self.i_det):
            out[self.i_det] = np.minimum(x[self.i_det], self.t_m)
        return out

    def expected_sales_of(self, idx, x):
        """S_j(x) for the products ``idx`` only; ``x`` has ``idx``'s length in its last axis."""
        idx = np.asarray(idx, dtype=np.int64)
        x = np.asarray(x, dtype=np.float64)
        if self.all_normal:
            return normal.expected_sales(x, self.mean[idx], self.std[idx])
        out = np.zeros(x.shape)
        for members, fn in ((self.i_norm, lambda xs, k: normal.expected_sales(xs, self.n_m[k], self.n_s[k])),
                            (self.i_gam, lambda xs, k: gamma_expected_sales(xs, self.g_m[k], self.g_s[k])),
                            (self.i_dis, lambda xs, k: discrete_expected_sales(xs, self.d_fam[k], self.d_m[k],
                                                                               self.d_s[k])),
                            (self.i_det, lambda xs, k: np.minimum(xs, self.t_m[k]))):
            pos = np.searchsorted(members, idx)              # members are sorted product indices
            pos = np.minimum(pos, max(len(members) - 1, 0))
            hit = (len(members) > 0) & (members[pos] == idx) if len(members) else np.zeros(len(idx), bool)
            if np.any(hit):
                out[..., hit] = fn(np.maximum(x[..., hit], 0.0), pos[hit])
        return out

    def marginal_sales_of(self, idx, x):
        """S_j'(x) (right derivative) for the products ``idx`` at their ``x``."""
        idx = np.asarray(idx, dtype=np.int64)
        x = np.asarray(x, dtype=np.float64)
        if self.all_normal:
            return normal.marginal_sales(x, self.mean[idx], self.std[idx])
        full = np.zeros(self.n)
        full[idx] = x
        return self.marginal_sales(full)[0][idx]

    def marginal_sales(self, x):
        """(right, left) derivatives of S_j at x_j: S'(x+) <= S'(x-) (equal where smooth)."""
        x = np.asarray(x, dtype=np.float64)
        if self.all_normal:
            d = normal.marginal_sales(x, self.mean, self.std)
            return d, d
        lo = np.zeros(self.n)
        hi = np.zeros(self.n)
        if len(self.i_norm):
            i = self.i_norm
            lo[i] = hi[i] = normal.marginal_sales(x[i], self.n_m, self.n_s)
        if len(self.i_gam):
            i = self.i_gam
            k, theta = gamma_params(self.g_m, self.g_s)
            lo[i] = hi[i] = special.gammaincc(k, x[i] / theta)
        if len(self.i_dis):
            i = self.i_dis
            xi = np.maximum(x[i], 0.0)
            fl = np.floor(xi)
            lo[i] = discrete_sf(fl, self.d_fam, self.d_m, self.d_s)
            at_int = xi == fl
            hi[i] = np.where(at_int, discrete_sf(fl - 1, self.d_fam, self.d_m, self.d_s), lo[i])
        if len(self.i_det):
            i = self.i_det
            xi, m = x[i], self.t_m
            lo[i] = (xi < m).astype(float)
            hi[i] = (xi <= m).astype(float) * (m > 0)
        return lo, hi

    def sales_density(self, x):
        """-S_j''(x_j): the demand density at x_j > 0 for the continuous families, 0 for
        deterministic and discrete products (their S_j is piecewise linear)."""
        x = np.asarray(x, dtype=np.float64)
        if self.all_normal:
            return _normal_pdf(x, self.mean, self.std)
        out = np.zeros(self.n)
        if len(self.i_norm):
            i = self.i_norm
            out[i] = _normal_pdf(x[i], self.n_m, self.n_s)
        if len(self.i_gam):
            i = self.i_gam
            k, theta = gamma_params(self.g_m, self.g_s)
            out[i] = _gamma_pdf(x[i], k, theta)
        return out

    def zero_threshold(self):
        """a above which x_j = 0 is optimal: f_j S_j'(0+)."""
        if self.all_normal:
            return self.fare * special.ndtr(self.mean / self.std)      # P(D > 0) = Phi(m / s)
        d, _ = self.marginal_sales(np.zeros(self.n))
        return self.fare * d


def _normal_pdf(x, m, s):
    return normal.pdf((x - m) / s) / s


def _gamma_pdf(x, k, theta):
    t = np.maximum(x, 1e-300) / theta
    return np.exp((k - 1.0) * np.log(t) - t - special.gammaln(k)) / theta


# ---------------------------------------------------------------------------
# Instance-level helpers (stateless; used by decomp.dual and decomp.certify)
# ---------------------------------------------------------------------------
def subproblems(instance, a):
    """Per-product solutions x_j(a_j) and dx_j/da_j, by each product's distribution."""
    v = Subproblems.from_instance(instance).evaluate(a)
    return v.x, -v.w


def expected_sales(instance, x):
    return Subproblems.from_instance(instance).expected_sales(x)


def marginal_sales(instance, x):
    """S_j'(x_j) (the right derivative where S_j has a kink)."""
    return Subproblems.from_instance(instance).marginal_sales(x)[0]


def marginal_sales_bounds(instance, x):
    """(S_j'(x_j+), S_j'(x_j-)): the right and left derivatives of expected sales.

    They differ where S_j has a kink: at the integers for Poisson and negative
    binomial demand (S piecewise linear), at the mean for std = 0. The
    subproblem's optimality condition there is S'(x+) <= a/f <= S'(x-).
    """
    return Subproblems.from_instance(instance).marginal_sales(x)
