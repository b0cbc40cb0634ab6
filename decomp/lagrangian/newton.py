"""Projected Newton on min q(pi) subject to pi >= 0 (Bertsekas 1982).

Bertsekas, "Projected Newton methods for optimization problems with simple
constraints", SIAM J. Control Optim. 20(2), 1982: at pi with gradient g, the
legs in the epsilon-active set

    held = {i : pi_i <= eps and g_i > 0},  eps = min(eps_bar, |pi - [pi - D g]^+|)

(slack legs at or next to bid price 0) take a diagonally scaled gradient step
(falling by at most a factor KAPPA per step, see :func:`step_floor`);
the others (the free legs) take the Newton step of the reduced Hessian
H_FF (+ lam I, Levenberg-Marquardt, after diagonal scaling). The trial point
follows the projection arc pi(t) = max(pi + t d, l), l the step's lower bounds
(the floor r below, and a fall by at most a factor KAPPA: :func:`step_floor`;
the paper's arc is the case l = 0), and is accepted by Armijo's rule on that
arc, q(pi) - q(pi(t)) >= sigma g.(pi - pi(t)), halving t. Every
limit point is stationary, hence optimal for the convex dual (Proposition 2
of the paper, for scalings with eigenvalues bounded away from 0 and
infinity, which lam provides); near a solution at which the free legs are
exactly those with positive bid price, the held set is identified and the
steps are Newton's on the free legs. No step needs bid prices positive.

The bound is pi >= r (r = ``floor``, :data:`decomp.lagrangian.prices.FLOOR` of
the largest fare) rather than pi >= 0: within r of zero the dual of a
normal (or gamma, Poisson, negative-binomial) product whose legs are all
nearly free is steeper than any step can resolve (its allocation follows the
demand's tail, x = m + s z with z -> infinity as a -> 0), so slack legs would
zig-zag there. Bounding below by r changes the optimal dual value by at most
r sum_i c_i (convexity: q(pi* + r 1) <= q* + r c.1), and legs that end at r
are reported at bid price 0, where the certificate is computed again.

Curvatures: each product's w = -dx/da at pi, except for products whose
allocation crossed 0 in the last step, which take the chord's slope across
that step where it is larger (:func:`kink_curvature`), and products the step
itself would close or whose bid-price sum it moves far, which take the chord
of the step (:func:`chord_update`, a low-rank update of the factored system);
both only for networks without kinks, see the loop. The dual is once differentiable at
that kink, and the tangent there makes the steps oscillate across it or creep up to it.

Safeguard: when the Newton arc gives no decrease (the projection turned it
uphill, or rounding), a projected step along the diagonally scaled gradient
is tried, which is gradient projection with Armijo's rule along the arc
(Bertsekas, Nonlinear Programming, 2nd ed., section 2.3) and converges on
its own.
"""

from __future__ import annotations

import dataclasses

import numpy as np

SIGMA = 1e-4
#: Trials of the arc search at most. After a trial t fails Armijo's rule, the next is the
#: minimizer of the quadratic through the dual at 0, its first-order prediction and its
#: value at t, kept within [SHRINK_LOW, SHRINK_HIGH] t (safeguarded interpolation, Nocedal
#: and Wright 2006, section 3.5: the convergence argument of Armijo's rule holds for any
#: backtracking factors in a fixed interval inside (0, 1)); halving (SHRINK_HIGH) where the
#: prediction is within INTERPOLATE_ABOVE of the dual's rounding, whose values there
#: cannot fit a model. Against halving alone, on p10k and p100k mix and low-CV networks of
#: six seeds and gamma: 19% fewer dual evaluations (1,142 -> 930), solve 17.1 -> 15.3 s;
#: the ladder's normal cases unchanged (p1m 11 iterations; without the rounding guard 12).
MAX_TRIALS = 50
SHRINK_LOW, SHRINK_HIGH = 0.1, 0.5
INTERPOLATE_ABOVE = 1e6
#: A full step whose decrease is at least this fraction of its first-order prediction
#: (a quadratic model gives 1/2) is tried longer, up to 2^MAX_DOUBLINGS.
EXPAND = 0.75
MAX_DOUBLINGS = 8
#: A bid price falls by at most this factor in one step (see step_floor).
KAPPA = 10.0
#: At most this many product groups take the chord of the step (see chord_update), and
#: those whose bid-price sum changes by more than this fraction of itself do.
MAX_RANK = 64
CHORD_CHANGE = 0.05
#: ... and only when that changes some leg's curvature by more than this fraction.
MIN_CHANGE = 0.05
#: Levenberg-Marquardt factor on the scaled system: start, bounds.
LAM_START, LAM_MIN, LAM_MAX = 1e-8, 1e-12, 1e6


