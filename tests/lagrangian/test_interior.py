"""The restricted problem and its interior-point method (decomp.lagrangian.master,
decomp.lagrangian.interior), on their own and in the loop.

References outside the method's code: the independent certificate of tests/support/family.py
(scipy.stats alone; weak duality, a mathematical fact), Ipopt (cyipopt,
bound_relax_factor = 0) for normal demand, and HiGHS (scipy.optimize.linprog) for the
linear program that a piecewise-linear network is.
"""

from __future__ import annotations

import time

import numpy as np
import pytest
from scipy import optimize

from decomp import SolverOptions, Termination, solve
from decomp.generator import generate
from decomp.lagrangian import interior, master
from decomp.lagrangian.hessian import LegSystem
from decomp.lagrangian.bounds import Bounds
from decomp.lagrangian.network import Network
from decomp.lagrangian.prices import fare_start, price_closed_legs

from support import family

#: every fourth draw of the family (5 to 3,000 products)
SEEDS = list(range(0, 300, 4))


def _interior_alone(inst, tol=1e-9):
    """The whole problem as one master (every kink free) by the interior-point method from
    the fare start, pricing until consistent."""
    net = Network(inst)
    system = LegSystem(net)
    bounds = Bounds()
    k = net.products.kinks
    lo, hi = np.zeros(k.n_owners, dtype=np.int64), k.count.copy()
    pi = fare_start(net)
    its = 0
    for _ in range(4):
        m = master.build(net, lo, hi)
        word, n, pi, _ = interior.solve_master(net, system, m, pi, tol, 400, None, time.perf_counter(), bounds, [], 0)
        its += n
        if word != "master_solved":
            break
    full = net.full_prices(bounds.pi)
    price_closed_legs(inst, net, full)          # legs of zero capacity, as solve_dual does
    return word, its, net.full_allocation(bounds.x), full


@pytest.mark.solver
@pytest.mark.parametrize("seed", SEEDS)
def test_interior_point_alone_on_family_draws(seed):
    inst, desc = family.draw(seed, max_products=3000)
    word, its, x, pi = _interior_alone(inst)
    assert word == "optimal", (desc, its)
    primal, dual, viol = family.independent_certificate(inst, x, pi)
    assert viol <= 1e-9, desc
    assert family.relative_gap(dual, primal) <= 1e-8, desc
    if desc["demand"] == "normal":
        ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-10))
        if ref.termination is Termination.OPTIMAL:
            assert primal == pytest.approx(ref.objective, rel=1e-7), desc
        else:
            assert ref.objective <= primal * (1.0 + 1e-9), desc


@pytest.mark.solver
@pytest.mark.parametrize("seed", [1660, 1718])
def test_a_master_without_variables_is_priced_at_its_own_bid_prices(seed):
    # Small Poisson networks of slack legs (family draws found by a held-out sweep), handed to
    # the master phase at bid prices above every fare: the first windows fix every kink (all
    # empty), so the first master has no variables. Its own bid prices are 0, and pricing there
    # frees the kinks (pricing at the hand-over's bid prices found every fixed kink consistent
    # and stopped with a certified gap of 2.2 and 1.8). The Newton phase reached such a master
    # on these draws until its smoothing levels stopped ending on a negative decrement.
    # Reference: the independent certificate (scipy.stats; weak duality).
    from decomp.lagrangian import loop
    from decomp.lagrangian.prices import FLOOR

    inst, desc = family.draw(seed, max_products=3000)
    net = Network(inst)
    fare_max = float(inst.fare.max())
    state = loop.LoopState(net, LegSystem(net), 1e-9, 300, None, time.perf_counter(), FLOOR * fare_max)
    word = loop.master_phase(state, np.full(net.n, 2.0 * fare_max))
    assert word == "optimal", (desc, word)
    assert state.empty_masters == 1 and state.master_rounds >= 2
    x, pi = net.full_allocation(state.bounds.x), net.full_prices(state.bounds.pi)
    price_closed_legs(inst, net, pi)
    primal, dual, viol = family.independent_certificate(inst, x, pi)
    assert viol <= 1e-9, desc
    assert family.relative_gap(dual, primal) <= 1e-8, desc


