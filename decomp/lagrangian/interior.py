"""A primal-dual interior-point method on a restricted problem (:mod:`.master`).

The master's variables are the smooth parts v_j of products (v_j = x_j - offset_j in
[0, u_j - offset_j], revenue f_j S_j(offset_j + v_j)) and free kinks y_k in [0, w_k]
(revenue r_k y_k); the fixed kinks are constants and have reduced the capacities to c'.
With the slack s = c' - A X (X the variables summed per product), the barrier problem
at level mu,

    min  -F(v, y) - mu sum (log v + log(u - v)) - mu sum (log y + log(w - y)) - mu sum log s,

is solved along the central path in two modes (the adaptive barrier strategy with a
monotone safeguard of Nocedal, Waechter and Waltz 2009):

- free mode, Mehrotra's predictor-corrector (Mehrotra 1992): an affine-scaling predictor
  gives sigma = (mu_aff / mu)^3, and the corrector aims at sigma mu with the predictor's
  second-order terms, improved by Gondzio's centrality correctors (Gondzio 1996). A
  master of smooth parts only takes one step length for primal and dual and stays in
  the wide neighbourhood of the central path (long-step path following); with kinks,
  primal and dual lengths are separate, as in linear programming;
- monotone mode, entered when a free step is short (the iterate has lost the central
  path: nearly kinked revenue, low-CV or gamma demand near its corner): Newton on the
  barrier problem at a fixed level (Fiacco and McCormick) until that problem is solved,
  then back to free mode. Damped Newton on the strictly convex barrier function
  converges from any interior point, which the free mode alone does not promise.

Eliminating the variables leaves one system of leg size,
with the dual Hessian's pattern (:class:`.hessian.LegSystem`),

    (A D A^T + S / lambda) d_lambda = A D rho + targets / lambda - s,
    D = (f p(x) + z / v + t / (u - v))^-1 per variable, summed per product,

lambda the leg multipliers, i.e. the bid prices (in units of the largest fare).
Every iterate is primal feasible (the slacks, and the distances to the upper bounds,
are carried; steps keep them positive within the fraction-to-the-boundary rule), and
where the master has smooth parts the primal step must decrease the barrier function
at the target level (Armijo; the primal-dual direction is a descent direction of it
because the eliminated matrix is positive definite), which globalizes the method on
their nonlinear revenue. The certificate is the loop's: the exact dual q(lambda) over
the whole problem and the exact revenue of the fixed seats plus the master's
allocation.
"""

from __future__ import annotations

import dataclasses
import logging
import time

import numpy as np

from . import newton
from .bounds import record
from .master import price
from .prices import FLOOR, settled
from .recovery import recover, smallest_over_legs, within_capacity

log = logging.getLogger(__name__)

#: The first barrier level (objective in units of the largest fare, seats).
MU_START = 1e-3
#: ... of a master of smooth parts only: its parts start at their own responses to the Newton
#: phase's bid prices and its legs' pairs centred (:meth:`_Iterate._place`), near the central
#: path at a lower level than a master with kinks, whose kinks start centred at the level
#: itself. Gamma p10k / p100k / p1m 22 / 22 / 31 iterations from 1e-3, 20 / 19 / 28 from
#: 1e-5 (bid prices as exact: within 2.3e-7 of a tol-1e-12 solve); from 1e-6 18 / 16 / 29,
#: but p10k's bid prices 7.6e-6 off.
MU_START_SMOOTH = 1e-5
#: The fraction of the distance to the boundary a step may go (at least; 1 - mu late on).
TO_BOUNDARY = 0.995
#: Gondzio's correctors: at most CORRECTORS of them, each aiming at a step STRETCH times
#: (+0.1) the current one, the products kept within [BETA_LOW, BETA_HIGH] times the target,
#: kept only if the step grows by GROWTH of the trial step.
CORRECTORS, STRETCH, BETA_LOW, BETA_HIGH, GROWTH = 2, 2.0, 0.1, 10.0, 0.1
#: Steps keep every complementarity product above NEIGHBOURHOOD times their average,
#: shrinking both by NEIGHBOURHOOD_SHRINK at most NEIGHBOURHOOD_TRIES times.
NEIGHBOURHOOD, NEIGHBOURHOOD_SHRINK, NEIGHBOURHOOD_TRIES = 1e-3, 0.8, 30
#: Armijo's sufficient-decrease fraction and the backtracking factor (all-primal masters).
ARMIJO, BACKTRACK = 1e-4, 0.5
#: The start is scaled so that no leg is fuller than this (masters with kinks; see _place
#: for those of smooth parts only).
FILL = 0.9
#: A free (predictor-corrector) step shorter than POOR_STEP hands over to the monotone
#: mode; that mode's barrier problem counts as solved when its optimality error is
#: within KAPPA_EPS times the level (Ipopt's kappa_eps; Nocedal, Waechter and Waltz 2009
#: safeguard the free mode the same way).
POOR_STEP, KAPPA_EPS = 0.1, 10.0
#: A solved monotone level is followed by one at most KAPPA_MU times it, or its power
#: THETA_MU (Ipopt's kappa_mu and theta_mu).
KAPPA_MU, THETA_MU = 0.2, 1.5
#: The certificate (an exact dual evaluation over the whole problem and a feasible
#: allocation's revenue) is computed at the first iteration and then at each once the
#: complementarity is within CERTIFY_WITHIN tol of the objective and has fallen by the
#: factor RECERTIFY since the last certificate (in the monotone mode it falls slowly,
#: and the gap falls with it: a smaller factor stops sooner at one more dual evaluation
#: per certificate).
CERTIFY_WITHIN, RECERTIFY = 1e2, 0.5
#: The iterate kept for the next master's start: the first at or below this barrier level,
#: and, in a master started from a kept iterate, at or below SNAPSHOT_PROGRESS times its
#: level (the next start then carries this master's progress, not the last one's start).
SNAPSHOT_MU, SNAPSHOT_PROGRESS = 1e-4, 0.1
#: A later master starts from the kept iterate only where at most this share of its variables
#: is new (pricing grew it little: a perturbation of the last one); otherwise it starts cold.
WARM_NEW = 0.25
#: What enters a warm-started master empty takes at most this share of a leg's slack.
ENTER_SHARE = 0.5
#: The barrier level's floor: complementarity MU_FLOOR tol of the objective (summed).
MU_FLOOR = 1e-2
#: The master counts as solved when, besides its complementarity, its largest dual
#: residual (a slope, in units of the largest fare) and its largest primal residual
#: (relative to the capacity) are below this.
RESIDUAL = 1e-11
#: ... beyond ROUNDING machine epsilons of the allocation times the curvature (the slope's
#: own rounding).
ROUNDING = 8 * np.finfo(float).eps
#: A settled iterate's exact dual replaces the best one where it is at most this share above
#: it (:func:`_report_settled`).
SAME_DUAL = 1e-13
#: The start's centring (:func:`_centre`) stops at Newton steps within this share of the bound.
CENTRE_TOL = 1e-12


