"""A primal-dual interior-point method on the PNLP itself, for networks whose products
are all smooth (normal or gamma demand) or deterministic.

    max  sum_j f_j S_j(x_j)   s.t.   A x <= c,   0 <= x <= u

The barrier problem at level mu (s = c - A x the slack),

    min  phi(x) = -sum_j f_j S_j(x_j) - mu sum_j (log x_j + log(u_j - x_j)) - mu sum_i log s_i,

is convex on the strictly feasible set. Each step is the primal-dual Newton direction
(Wachter and Biegler 2006, without the filter: every iterate is strictly feasible, so
the only measure is phi): it solves M dx = -grad phi with

    M = diag(f p(x) + z / x + v / (u - x)) + A^T diag(y / s) A,

p the demand density and z, v, y the multipliers of the bounds and the capacities.
M is positive definite, so dx is a descent direction, and the step is taken by
Armijo's rule on phi within the fraction-to-the-boundary rule: on each barrier level
this is damped Newton on a strictly convex function (it converges). mu falls by
Fiacco and McCormick's monotone rule once the level's optimality error is below
KAPPA_EPS mu. Eliminating dx leaves one system of leg size for the change dy of y,

    (A D A^T + S Y^-1) dy = A D r - s + mu / y,
    D = diag(f p(x) + z / x + v / (u - x))^-1,   r = f S'(x) + mu / x - mu / (u - x) - A^T y,

then dx = D (r - A^T dy): the pattern of the dual's Hessian, which
:class:`.hessian.LegSystem` already factors. The leg multipliers y are bid prices.

Why a second method: where demand has a small CV, a product's term of the dual is
nearly a kink (its fractile falls from m - 3 s to 0 within a tiny range of bid prices,
and the dual's curvature spans a dozen decades across one Newton step), while in the
primal that product is merely nearly linear on [0, m - 3 s]; the barrier treats that
as it treats an LP. The loop (:mod:`.loop`) turns to it when projected Newton stalls.

Every iterate is certified as the Newton loop's are: the exact dual q(y) is an upper
bound and the (feasible) allocation's exact revenue a lower bound; the method stops
when their gap is within tol.
"""

from __future__ import annotations

import time

import numpy as np

from ..result import IterationRecord
from .recovery import smallest_over_legs, within_capacity

#: The first barrier level (objective in units of the largest fare).
MU_START = 1e-1
#: Fiacco-McCormick: a level is done when its optimality error is below KAPPA_EPS mu;
#: the next is min(KAPPA_MU mu, mu ^ THETA_MU). KAPPA_MU and THETA_MU are Ipopt's
#: defaults; KAPPA_EPS is 100 rather than its 10, measured when chosen: generator-sweep
#: draws 7, 25 and 81 took 85, 109 and 76 iterations instead of 98, 162 and 114.
KAPPA_EPS, KAPPA_MU, THETA_MU = 100.0, 0.2, 1.5
#: The bound multipliers stay within a factor KAPPA_SIGMA of mu / distance to the bound.
KAPPA_SIGMA = 1e10
#: The first iterate: x at the mean within [X_LOW, X_HIGH] of the bound, then scaled down
#: so that every leg is at most FILL full.
X_LOW, X_HIGH, FILL = 0.05, 0.5, 0.5
#: The fraction of the distance to the boundary a step may go. Fixed: with Ipopt's
#: max(0.99, 1 - mu) a tight leg's slack fell to 1e-12 in one step at mu = 2e-6 on
#: generator draw 7, and the next directions were rounding (no descent).
TO_BOUNDARY = 0.995
#: The certificate (an exact dual evaluation and an exact revenue, half of an iteration's
#: work with gamma demand) is computed once the complementarity, the duality gap of a
#: primal-dual feasible point, is within CERTIFY_WITHIN tol of the objective, and every
#: CERTIFY_EVERY iterations before.
CERTIFY_WITHIN, CERTIFY_EVERY = 1e3, 10
#: Armijo's sufficient-decrease fraction and the backtracking factor.
ARMIJO, BACKTRACK = 1e-4, 0.5


def applies(net) -> bool:
    """Whether every product is smooth or deterministic (no discrete demand)."""
    return net.n_products > 0 and not len(net.sub.i_dis)


