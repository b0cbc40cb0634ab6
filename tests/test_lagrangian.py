"""The Lagrangian method (PNLP): agreement with Ipopt, strong duality, the DLP limit,
warm starts, the other dual methods and their statuses."""

import json

import numpy as np
import pytest

from decomp import SolutionStatus, SolverOptions, Termination, ladder, solve
from decomp import dual as _dual
from decomp import threads as _threads
from decomp.generator import generate
from decomp import lagrangian as m_lagr
from decomp.lagrangian.alternatives import lbfgsb_termination
from decomp import demand_mix
from decomp.result import IterationRecord

pytestmark = pytest.mark.solver


@pytest.fixture(scope="module")
def rungs():
    return {name: ladder.load_rung(name) for name in ("p100", "p1k", "p10k")}


@pytest.fixture(scope="module")
def lagr(rungs):
    return {name: solve(inst, "pnlp", "lagrangian") for name, inst in rungs.items()}


def _close_bid_prices(ref, got, rel=1e-6):
    """Bid prices agree to ``rel`` where they are at least 1e-3 of the largest."""
    big = ref >= 1e-3 * ref.max()
    err = np.abs(got[big] - ref[big]) / ref[big]
    return float(err.max()) if big.any() else 0.0


# -- agreement with Ipopt -------------------------------------------------------------

@pytest.mark.parametrize("name", ["p100", "p1k", "p10k"])
def test_agrees_with_ipopt_on_the_ladder(rungs, lagr, name):
    # Reference: Ipopt (interior point, via the 'ipopt' method) with bound_relax_factor = 0
    # (its default there), run to tol 1e-12 so that its multipliers are accurate enough
    # to compare bid prices at 1e-6.
    inst = rungs[name]
    ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-12))
    got = lagr[name]
    assert ref.termination is Termination.OPTIMAL
    assert got.ok
    assert abs(got.objective - ref.objective) <= 1e-8 * abs(ref.objective)
    assert _close_bid_prices(ref.bid_price_array, got.bid_price_array) <= 1e-6


@pytest.mark.parametrize("name", ["p100", "p1k", "p10k"])
def test_strong_duality_certified(rungs, lagr, name):
    # Strong duality of the concave PNLP with linear constraints (mathematical fact):
    # the dual value at the returned bid prices meets the primal value of the feasible
    # allocation; the certificate is computed by decomp.certify, not by the loop.
    r = lagr[name]
    c = r.certificate
    assert r.termination is Termination.OPTIMAL and r.solution_status is SolutionStatus.OPTIMAL
    assert c.max_violation_rel <= 1e-9
    assert 0 <= c.gap <= 1e-9 or abs(c.gap) <= 1e-12
    assert c.kkt_residual <= 1e-6
    assert c.min_bid_price > 0               # normal demand: every used leg priced
    # the bound on the result is the independent dual value
    assert r.bound == pytest.approx(_dual.dual_value(rungs[name], r.bid_price_array), rel=1e-14)


def test_history_records_every_iteration(lagr):
    r = lagr["p1k"]
    assert len(r.history) == r.iterations
    assert all(isinstance(h, IterationRecord) for h in r.history)
    gaps = [h.gap for h in r.history]
    assert gaps[-1] <= 1e-9 < gaps[0]
    duals = [h.dual_value for h in r.history]
    # Armijo line search on the exact dual: the dual value never increases
    assert all(b <= a * (1 + 1e-14) for a, b in zip(duals, duals[1:]))
    assert all(h.seconds >= 0 and h.pi_norm > 0 for h in r.history)
    json.dumps(r.to_json_dict())


def test_dlp_limit_as_std_goes_to_zero(rungs):
    # As std -> 0 the expected sales S(x) -> min(x, mean), so the PNLP optimum tends to
    # the DLP optimum (solved here by HiGHS), from below (Jensen, mathematical fact).
    inst = rungs["p100"]
    dlp = solve(inst, "dlp", "highs").objective
    errs = []
    # Near-deterministic demand makes the dual nearly piecewise linear: Newton needs
    # many more (cheap, 100-product) iterations there, hence the larger limit.
    for eps in (1e-1, 1e-2, 1e-5):
        r = solve(inst.with_forecast(std=inst.std * eps), "pnlp", "lagrangian",
                  SolverOptions(iteration_limit=1000))
        assert r.ok, (eps, r.message)
        errs.append(dlp - r.objective)
    assert all(e >= -1e-9 * dlp for e in errs)
    assert errs[0] > errs[1] > errs[2]
    assert errs[2] <= 1e-4 * dlp