@dataclasses.dataclass
class Variables:
    """The master's primal variables, in the method's units."""

    owner: np.ndarray     # product of each variable
    group: np.ndarray     # its group
    ub: np.ndarray        # upper bound (lower bound 0)
    n_smooth: int         # the first n_smooth are smooth parts
    offset: np.ndarray    # smooth parts: where they start (jump)
    slope: np.ndarray     # kinks: r / fare_max


class _Iterate:
    """Primal variables v (with carried distances to their upper bounds), slacks s; bound
    multipliers z, t; leg multipliers lambda."""

    def __init__(self, net, master, pi, fmax, mu):
        self.net, self.fmax = net, fmax
        self.capacity = master.capacity
        k = net.products.kinks
        owner = np.concatenate([master.smooth, master.kink_owner]).astype(np.int64)
        ub = np.concatenate([master.room, k.widths(master.kink)])
        self.var = var = Variables(owner=owner, group=net.group_of(owner), ub=np.maximum(ub, 1e-12),
                                   n_smooth=len(master.smooth), offset=master.offset,
                                   slope=k.slope[master.kink] / fmax)
        self.smooth = master.smooth
        lam = np.maximum(pi / fmax, 1e-12)
        a = self.prices(lam)
        n = var.n_smooth
        self.part = net.products.smooth_part(self.smooth) if n else None
        self._cache = None
        v = np.empty(len(var.ub))
        # kinks: centred at (lambda, mu), slope - a + mu/v - mu/(u - v) = 0
        v[n:] = _centre(lambda _, k=var.slope: (k, 0.0), a[n:], var.ub[n:], mu)
        if n:
            # smooth parts start at their own responses to the bid prices (the fractile beyond
            # the offset): where the curvature is steep the barrier's centre is far from there
            # in the part's own scale, and the method would crawl back. Those whose response
            # lies outside their box are centred like the kinks: closed ones (no response
            # beyond the offset), and those whose response is beyond their bound (a flat tail:
            # clipped to the bound, the multiplier of the bound would be mu / (u - v), huge,
            # and its dual residual with it; the method took some ten short steps to undo it)
            # (the whole products' response: its families keep their last answers as starts,
            # and the bid prices are the last evaluation's)
            x = net.products.respond(net.to_products(net.AT_g @ lam) * fmax).x[self.smooth] - var.offset
            v[:n] = x
            closed = np.flatnonzero(~((x > 0) & (x < var.ub[:n])))
            if len(closed):
                part = net.products.smooth_part(self.smooth[closed])
                off = var.offset[closed]
                v[closed] = _centre(lambda w: tuple(t / fmax for t in part.terms(off + w)[1:]), a[closed],
                                    var.ub[closed], mu)
        self._place(v, lam, mu)
        self.lam = np.maximum(lam, mu / self.s)
        self.z = mu / self.v
        self.t = mu / self.up
        self.residual = np.inf
        self.infeasibility = np.inf
        self.last_steps = (1.0, 1.0)
        #: the iterate kept for the next master's start (:class:`Snapshot`), once there is one
        self.snapshot = None

    def _place(self, v, lam, mu):
        """Start at ``v`` (kept inside its bounds), primal feasible: scaled into the
        capacities. A master of smooth parts only leaves each leg the slack mu / lambda that
        centres its pair (s lambda = mu, as its parts' pairs are), at most 1 - FILL of the
        capacity; a master with kinks leaves 1 - FILL of it. (A tenth of the capacity on
        every leg put the start's leg pairs at hundreds of times mu on binding legs, and the
        first steps went to closing them: gamma p10k / p100k / p1m 22 / 22 / 30 iterations,
        19 / 20 / 27 centred. With kinks, centred was as often worse as better: p100k low-CV
        seeds 3 and 5 38 to 54 and 42 to 65, mix seed 14 48 to 42.) The distances to the
        upper bounds and to the capacities are carried from here on, not computed as u - v
        and c' - A X: near a bound those differences lose every digit."""
        ub = self.var.ub
        v = np.clip(v, 1e-9 * ub, (1.0 - 1e-9) * ub)
        load = self.net.A_g @ self.per_group(v)
        slack = (1.0 - FILL) * self.capacity
        if self.var.n_smooth == len(ub):
            slack = np.minimum(mu / lam, slack)
        fill = np.minimum(1.0, (self.capacity - slack) / np.maximum(load, 1e-300))
        self.v = v * smallest_over_legs(self.net, fill, np.ones(self.net.n, dtype=bool))[self.var.group]
        self.up = ub - self.v
        self.s = self.capacity - self.net.A_g @ self.per_group(self.v)

    def per_group(self, values):
        return np.bincount(self.var.group, weights=values, minlength=self.net.G)

    def adopt(self, snap, master):
        """Start from an earlier master's iterate ``snap`` (primal-dual column generation),
        keeping its primal point: the legs' loads hardly move, so their slacks and
        multipliers stay as they were.

        - The variables both masters have keep their (v, z, t) (smooth parts by product,
          kinks by index; a smooth part whose cap pricing lifted keeps its seats).
        - A kink the last master had fixed full enters full (its seats were in the fixed
          load; (u - v) t at the snapshot's level), one fixed empty and the smooth part of a
          product it had closed enter (nearly) empty, together taking at most ENTER_SHARE
          of each leg's slack.
        - The entering variables' bound multipliers make their dual residuals 0
          (z - t = a - slope): the smallest such pair, each at least mu / u, for those that
          enter empty.

        (Until 2026-12-05 the kept variables were scaled into the capacities like a cold
        start, no leg fuller than FILL: on binding legs that opened a tenth of the capacity
        as slack at the snapshot's bid prices, and the start's average complementarity came
        out at 10 to 15 times the snapshot's level; the master's first step was then short and
        the monotone mode took 10 to 15 steps.)"""
        n = self.var.n_smooth
        ub = self.var.ub
        mu = snap.mu
        lam = np.maximum(snap.lam, 1e-12)
        a = self.prices(lam)
        v, z, t = np.full(len(ub), np.nan), np.empty(len(ub)), np.empty(len(ub))
        for mine, theirs, off_mine, off_theirs in ((self.smooth, snap.smooth, 0, 0),
                                                   (master.kink, snap.kink, n, snap.n_smooth)):
            if not len(mine) or not len(theirs):
                continue
            pos = np.minimum(np.searchsorted(theirs, mine), len(theirs) - 1)
            found = np.flatnonzero(theirs[pos] == mine)
            v[off_mine + found] = np.minimum(snap.v[off_theirs + pos[found]], (1.0 - 1e-9) * ub[off_mine + found])
            z[off_mine + found] = snap.z[off_theirs + pos[found]]
            t[off_mine + found] = snap.t[off_theirs + pos[found]]
        new = np.flatnonzero(np.isnan(v))
        new_kink, new_smooth = new[new >= n], new[new < n]
        was_full = self._was_full(master.kink[new_kink - n], snap.lo)
        # entering full: (u - v) t = mu and z - t = a - r, z >= mu / v
        full = new_kink[was_full]
        reduced = self.var.slope[full - n] - a[full]
        t_full = np.maximum(reduced, 0.0) + mu / ub[full]
        v[full] = ub[full] - np.minimum(mu / t_full, 0.5 * ub[full])
        z[full] = np.maximum(mu / v[full], t_full - reduced)
        t[full] = z[full] + reduced
        # entering empty: kinks where v z = mu with z = max(a - r, 0) + mu / u (at most half
        # their width), smooth parts at most 1e-3 of their bound; then scaled into the slack
        empty = new_kink[~was_full]
        z_empty = np.maximum(a[empty] - self.var.slope[empty - n], 0.0) + mu / ub[empty]
        v[empty] = np.minimum(mu / z_empty, 0.5 * ub[empty])
        v[new_smooth] = np.minimum(self.v[new_smooth], 1e-3 * ub[new_smooth])
        enter = np.concatenate([empty, new_smooth])
        v[enter] *= self._share_of_slack(v, enter)
        v[enter] = np.maximum(v[enter], 1e-12 * ub[enter])
        self.v, self.up = v, ub - v
        g, _ = self.slopes(v)
        reduced = g[enter] - a[enter]
        z[enter] = np.maximum(-reduced, 0.0) + mu / ub[enter]
        t[enter] = np.maximum(reduced, 0.0) + mu / ub[enter]
        self.z, self.t = z, t
        self.s = np.maximum(self.capacity - self.net.A_g @ self.per_group(v), 1e-15 * np.maximum(self.capacity, 1.0))
        self.lam = np.maximum(lam, mu / self.s)

    def _was_full(self, kinks, lo):
        """Per kink (flat index): whether a master with windows from ``lo`` had it fixed full."""
        k = self.net.products.kinks
        row = np.searchsorted(k.ptr, kinks, side="right") - 1
        return (kinks - k.ptr[row]) < lo[row]

    def _share_of_slack(self, v, enter):
        """Per entering variable: the factor (<= 1) that keeps the entering load within
        ENTER_SHARE of each of its legs' slack without it."""
        others = v.copy()
        others[enter] = 0.0
        room = np.maximum(self.capacity - self.net.A_g @ self.per_group(others), 0.0)
        entering = np.zeros(len(v))
        entering[enter] = v[enter]
        ask = self.net.A_g @ self.per_group(entering)
        allowed = ENTER_SHARE * room
        fit = np.ones(len(ask))
        np.divide(allowed, ask, out=fit, where=ask > allowed)
        return smallest_over_legs(self.net, fit, np.ones(self.net.n, dtype=bool))[self.var.group[enter]]

    def prices(self, lam):
        """a per variable: the sum of its product's leg multipliers."""
        return (self.net.AT_g @ lam)[self.var.group]

    def _terms(self, v):
        """(f S, f S', -f S'') of the smooth parts at ``v`` (fare_max units), kept for the
        last point asked: the line search's accepted trial is the next iterate."""
        x = self.var.offset + v[:self.var.n_smooth]
        if self._cache is None or not np.array_equal(self._cache[0], x):
            self._cache = (x, *(t / self.fmax for t in self.part.terms(x)))
        return self._cache[1:]

    def slopes(self, v):
        """(g, h): the revenue's slope and -curvature per variable (fare_max units)."""
        var = self.var
        n = var.n_smooth
        g = np.empty(len(v))
        h = np.zeros(len(v))
        g[n:] = var.slope
        if n:
            _, g[:n], h[:n] = self._terms(v)
        return g, h

    def revenue(self, v):
        """The master's revenue (fare_max units, up to a constant)."""
        var = self.var
        n = var.n_smooth
        out = float(var.slope @ v[n:])
        if n:
            out += float(self._terms(v)[0].sum())
        return out

    def move(self, direction, ap, ad):
        """Take the primal step ap and the dual step ad along ``direction``."""
        dv, ds, dl, dz, dt = direction
        self.v, self.up = self.v + ap * dv, self.up - ap * dv
        # a slack at the rounding of its leg's load is as good as none: keep it there
        self.s = np.maximum(self.s + ap * ds, 1e-15 * np.maximum(self.capacity, 1.0))
        self.z, self.t, self.lam = self.z + ad * dz, self.t + ad * dt, self.lam + ad * dl

    def residuals(self, g, h):
        """(dual residual per variable, primal residual per leg) at slopes ``g`` and
        curvatures ``h``; their largest sizes kept as ``residual`` (beyond the rounding of
        the slopes) and ``infeasibility`` (relative to capacity)."""
        rd = g - self.prices(self.lam) + self.z - self.t
        rp = self.primal_residual()
        n = self.var.n_smooth
        # a smooth part's slope is known only to its curvature times the rounding of its
        # allocation offset + v (nearly known demand: std 1e-5 of the mean and below)
        size = np.abs(rd)
        size[:n] -= ROUNDING * h[:n] * (self.var.offset + self.v[:n])
        self.residual = float(size.max(initial=0.0))
        self.infeasibility = float((np.abs(rp) / np.maximum(self.capacity, 1.0)).max(initial=0.0))
        return rd, rp

    def primal_residual(self):
        return self.capacity - self.net.A_g @ self.per_group(self.v) - self.s

    def complementarity(self):
        return float(self.v @ self.z + self.up @ self.t + self.s @ self.lam)

    def allocation(self, master):
        """Per product: the fixed seats plus the master's variables (a smooth part's seats
        are v; its offset, the jump, is either fixed or a free kink of its own)."""
        return master.fixed_x + np.bincount(self.var.owner, weights=self.v, minlength=len(master.fixed_x))


