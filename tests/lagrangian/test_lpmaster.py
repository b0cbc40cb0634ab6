"""A restricted problem of kinks only, solved as a linear program by HiGHS's dual simplex
(decomp.lagrangian.lpmaster), in the loop.

References outside the method's code: the seat-by-seat linear program of a discrete-demand
network built here from scipy.stats alone and solved by HiGHS through
scipy.optimize.linprog; the independent certificate of tests/support/family.py (scipy.stats;
weak duality, a mathematical fact).
"""

from __future__ import annotations

import logging

import numpy as np
import pytest
import scipy.sparse as sp
from scipy import optimize, stats

from decomp import Termination, demand_mix, solve
from decomp.generator import generate

from support import family


def _large_means(products, seed, scale):
    """A generated network of Poisson demand with means and capacities ``scale`` times the
    generator's (a product of mean 30 has some 20 seats near its bid-price sum: many kinks
    per product)."""
    inst = generate(products, seed=seed)
    inst = inst.with_forecast(mean=inst.mean * scale, capacity=np.round(inst.capacity * scale))
    return demand_mix.apply(inst, demand_mix.DemandMix.parse("poisson 1"), seed=0)


def _seat_lp_optimum(inst):
    """The network's optimum as the linear program of its seats: seat k of product j has
    revenue f_j P(D_j > k) (scipy.stats.poisson.sf) and width 1, up to the smallest capacity
    of the product's legs (no product can sell more), where P(D > k) > 1e-13 (the seats
    beyond add less than 1e-13 f each)."""
    owner = np.repeat(np.arange(inst.n_products), np.diff(inst.leg_ptr))
    bound = np.full(inst.n_products, np.inf)
    np.minimum.at(bound, owner, inst.capacity[inst.leg_index])
    cols, cost = [], []
    for j in range(inst.n_products):
        seats = np.arange(int(bound[j]))
        sf = stats.poisson.sf(seats, inst.mean[j])
        seats = seats[sf > 1e-13]
        cols.append(np.full(len(seats), j))
        cost.append(inst.fare[j] * sf[seats])
    col_owner = np.concatenate(cols)
    A = sp.csr_matrix(inst.A)[:, col_owner]
    lp = optimize.linprog(-np.concatenate(cost), A_ub=A, b_ub=inst.capacity, bounds=(0.0, 1.0), method="highs")
    assert lp.status == 0, lp.message
    return -lp.fun


@pytest.mark.solver
def test_large_poisson_means_solve_as_linear_programs_to_the_seat_lp_optimum():
    # means 10 times the generator's (up to some 4,000): the masters are linear programs of
    # many kinks per product, which the interior-point method took 100 to 500 iterations on
    inst = _large_means(300, seed=5, scale=10)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert "as linear programs by HiGHS" in r.message, r.message
    assert r.objective == pytest.approx(_seat_lp_optimum(inst), rel=1e-9)
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8


@pytest.mark.solver
def test_a_linear_program_highs_cannot_finish_goes_to_the_interior_point_method(monkeypatch, caplog):
    # HiGHS stopped by an iteration limit of one simplex iteration (a failure as numerical
    # trouble would be): the master is solved by the interior-point method instead, the log
    # says so, and the answer is still certified
    from decomp.methods import highs

    made = highs.new_highs

    def limited():
        h = made()
        h.setOptionValue("simplex_iteration_limit", 1)
        return h

    monkeypatch.setattr(highs, "new_highs", limited)
    inst = _large_means(120, seed=2, scale=3)
    with caplog.at_level(logging.WARNING, logger="decomp.lagrangian.lpmaster"):
        r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert "by the interior-point method" in r.message, r.message
    assert any("the interior-point method solves it instead" in rec.getMessage() for rec in caplog.records)
    monkeypatch.undo()
    assert r.objective == pytest.approx(solve(inst, "pnlp", "lagrangian").objective, rel=1e-8)


@pytest.mark.solver
def test_a_warm_start_near_the_optimum_goes_straight_to_the_linear_programs():
    # after a change of the means by up to 5% (the nightly case), the masters start from the
    # warm bid prices without the Newton phase; the answer is the moved network's seat LP's
    inst = _large_means(300, seed=4, scale=3)
    cold = solve(inst, "pnlp", "lagrangian")
    rng = np.random.default_rng(5)
    moved = inst.with_forecast(mean=inst.mean * rng.uniform(0.95, 1.05, inst.n_products))
    r = solve(moved, "pnlp", "lagrangian", warm_start=cold)
    assert r.termination is Termination.OPTIMAL, r.message
    assert "projected Newton 0," in r.message, r.message
    assert r.objective == pytest.approx(_seat_lp_optimum(moved), rel=1e-9)