# -- warm starts --------------------------------------------------------------------------

def test_warm_start_after_a_five_percent_forecast_change(rungs, lagr):
    inst = rungs["p10k"]
    rng = np.random.default_rng(5)
    moved = inst.with_forecast(mean=inst.mean * rng.uniform(0.95, 1.05, inst.n_products))
    cold = solve(moved, "pnlp", "lagrangian")
    warm = solve(moved, "pnlp", "lagrangian", warm_start=lagr["p10k"].bid_prices)
    assert cold.ok and warm.ok
    # both reach the same optimum (a strictly concave PNLP has one); how many iterations
    # each takes is measured by the benchmark suite, not asserted here
    assert warm.objective == pytest.approx(cold.objective, rel=1e-9)
    assert _close_bid_prices(cold.bid_price_array, warm.bid_price_array) <= 1e-6


def test_warm_start_array_and_partial_dict(rungs, lagr):
    inst = rungs["p1k"]
    base = lagr["p1k"]
    r = solve(inst, "pnlp", "lagrangian", warm_start=base.bid_price_array)
    assert r.ok and r.iterations <= 2
    partial = dict(list(base.bid_prices.items())[: inst.n_legs // 2])   # other legs: cold start
    r2 = solve(inst, "pnlp", "lagrangian", warm_start=partial)
    assert r2.ok
    assert r2.objective == pytest.approx(base.objective, rel=1e-9)
    with pytest.raises(ValueError):
        solve(inst, "pnlp", "lagrangian", warm_start=np.ones(3))


# -- other dual methods, limits and statuses ----------------------------------------------

def test_lbfgsb_does_not_claim_optimality_without_a_certificate(rungs):
    inst = rungs["p1k"]
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(dual_method="lbfgsb", iteration_limit=40))
    assert r.termination in (Termination.ITERATION_LIMIT, Termination.NUMERICAL_ERROR, Termination.OPTIMAL)
    if r.termination is not Termination.OPTIMAL:
        assert r.solution_status is not SolutionStatus.OPTIMAL
    # whatever it reached is a valid bound pair: dual above primal
    assert r.certificate.gap >= -1e-12
    assert r.certificate.max_violation_rel <= 1e-9


def test_lbfgsb_reaches_a_loose_tolerance(rungs, lagr):
    r = solve(rungs["p100"], "pnlp", "lagrangian", SolverOptions(dual_method="lbfgsb", tol=1e-5))
    assert r.ok and r.gap <= 1e-5
    assert r.objective == pytest.approx(lagr["p100"].objective, rel=1e-5)


def test_subgradient_hits_its_iteration_limit_honestly(rungs):
    r = solve(rungs["p100"], "pnlp", "lagrangian", SolverOptions(dual_method="subgradient", iteration_limit=30))
    assert r.termination is Termination.ITERATION_LIMIT
    assert r.solution_status is SolutionStatus.FEASIBLE      # feasible, not certified
    assert r.certificate.gap > 1e-9
    assert r.iterations == 30


def test_newton_iteration_and_time_limits(rungs):
    inst = rungs["p10k"]
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(iteration_limit=2))
    assert r.termination is Termination.ITERATION_LIMIT
    assert r.solution_status is SolutionStatus.FEASIBLE and r.certificate.max_violation_rel <= 1e-9
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(time_limit=1e-6))
    assert r.termination is Termination.TIME_LIMIT
    assert r.solution_status is SolutionStatus.FEASIBLE