def solve_master(net, system, master, pi0, tol, limit, deadline, t0, bounds, history, first_iteration,
                 early_pricing=False, warm=None, settle=None):
    """The interior-point method on ``master`` from bid prices ``pi0``; every certified
    iterate is offered to ``bounds``; with ``early_pricing`` its fixed kinks are priced
    there too ("reprice" when one is violated: the master is left before its end, as in
    primal-dual column generation, which prices at well-centred points of an inexactly
    solved master). With ``settle`` (networks of smooth products only, whose bid prices are
    unique), a certified gap within tol ends the method only once its last step moved no
    bid price by more than that share of itself: the gap is reached where the bid prices
    may still be 1e-5 to 1e-4 of themselves from the optimum's on gamma networks, and the
    loop's settling Newton steps on the exact dual (:func:`.loop.settle`) do not converge
    there (products near closing, where the response's derivative in the bid price is
    unbounded for gamma shapes above 1). Returns (termination word, iterations, pi, final
    iterate)."""
    fmax = float(net.fare.max(initial=1.0))
    if not master.size:
        # a master without variables: its fixed seats are its whole allocation, and its own
        # optimal bid prices are 0 (its dual, min c' lambda over lambda >= 0, has no other
        # constraint). Certified at pi0 (a bound like any other); where that is not within
        # tol, priced at 0: a leg left slack by the fixed seats cannot keep the bid price
        # pi0 gave it, and the kinks fixed empty at pi0 that are profitable at 0 are freed.
        # (Pricing at pi0 instead found every fixed kink consistent and stopped with gaps of
        # 1.8 and 2.2 on two small Poisson networks of slack legs, family draws 1660, 1718.)
        _certify(net, master, None, pi0, bounds)
        if bounds.gap <= tol:
            return "optimal", 0, pi0, None
        return "master_solved", 0, np.zeros_like(pi0), None
    if warm is not None and warm.new_share(master) > WARM_NEW:
        warm = None
    start = MU_START_SMOOTH if len(master.smooth) == master.size else MU_START
    cur = _Iterate(net, master, pi0, fmax, start if warm is None else warm.mu)
    keep_at = SNAPSHOT_MU
    if warm is not None:
        cur.adopt(warm, master)
        keep_at = min(SNAPSHOT_MU, SNAPSHOT_PROGRESS * warm.mu)
    pairs = 2 * len(cur.v) + net.n
    certified = np.inf
    before = None                       # the bid prices before the last step
    level, next_level = None, np.inf
    for it in range(1, limit + 1):
        comp = cur.complementarity()
        violated = False
        fresh = it == 1 or (comp * fmax <= CERTIFY_WITHIN * tol * _size(bounds) and comp <= RECERTIFY * certified)
        if fresh:
            _certify(net, master, cur, cur.lam * fmax, bounds)
            certified = comp
            # the fixed kinks priced at this near-optimal point of the master: if one is on
            # the wrong side of its bid-price sum, the windows must grow in any case, and the
            # rest of this master's solve is spent on the wrong problem
            violated = early_pricing and it > 1 and price(net, master, cur.lam * fmax, caps=False) is not None
        history.append(record(first_iteration + it, bounds, cur.lam * fmax, 0.0, t0))
        if bounds.gap <= tol and (settle is None or before is not None
                                  and settled(before, cur.lam * fmax, settle, fmax)):
            if settle is not None and not fresh:
                _report_settled(net, master, cur, cur.lam * fmax, bounds)
            if bounds.gap <= tol:
                return "optimal", it, cur.lam * fmax, cur
        before = cur.lam * fmax
        if violated:
            return "reprice", it, cur.lam * fmax, cur
        # the master is solved (its own duality gap far below tol, its residuals met): back
        # to pricing
        if (comp * fmax <= 2 * MU_FLOOR * tol * _size(bounds) and cur.residual <= RESIDUAL
                and cur.infeasibility <= RESIDUAL):
            _certify(net, master, cur, cur.lam * fmax, bounds, final=True, system=system)
            return ("optimal" if bounds.gap <= tol else "master_solved"), it, cur.lam * fmax, cur
        if deadline is not None and time.perf_counter() > deadline:
            return "time_limit", it, cur.lam * fmax, cur
        mu = comp / pairs
        if cur.snapshot is None and mu <= keep_at and cur.var.n_smooth:
            cur.snapshot = Snapshot.of(cur, master, mu)
        # the barrier level need not fall below what tol asks of the complementarity: below
        # that the slacks would sink to the rounding of the loads and block the steps
        mu_min = MU_FLOOR * tol * _size(bounds) / (pairs * fmax)
        if level is None:
            # free mode: Mehrotra's predictor-corrector; a poor step (or none) hands over to
            # the monotone mode at the current level, or at the next one if lower
            if not _step(net, system, cur, mu, mu_min) or min(cur.last_steps) < POOR_STEP:
                level = max(min(mu, next_level), mu_min)
            continue
        # monotone mode: Newton on the barrier problem at a fixed level until it is solved
        # (its optimality error within KAPPA_EPS of the level); then back to free mode, the
        # next monotone level lower by KAPPA_MU (or to the power THETA_MU), so that the
        # levels fall however the modes alternate
        taken, error = _barrier_step(net, system, cur, level)
        if not taken:
            _certify(net, master, cur, cur.lam * fmax, bounds, final=True, system=system)
            return ("optimal" if bounds.gap <= tol else "numerical_error"), it, cur.lam * fmax, cur
        if error <= KAPPA_EPS * level:
            next_level = min(KAPPA_MU * level, level ** THETA_MU)
            level = None
    return "iteration_limit", limit, cur.lam * fmax, cur


