"""Certificates: what a returned allocation and bid prices are worth.

Computed from the instance alone, independently of what the solver claims:

* primal feasibility: the largest capacity excess max_i (A x - c)_i in seats
  and relative to max(1, c_i);
* optimality conditions per product, relative to the fare: for the PNLP
  f_j P(D_j > x_j) = a_j where x_j > 0 and f_j P(D_j > x_j) <= a_j where
  x_j = 0 (a_j the sum of the product's bid prices); for the LPs (DLP, PWL)
  the reduced cost of every segment, complementary with its bounds;
* a dual bound at the returned bid prices, projected to pi >= 0 (any such
  point gives an upper bound on the optimum), and the relative gap
  (dual - primal) / max(1, |primal|) (:func:`relative_gap`, the one scale of decomp's gaps):

  - PNLP: the Lagrangian dual q(pi) = sum_j max_x [f_j S_j(x) - a_j x] + c.pi, each
    product's maximum found here from scipy.special (the normal and gamma fractiles by
    scipy's inverses, the discrete one by a search on the incomplete gamma and beta
    functions), independently of the solver's own demand classes;
  - DLP:  the LP dual objective c.pi + sum_j mean_j (f_j - a_j)^+;
  - PWL:  the LP dual objective c.pi + sum_j sum_k w_jk (f_j s_jk - a_j)^+.

Everything is numpy over products; the PWL tables are processed in chunks of
products to bound memory at a million products.
"""

from __future__ import annotations

import numpy as np
from scipy import special

from .result import Certificate, SolutionStatus, Termination

#: Seats within which an allocation counts as sitting on a bound (times max(1, bound)).
BOUND_TOL = 1e-6
#: Largest relative capacity violation of a certified answer.
FEAS_TOL = 1e-6
#: Products per chunk when the PWL segment table is expanded.
_CHUNK = 200_000


def _violation(instance, x):
    if instance.n_legs == 0:
        return 0.0, 0.0
    excess = instance.leg_load(x) - instance.capacity
    viol = float(max(0.0, excess.max()))
    rel = float(max(0.0, (excess / np.maximum(1.0, instance.capacity)).max()))
    return viol, rel


def _lp_terms(fare, a, x, width, slope):
    """(dual term, primal value, largest reduced-cost violation / fare) of segments.

    ``width`` and ``slope`` are (P, K); the allocation ``x`` fills the segments
    in order. A segment below its width with f s > a, or above zero with
    f s < a, violates complementarity by |f s - a|.
    """
    rc = fare[:, None] * slope - a[:, None]                       # reduced cost per segment
    dual = float(np.sum(width * np.maximum(rc, 0.0)))
    start = np.concatenate([np.zeros((width.shape[0], 1)), np.cumsum(width, axis=1)[:, :-1]], axis=1)
    fill = np.clip(x[:, None] - start, 0.0, width)
    primal = float(np.sum(fare[:, None] * slope * fill))
    tol = BOUND_TOL * np.maximum(1.0, width)
    below_top = fill < width - tol
    above_zero = fill > tol
    bad = np.where(below_top, np.maximum(rc, 0.0), 0.0)
    bad = np.maximum(bad, np.where(above_zero, np.maximum(-rc, 0.0), 0.0))
    kkt = float(np.max(bad / fare[:, None])) if bad.size else 0.0
    return dual, primal, kkt


def _lp_certificate(instance, x, pi_plus, model, segments):
    fare = instance.fare
    a = instance.leg_sum(pi_plus)
    dual, primal, kkt = float(instance.capacity @ pi_plus), 0.0, 0.0
    P = instance.n_products
    if model == "dlp":
        width = np.maximum(instance.mean, 0.0)[:, None]
        d, p, k = _lp_terms(fare, a, x, width, np.ones_like(width))
        return dual + d, p, k
    from .segments import segments as segment_table

    for lo in range(0, P, _CHUNK):                               # chunks of products, not products
        hi = min(P, lo + _CHUNK)
        part = _slice(instance, lo, hi)
        _, width, slope = segment_table(part, segments)
        d, p, k = _lp_terms(fare[lo:hi], a[lo:hi], x[lo:hi], width, slope)
        dual, primal, kkt = dual + d, primal + p, max(kkt, k)
    return dual, primal, kkt