@pytest.mark.parametrize("mix", [None, "gamma", "lowcv", "poisson", "negbin", "mix"])
def test_unlimited_legs_written_as_capacity_1e12(rungs, mix):
    # The README writes an unlimited leg as capacity 1e12. Every fifth leg of p100 so: the
    # method must still certify (it ended numerical_error), and its message must state the
    # gap the result carries (it said 7.6e-4 beside a gap field of 3.2e-12).
    inst = rungs["p100"]
    cap = inst.capacity.copy()
    cap[::5] = 1e12
    inst = inst.with_forecast(capacity=cap)
    if mix is not None:
        inst = demand_mix.apply(inst, demand_mix.NAMED[mix], seed=1)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL and r.solution_status is SolutionStatus.OPTIMAL, r.message
    assert r.message.endswith(f"certified gap {r.gap:.3g}"), r.message
    # weak duality (a mathematical fact): the certificate's dual bound is above its primal
    assert r.certificate.dual_value >= r.certificate.primal_value - 1e-9 * abs(r.objective)
    assert np.all(r.bid_price_array[::5] == 0.0)       # a leg that cannot fill has no value
    if mix is None:
        # Reference: Ipopt (cyipopt) on the same arrays, normal demand
        ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-10))
        assert ref.termination is Termination.OPTIMAL
        assert r.objective == pytest.approx(ref.objective, rel=1e-8)


def test_dense_and_schur_factorizations_agree():
    inst = generate(3000, seed=3)
    a = solve(inst, "pnlp", "lagrangian", SolverOptions(solver_options={"linear_solver": "dense"}))
    b = solve(inst, "pnlp", "lagrangian", SolverOptions(solver_options={"linear_solver": "schur"}))
    assert a.ok and b.ok and b.options["linear_solver"] == "schur"
    assert a.objective == pytest.approx(b.objective, rel=1e-12)
    assert np.allclose(a.bid_price_array, b.bid_price_array, rtol=1e-7, atol=1e-9 * a.bid_price_array.max())


def test_bad_options_are_rejected(rungs):
    from decomp.errors import ConfigError

    with pytest.raises(ConfigError, match="unknown lagrangian solver option"):
        solve(rungs["p100"], "pnlp", "lagrangian", SolverOptions(solver_options={"nope": 1}))
    with pytest.raises(ConfigError):
        solve(rungs["p100"], "pnlp", "lagrangian", SolverOptions(solver_options={"linear_solver": "lu"}))


def test_lbfgsb_message_table():
    # scipy's L-BFGS-B messages (scipy.optimize._lbfgsb_py, quoted from its source).
    assert lbfgsb_termination("CONVERGENCE: REL_REDUCTION_OF_F_<=_FACTR*EPSMCH") is Termination.NUMERICAL_ERROR
    assert lbfgsb_termination("STOP: TOTAL NO. OF ITERATIONS REACHED LIMIT") is Termination.ITERATION_LIMIT
    assert lbfgsb_termination("ABNORMAL_TERMINATION_IN_LNSRCH") is Termination.NUMERICAL_ERROR
    assert lbfgsb_termination("something new") is Termination.UNKNOWN


def test_solve_command_writes_a_result(tmp_path, rungs):
    from decomp.cli import main

    out = tmp_path / "r.json"
    code = main(["solve", str(ladder.rung_path("p100")), "--model", "pnlp", "--method", "lagrangian",
                 "--out", str(out)])
    assert code == 0
    data = json.loads(out.read_text())
    assert data["termination"] == "optimal" and data["method"] == "lagrangian"
    warm = tmp_path / "w.json"
    code = main(["solve", str(ladder.rung_path("p100")), "--model", "pnlp", "--method", "lagrangian",
                 "--warm-start", str(out), "--out", str(warm)])
    assert code == 0
    assert json.loads(warm.read_text())["iterations"] <= 1


@pytest.mark.solver
def test_tiny_bid_price_leg_does_not_stall_the_gap():
    # Regression: a 100,000-product date instance whose slack leg has a bid
    # price near 1e-87; scaling every product of that leg (including ones whose
    # other legs are dear) left the recovered primal 1e-8 below the dual and the
    # method ran into its iteration limit. Check: strong duality (a mathematical
    # fact for this convex program) certified to the default tol in few iterations.
    import datetime as dt

    from decomp.generator import generate
    from decomp.production.batch import DateVariation

    inst = DateVariation(seed=1).apply(generate(100_000, seed=1), dt.date(2027, 1, 1), name="stall")
    res = solve(inst, "pnlp", "lagrangian")
    assert res.ok, res.message
    assert res.gap <= 1e-9 and res.certificate.max_violation_rel <= 1e-9
    assert res.iterations <= 30
    assert res.bid_price_array.min() < 1e-60     # the tiny-bid-price leg is there


