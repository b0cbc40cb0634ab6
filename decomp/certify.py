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
  (dual - primal) / max(1, |primal|):

  - PNLP: the Lagrangian dual q(pi) (:func:`decomp.dual.evaluate`);
  - DLP:  the LP dual objective c.pi + sum_j mean_j (f_j - a_j)^+;
  - PWL:  the LP dual objective c.pi + sum_j sum_k w_jk (f_j s_jk - a_j)^+.

Everything is numpy over products; the PWL tables are processed in chunks of
products to bound memory at a million products.
"""

from __future__ import annotations

import numpy as np

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
    from models import pwl

    for lo in range(0, P, _CHUNK):                               # chunks of products, not products
        hi = min(P, lo + _CHUNK)
        part = _slice(instance, lo, hi)
        _, width, slope = pwl.segments(part, segments)
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


def _pnlp_kkt(instance, x, a):
    """Largest per-product violation of f S'(x) = a (x > 0) / f S'(x) <= a (x = 0), over f."""
    from . import distributions

    fare, mean, std = instance.fare, instance.mean, instance.std
    ratio = a / fare
    tol = BOUND_TOL * np.maximum(1.0, np.abs(mean))
    at_zero = x <= tol
    # products with std > 0: S'(x) = P(D > x)
    tail = distributions.marginal_sales(instance, np.maximum(x, 0.0))
    r = np.where(at_zero, np.maximum(tail - ratio, 0.0), np.abs(tail - ratio))
    det = std <= 0
    if np.any(det):
        # std = 0: S(x) = min(x, mean), derivative 1 below the mean, 0 above,
        # any value in [0, 1] at the mean (and at 0 when mean = 0).
        xd, md, rd = x[det], np.maximum(mean[det], 0.0), ratio[det]
        td = tol[det]
        lo_slope = np.where(xd < md - td, 1.0, 0.0)              # right derivative
        hi_slope = np.where((xd > td) & (xd > md + td), 0.0, 1.0)  # left derivative (x>0)
        hi_slope = np.where(xd <= td, np.inf, hi_slope)          # at x = 0 any ratio above is fine
        rdet = np.maximum(lo_slope - rd, 0.0) + np.maximum(rd - hi_slope, 0.0)
        r = r.copy()
        r[det] = rdet
    return float(r.max()) if r.size else 0.0


def _pnlp_terms(instance, x, a, lo, hi, with_dual):
    """(primal value, largest KKT residual, sum of the dual's product terms) of the
    products lo:hi: each term depends on its own product only."""
    from . import distributions

    part = _slice(instance, lo, hi)
    xs, aa = x[lo:hi], a[lo:hi]
    sub = distributions.Subproblems.from_instance(part)
    primal = float(part.fare @ sub.expected_sales(np.maximum(xs, 0.0))) if hi > lo else 0.0
    kkt = _pnlp_kkt(part, xs, aa)
    terms = 0.0
    if with_dual and hi > lo:
        with np.errstate(divide="ignore", invalid="ignore"):   # std = 0 products in the fractile
            terms = float(sub.evaluate(aa).exact_value)
    return primal, kkt, terms


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
    x = np.asarray(x, dtype=np.float64)
    pi = np.asarray(pi, dtype=np.float64)
    if x.shape != (instance.n_products,):
        raise ValueError(f"certify: x has shape {x.shape}, expected ({instance.n_products},)")
    if pi.shape != (instance.n_legs,):
        raise ValueError(f"certify: pi has shape {pi.shape}, expected ({instance.n_legs},)")
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
    gap = (dv - primal) / max(1.0, abs(primal))
    return Certificate(max_violation=viol, max_violation_rel=viol_rel, kkt_residual=kkt,
                       dual_value=float(dv), primal_value=float(primal), gap=float(gap),
                       min_bid_price=float(pi.min()) if pi.size else 0.0)


def solution_status(termination, certificate, *, gap_tol: float = 1e-6,
                    feas_tol: float = FEAS_TOL, have_solution: bool = True) -> SolutionStatus:
    """How good the answer is: optimal only when the solver converged AND the
    certificate shows capacities kept (relative violation <= ``feas_tol``) and
    a gap of at most ``gap_tol`` (in absolute value: a clearly negative gap
    means the primal value is not attainable)."""
    if not have_solution or certificate is None:
        return SolutionStatus.NO_SOLUTION
    if not np.isfinite(certificate.primal_value) or certificate.max_violation_rel > feas_tol:
        return SolutionStatus.INFEASIBLE
    gap = certificate.gap
    if (Termination(termination) is Termination.OPTIMAL and gap is not None
            and np.isfinite(gap) and abs(gap) <= gap_tol):
        return SolutionStatus.OPTIMAL
    return SolutionStatus.FEASIBLE


def gap_tolerance(tol: float) -> float:
    """The certified-gap threshold used with solver tolerance ``tol``.

    A solver's own tolerance is not a relative duality gap (Ipopt's is a scaled
    KKT error, HiGHS's are feasibility tolerances), so the certificate allows
    a relative gap of max(10 tol, 1e-7).
    """
    return max(10.0 * float(tol), 1e-7)