def _low_cv_network():
    # a generated network of the low-CV class on which projected Newton alone creeps (one
    # hub, CV 0.065-0.144, demand 1.3-2.9 times the capacity)
    return generate(5968, seed=7, demand_factor=(1.2607744487313262, 2.9044594619928015),
                    cv=(0.06473373694670354, 0.14362834833006247), fare_ratio=0.8924354333900795,
                    class_growth=1.2865351175695026, seats=95.09505796799849, hubs=1)


def _the_whole_problems_optimum(inst, r):
    """Assert that ``r`` is the whole PNLP's optimum: the independent certificate (scipy.stats;
    weak duality) within 1e-8, and Ipopt's objective at tol 1e-10 within 1e-8."""
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8
    ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-10))
    assert ref.termination is Termination.OPTIMAL
    assert primal == pytest.approx(ref.objective, rel=1e-8)


@pytest.mark.solver
def test_a_low_cv_network_is_solved_through_the_restricted_problem():
    inst = _low_cv_network()
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert "restricted problem" in r.message, r.message
    _the_whole_problems_optimum(inst, r)
    # exact zeros on the slack legs: bid prices are 0.0 or above the reporting resolution
    pi = r.bid_price_array
    assert np.all((pi == 0.0) | (pi > 1e-9 * inst.fare.max()))


def _poisson_network(products=600, seed=5):
    inst = generate(products, seed=seed)
    return inst.with_forecast(meta={**inst.meta, "distribution": "poisson"})


@pytest.mark.solver
def test_the_restricted_problem_with_pricing_solves_the_linear_program():
    # With whole seats a Poisson network is a linear program, one column per seat (slope
    # f P(D > k), width 1); reference: HiGHS through scipy.optimize.linprog on every seat
    # of the kink table. The master from the first windows, priced until consistent, must
    # reach its optimum (LP duality: consistent fixed kinks make the master's optimum the
    # whole problem's).
    inst = _poisson_network()
    net = Network(inst)
    k = net.products.kinks
    owner = k.owner[k.kink_owner()]
    cols = net.AT_g[net.group_of(owner)].T.tocsr()
    lp = optimize.linprog(-k.slope, A_ub=cols, b_ub=net.cap, bounds=np.column_stack([np.zeros(len(k)), k.width]),
                          method="highs")
    assert lp.status == 0
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert r.objective == pytest.approx(-lp.fun, rel=1e-9)


def test_pricing_frees_exactly_the_kinks_on_the_wrong_side():
    # A fixed-full kink whose slope is below the bid-price sum, or a fixed-empty one above it,
    # is inconsistent (complementary slackness of its bound, an LP fact): pricing widens that
    # product's window to reach it, and leaves consistent products alone.
    inst = _poisson_network(products=200, seed=2)
    net = Network(inst)
    k = net.products.kinks
    pi = fare_start(net)
    lo, hi = master.first_windows(net, pi)
    m = master.build(net, lo, hi)
    assert master.price(net, m, pi) is None              # consistent where it was built
    new = master.price(net, m, pi * 3.0)                 # dearer legs: full kinks now unprofitable
    assert new is not None
    nlo, nhi, caps = new
    assert caps is None                                  # kinks only: no smooth part to cap
    a = net.to_products(net.AT_g @ (pi * 3.0))[k.owner]
    above = k.above(a)
    moved = (nlo != m.lo) | (nhi != m.hi)
    assert np.all(nlo[moved] <= above[moved]) and np.all(above[moved] <= nhi[moved])
    assert np.array_equal(nlo[~moved], m.lo[~moved]) and np.array_equal(nhi[~moved], m.hi[~moved])