def test_threaded_subproblems_match_one_thread(monkeypatch):
    # The product slices are independent: splitting them over threads must give
    # the very same numbers (bitwise for x, w, the per-group sums; the slice sums of
    # the dual value only to rounding, since they are added in another order).
    monkeypatch.setattr(_threads, "FROM_PRODUCTS", 0)
    inst = generate(20_000, seed=4)
    one = m_lagr.Network(inst, threads=1)
    two = m_lagr.Network(inst, threads=3)
    assert one._chunks is None and two._chunks is not None and len(two._chunks) == 3
    pi = m_lagr.fare_start(one)
    p1, p2 = one.evaluate(pi), two.evaluate(pi)
    for name in ("x", "w", "x_g", "load"):
        assert np.array_equal(getattr(p1, name), getattr(p2, name)), name
    assert p2.exact == pytest.approx(p1.exact, rel=1e-13)
    a = solve(inst, "pnlp", "lagrangian", SolverOptions(threads=1))
    monkeypatch.setattr(_threads, "available", lambda: 2)
    b = solve(inst, "pnlp", "lagrangian")
    assert a.ok and b.ok
    assert b.objective == pytest.approx(a.objective, rel=1e-12)
    assert np.allclose(a.bid_price_array, b.bid_price_array, rtol=1e-9, atol=1e-12 * a.bid_price_array.max())


def test_history_is_finite_for_every_family():
    # Every history record pairs the dual value with a recovered feasible
    # allocation, so its gap is a finite number and the result is strict JSON
    # (RFC 8259 has no NaN or infinity), also while bid prices settle.
    inst = generate(3000, seed=2)
    for family in ("normal", "gamma"):
        r = solve(inst.with_forecast(meta={**inst.meta, "distribution": family}), "pnlp", "lagrangian")
        assert r.ok, family
        assert all(np.isfinite(h.gap) and np.isfinite(h.primal_value) for h in r.history), family
        json.dumps(r.to_json_dict(include_history=True), allow_nan=False)


# -- the bound-constrained method: exact zeros, the kinks and their smoothing ----------------

def _two_leg_instance(rng):
    """Leg L1 slack, leg L2 tight; P1 flies L1 then L2, P2 flies L2 only (no product uses
    L1 alone): at the optimum L1's bid price is exactly 0, and its bound is active."""
    from decomp.instance import Instance

    m1, m2 = rng.uniform(20, 60, 2)
    cap2 = rng.uniform(0.3, 0.7) * (m1 + m2)
    cap1 = rng.uniform(1.5, 3.0) * m1
    fares = np.sort(rng.uniform(50, 400, 2))[::-1]
    return Instance(leg_ids=["L1", "L2"], leg_origin=["QA1", "QB2"], leg_destination=["QB2", "QC3"],
                    capacity=[np.floor(cap1), np.floor(cap2)], product_ids=["P1", "P2"],
                    leg_ptr=np.array([0, 2, 3]), leg_index=np.array([0, 1, 1]),
                    fare=[fares[0], fares[1]], mean=[m1, m2], std=[0.3 * m1, 0.4 * m2])


def test_slack_leg_shared_with_a_tight_leg_gets_exactly_zero():
    # Regression (the smallest reproducer of the log-space failure): 20 random draws.
    # Reference: Ipopt (bound_relax_factor = 0) on the same PNLP. L1 is slack, so
    # complementary slackness (a mathematical fact) makes its bid price 0.
    rng = np.random.default_rng(12)
    for _ in range(20):
        inst = _two_leg_instance(rng)
        got = solve(inst, "pnlp", "lagrangian")
        ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-12))
        assert got.ok, got.message
        assert got.bid_prices["L1"] == 0.0
        assert got.allocation[0] < inst.capacity[0]              # L1 keeps its slack
        assert got.objective == pytest.approx(ref.objective, rel=1e-8)
        assert got.bid_prices["L2"] == pytest.approx(ref.bid_prices["L2"], rel=1e-6)