class _Iterate:
    """The iterate, in units where the largest fare is 1 (so y is bid price / fare_max)."""

    def __init__(self, net, y0, fare_max, mu):
        sub = net.sub
        self.net = net
        self.fscale = sub.fare / fare_max
        ub = net.upper.astype(np.float64).copy()
        if len(sub.i_det):
            ub[sub.i_det] = np.minimum(ub[sub.i_det], sub.t_m)
        # a deterministic product with mean 0 keeps a sliver of room (it earns nothing)
        self.ub = np.maximum(ub, 1e-9)
        x = np.clip(np.maximum(sub.mean, 0.0), X_LOW * self.ub, X_HIGH * self.ub)
        fill = np.minimum(1.0, FILL * net.cap / np.maximum(net.load(x), 1e-300))
        self.x = x * net.to_products(smallest_over_legs(net, fill, np.ones(net.n, dtype=bool)))
        self.s = net.cap - net.load(self.x)
        self.y = np.maximum(y0 / fare_max, mu / self.s)
        self.z = mu / self.x
        self.v = mu / (self.ub - self.x)

    def derivatives(self):
        """(f S'(x), f p(x)) in fare units."""
        sub = self.net.sub
        return self.fscale * sub.marginal_sales(self.x)[0], self.fscale * sub.sales_density(self.x)

    def barrier(self, x, s, mu):
        if np.any(x <= 0) or np.any(x >= self.ub) or np.any(s <= 0):
            return np.inf
        revenue = self.fscale @ self.net.sub.expected_sales(x)
        return float(-revenue - mu * (np.log(x).sum() + np.log(self.ub - x).sum() + np.log(s).sum()))

    def complementarity(self):
        """x z + (u - x) v + s y, summed (fare units)."""
        return float(self.x @ self.z + (self.ub - self.x) @ self.v + self.s @ self.y)

    def dual_residual(self, g1):
        """The largest |f S'(x) - A^T y + z - v| (fare units), independent of mu."""
        net = self.net
        rd = -g1 + net.to_products(net.AT_g @ self.y) - self.z + self.v
        return float(np.abs(rd).max(initial=0.0))

    def error(self, residual, mu):
        """A barrier level's optimality error: the dual residual and the complementarity."""
        return max(residual,
                   float(np.abs(self.x * self.z - mu).max(initial=0.0)),
                   float(np.abs((self.ub - self.x) * self.v - mu).max(initial=0.0)),
                   float(np.abs(self.s * self.y - mu).max(initial=0.0)))


def run_interior(net, system, tol, limit, deadline, t0, y0, fare_max, best):
    """Iterate until ``best`` (a :class:`.loop.Certified`, offered every iterate) is within
    tol; returns (termination word, iterations, history). ``y0``: starting bid prices."""
    mu = MU_START
    cur = _Iterate(net, y0, fare_max, mu)
    held = np.zeros(net.n, dtype=bool)
    history = []
    step = 0.0
    pairs = 2 * net.n_products + net.n
    for it in range(1, limit + 1):
        if it % CERTIFY_EVERY == 1 or cur.complementarity() * fare_max <= CERTIFY_WITHIN * tol * _size(best):
            _certify(net, cur, fare_max, best)
        history.append(IterationRecord(iteration=it, dual_value=float(best.dual),
                                       primal_value=float(best.primal), gap=_finite(best.gap),
                                       step=float(step), pi_norm=float(np.linalg.norm(best.pi)),
                                       seconds=time.perf_counter() - t0))
        if best.gap <= tol:
            return "optimal", it, history
        if deadline is not None and time.perf_counter() > deadline:
            return "time_limit", it, history
        g1, h = cur.derivatives()
        # the barrier's duality gap is about pairs * mu (fare units): the last level keeps
        # it at a tenth of tol, in the certificate's relative measure
        mu_floor = 0.1 * tol * _size(best) / (pairs * fare_max)
        residual = cur.dual_residual(g1)
        while mu > mu_floor and cur.error(residual, mu) <= KAPPA_EPS * mu:
            mu = max(mu_floor, min(KAPPA_MU * mu, mu ** THETA_MU))
        d = _direction(net, system, cur, g1, h, mu, held)
        if d is None:
            return "numerical_error", it, history
        step = _take_step(cur, d, g1, mu)
        if step == 0.0:
            return "numerical_error", it, history
    return "iteration_limit", limit, history