def test_smooth_caps_are_lifted_where_a_response_reaches_them():
    # A smooth part's seats are capped at its response to a lower bid-price sum; pricing at
    # other bid prices lifts exactly the caps the products' own responses reach. Reference
    # for the responses: scipy.stats.norm.isf (normal demand: the fractile, floored at 0).
    from scipy import stats
    inst = generate(400, seed=4, cv=(0.05, 0.3))
    net = Network(inst)
    pi = fare_start(net) * 0.5
    lo, hi = master.first_windows(net, pi)
    caps = master.first_caps(net, pi)
    m = master.build(net, lo, hi, caps=caps)
    assert master.price(net, m, pi) is None              # consistent where it was built
    cheaper = pi * 0.3                                   # responses grow: some reach their caps
    new = master.price(net, m, cheaper)
    assert new is not None
    lifted = np.isinf(new[2]) & np.isfinite(caps)
    a = net.to_products(net.AT_g @ cheaper)
    order = net.prods if getattr(net, "prods", None) is not None else np.arange(net.n_products)
    f, mu, sd = inst.fare[order], inst.mean[order], inst.std[order]
    want = np.maximum(stats.norm.isf(np.minimum(a / f, 1.0), mu, sd), 0.0)
    finite = np.isfinite(caps)
    assert lifted.any()
    assert np.array_equal(lifted[finite], (want >= caps * (1 - 1e-7))[finite] & (want > 0)[finite])


@pytest.mark.solver
def test_caps_that_bind_are_lifted_until_the_answer_is_the_whole_problems(monkeypatch):
    # With caps hardly above the first bid prices' responses (margin 1e-3, no floor), many
    # bind at the optimum: pricing must lift them round after round, and the answer must be
    # the whole problem's. Reference: the independent certificate (scipy.stats; weak
    # duality) and Ipopt on the same PNLP.
    monkeypatch.setattr(master, "SMOOTH_MARGIN", 1e-3)
    monkeypatch.setattr(master, "CAP_FLOOR", 0.0)
    inst = _low_cv_network()
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert "then 1 round(s)" not in r.message, r.message      # the caps did bind
    _the_whole_problems_optimum(inst, r)


def test_fixed_seats_never_overfill_a_leg():
    # The master needs room for its interior: where the fixed-full kinks would fill a leg,
    # build() frees them (a leg's capacity minus its fixed seats stays positive).
    inst = _poisson_network(products=300, seed=3)
    net = Network(inst)
    k = net.products.kinks
    lo = k.count.copy()                  # everything fixed full: far more than the legs hold
    m = master.build(net, lo, k.count.copy())
    assert np.all(m.capacity > 0)


def _mixed_network_with_two_rounds():
    """The p1k ladder network with the named mix (seed 3): its first restricted problem is
    left at early pricing and a second, grown one follows (measured on the arc search's
    interpolation, 2026-12-05; seed 2 did until then, and now needs one round)."""
    from decomp import demand_mix, ladder

    return demand_mix.apply(ladder.load_rung("p1k"), demand_mix.NAMED["mix"], seed=3)