def _slice(instance, lo, hi):
    """The product arrays lo:hi (legs dropped): enough for the segment table."""
    import dataclasses

    if lo == 0 and hi == instance.n_products:
        return instance
    n = hi - lo
    return dataclasses.replace(
        instance, product_ids=instance.product_ids[lo:hi], fare=instance.fare[lo:hi],
        mean=instance.mean[lo:hi], std=instance.std[lo:hi],
        distribution=None if instance.distribution is None else instance.distribution[lo:hi],
        leg_ptr=np.zeros(n + 1, dtype=np.int64), leg_index=np.zeros(0, dtype=np.int64),
        product_extra={})


def _pnlp_terms(instance, x, a, lo, hi, with_dual):
    """(primal value, largest KKT residual, sum of the dual's product terms) of the
    products lo:hi: each term depends on its own product only. Computed here from
    scipy.special, family by family, without the solver's own classes: a check of them."""
    from .distributions import family_codes

    codes = family_codes(instance)
    sl = slice(lo, hi)
    f, m, s = instance.fare[sl], instance.mean[sl], instance.std[sl]
    c = np.zeros(hi - lo, dtype=np.int8) if codes is None else codes[sl]
    xs, aa = np.maximum(x[sl], 0.0), a[sl]
    primal = dual = kkt = 0.0
    for fam in (_normal_terms, _gamma_terms, _discrete_terms, _known_terms):
        mask = fam.select(c, m, s)
        if not np.any(mask):
            continue
        p, d, k = fam(f[mask], m[mask], s[mask], c[mask], xs[mask], aa[mask], with_dual)
        primal, dual, kkt = primal + p, dual + d, max(kkt, k)
    return primal, kkt, dual


def _kkt(fare, a, x, right, left, mean):
    """Largest violation, over the fare, of right <= a / f <= left where x > 0 and of
    right <= a / f at x = 0 (the subproblem's optimality condition)."""
    ratio = a / fare
    at_zero = x <= BOUND_TOL * np.maximum(1.0, np.abs(mean))
    over = np.maximum(right - ratio, 0.0)
    under = np.where(at_zero, 0.0, np.maximum(ratio - left, 0.0))
    return float(np.max(over + under, initial=0.0))


def _normal_terms(f, m, s, c, x, a, with_dual):
    from . import normal

    sales = normal.expected_sales(x, m, s)
    slope = special.ndtr(-(x - m) / s)
    dual = 0.0
    if with_dual:
        r = np.clip(a / f, 1e-300, 1.0)
        xs = np.where(r < 1.0, np.maximum(m - s * special.ndtri(r), 0.0), 0.0)
        dual = float(np.sum(f * normal.expected_sales(xs, m, s) - a * xs))
    return float(f @ sales), dual, _kkt(f, a, x, slope, slope, m)


_normal_terms.select = lambda c, m, s: (c == 0) & (s > 0)


def _gamma_sales(x, m, s):
    """E[min(D, x)] = m P(k + 1, x / theta) + x Q(k, x / theta) for gamma D."""
    k, th = (m / s) ** 2, s * s / m
    y = x / th
    return m * special.gammainc(k + 1.0, y) + x * special.gammaincc(k, y)


def _gamma_terms(f, m, s, c, x, a, with_dual):
    k, th = (m / s) ** 2, s * s / m
    slope = special.gammaincc(k, x / th)
    dual = 0.0
    if with_dual:
        r = np.clip(a / f, 1e-300, 1.0)
        xs = np.where(r < 1.0, th * special.gammainccinv(k, r), 0.0)
        dual = float(np.sum(f * _gamma_sales(xs, m, s) - a * xs))
    return float(f @ _gamma_sales(x, m, s)), dual, _kkt(f, a, x, slope, slope, m)


_gamma_terms.select = lambda c, m, s: (c == 1) & (s > 0) & (m > 0)


def _discrete_sf(n, m, s, nb):
    """P(D > n) (1 for n < 0): Poisson P(n + 1, m), negative binomial I_{1-p}(n + 1, r)."""
    out = np.ones(len(n))
    pos = n >= 0
    po, q = pos & ~nb, pos & nb
    out[po] = special.gammainc(n[po] + 1.0, m[po])
    var = s[q] ** 2
    out[q] = special.betainc(n[q] + 1.0, m[q] ** 2 / (var - m[q]), 1.0 - m[q] / var)
    return out