@dataclasses.dataclass
class Snapshot:
    """A master's iterate kept for the next master's start. As in primal-dual column
    generation, the next master starts from a well-centred iterate of the last one (the
    first at or below SNAPSHOT_MU, and for a warm-started master below a tenth of its
    start's level: a third master from the second's first iterate, which is the first's
    kept one, took 48 iterations on a nightly date where from the second's own took 8),
    not from its end, where the variables sit at their bounds and a changed problem blocks
    the steps; :meth:`_Iterate.adopt` says how. Pricing may have grown the master too much
    for that (more than WARM_NEW of its variables new): it then starts cold (p100k gamma
    with means 30 times: 5,548 of 12,008 new, 130 iterations warm, 95 cold). Only masters
    with smooth parts keep one:
    their parts' positions cost the cold start most of its iterations; a master of kinks
    only, a linear program, started warm took more (p10k Poisson 66 -> 80, negative
    binomial 41 -> 50)."""

    mu: float
    smooth: np.ndarray
    kink: np.ndarray
    n_smooth: int
    v: np.ndarray
    z: np.ndarray
    t: np.ndarray
    lam: np.ndarray
    lo: np.ndarray          # the master's windows: per kink owner, kinks [0, lo) fixed full

    @classmethod
    def of(cls, cur, master, mu):
        return cls(mu=mu, smooth=cur.smooth.copy(), kink=master.kink.copy(), n_smooth=cur.var.n_smooth,
                   v=cur.v.copy(), z=cur.z.copy(), t=cur.t.copy(), lam=cur.lam.copy(), lo=master.lo.copy())

    def new_share(self, master) -> float:
        """The share of ``master``'s variables this iterate does not have."""
        kept = np.isin(master.smooth, self.smooth).sum() + np.isin(master.kink, self.kink).sum()
        return 1.0 - float(kept) / max(master.size, 1)