@pytest.mark.solver
def test_a_later_master_starts_from_the_last_ones_primal_point(monkeypatch):
    # Primal-dual column generation: the variables both masters have keep the kept iterate's
    # values (so no leg's load moves), what enters empty fits into the slack, and every
    # entering variable's dual residual is 0. The answer is then checked against the
    # independent certificate (scipy.stats and weak duality).
    starts = []
    adopt = interior._Iterate.adopt

    def spy(self, snap, m):
        adopt(self, snap, m)
        starts.append((snap, m, self.v.copy(), self.s.copy(), self.z.copy(), self.t.copy(), self.lam.copy(), self))

    monkeypatch.setattr(interior._Iterate, "adopt", spy)
    inst = _mixed_network_with_two_rounds()
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert starts, r.message                         # a later master did start warm
    for snap, m, v, s, z, t, lam, cur in starts:
        n = len(m.smooth)
        kept_smooth = np.isin(m.smooth, snap.smooth)
        pos = np.searchsorted(snap.smooth, m.smooth[kept_smooth])
        assert np.array_equal(v[:n][kept_smooth], np.minimum(snap.v[pos], (1 - 1e-9) * cur.var.ub[:n][kept_smooth]))
        kept_kinks = np.isin(m.kink, snap.kink)
        pos = np.searchsorted(snap.kink, m.kink[kept_kinks]) + snap.n_smooth
        assert np.array_equal(v[n:][kept_kinks], snap.v[pos])
        assert np.all(s > 0) and np.all(v > 0) and np.all(v < cur.var.ub)
        assert np.all(z > 0) and np.all(t > 0)
        entering = np.flatnonzero(~np.concatenate([kept_smooth, kept_kinks]))
        g, _ = cur.slopes(v)
        a = cur.prices(lam)
        residual = (g - a + z - t)[entering]
        assert np.all(np.abs(residual) <= 1e-12 * np.maximum(1.0, np.abs(g[entering]))), residual
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8


@pytest.mark.solver
def test_a_master_grown_much_by_pricing_starts_cold(monkeypatch):
    # With WARM_NEW = 0 every later master counts as grown too much: none starts from the
    # kept iterate, and the answer is the same optimum (the independent certificate).
    monkeypatch.setattr(interior, "WARM_NEW", 0.0)
    calls = []
    monkeypatch.setattr(interior._Iterate, "adopt", lambda self, snap, m: calls.append(1))
    inst = _mixed_network_with_two_rounds()
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert "then 2 round(s)" in r.message or "then 3 round(s)" in r.message, r.message
    assert not calls
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8


def test_the_settled_iterate_is_the_one_reported(monkeypatch):
    # A master of smooth parts that must settle its bid prices stops at an iterate that is
    # not always certified (certificates come when the complementarity halves): its bid
    # prices become the bounds' (and so the reported ones), with the exact dual at them as
    # the upper bound. Checked by the independent certificate (scipy.stats, weak duality)
    # at the returned prices. On the ladder's p10k gamma network the last certified iterate
    # was a step before, 4.3e-6 of the bid prices from a tol-1e-12 solve (5.3e-8 now).
    from decomp.benchsuite.cases import load_instance

    seen = []
    report = interior._report_settled

    def spy(net, master, cur, pi, bounds):
        before = bounds.dual
        report(net, master, cur, pi, bounds)
        seen.append((pi.copy(), bounds.pi.copy(), before, bounds.dual, net.evaluate(pi).exact))

    monkeypatch.setattr(interior, "_report_settled", spy)
    inst, _ = load_instance("p10k-gamma")
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert seen, r.message                          # the master stopped at an uncertified iterate
    pi, kept, before, dual, exact = seen[-1]
    assert np.array_equal(kept, pi)                 # its bid prices are the bounds'
    assert dual == exact                            # and the bound is the exact dual there
    assert dual <= before + interior.SAME_DUAL * abs(before)
    primal, upper, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(upper, primal) <= 1e-9


def test_a_flat_share_needs_a_revenue_to_be_a_share_of():
    # The smooth parts' flat bound keeps at most FLAT_SHARE tol of a feasible allocation's
    # revenue out of the master. With no revenue (bid prices above every fare close every
    # product) no share is that small: no bound, rather than a share of 0 and log(0).
    inst = generate(300, seed=3)
    net = Network(inst)
    assert master.flat_share(net, 1e-9, 0.0) is None
    share = master.flat_share(net, 1e-9, 1e12)
    assert share == pytest.approx(master.FLAT_SHARE * 1e-9)
    with np.errstate(all="raise"):
        net.products.flat_from(share)