@pytest.mark.solver
def test_a_warm_start_far_from_the_optimum_gives_way_to_newton():
    # bid prices five times the optimal ones: the first master's pricing frees far more
    # kinks than a near start would (more than WARM_GROWTH times the first windows), and the
    # loop goes on with the Newton phase; the answer is still the seat LP's
    inst = _large_means(300, seed=4, scale=3)
    cold = solve(inst, "pnlp", "lagrangian")
    r = solve(inst, "pnlp", "lagrangian", warm_start=cold.bid_price_array * 5.0)
    assert r.termination is Termination.OPTIMAL, r.message
    assert "projected Newton 0," not in r.message, r.message
    assert r.objective == pytest.approx(_seat_lp_optimum(inst), rel=1e-9)


@pytest.mark.solver
def test_a_linear_program_master_followed_by_one_with_smooth_parts():
    # Pricing can open a jump fixed empty, so that a master of kinks only (a linear program,
    # its HiGHS model kept for the next round) is followed by one with smooth parts (the
    # interior-point method, which must start cold then: it once took the HiGHS model for its
    # own restart point and failed). Family draw 194 (mixed demand, 60 products) handed to
    # the master phase at three times its optimal bid prices: every smooth product closed at
    # first. (Family draw 1619 reached this path from the Newton phase until its smoothing
    # levels stopped ending on a negative decrement; no draw of 0-12,000 does now.)
    # Reference: the independent certificate (scipy.stats; weak duality).
    import time

    from decomp.lagrangian import loop
    from decomp.lagrangian.hessian import LegSystem
    from decomp.lagrangian.network import Network
    from decomp.lagrangian.prices import FLOOR, price_closed_legs

    inst, desc = family.draw(194, max_products=3000)
    optimum = solve(inst, "pnlp", "lagrangian")
    net = Network(inst)
    fare_max = float(inst.fare.max())
    state = loop.LoopState(net, LegSystem(net), 1e-9, 300, None, time.perf_counter(), FLOOR * fare_max)
    word = loop.master_phase(state, np.maximum(3.0 * optimum.bid_price_array[net.legs], FLOOR * fare_max))
    assert word == "optimal", (desc, word)
    assert state.lp_masters >= 1 and state.master_rounds - state.lp_masters - state.empty_masters >= 1
    x, pi = net.full_allocation(state.bounds.x), net.full_prices(state.bounds.pi)
    price_closed_legs(inst, net, pi)
    primal, dual, viol = family.independent_certificate(inst, x, pi)
    assert viol <= 1e-9, desc
    assert family.relative_gap(dual, primal) <= 1e-8, desc


@pytest.mark.solver
def test_a_time_limit_inside_the_linear_program_is_a_time_limit_with_an_allocation(monkeypatch):
    # HiGHS stopped by its time limit in the first master (given here through its own option,
    # so that the Newton phase before it is not cut short): the loop stops as time_limit, with
    # a feasible allocation and its certified gap (weak duality: >= 0 and finite). Newton
    # recovers allocations only near its end here, as on large networks.
    from decomp import SolutionStatus
    from decomp.lagrangian import loop
    from decomp.methods import highs

    monkeypatch.setattr(loop, "RECOVER_ALWAYS_BELOW", 0)

    made = highs.new_highs

    def out_of_time():
        h = made()
        h.setOptionValue("time_limit", 1e-9)
        return h

    monkeypatch.setattr(highs, "new_highs", out_of_time)
    inst = _large_means(200, seed=6, scale=3)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.TIME_LIMIT, r.message
    assert r.solution_status is SolutionStatus.FEASIBLE and r.certificate.max_violation_rel <= 1e-9
    assert 0.0 <= r.gap < 1.0 and r.objective > 0


@pytest.mark.solver
def test_past_the_deadline_a_master_highs_did_not_finish_stops_as_time_limit(monkeypatch):
    # HiGHS ends without an optimum (an iteration limit here; on a 3.9-million-column master
    # it ended so after its time limit) and the caller's deadline has passed: the loop stops
    # as time_limit with a certified feasible allocation, and does not start the
    # interior-point fallback after the deadline (it once ran 190 s over a 60 s limit so).
    import time as _time

    from decomp import SolutionStatus, SolverOptions
    from decomp.lagrangian import interior, loop, lpmaster
    from decomp.methods import highs

    import highspy

    class Late(highspy.Highs):
        """A HiGHS that ends at one simplex iteration and ignores the time limit it is given
        (so that it ends without an optimum and without the time-limit status)."""

        def setOptionValue(self, name, value):
            return None if name == "time_limit" else super().setOptionValue(name, value)

    monkeypatch.setattr(loop, "RECOVER_ALWAYS_BELOW", 0)

    def late():
        h = Late()
        h.setOptionValue("output_flag", False)
        h.setOptionValue("simplex_iteration_limit", 1)
        return h

    monkeypatch.setattr(highs, "new_highs", late)
    take = lpmaster.Model.take

    def slow_take(self, master):
        taken = take(self, master)
        _time.sleep(0.6)                     # the deadline passes while the master is set up
        return taken

    monkeypatch.setattr(lpmaster.Model, "take", slow_take)
    fallback = []
    monkeypatch.setattr(lpmaster, "interior_solve", lambda *a, **k: fallback.append(1))
    inst = _large_means(200, seed=6, scale=3)
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(time_limit=0.5))
    assert not fallback
    assert r.termination is Termination.TIME_LIMIT, r.message
    assert r.solution_status is SolutionStatus.FEASIBLE and r.certificate.max_violation_rel <= 1e-9
    assert 0.0 <= r.gap < 1.0 and r.objective > 0