def _one_kink(fare, mean, upper):
    """The kink table of one product of known demand (std = 0): one kink of slope fare."""
    from decomp.distributions import Products

    return Products(np.array([fare]), np.array([mean]), np.array([0.0]), upper=np.array([upper])).kinks


def test_exact_kink_terms_are_the_piecewise_linear_maximum():
    # h(a) = max_{0<=x<=w} (r - a) x over one kink (slope r = fare, width min(mean, u)):
    # the allocation is w where a < r and 0 where a > r, the term (r - a)^+ w (a fact of
    # this linear program).
    k = _one_kink(fare=10.0, mean=4.0, upper=9.0)
    for a in (3.0, 9.999, 10.5, 25.0):
        r = k.exact(np.array([a]))
        assert r.x[0] == (4.0 if a < 10.0 else 0.0)
        assert r.value[0] == pytest.approx(max(10.0 - a, 0.0) * 4.0, rel=1e-15)
    assert _one_kink(fare=10.0, mean=40.0, upper=9.0).width[0] == 9.0     # the bound u caps the mean


def test_smoothed_kink_is_the_lognormal_partial_expectation():
    # The smoothed term of a kink is E[(R - a)^+] with R = r exp(theta Z - theta^2/2), i.e.
    # scipy.stats.lognorm(s=theta, scale=r exp(-theta^2/2)); reference: the integral of its
    # sf() from a on (E[(R - a)^+] = int_a^inf P(R > t) dt for R >= 0, a mathematical fact),
    # by adaptive quadrature (scipy.integrate.quad). Its derivative in a is -P(R > a) (the
    # allocation, per unit of width), and Jensen's inequality puts it above (r - a)^+.
    from scipy import integrate
    from scipy import stats

    k = _one_kink(fare=10.0, mean=4.0, upper=9.0)
    for theta in (0.3, 0.03, 0.003):
        R = stats.lognorm(s=theta, scale=10.0 * np.exp(-0.5 * theta * theta))
        for a in (8.0, 9.9, 10.0, 10.2, 12.0):
            got = k.smoothed(np.array([a]), theta)
            ref = integrate.quad(R.sf, a, R.isf(1e-17), epsabs=1e-15, epsrel=1e-12, limit=400)[0]
            assert got.value[0] == pytest.approx(4.0 * ref, rel=1e-7, abs=1e-11)
            assert got.x[0] == pytest.approx(4.0 * R.sf(a), rel=1e-9, abs=1e-14)
            assert got.value[0] >= 4.0 * max(10.0 - a, 0.0) - 1e-12


def test_smoothed_dual_brackets_the_exact_dual():
    # q <= q_theta (Jensen, kink by kink), and the excess q_theta - q reported by the
    # evaluation is exactly their difference, on a Poisson network at random bid prices.
    inst = generate(400, seed=9)
    inst = inst.with_forecast(meta={**inst.meta, "distribution": "poisson"})
    net = m_lagr.Network(inst)
    rng = np.random.default_rng(3)
    base = m_lagr.fare_start(net)
    for theta in (3e-1, 3e-2, 3e-3):
        pi = base * rng.uniform(0.3, 2.0, net.n)
        pt = net.evaluate(pi, theta)
        exact = net.evaluate(pi)
        assert pt.exact == pytest.approx(exact.exact, rel=1e-13)
        assert pt.value >= pt.exact - 1e-12 * abs(pt.exact)
        assert pt.value - pt.exact <= 0.4 * theta * float(inst.fare.max()) * len(net.products.kinks)