def _discrete_sales(x, m, s, nb):
    """S(x), linear between whole seats: S(n) = m (1 - P(D* >= n)) + n P(D > n), D* = D
    (Poisson) or NB(r + 1, p), and S(x) = S(n) + (x - n) P(D > n)."""
    n = np.floor(x)
    sf = _discrete_sf(n, m, s, nb)
    tail = np.ones(len(n))
    pos = n >= 1
    po, q = pos & ~nb, pos & nb
    tail[po] = special.gammainc(n[po], m[po])
    var = s[q] ** 2
    tail[q] = special.betainc(n[q], m[q] ** 2 / (var - m[q]) + 1.0, 1.0 - m[q] / var)
    return m * (1.0 - tail) + n * sf + (x - n) * sf


def _discrete_terms(f, m, s, c, x, a, with_dual):
    nb = c == 3
    n = np.floor(x)
    right = _discrete_sf(n, m, s, nb)
    left = np.where(x == n, _discrete_sf(n - 1.0, m, s, nb), right)
    dual = 0.0
    if with_dual:
        star = _discrete_argmax(f, m, s, nb, a, n)
        dual = float(np.sum(f * _discrete_sales(star, m, s, nb) - a * star))
        # a bid-price sum of 0 leaves the whole demand open: the term's supremum is f m
        free = ~(a > 0)
        dual += float(np.sum(f[free] * m[free] - (f[free] * _discrete_sales(star[free], m[free], s[free], nb[free])
                                                 - a[free] * star[free])))
    return float(f @ _discrete_sales(x, m, s, nb)), dual, _kkt(f, a, x, right, left, m)


_discrete_terms.select = lambda c, m, s: ((c == 2) | (c == 3)) & (m > 0)


def _discrete_argmax(f, m, s, nb, a, start):
    """The smallest whole n with f P(D > n) <= a (the subproblem's maximizer), found from
    ``start`` by a doubling search and bisection on scipy's tail probabilities."""
    ratio = a / f
    lo = np.full(len(a), -1.0)                    # f sf(lo) > a
    hi = np.maximum(start, 0.0)
    low_enough = _discrete_sf(hi, m, s, nb) <= ratio
    # bracket: hi with sf(hi) <= ratio, lo with sf(lo) > ratio
    step = np.ones(len(a))
    up = np.flatnonzero(~low_enough & (ratio > 0))
    while len(up):
        lo[up] = hi[up]
        hi[up] = hi[up] + step[up]
        step[up] *= 2.0
        up = up[~(_discrete_sf(hi[up], m[up], s[up], nb[up]) <= ratio[up])]
    # from above: steps that double too (an allocation of 1e12 seats on an unlimited leg
    # starts this search there), never below 0, the smallest answer
    down = np.flatnonzero(low_enough & (hi > 0) & (ratio > 0))
    step = np.ones(len(a))
    while len(down):
        trial = np.maximum(hi[down] - step[down], 0.0)
        ok = _discrete_sf(trial, m[down], s[down], nb[down]) <= ratio[down]
        lo[down] = np.where(ok, lo[down], trial)
        hi[down] = np.where(ok, trial, hi[down])
        step[down] *= 2.0
        down = down[ok & (hi[down] > 0)]
    while True:
        idx = np.flatnonzero(hi - lo > 1)
        if not len(idx):
            break
        mid = np.floor(0.5 * (lo[idx] + hi[idx]))
        # beyond 2**53 whole numbers are not all floats: a midpoint equal to an end ends there
        stuck = (mid <= lo[idx]) | (mid >= hi[idx])
        lo[idx[stuck]] = hi[idx[stuck]]
        idx, mid = idx[~stuck], mid[~stuck]
        ok = _discrete_sf(mid, m[idx], s[idx], nb[idx]) <= ratio[idx]
        hi[idx] = np.where(ok, mid, hi[idx])
        lo[idx] = np.where(ok, lo[idx], mid)
    return np.where(ratio > 0, hi, 0.0)


def _known_terms(f, m, s, c, x, a, with_dual):
    mk = np.maximum(m, 0.0)
    sales = np.minimum(x, mk)
    right = (x < mk).astype(float)
    left = np.where(x > mk, 0.0, 1.0)
    dual = float(mk @ np.maximum(f - a, 0.0)) if with_dual else 0.0
    return float(f @ sales), dual, _kkt(f, a, x, right, left, mk)


_known_terms.select = lambda c, m, s: ~(((c == 0) & (s > 0)) | ((c == 1) & (s > 0) & (m > 0))
                                        | (((c == 2) | (c == 3)) & (m > 0)))