@dataclasses.dataclass(frozen=True, eq=False)
class Direction:
    d: np.ndarray          # per leg
    held: np.ndarray       # legs held at their bound (bool)
    decrement: float       # g.(pi - [pi + d]^+): the step's first-order decrease (> 0 unless stationary)
    curvature: np.ndarray  # the diagonal the step was scaled with
    stationarity: float    # g.(pi - [pi - g/h]^+): the diagonally scaled projected decrement
    lower: np.ndarray      # per leg: the projection's lower bound for this step
    fixed: np.ndarray      # legs outside the Newton system (held or flat)


def leg_curvature(system, hv):
    """The Hessian's diagonal and the mask of flat legs (no curvature: all their
    products at x = 0, at their bound u, or between breakpoints)."""
    h = system.diagonal(hv)
    flat = ~(h > 0) | ~np.isfinite(h)
    return np.where(flat, 1.0, h), flat


def flat_step(pt, flat, fare_scale):
    """Flat legs: the dual is linear in their bid price up to the next breakpoint, so
    they go to the bound when slack (g > 0) and double (or rise to a fare scale) when
    overloaded; the arc search halves the step back to the breakpoint."""
    g, pi = pt.grad[flat], pt.pi[flat]
    return np.where(g > 0, -pi, np.where(g < 0, np.maximum(pi, fare_scale[flat]), 0.0))


def direction(net, system, pt, lam, eps_bar, floor, previous=None, chords=False) -> Direction:
    """The projected Newton direction at ``pt`` (see the module docstring); with the
    ``previous`` iterate, the curvatures of :func:`kink_curvature`; with ``chords``, the
    correction of :func:`chord_update`."""
    w_g = pt.w_g if previous is None else kink_curvature(net, pt, previous)
    hv = system.pair_values(w_g)
    h, flat = leg_curvature(system, hv)
    g, pi = pt.grad, pt.pi
    proj = pi - np.maximum(pi - g / h, floor)
    proj[flat] = 0.0
    eps = min(eps_bar, float(np.sqrt(proj @ proj)))
    held = (pi <= floor + eps) & (g > 0)
    scale = 1.0 / np.sqrt(h)
    b = -g * scale
    b[held | flat] = 0.0
    lower = step_floor(pi, floor)
    u = system.solve(hv, scale, held | flat, lam, b)
    if chords:
        u = chord_update(net, system, pt, u, scale, held | flat, lower, w_g, hv)
    d = u * scale
    if np.any(held):
        d[held] = -g[held] / h[held]
    if np.any(flat):
        d[flat] = flat_step(pt, flat, net.fare_scale)
    # the decrement counts only what the projection lets the step realize
    realized = pi - np.maximum(pi + d, lower)
    return Direction(d=d, held=held, decrement=float(g @ realized), curvature=h, stationarity=float(g @ proj),
                     lower=lower, fixed=held | flat)