def test_poisson_kinks_are_every_seat_above_the_tail():
    # Whole-seat kinks of Poisson demand: one per seat k below the product's bound u with
    # P(D > k) > 1e-12 (and the first seat beyond, which the table's recurrence records
    # before it stops), at slope f P(D > k). Reference: scipy.stats.poisson.sf. The table's
    # slopes come from 1 - (the probabilities summed): accurate to about 1e-14 of the fare,
    # absolute, which is what a slope times a seat needs. Large capacities make u about
    # twice them, far beyond the demand's tail, where the table stops early.
    from scipy import stats

    inst = generate(300, seed=4)
    inst = inst.with_forecast(capacity=inst.capacity * 50.0,
                              meta={**inst.meta, "distribution": "poisson"})
    net = m_lagr.Network(inst)
    k = net.products.kinks
    row = {int(o): i for i, o in enumerate(k.owner)}
    for j in range(0, net.n_products, 37):
        seats = np.arange(int(net.upper[j]))
        sf = stats.poisson.sf(seats, net.products.mean[j])
        i = row[j]
        mine = k.slope[k.ptr[i]:k.ptr[i + 1]]
        assert len(mine) == int(np.sum(sf > 1e-12)) + 1 or len(mine) == int(np.sum(sf > 1e-12))
        want = net.products.fare[j] * sf[sf > 1e-12]
        assert np.all(np.abs(mine[:len(want)] - want) <= 1e-13 * net.products.fare[j] + 1e-9 * want)


def test_answer_does_not_depend_on_the_clock(monkeypatch):
    # When the LP completions run is decided by counted work, not by elapsed time: the
    # same instance on a machine 1,000 times slower gives the same iterations and bid
    # prices. Draws from the test family whose runs call many LPs (it once depended on
    # the load: 2 of 4 identical runs of draw 357 ended at the iteration limit).
    import time

    import family

    real = time.perf_counter
    for seed in (194, 208, 357, 475):
        inst, _ = family.draw(seed)
        fast = solve(inst, "pnlp", "lagrangian")
        with monkeypatch.context() as m:
            m.setattr(time, "perf_counter", lambda: 1000.0 * real())
            slow = solve(inst, "pnlp", "lagrangian")
        assert fast.termination is Termination.OPTIMAL
        assert slow.iterations == fast.iterations
        assert np.array_equal(slow.bid_price_array, fast.bid_price_array)


def test_room_left_goes_to_the_dearest_seat_first():
    # Two products of deterministic demand (std = 0: revenue f min(x, mean), exact) on one
    # leg of 13 seats, each holding 5: the 3 seats left go to the 100 fare, not the 50
    # (the LP optimum; a fact of this linear program). On random allocations of a
    # generated Poisson network the pass keeps every leg within capacity and never lowers
    # the expected revenue (expected sales are nondecreasing in the allocation).
    from decomp.instance import Instance
    from decomp.lagrangian.recovery import _fill_dearest, scale_to_capacity

    inst = Instance(leg_ids=["L1"], leg_origin=["QA1"], leg_destination=["QB2"], capacity=[13.0],
                    product_ids=["P1", "P2"], leg_ptr=np.array([0, 1, 2]), leg_index=np.array([0, 0]),
                    fare=[100.0, 50.0], mean=[10.0, 10.0], std=[0.0, 0.0])
    net = m_lagr.Network(inst)
    y = _fill_dearest(net, np.array([5.0, 5.0]))
    assert y[0] == pytest.approx(8.0, rel=1e-9) and y[1] == 5.0
    assert net.revenue(y) == pytest.approx(100.0 * 8.0 + 50.0 * 5.0, rel=1e-9)

    inst = generate(300, seed=4)
    inst = inst.with_forecast(meta={**inst.meta, "distribution": "poisson"})
    net = m_lagr.Network(inst)
    rng = np.random.default_rng(2)
    for _ in range(5):
        y = rng.uniform(0.0, 2.0, net.n_products) * net.products.mean
        load = net.load(y)
        over = load > net.cap
        y = scale_to_capacity(net, y, load, over) if np.any(over) else y
        filled = _fill_dearest(net, y)
        assert np.all(net.load(filled) <= net.cap * (1.0 + 1e-12) + 1e-12)
        assert np.all(filled >= y)
        assert np.any(filled > y)
        assert net.revenue(filled) >= net.revenue(y) - 1e-9 * abs(net.revenue(y))