def _direction(net, system, cur, g1, h, mu, held):
    """(dx, dy, dz, dv): the primal-dual Newton direction at barrier level mu. The leg
    system is solved for the change dy (its right-hand side is a residual, small near
    the level's solution), not for y + dy: near a tight leg's bound mu / s is large and
    dx = D (r - A^T (y + dy)) would be the difference of two large numbers."""
    x, ub, s, y = cur.x, cur.ub, cur.s, cur.y
    D = 1.0 / (h + cur.z / x + cur.v / (ub - x))
    r1 = g1 + mu / x - mu / (ub - x) - net.to_products(net.AT_g @ y)
    hv = system.pair_values(net.to_groups(D))
    hv[system.diag_pair] += s / y
    diag = system.diagonal(hv)
    if not (np.all(np.isfinite(diag)) and np.all(diag > 0)):
        return None
    scale = 1.0 / np.sqrt(diag)
    dy = scale * system.solve(hv, scale, held, 0.0, scale * (net.load(D * r1) - s + mu / y))
    if not np.all(np.isfinite(dy)):
        return None
    dx = D * (r1 - net.to_products(net.AT_g @ dy))
    dz = mu / x - cur.z - (cur.z / x) * dx
    dv = mu / (ub - x) - cur.v + (cur.v / (ub - x)) * dx
    return dx, dy, dz, dv


def _take_step(cur, d, g1, mu):
    """Armijo on the barrier function within the fraction to the boundary (``g1``: f S'(x)
    in fare units, for the slope); the dual variables take their own fraction-to-the-
    boundary step. Returns the primal step, 0 if none decreases the barrier function."""
    net = cur.net
    dx, dy, dz, dv = d
    ds = -net.load(dx)
    alpha = TO_BOUNDARY * min(_longest(cur.x, dx), _longest(cur.ub - cur.x, -dx), _longest(cur.s, ds))
    slope = float(-(g1 + mu / cur.x - mu / (cur.ub - cur.x)) @ dx - (mu / cur.s) @ ds)
    phi0 = cur.barrier(cur.x, cur.s, mu)
    noise = 1e-13 * max(1.0, abs(phi0))
    while alpha > 1e-14:
        x, s = cur.x + alpha * dx, cur.s + alpha * ds
        if cur.barrier(x, s, mu) <= phi0 + ARMIJO * alpha * min(slope, 0.0) + noise:
            break
        alpha *= BACKTRACK
    else:
        return 0.0
    alpha_d = TO_BOUNDARY * min(_longest(cur.y, dy), _longest(cur.z, dz), _longest(cur.v, dv))
    # the slack is carried, not recomputed as c - A x: on a tight leg that difference
    # loses every digit of a slack far below the capacity
    cur.x, cur.s = x, s
    cur.y = cur.y + alpha_d * dy
    cur.z = np.clip(cur.z + alpha_d * dz, mu / (KAPPA_SIGMA * x), KAPPA_SIGMA * mu / x)
    cur.v = np.clip(cur.v + alpha_d * dv, mu / (KAPPA_SIGMA * (cur.ub - x)), KAPPA_SIGMA * mu / (cur.ub - x))
    return alpha


def _longest(value, change):
    """The largest t <= 1 with value + t change >= 0 (value > 0)."""
    neg = change < 0
    if not np.any(neg):
        return 1.0
    return float(min(1.0, np.min(-value[neg] / change[neg])))


def _certify(net, cur, fare_max, best):
    """Offer the iterate's bid prices (exact dual) and its allocation (the carried slack
    keeps A x <= c up to rounding; within_capacity removes that too)."""
    best.offer_dual(net.evaluate(np.maximum(cur.y, 0.0) * fare_max))
    best.offer_primal(*within_capacity(net, np.minimum(cur.x, net.upper)))


def _size(best):
    """The objective's size in the certificate's relative measure: max(1, |best primal|)."""
    return max(1.0, abs(best.primal)) if np.isfinite(best.primal) else 1.0


def _finite(v):
    return float(v) if np.isfinite(v) else None
