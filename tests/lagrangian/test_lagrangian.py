"""The Lagrangian method as a whole (decomp.lagrangian, the 'lagrangian' method): agreement with
Ipopt, strong duality, the DLP limit, warm starts, limits and options, exact zeros, threads and a
clock-free answer.

Its steps have files of their own in this folder: the kinks (test_kinks), the Newton step
(test_newton), the recovery (test_recovery), the restricted problem and its interior-point method
(test_interior), the other dual minimizers (test_alternatives), the demand families
(test_distributions); edge cases, the randomized family and the demand models too.
"""

import json

import numpy as np
import pytest

from decomp import SolutionStatus, SolverOptions, Termination, ladder, solve
from decomp import dual as _dual
from decomp import threads as _threads
from decomp import lagrangian as m_lagr
from decomp import demand_mix
from decomp.generator import generate
from decomp.result import IterationRecord


@pytest.fixture(scope="module")
def lagr(rungs):
    return {name: solve(inst, "pnlp", "lagrangian") for name, inst in rungs.items()}


def _close_bid_prices(ref, got, rel=1e-6):
    """Bid prices agree to ``rel`` where they are at least 1e-3 of the largest."""
    big = ref >= 1e-3 * ref.max()
    err = np.abs(got[big] - ref[big]) / ref[big]
    return float(err.max()) if big.any() else 0.0


# -- agreement with Ipopt -------------------------------------------------------------

@pytest.mark.solver
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


@pytest.mark.solver
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


# -- limits and statuses -----------------------------------------------------------------


def test_newton_iteration_and_time_limits(rungs):
    inst = rungs["p10k"]
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(iteration_limit=2))
    assert r.termination is Termination.ITERATION_LIMIT
    assert r.solution_status is SolutionStatus.FEASIBLE and r.certificate.max_violation_rel <= 1e-9
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(time_limit=1e-6))
    assert r.termination is Termination.TIME_LIMIT
    assert r.solution_status is SolutionStatus.FEASIBLE


def test_time_out_at_the_hand_over_is_a_time_limit_with_an_allocation(monkeypatch):
    # Large networks recover an allocation only near the optimum; a run whose time ends just
    # as Newton hands over to the restricted problem must still stop as time_limit with a
    # feasible allocation and its certified gap (weak duality: the gap is >= 0 and finite).
    # The clock is replaced: in time during the Newton phase, out of time after it.
    from decomp.lagrangian import loop

    monkeypatch.setattr(loop, "RECOVER_ALWAYS_BELOW", 0)
    phase = loop.newton_phase
    state = {"over": False}

    def newton_then_out(st, *a, **k):
        out = phase(st, *a, **k)
        state["over"] = True
        return out

    monkeypatch.setattr(loop, "newton_phase", newton_then_out)
    monkeypatch.setattr(loop.LoopState, "out_of_time", lambda self: state["over"])
    inst = demand_mix.apply(generate(3000, seed=5), demand_mix.NAMED["poisson"], seed=1)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.TIME_LIMIT, r.message
    assert r.solution_status is SolutionStatus.FEASIBLE and r.certificate.max_violation_rel <= 1e-9
    assert 0.0 <= r.gap < 1.0 and r.objective > 0


@pytest.mark.solver
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


def test_threaded_gamma_functions_match_one_thread(monkeypatch):
    # Gamma demand's incomplete gamma functions run in slices on threads: elementwise, so
    # the dual's terms are bitwise those of one thread, and the whole solve the same.
    from decomp.distributions import gamma as _gamma
    monkeypatch.setattr(_gamma, "THREADS_FROM", 0)
    inst = demand_mix.apply(generate(3000, seed=4), demand_mix.NAMED["gamma"], seed=2)
    one = m_lagr.Network(inst, threads=1)
    two = m_lagr.Network(inst, threads=3)
    pi = m_lagr.fare_start(one)
    p1, p2 = one.evaluate(pi), two.evaluate(pi)
    for name in ("x", "w", "x_g", "load"):
        assert np.array_equal(getattr(p1, name), getattr(p2, name)), name
    y = np.linspace(0.0, 2.0, one.n_products) * one.upper
    assert np.array_equal(one.products.revenue(y), two.products.revenue(y))
    a = solve(inst, "pnlp", "lagrangian", SolverOptions(threads=1))
    b = solve(inst, "pnlp", "lagrangian", SolverOptions(threads=3))
    assert a.ok and b.ok and a.iterations == b.iterations
    assert b.objective == pytest.approx(a.objective, rel=1e-13)


def test_threaded_subproblems_match_one_thread(monkeypatch):
    # The product slices are independent: splitting them over threads must give
    # the very same numbers (bitwise for x, w, the per-group sums; the slice sums of
    # the dual value only to rounding, since they are added in another order).
    monkeypatch.setattr(_threads, "FROM_PRODUCTS", 0)
    split = []
    map_slices = _threads.map_slices

    def spy(fn, n, threads=None, from_items=None):
        split.append(len(_threads.slices(n, threads, from_items)))
        return map_slices(fn, n, threads, from_items)

    monkeypatch.setattr(_threads, "map_slices", spy)
    inst = generate(20_000, seed=4)
    one = m_lagr.Network(inst, threads=1)
    two = m_lagr.Network(inst, threads=3)
    pi = m_lagr.fare_start(one)
    p1 = one.evaluate(pi)
    assert set(split) <= {1}                  # one thread: one slice
    split.clear()
    p2 = two.evaluate(pi)
    assert 3 in split                         # three threads: the products in three slices
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


# -- the bound-constrained method: exact zeros ---------------------------------------------

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


@pytest.mark.solver
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


def test_answer_does_not_depend_on_the_clock(monkeypatch):
    # When the LP completions run is decided by counted work, not by elapsed time: the
    # same instance on a machine 1,000 times slower gives the same iterations and bid
    # prices. Draws from the test family whose runs call many LPs (it once depended on
    # the load: 2 of 4 identical runs of draw 357 ended at the iteration limit).
    import time

    from support import family

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


def test_discrete_demand_at_scale_is_certified():
    # Negative-binomial demand on 5,010 products: with whole seats the PNLP is a linear
    # program, whose split of a leg's last seats the dual leaves open; the restricted
    # problem of the kinks near the bid prices settles it. Checked by the independent
    # certificate (scipy.stats only; weak duality, a mathematical fact).
    import dataclasses

    from support import family

    inst = generate(5010, seed=4, demand_factor=(0.3691967057659209, 0.48735104588241573),
                    cv=(0.13299706742235012, 0.30313758632135546), fare_ratio=0.8604010223537917,
                    class_growth=0.863140042077445, seats=232.98113362660803, hubs=2)
    inst = dataclasses.replace(inst, std=np.maximum(inst.std, np.sqrt(inst.mean) * 1.2 + 1e-3),
                               distribution=np.full(inst.n_products, "negbin", dtype=object))
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8