def test_discrete_demand_at_scale_is_certified():
    # Negative-binomial demand on 5,010 products: with whole seats the PNLP is a linear
    # program, whose split of a leg's last seats the dual leaves open; the restricted
    # problem of the kinks near the bid prices settles it. Checked by the independent
    # certificate (scipy.stats only; weak duality, a mathematical fact).
    import dataclasses

    import family

    inst = generate(5010, seed=4, demand_factor=(0.3691967057659209, 0.48735104588241573),
                    cv=(0.13299706742235012, 0.30313758632135546), fare_ratio=0.8604010223537917,
                    class_growth=0.863140042077445, seats=232.98113362660803, hubs=2)
    inst = dataclasses.replace(inst, std=np.maximum(inst.std, np.sqrt(inst.mean) * 1.2 + 1e-3),
                               distribution=np.full(inst.n_products, "negbin", dtype=object))
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert (dual - primal) / max(1.0, abs(primal)) <= 1e-8


def test_kink_curvature_is_the_chord_for_products_that_crossed_zero():
    # Normal demand: x(a) = max(0, mean + std * Phi^-1(1 - a/f)), with slope -std / (f phi(z))
    # inside (the newsvendor fractile; scipy.stats.norm as the reference). Product P1 on L1
    # is open at the previous bid price and closed (x = 0) at the current one: its curvature
    # is the chord's slope x_prev / (a - a_prev). P2 on L2 stays open: its tangent stays.
    from scipy import stats
    from decomp.instance import Instance
    from decomp.lagrangian.newton import kink_curvature

    f, m, s = np.array([100.0, 80.0]), np.array([10.0, 20.0]), np.array([2.0, 6.0])
    inst = Instance(leg_ids=["L1", "L2"], leg_origin=["QA1", "QB2"], leg_destination=["QB2", "QC3"],
                    capacity=[30.0, 30.0], product_ids=["P1", "P2"], leg_ptr=np.array([0, 1, 2]),
                    leg_index=np.array([0, 1]), fare=f, mean=m, std=s)
    net = m_lagr.Network(inst)
    kink = f[0] * stats.norm.cdf(m[0] / s[0])          # P1 closes at a above this
    before = net.evaluate(np.array([kink - 0.02, 40.0]))
    after = net.evaluate(np.array([kink + 0.01, 41.0]))
    x_before = m[0] + s[0] * stats.norm.isf((kink - 0.02) / f[0])
    assert before.x[0] == pytest.approx(x_before, rel=1e-9) and after.x[0] == 0.0
    w_g = kink_curvature(net, after, before)
    assert w_g[net.group_of(np.array([0]))[0]] == pytest.approx(x_before / 0.03, rel=1e-9)
    z = stats.norm.isf(41.0 / f[1])
    assert w_g[net.group_of(np.array([1]))[0]] == pytest.approx(s[1] / (f[1] * stats.norm.pdf(z)), rel=1e-9)