def checked_point(instance, x, pi):
    """(x, pi) as float arrays, one allocation per product and one bid price per leg (a
    ValueError naming the shape otherwise)."""
    x = np.asarray(x, dtype=np.float64)
    pi = np.asarray(pi, dtype=np.float64)
    if x.shape != (instance.n_products,):
        raise ValueError(f"certify: x has shape {x.shape}, expected ({instance.n_products},)")
    if pi.shape != (instance.n_legs,):
        raise ValueError(f"certify: pi has shape {pi.shape}, expected ({instance.n_legs},)")
    return x, pi


def certify(instance, model: str, x, pi, *, dual_value=None, segments: int = 16,
            threads: int | None = None) -> Certificate:
    """The certificate of allocation ``x`` (per product) and bid prices ``pi`` (per leg).

    ``dual_value``: a dual bound already computed by the method (e.g. the
    Lagrangian's own q(pi)); when given it replaces the one computed here.
    ``segments``: K of the PWL model (ignored otherwise).
    ``threads``: PNLP only, the product terms are summed over slices of
    products on this many threads (:mod:`decomp.threads`; default all CPUs,
    from 200,000 products on).
    """
    x, pi = checked_point(instance, x, pi)
    if model not in ("dlp", "pnlp", "pwl"):
        raise ValueError(f"certify: unknown model {model!r}; valid models: dlp, pnlp, pwl")
    pi_plus = np.maximum(np.nan_to_num(pi, nan=0.0), 0.0)
    viol, viol_rel = _violation(instance, x)
    if model == "pnlp":
        from . import threads as _threads

        a = instance.leg_sum(pi_plus)
        parts = _threads.map_slices(lambda lo, hi: _pnlp_terms(instance, x, a, lo, hi, dual_value is None),
                                    instance.n_products, threads)
        primal = sum(p for p, _, _ in parts)
        kkt = max(k for _, k, _ in parts)
        if dual_value is None:
            # q(pi) = sum_j max_x [f_j S_j(x) - a_j x] + c.pi, as decomp.dual.evaluate
            dv = sum(t for _, _, t in parts) + float(instance.capacity @ pi_plus)
        else:
            dv = float(dual_value)
    else:
        dv_lp, primal, kkt = _lp_certificate(instance, x, pi_plus, model, segments)
        dv = dv_lp if dual_value is None else float(dual_value)
    gap = relative_gap(dv, primal)
    return Certificate(max_violation=viol, max_violation_rel=viol_rel, kkt_residual=kkt,
                       dual_value=float(dv), primal_value=float(primal), gap=float(gap),
                       min_bid_price=float(pi.min()) if pi.size else 0.0)


def relative_gap(upper: float, reference: float) -> float:
    """(upper - reference) / max(1, |reference|): a bound's (or a new value's) distance above a
    reference value, relative to it; the floor 1 keeps it finite near a revenue of zero. The
    certificate's gap is relative_gap(dual bound, primal revenue)."""
    return (float(upper) - float(reference)) / max(1.0, abs(float(reference)))


def solution_status(termination, certificate, tol: float, *, feas_tol: float = FEAS_TOL,
                    have_solution: bool = True) -> SolutionStatus:
    """How good the answer is: the one rule for every method.

    Optimal only when the solver converged AND this module's certificate shows the capacities
    kept (relative violation <= ``feas_tol``) and a relative gap of at most ``tol``, the
    ``SolverOptions.tol`` the user asked for (in absolute value: a clearly negative gap means the
    primal value is not attainable); feasible when the capacities are kept but either fails.

    Why ``tol`` itself, for every method: "optimal" then promises what the user asked for, in the
    same words whichever method answered. The Lagrangian method stops on this certified gap; a
    direct solver's own tolerance is something else (Ipopt's is a scaled KKT error, HiGHS's are
    feasibility tolerances), which is why its answer is judged by the certificate and not by its
    own claim. At the tolerances decomp passes them, HiGHS and Ipopt certify gaps far below
    ``tol`` on the ladder (about 1e-13 at tol 1e-9, 3e-10 at tol 1e-6), so the rule costs them
    nothing there; where one does not meet it, the answer is reported feasible with its gap.
    """
    if not have_solution or certificate is None:
        return SolutionStatus.NO_SOLUTION
    if not np.isfinite(certificate.primal_value) or certificate.max_violation_rel > feas_tol:
        return SolutionStatus.INFEASIBLE
    gap = certificate.gap
    if (Termination(termination) is Termination.OPTIMAL and gap is not None
            and np.isfinite(gap) and abs(gap) <= tol):
        return SolutionStatus.OPTIMAL
    return SolutionStatus.FEASIBLE