def _barrier_step(net, system, cur, mu):
    """One primal-dual Newton step on the barrier problem at the fixed level mu
    (Fiacco-McCormick); (taken, the barrier problem's optimality error before it)."""
    var = cur.var
    g, h = cur.slopes(cur.v)
    rd, rp = cur.residuals(g, h)
    v, up, s, lam, z, t = cur.v, cur.up, cur.s, cur.lam, cur.z, cur.t
    err = max(cur.residual, cur.infeasibility, float(np.abs(v * z - mu).max(initial=0.0)),
              float(np.abs(up * t - mu).max(initial=0.0)), float(np.abs(s * lam - mu).max(initial=0.0)))
    solve = _Solver(net, system, cur, h, rp)
    if solve.failed:
        return False, err
    direction = solve(rd, mu - v * z, mu - up * t, mu - s * lam)
    dv, ds, dl, dz, dt = direction
    frac = max(TO_BOUNDARY, 1.0 - mu)
    ap, ad = _steps(cur, direction)
    ap, ad = frac * ap, frac * ad
    if var.n_smooth:
        ap = _armijo(cur, g, dv, ds, ap, mu)
        if ap <= 0.0:
            return False, err
    log.debug("barrier mu %.3g err %.3g steps %.3g %.3g", mu, err, ap, ad)
    cur.move(direction, ap, ad)
    return True, err