@pytest.mark.solver
def test_a_pricing_round_restarts_from_a_dual_feasible_basis_and_reaches_the_cold_optimum():
    # After a solve, pricing adds the kinks that are profitable at the master's bid prices.
    # Each new column starts at the bound its reduced cost favours (profitable: its upper
    # bound), so the kept basis stays dual feasible (HiGHS put them at 0 and repaired that
    # itself: 32 s for 184,724 new columns on a held-out negative binomial network). The
    # restarted solve must reach the optimum HiGHS finds from nothing on the same master.
    import highspy

    from decomp.lagrangian import lpmaster, master
    from decomp.lagrangian.network import Network

    inst = _large_means(300, seed=5, scale=10)
    net = Network(inst)
    fmax = float(net.fare.max())
    ref = solve(inst, "pnlp", "lagrangian")
    pi = ref.bid_price_array[net.legs]
    lo, hi = master.first_windows(net, pi * 1.5)          # windows of bid prices too high
    first = master.build(net, lo, hi)
    model = lpmaster.Model(net, fmax)
    model.take(first)
    model.h.run()
    duals = np.asarray(model.h.getSolution().row_dual) * fmax
    lo2, hi2, _ = master.price(net, first, np.maximum(duals, 0.0))
    second = master.build(net, lo2, hi2)
    n_before = len(model.kink)
    model.take(second)
    added = len(model.kink) - n_before
    assert added > 0
    status = model.h.getBasis().col_status[n_before:]
    k = net.products.kinks
    cols = net.A_g[:, net.group_of(model.owner[n_before:])].tocsc()
    reduced = k.slope[model.kink[n_before:]] / fmax - cols.T @ (duals / fmax)
    upper = np.array([s == highspy.HighsBasisStatus.kUpper for s in status])
    assert np.array_equal(upper, reduced > 0)
    assert upper.any()
    model.h.run()
    cold = lpmaster.Model(net, fmax)
    cold.take(second)
    cold.h.run()
    for h in (model.h, cold.h):
        assert h.getModelStatus() == highspy.HighsModelStatus.kOptimal
    assert model.h.getInfo().objective_function_value == pytest.approx(
        cold.h.getInfo().objective_function_value, rel=1e-10)


@pytest.mark.solver
def test_fixed_seats_that_fill_a_leg_free_the_last_full_kinks_first():
    # Windows taken at bid prices 10% below the optimum's fix more kinks full than the legs
    # hold. The master frees full kinks, the last (least profitable) ones of each product on
    # an overfilled leg first (one, then two more, four, ...), until every leg keeps ROOM of
    # its capacity; before, it freed every kink of those products (a first master of 969,290
    # free kinks where 16,804 were asked, on a held-out negative binomial network). Exactness
    # does not depend on it (pricing checks every fixed kink); the reference for the optimum
    # is the seat-by-seat linear program by HiGHS.
    from decomp.lagrangian import master
    from decomp.lagrangian.network import Network

    inst = _large_means(300, seed=5, scale=10)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.objective == pytest.approx(_seat_lp_optimum(inst), rel=1e-9)
    net = Network(inst)
    k = net.products.kinks
    lo, hi = master.first_windows(net, r.bid_price_array * 0.9)
    fixed = np.zeros(net.n_products)
    fixed[k.owner] = k.filled(lo)
    overfilled = net.cap - net.load(fixed) <= master.ROOM * net.cap
    assert overfilled.sum() >= 10
    on_them = (net.to_products(net.AT_g @ overfilled.astype(float)) > 0)[k.owner]
    m = master.build(net, lo, hi)
    assert np.all(m.capacity > master.ROOM * np.maximum(net.cap, 1.0))
    assert np.all(m.lo <= lo) and np.array_equal(m.hi, hi)
    assert len(m.kink) < 0.2 * k.count[on_them].sum()