def chord_update(net, system, pt, u, scale, fixed, lower, w_g, hv):
    """The scaled step ``u`` solved again with the curvature of some groups taken from the
    chord of the step, (x_g(a) - x_g(a + da)) / da, instead of the tangent (``w_g``, the
    curvatures ``u`` was solved with, ``hv`` their pair values): the groups with a product the step would close
    (its allocation falls to 0 before the step's end: at x = 0 the allocation has a kink,
    its slope -w steepening towards 0 and 0 beyond, so the tangent predicts a fall in
    load the product cannot deliver), and the groups whose bid-price sum a changes by
    more than CHORD_CHANGE of itself (in the demand's tail the slope varies like 1 / a,
    and the tangent misjudges a large relative move). The change is A diag(dw) A^T over
    those k groups, a rank-k update of the factored system, solved by the Woodbury
    identity with k more solves and a k x k system; only for 0 < k <= MAX_RANK (beyond
    that, as on cold starts, the step stays the tangent's). Chords of a nonincreasing
    allocation are nonnegative and at most the largest w along them, so the curvatures
    stay bounded and the convergence argument is unchanged."""
    step = np.maximum(pt.pi + u * scale, lower) - pt.pi
    step[fixed] = 0.0
    da_g = net.AT_g @ step
    groups = chord_groups(net, pt, da_g)
    if groups is None or not len(groups):
        return u
    products, owner = net.members_of(groups)
    x_new = net.allocation_of(products, pt.a_g[owner] + da_g[owner])
    drop = np.bincount(np.searchsorted(groups, owner), weights=pt.x[products] - x_new, minlength=len(groups))
    dw = drop / da_g[groups] - w_g[groups]
    U = net.AT_g[groups].toarray().T                      # each group's legs
    # a change below MIN_CHANGE of every leg's curvature is not worth the solves
    if not np.any(U @ np.abs(dw) > MIN_CHANGE * system.diagonal(hv)):
        return u
    U *= scale[:, None]
    U[fixed] = 0.0
    Z = system.solve_again(U)
    if Z is None:
        return u
    K = np.eye(len(groups)) + dw[:, None] * (U.T @ Z)
    try:
        y = np.linalg.solve(K, dw * (U.T @ u))
    except np.linalg.LinAlgError:
        return u
    return u - Z @ y


def chord_groups(net, pt, da_g):
    """The groups (sorted) that take the chord in :func:`chord_update`, none of them with
    da = 0; None when they are more than MAX_RANK (or clearly so: the product-level test
    is skipped when more than MAX_RANK groups move far, or 4 MAX_RANK products close)."""
    moving = np.flatnonzero(np.abs(da_g) > CHORD_CHANGE * pt.a_g)
    if len(moving) > MAX_RANK:
        return None
    closing = np.flatnonzero(net.to_products(pt.a_g + da_g) >= net.zero_threshold)
    closing = closing[pt.x[closing] > 0]
    if len(closing) > MAX_RANK * 4:
        return None
    groups = np.union1d(net.group_of(closing), moving)
    groups = groups[da_g[groups] != 0]
    return groups if len(groups) <= MAX_RANK else None


def kink_curvature(net, pt, previous):
    """Per group: the curvatures w, where each product whose allocation crossed 0 between
    the ``previous`` iterate and this one takes the larger of its w and the slope of the
    chord between the two, (x - x_previous) / (a_previous - a). At x = 0 the allocation
    has a kink: its slope -w climbs steeply as it approaches 0, then drops to 0 beyond.
    The tangent there is the wrong model: 0 on the closed side, too flat on the open
    one, and on a leg where such products carry much of the curvature the steps
    overshoot and oscillate across the kink. The chord is the response the last step
    measured. The curvatures stay nonnegative and bounded (the largest w along the
    chord), as the convergence argument needs, and once the products stop crossing
    the steps are Newton's again."""
    crossed = np.flatnonzero((pt.x > 0) != (previous.x > 0))
    groups = net.group_of(crossed)
    a = pt.a_g[groups]
    da = previous.a_g[groups] - a
    moved = np.abs(da) > 1e-12 * np.maximum(np.abs(a), 1.0)
    if not np.any(moved):
        return pt.w_g
    crossed, groups, da = crossed[moved], groups[moved], da[moved]
    chord = (pt.x[crossed] - previous.x[crossed]) / da
    w_g = pt.w_g.copy()
    np.add.at(w_g, groups, np.maximum(chord - pt.w[crossed], 0.0))
    return w_g