def _step(net, system, cur, mu, mu_min) -> bool:
    """One predictor-corrector step, aiming no lower than ``mu_min``; False when no step
    could be taken."""
    var = cur.var
    g, h = cur.slopes(cur.v)
    rd, rp = cur.residuals(g, h)
    v, up, s, lam, z, t = cur.v, cur.up, cur.s, cur.lam, cur.z, cur.t
    solve = _Solver(net, system, cur, h, rp)
    if solve.failed:
        return False
    # predictor (affine scaling: targets 0)
    dv, ds, dl, dz, dt = solve(rd, -v * z, -up * t, -s * lam)
    ap, ad = _steps(cur, (dv, ds, dl, dz, dt))
    pairs = 2 * len(v) + len(s)
    mu_aff = ((v + ap * dv) @ (z + ad * dz) + (up - ap * dv) @ (t + ad * dt)
              + (s + ap * ds) @ (lam + ad * dl)) / pairs
    sigma = min(1.0, (mu_aff / mu) ** 3)
    target = max(sigma * mu, mu_min)
    # corrector: aim at sigma mu with the predictor's second-order terms
    direction = solve(rd, target - v * z - dv * dz, target - up * t + dv * dt, target - s * lam - ds * dl)
    direction = _centrality(cur, solve, direction, target)
    dv, ds, dl, dz, dt = direction
    frac = max(TO_BOUNDARY, 1.0 - mu)
    ap, ad = _steps(cur, direction)
    ap, ad = frac * ap, frac * ad
    if var.n_smooth == len(var.ub):
        # a master of smooth parts only is a nonlinear program: one step length for primal
        # and dual (with two, a part opening from 0 multiplies its v by far more than its
        # multiplier falls) and the wide neighbourhood of long-step path-following methods;
        # with kinks, separate lengths as in linear programming
        ap = ad = min(ap, ad)
        ap, ad = _neighbourhood(cur, direction, ap, ad)
    if var.n_smooth:
        ap = _armijo(cur, g, dv, ds, ap, target)
        if ap <= 0.0:
            return False
    log.debug("ipm mu %.3g sigma %.3g steps %.3g %.3g", mu, sigma, ap, ad)
    cur.last_steps = (ap, ad)
    cur.move(direction, ap, ad)
    return True