def test_chord_update_is_the_newton_step_with_the_closing_products_chord():
    # Three legs, products on L1, L2, L3 and L1-L2. At the step the tangent proposes, P1 (on
    # L1 alone) closes: its zero threshold f Phi(m/s) (scipy.stats.norm) lies inside the step.
    # No bid-price sum moves by 5% of itself, so P1's group alone takes the chord x / da in
    # place of its tangent w, and chord_update's Woodbury step equals the step solved
    # directly (numpy) with the Hessian A diag(w') A^T of those curvatures, scaled as the
    # system is (a mathematical identity, checked here on the method's own scaled system).
    from scipy import stats
    from decomp.instance import Instance
    from decomp.lagrangian import newton
    from decomp.lagrangian.hessian import LegSystem

    f = np.array([100.0, 80.0, 60.0, 150.0])
    m = np.array([10.0, 20.0, 15.0, 12.0])
    s = np.array([2.0, 6.0, 5.0, 4.0])
    inst = Instance(leg_ids=["L1", "L2", "L3"], leg_origin=["QA1", "QB2", "QC3"],
                    leg_destination=["QB2", "QC3", "QD4"], capacity=[30.0, 30.0, 30.0],
                    product_ids=["P1", "P2", "P3", "P4"], leg_ptr=np.array([0, 1, 2, 3, 5]),
                    leg_index=np.array([0, 1, 2, 0, 1]), fare=f, mean=m, std=s)
    net = m_lagr.Network(inst)
    system = LegSystem(net)
    kink = f[0] * stats.norm.cdf(m[0] / s[0])
    pt = net.evaluate(np.array([kink - 0.05, 30.0, 20.0]))
    assert net.zero_threshold[0] == pytest.approx(kink, rel=1e-12)
    fixed = np.zeros(3, bool)
    lower = np.zeros(3)
    step = np.array([0.2, -1.0, 0.5])
    g1 = net.group_of(np.array([0]))[0]
    assert list(newton.chord_groups(net, pt, net.AT_g @ step)) == [g1]
    r1 = (kink - 0.05) / f[0]
    x1 = m[0] + s[0] * stats.norm.isf(r1)
    w1 = s[0] / (f[0] * stats.norm.pdf(stats.norm.isf(r1)))
    assert pt.w[0] == pytest.approx(w1, rel=1e-9)
    # the system is solved in the space scaled by the Hessian's diagonal: S = diag(h)^(-1/2);
    # a right-hand side whose tangent step is that step: b = (S H S + lam I) S^-1 step
    A = net.A_g.toarray()
    H = A @ np.diag(pt.w_g) @ A.T
    scale = 1.0 / np.sqrt(np.diag(H))
    S = np.diag(scale)
    lam = 1e-8
    b = (S @ H @ S + lam * np.eye(3)) @ (step / scale)
    u = system.solve(system.pair_values(pt.w_g), scale, fixed, lam, b)
    assert u * scale == pytest.approx(step, rel=1e-6)
    updated = newton.chord_update(net, system, pt, u, scale, fixed, lower, pt.w_g,
                                   system.pair_values(pt.w_g))
    w2 = pt.w_g.copy()
    w2[g1] += x1 / 0.2 - w1
    H2 = A @ np.diag(w2) @ A.T
    assert updated == pytest.approx(np.linalg.solve(S @ H2 @ S + lam * np.eye(3), b), rel=1e-6)
    assert not np.allclose(updated, u, rtol=1e-3)


def test_chord_update_takes_the_chord_where_a_bid_price_sum_moves_far():
    # One leg, one product (normal demand): the step raises a from 20 to 30, far more than
    # 5% of itself. The chord (x(20) - x(30)) / 10 of the newsvendor fractile
    # x(a) = m + s Phi^-1(1 - a/f) (scipy.stats.norm) replaces the tangent, and for one leg
    # the step solved with it is exact: -g / chord moves a to 30 when g = -(x(20) - x(30)).
    from scipy import stats
    from decomp.instance import Instance
    from decomp.lagrangian import newton
    from decomp.lagrangian.hessian import LegSystem

    f, m, s = np.array([100.0]), np.array([40.0]), np.array([12.0])
    inst = Instance(leg_ids=["L1"], leg_origin=["QA1"], leg_destination=["QB2"], capacity=[30.0],
                    product_ids=["P1"], leg_ptr=np.array([0, 1]), leg_index=np.array([0]),
                    fare=f, mean=m, std=s)
    net = m_lagr.Network(inst)
    system = LegSystem(net)
    pt = net.evaluate(np.array([20.0]))
    x20 = m[0] + s[0] * stats.norm.isf(0.2)
    x30 = m[0] + s[0] * stats.norm.isf(0.3)
    w20 = s[0] / (f[0] * stats.norm.pdf(stats.norm.isf(0.2)))
    assert pt.x[0] == pytest.approx(x20, rel=1e-12) and pt.w[0] == pytest.approx(w20, rel=1e-9)
    scale = np.array([1.0 / np.sqrt(w20)])
    lam = 1e-12
    step = np.array([10.0])
    b = (1.0 + lam) * step / scale                        # its tangent step is +10
    u = system.solve(system.pair_values(pt.w_g), scale, np.zeros(1, bool), lam, b)
    assert u * scale == pytest.approx(step, rel=1e-9)
    assert list(newton.chord_groups(net, pt, net.AT_g @ step)) == [0]
    # the same right-hand side g = -w20 * 10: with the chord the step is w20 * 10 / chord
    chord = (x20 - x30) / 10.0
    updated = newton.chord_update(net, system, pt, u, scale, np.zeros(1, bool), np.zeros(1), pt.w_g,
                                   system.pair_values(pt.w_g))
    assert updated * scale == pytest.approx(w20 * 10.0 / chord, rel=1e-6)