def step_floor(pi, floor):
    """The step's lower bounds: every bid price falls by at most a factor KAPPA in one
    step, and never below the floor. Without it a leg could be thrown from a moderate
    bid price deep into the demand's tail (1e-10 of the fare), where its curvature is
    huge and Newton climbs back out only a little per step: legs held at the
    optimum's start are often only nearly slack. A leg truly slack reaches the
    reporting resolution in a few steps (a factor 10 each). The bound is a box
    around pi that the arc search projects on, holding a neighbourhood of pi in
    the feasible set (every bid price above the floor may fall by (1 - 1/KAPPA)
    of itself), so Armijo's rule and the convergence argument are unchanged."""
    return np.maximum(pi / KAPPA, floor)


def gradient_direction(pt, curvature, floor) -> Direction:
    d = -pt.grad / curvature
    decrement = float(-(pt.grad @ d))
    return Direction(d=d, held=np.zeros(len(d), bool), decrement=decrement, curvature=curvature,
                     stationarity=decrement, lower=step_floor(pt.pi, floor), fixed=np.ones(len(d), bool))


def arc_search(net, pt, d, smoothing, lower):
    """Armijo's rule along the projection arc max(pi + t d, lower), from t = 1 down by
    safeguarded interpolation (:func:`_shrink`); (point, t) or None."""
    pi, g = pt.pi, pt.grad
    noise = 1e-14 * max(1.0, abs(pt.value))
    t = 1.0
    for _ in range(MAX_TRIALS):
        trial = np.maximum(pi + t * d, lower)
        pred = float(g @ (pi - trial))
        if pred <= 0.0:
            return None
        nt = net.evaluate(trial, smoothing)
        drop = pt.value - nt.value
        if drop >= SIGMA * pred or (pred <= noise and drop >= -noise):
            if t == 1.0 and drop >= EXPAND * pred:
                return _expand(net, pt, d, smoothing, lower, nt)
            return nt, t
        t *= _shrink(pred, drop, noise)
    return None


def _shrink(pred, drop, noise):
    """The factor of the next trial after one whose dual fell by ``drop`` against the
    first-order prediction ``pred`` (drop < SIGMA pred): with q(s) = q(0) - (pred/t) s + c s^2
    through q(t) = q(0) - drop, the minimizer is s = t pred / (2 (pred - drop))."""
    if pred <= INTERPOLATE_ABOVE * noise:
        return SHRINK_HIGH
    return min(SHRINK_HIGH, max(SHRINK_LOW, 0.5 * pred / (pred - drop)))


def _expand(net, pt, d, smoothing, lower, accepted):
    """The full step decreased the dual more than its quadratic model promises (the
    dual flattens along d, as on a leg whose bid price rises out of the demand's
    tail): double the step while the dual keeps decreasing. Every point returned
    satisfies Armijo's rule, so the convergence argument is unchanged."""
    t = 1.0
    for _ in range(MAX_DOUBLINGS):
        trial = np.maximum(pt.pi + 2.0 * t * d, lower)
        nt = net.evaluate(trial, smoothing)
        if not nt.value < accepted.value:
            break
        accepted, t = nt, 2.0 * t
    return accepted, t


def step(net, system, pt, lam, eps_bar, floor, dirn=None):
    """One safeguarded projected Newton step: (new point, direction, t, next lam) or None."""
    dirn = dirn or direction(net, system, pt, lam, eps_bar, floor)
    found = arc_search(net, pt, dirn.d, pt.smoothing, dirn.lower)
    if found is not None:
        nt, t = found
        lam = max(lam * 0.1, LAM_MIN) if t >= 1.0 else min(max(lam, LAM_START) * 2.0 / t, LAM_MAX)
        return nt, dirn, t, lam
    grad_dir = gradient_direction(pt, dirn.curvature, floor)
    found = arc_search(net, pt, grad_dir.d, pt.smoothing, grad_dir.lower)
    if found is None:
        return None
    nt, t = found
    return nt, grad_dir, t, min(lam * 10.0, LAM_MAX)