def _centre(slope, a, ub, mu, rounds=60):
    """v in (0, ub) with F(v) = g(v) - a + mu/v - mu/(ub - v) = 0, where ``slope(v)`` gives
    (g, h), the revenue's slope and -curvature (F falls in v: the revenue is concave).
    Newton on F, safeguarded by bisection on a bracket, until every step is within
    CENTRE_TOL of ub."""
    lo, hi = np.zeros(len(ub)), ub.copy()
    v = 0.5 * ub
    for _ in range(rounds):
        g, h = slope(v)
        F = g - a + mu / v - mu / (ub - v)
        lo = np.where(F > 0, v, lo)
        hi = np.where(F > 0, hi, v)
        new = v + F / (h + mu / v ** 2 + mu / (ub - v) ** 2)
        new = np.where((new > lo) & (new < hi), new, 0.5 * (lo + hi))
        done = bool(np.all(np.abs(new - v) <= CENTRE_TOL * ub))
        v = new
        if done:
            break
    return v


def _steps(cur, direction):
    """(primal, dual) step lengths to the boundary."""
    dv, ds, dl, dz, dt = direction
    ap = min(_longest(cur.v, dv), _longest(cur.up, -dv), _longest(cur.s, ds))
    ad = min(_longest(cur.z, dz), _longest(cur.t, dt), _longest(cur.lam, dl))
    return ap, ad


class _Solver:
    """The eliminated system at the current iterate, factored once for all its solves."""

    def __init__(self, net, system, cur, h, rp):
        self.net, self.system, self.cur, self.rp = net, system, cur, rp
        self.inv = 1.0 / (h + cur.z / cur.v + cur.t / cur.up)
        hv = system.pair_values(cur.per_group(self.inv))
        hv[system.diag_pair] += cur.s / cur.lam
        diag = system.diagonal(hv)
        self.failed = not (np.all(np.isfinite(diag)) and np.all(diag > 0))
        self.hv = hv
        self.scale = 1.0 / np.sqrt(np.where(diag > 0, diag, 1.0))
        self.held = np.zeros(net.n, dtype=bool)
        self.first = True
        # reciprocals once for all the solves (each solve divides by v and u - v twice)
        self.iv, self.iup = 1.0 / cur.v, 1.0 / cur.up

    def __call__(self, rd, cz, ct, cs, residuals=True):
        """The direction for dual residual ``rd`` and complementarity right-hand sides
        (``cz``: v z, ``ct``: (u - v) t, ``cs``: s lambda); ``residuals=False``: a pure
        centrality correction (no primal residual either)."""
        cur, net = self.cur, self.net
        rp = self.rp if residuals else 0.0
        rho = rd + cz * self.iv - ct * self.iup
        rhs = net.A_g @ cur.per_group(rho * self.inv) + cs / cur.lam - rp
        if self.first:
            u = self.system.solve(self.hv, self.scale, self.held, 0.0, self.scale * rhs)
            self.first = False
        else:
            again = self.system.solve_again((self.scale * rhs)[:, None])
            u = again[:, 0] if again is not None else self.system.solve(self.hv, self.scale, self.held, 0.0,
                                                                        self.scale * rhs)
        dl = self.scale * u
        dv = (rho - cur.prices(dl)) * self.inv
        ds = rp - net.A_g @ cur.per_group(dv)
        dz = (cz - cur.z * dv) * self.iv
        dt = (ct + cur.t * dv) * self.iup
        return dv, ds, dl, dz, dt


def _centrality(cur, solve, direction, target):
    """Gondzio's multiple centrality correctors (Gondzio 1996): at an enlarged trial step,
    pull the complementarity products that would fall outside [BETA_LOW, BETA_HIGH] times
    the target back into it (and cap the very large ones), with the same factorization,
    as long as that lengthens the step by at least GROWTH of the enlarged step."""
    v, up, s, lam, z, t = cur.v, cur.up, cur.s, cur.lam, cur.z, cur.t
    ap, ad = _steps(cur, direction)
    for _ in range(CORRECTORS):
        trial_p, trial_d = min(1.0, STRETCH * ap + 0.1), min(1.0, STRETCH * ad + 0.1)
        if ap + ad + GROWTH * (trial_p + trial_d) > 2.0:
            break                       # no corrector could pass the test below: steps are <= 1
        dv, ds, dl, dz, dt = direction
        products = [(v + trial_p * dv) * (z + trial_d * dz), (up - trial_p * dv) * (t + trial_d * dt),
                    (s + trial_p * ds) * (lam + trial_d * dl)]
        low, high = BETA_LOW * target, BETA_HIGH * target
        # into [low, high]; a product far above high moves down by at most high
        fixes = [np.maximum(np.clip(p, low, high) - p, -high) for p in products]
        corr = solve(np.zeros(len(v)), fixes[0], fixes[1], fixes[2], residuals=False)
        new = tuple(d + c for d, c in zip(direction, corr))
        ap_new, ad_new = _steps(cur, new)
        if ap_new + ad_new < ap + ad + GROWTH * (trial_p + trial_d):
            break
        direction, ap, ad = new, ap_new, ad_new
    return direction


def _neighbourhood(cur, direction, ap, ad):
    """Shorten both steps until every complementarity product is at least NEIGHBOURHOOD
    times their average (the wide neighbourhood of the central path of long-step
    path-following methods): a product far below the others blocks later steps."""
    dv, ds, dl, dz, dt = direction
    for _ in range(NEIGHBOURHOOD_TRIES):
        products = ((cur.v + ap * dv) * (cur.z + ad * dz), (cur.up - ap * dv) * (cur.t + ad * dt),
                    (cur.s + ap * ds) * (cur.lam + ad * dl))
        total = sum(float(p.sum()) for p in products)
        pairs = sum(len(p) for p in products)
        low = min(float(p.min(initial=np.inf)) for p in products)
        if low >= NEIGHBOURHOOD * total / pairs:
            break
        ap, ad = NEIGHBOURHOOD_SHRINK * ap, NEIGHBOURHOOD_SHRINK * ad
    return ap, ad


def _longest(value, change):
    """The largest t <= 1 with value + t change >= 0 (value > 0): only the entries that a
    full step would take below 0 can block it (one pass and a reduction where none does)."""
    after = value + change
    if not after.min(initial=0.0) < 0.0:
        return 1.0
    block = after < 0.0
    return float(min(1.0, (value[block] / -change[block]).min()))


def _armijo(cur, g, dv, ds, alpha, mu):
    """Backtrack the primal step until the barrier function at level mu decreases enough."""

    def phi(v, up, s):
        # log v + log(u - v) as one log of the product: v + (u - v) = u, so one factor is at
        # least u/2 and the product cannot underflow where v does not
        return -cur.revenue(v) - mu * (np.log(v * up).sum() + np.log(s).sum())

    slope = float(-(g + mu / cur.v - mu / cur.up) @ dv - (mu / cur.s) @ ds)
    if slope >= 0:
        return alpha                       # not a descent direction at mu: take it (the dual guides it)
    p0 = phi(cur.v, cur.up, cur.s)
    noise = 1e-13 * max(1.0, abs(p0))
    if -slope * alpha <= noise:
        return alpha                       # below the barrier function's resolution: Newton's step
    while alpha > 1e-14:
        if phi(cur.v + alpha * dv, cur.up - alpha * dv, cur.s + alpha * ds) <= p0 + ARMIJO * alpha * slope + noise:
            return alpha
        alpha *= BACKTRACK
    return 0.0


def _certify(net, master, cur, pi, bounds, final=False, system=None):
    """Offer the exact dual at ``pi`` and the allocation (fixed seats and the master's
    variables), made feasible; ``final``: also the allocation a Newton
    step of the exact dual predicts at ``pi`` (:func:`.recovery.recover` with its second
    correction): where the method stopped short, its primal may lag its bid prices."""
    pt = net.evaluate(np.maximum(pi, 0.0))
    bounds.offer_dual(pt)
    x = master.fixed_x if cur is None else cur.allocation(master)
    bounds.offer_primal(*within_capacity(net, np.minimum(x, net.upper)))
    if final:
        bounds.offer_primal(*recover(net, pt))
        if system is not None:
            fmax = float(net.fare.max(initial=1.0))
            floor = FLOOR * fmax
            pt = net.evaluate(np.maximum(pi, floor))
            dirn = newton.direction(net, system, pt, newton.LAM_MIN, 1e-3 * fmax, floor)
            bounds.offer_primal(*recover(net, pt, dirn, system, both=False))


def _report_settled(net, master, cur, pi, bounds):
    """Make the settled iterate's bid prices ``pi`` the reported ones (the bounds keep the
    last certified iterate's, which may be a step or more before): its exact dual becomes the
    upper bound where it exceeds the best by at most SAME_DUAL of it (rounding: the dual is
    flat to about that near the optimum), and its allocation is offered too."""
    pt = net.evaluate(np.maximum(pi, 0.0))
    if pt.exact <= bounds.dual + SAME_DUAL * max(1.0, abs(bounds.dual)):
        bounds.dual, bounds.pi = pt.exact, pt.pi
    bounds.offer_primal(*within_capacity(net, np.minimum(cur.allocation(master), net.upper)))


def _size(bounds):
    return max(1.0, abs(bounds.primal)) if np.isfinite(bounds.primal) else 1.0
