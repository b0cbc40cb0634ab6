"""The sales-based LP under the multinomial logit: every method against sources outside the project.

* The theorem of Gallego, Ratliff and Shebalov (2015, Operations Research 63(1)): under
  the multinomial logit the sales-based LP has the optimal value of the choice-based
  deterministic LP (Liu and van Ryzin 2008). That LP is solved here by column
  generation whose pricing enumerates every offer set by brute force, its restricted
  LPs by scipy's HiGHS (``tests/support/choice_reference.py``, no decomp code), and also with
  every offer set as a column from the start; each of decomp's methods must match it
  to 1e-9 (relative).
* Talluri and van Ryzin (2004, Management Science 50(1)): under the multinomial logit
  the offer set maximizing expected net fare is revenue-ordered (the products whose
  net fare exceeds the set's value). Checked against enumeration of every subset, and
  on a single leg and single market, where the optimal sets at the bid price are the
  fare-ordered ones.
* Strong duality: the certificate's dual bound equals the primal value at the optimum
  (a mathematical fact); the LP dual of a maximization with <= rows has duals >= 0.
"""

from __future__ import annotations

import itertools

import numpy as np
import pandas as pd
import pytest

import decomp
from decomp.choice import mnl, with_markets
from decomp.choice.certify import certify
from decomp.choice.network import ChoiceNetwork
from decomp.result import Termination

from support import choice_reference as ref
from support.choice_networks import random_network

pytestmark = [pytest.mark.solver, pytest.mark.filterwarnings("ignore::decomp.io.UnusedLegWarning")]

METHODS = ("highs", "pyomo-highs", "lagrangian")


@pytest.mark.parametrize("seed", range(12))
def test_sales_lp_equals_choice_lp_by_column_generation(seed):
    # Source: Gallego, Ratliff and Shebalov 2015 (SBLP = CDLP under the MNL); the CDLP by column
    # generation with brute-force pricing over every subset (markets of at most 8 products), scipy HiGHS.
    inst = random_network(seed, legs=3 + seed % 3, markets=4 + seed % 5, others=seed % 3,
                          tightness=0.4 + 0.1 * (seed % 5), closed=1 if seed % 4 == 3 else 0)
    value, _, rounds = ref.cdlp_column_generation(*ref.from_instance(inst))
    assert rounds >= 1
    every = ref.cdlp_all_columns(*ref.from_instance(inst))
    assert every == pytest.approx(value, rel=1e-9, abs=1e-9)
    for method in METHODS:
        r = decomp.solve(inst, model="sblp", method=method)
        assert r.ok, (method, r.termination, r.gap, r.message)
        assert r.objective == pytest.approx(value, rel=1e-9), method
        assert r.bound == pytest.approx(value, rel=1e-9), method
        assert r.certificate.max_violation_rel <= 1e-9
        assert np.all(r.bid_price_array >= -1e-9)


def test_lagrangian_certifies_to_1e9():
    inst = random_network(101, legs=5, markets=12)
    r = decomp.solve(inst, model="sblp", method="lagrangian", tol=1e-9)
    assert r.ok and abs(r.gap) <= 1e-9
    # independent recomputation of the certificate at the returned answer
    c = certify(inst, r.allocation, r.bid_price_array)
    assert c.dual_value - c.primal_value <= 1e-9 * abs(c.primal_value)


@pytest.mark.parametrize("seed", range(40))
def test_best_offer_is_the_enumerated_best_subset(seed):
    # Source: Talluri and van Ryzin 2004 (revenue-ordered optimal sets under the MNL), against enumeration.
    rng = np.random.default_rng(seed)
    n = int(rng.integers(1, 9))
    r = rng.normal(100, 80, n)
    w = rng.uniform(0.05, 5, n)
    w0 = float(rng.uniform(0.05, 5))
    mp = mnl.MarketProducts(index=np.arange(n), market=np.zeros(n, dtype=np.int64), weight=w,
                            w0=np.array([w0]), arrivals=np.array([1.0]))
    R, offered = mnl.best_offer(mp, r)
    best, subset = ref.best_subset(r.tolist(), w.tolist(), w0)
    assert R[0] == pytest.approx(best, rel=1e-12, abs=1e-12)
    if best > 0:
        assert set(np.flatnonzero(offered).tolist()) == set(subset)
    else:
        assert not offered.any()


def _single_leg(capacity, fares, weights, w0, arrivals):
    legs = pd.DataFrame({"leg": ["NV7"], "origin": ["QAA"], "destination": ["QBB"], "capacity": [capacity]})
    n = len(fares)
    products = pd.DataFrame({"product": [f"C{k}" for k in range(n)], "legs": ["NV7"] * n, "fare": fares,
                             "mean": [1.0] * n, "std": [1.0] * n, "market": ["MQ"] * n,
                             "preference_weight": weights})
    markets = pd.DataFrame({"market": ["MQ"], "arrivals": [arrivals], "no_purchase_weight": [w0]})
    return with_markets(decomp.Instance.from_frames(legs, products), markets)


@pytest.mark.parametrize("seed", range(10))
def test_single_leg_single_market_against_enumeration(seed):
    # Source: enumeration of every offer set of one market on one leg (the CDLP with all 2^n columns,
    # scipy HiGHS); Talluri and van Ryzin 2004: the optimal sets at the bid price are fare-ordered.
    rng = np.random.default_rng(100 + seed)
    n = int(rng.integers(2, 9))
    fares = np.sort(rng.uniform(50, 500, n))[::-1]
    weights = rng.uniform(0.3, 3.0, n) * (fares[0] / fares) ** 1.5
    w0, arrivals = float(rng.uniform(0.2, 3)), float(rng.uniform(20, 200))
    capacity = float(np.round(rng.uniform(0.2, 0.9) * arrivals))
    inst = _single_leg(capacity, fares.round(2), weights, w0, arrivals)
    expected = ref.cdlp_all_columns(*ref.from_instance(inst))
    for method in METHODS:
        r = decomp.solve(inst, model="sblp", method=method)
        assert r.ok and r.objective == pytest.approx(expected, rel=1e-9), method
    r = decomp.solve(inst, model="sblp", method="lagrangian")
    pi = float(r.bid_price_array[0])
    # at the bid price, the best set by enumeration is a fare-ordered prefix, and it is the one offered
    net = (inst.fare - pi).tolist()
    best, subset = ref.best_subset(net, inst.markets.weight.tolist(), w0)
    assert set(subset) == set(range(len(subset)))            # products are listed by falling fare
    mp = ChoiceNetwork.of(inst).mp
    R, offered = mnl.best_offer(mp, inst.fare[mp.index] - pi)
    assert R[0] * arrivals == pytest.approx(best * arrivals, rel=1e-9, abs=1e-9)
    # the sales are a mix of fare-ordered sets: sales per weight do not rise as the fare falls
    per_weight = r.allocation / inst.markets.weight
    assert np.all(np.diff(per_weight) <= 1e-9 * per_weight.max())


def test_single_leg_with_room_sells_the_unconstrained_best_set():
    # With capacity for everyone the optimum is arrivals x the best revenue per arrival by enumeration.
    fares, weights = [400.0, 300.0, 150.0, 90.0], [0.5, 1.0, 3.0, 6.0]
    inst = _single_leg(1e6, fares, weights, 1.0, 100.0)
    best, subset = ref.best_subset(fares, weights, 1.0)
    for method in METHODS:
        r = decomp.solve(inst, model="sblp", method=method)
        assert r.objective == pytest.approx(100.0 * best, rel=1e-12)
        assert r.bid_price_array[0] == pytest.approx(0.0, abs=1e-9)


@pytest.mark.parametrize("method", METHODS)
def test_duals_are_bid_prices(method):
    # LP duality: a binding capacity row of a maximization has a dual >= 0; with one more seat on the
    # priciest leg the optimum rises by about its bid price (within the LP's piecewise-linear step).
    inst = random_network(7, legs=4, markets=8, tightness=0.4)
    r = decomp.solve(inst, model="sblp", method=method)
    assert r.ok
    pi = r.bid_price_array
    i = int(np.argmax(pi))
    assert pi[i] > 0
    cap = inst.capacity.copy()
    h = 1e-4
    cap[i] += h
    up = decomp.solve(inst.with_forecast(capacity=cap), model="sblp", method="highs")
    assert (up.objective - r.objective) / h == pytest.approx(pi[i], rel=1e-3)


def test_closed_legs_get_closing_prices():
    inst = random_network(3, legs=4, markets=10, closed=2)
    r = decomp.solve(inst, model="sblp", method="lagrangian")
    h = decomp.solve(inst, model="sblp", method="highs")
    assert r.ok and r.objective == pytest.approx(h.objective, rel=1e-9)
    closed = inst.capacity == 0
    on_closed = inst.leg_sum(closed.astype(float)) > 0
    assert np.all(r.allocation[on_closed] == 0)
    # every product on a closed leg has net fare <= 0 at the returned prices
    assert np.all(inst.fare[on_closed] - inst.leg_sum(r.bid_price_array)[on_closed] <= 1e-9)


def test_time_and_iteration_limits_are_statuses():
    from decomp.choice.generate import generate_choice

    inst = generate_choice(3000, seed=4)
    r = decomp.solve(inst, model="sblp", method="lagrangian", iteration_limit=1)
    assert r.termination in (Termination.ITERATION_LIMIT, Termination.OPTIMAL)
    if r.termination is Termination.ITERATION_LIMIT:
        assert r.solution_status.value in ("feasible", "optimal")
        assert r.certificate.max_violation_rel <= 1e-6           # the answer it returns is feasible
    full = decomp.solve(inst, model="sblp", method="lagrangian")
    assert full.ok and full.iterations > 1


def test_warm_start_gives_the_same_optimum():
    from decomp.choice.generate import generate_choice

    inst = generate_choice(2000, seed=9)
    cold = decomp.solve(inst, model="sblp", method="lagrangian")
    warm = decomp.solve(inst, model="sblp", method="lagrangian", warm_start=cold)
    assert warm.ok and warm.objective == pytest.approx(cold.objective, rel=1e-9)


def test_generated_network_agrees_across_methods():
    from decomp.choice.generate import generate_choice

    inst = generate_choice(4000, seed=11)
    res = {m: decomp.solve(inst, model="sblp", method=m) for m in ("highs", "lagrangian")}
    assert all(r.ok for r in res.values())
    assert res["lagrangian"].objective == pytest.approx(res["highs"].objective, rel=1e-9)
    assert abs(res["lagrangian"].gap) <= 1e-9


def test_registry_lists_the_sales_lp_methods_and_baselines_leave_them_out():
    assert {("sblp", m) for m in METHODS} <= set(decomp.pairs())
    from decomp.baseline.cases import _available_pairs

    assert all(model != "sblp" for model, _ in _available_pairs())
    with pytest.raises(decomp.UnknownMethodError, match="does not solve model 'sblp'"):
        decomp.get_method("ipopt", "sblp")


def test_mnl_sales_match_the_formula():
    # The multinomial logit by hand: P_j(S) = w_j / (w0 + sum_S w).
    w = np.array([1.0, 2.0, 3.0])
    mp = mnl.MarketProducts(index=np.arange(3), market=np.zeros(3, dtype=np.int64), weight=w,
                            w0=np.array([4.0]), arrivals=np.array([10.0]))
    for s in itertools.product([False, True], repeat=3):
        offered = np.array(s)
        x = mnl.sales(mp, offered)
        expect = np.where(offered, 10 * w / (4 + w[offered].sum()), 0.0)
        assert np.allclose(x, expect, rtol=1e-15)


def _family_draw(seed):
    """Random networks the generator never makes (hub networks of 2-7 spokes, markets of 1-8 products, products
    outside markets, closed legs, slack to very tight) and generated ones with random choice options."""
    from decomp.choice.generate import ChoiceParams, generate_choice

    rng = np.random.default_rng(seed)
    if seed % 2 == 0:
        return random_network(seed, legs=int(rng.integers(2, 8)), markets=int(rng.integers(3, 40)),
                              max_products=int(rng.integers(1, 9)), others=int(rng.integers(0, 4)),
                              tightness=float(rng.uniform(0.1, 1.5)), closed=int(rng.integers(0, 2)))
    choice = ChoiceParams(weight_slope=float(rng.uniform(0, 4)), strong_share=float(rng.uniform(0, 1)),
                          strong_no_purchase=(0.02, 0.3), weak_no_purchase=(1.0, 20.0))
    return generate_choice(int(rng.integers(300, 6000)), seed=seed, choice=choice,
                           demand_factor=(float(rng.uniform(0.3, 1.0)), float(rng.uniform(1.0, 3.0))))


@pytest.mark.parametrize("seed", [pytest.param(s, marks=pytest.mark.slow) if s >= 30 else s for s in range(100)])
def test_family_lagrangian_certifies_and_agrees_with_highs(seed):
    # Strong duality (the certificate's dual bound at the returned bid prices) and HiGHS on the same LP.
    inst = _family_draw(seed)
    r = decomp.solve(inst, model="sblp", method="lagrangian", tol=1e-9)
    h = decomp.solve(inst, model="sblp", method="highs")
    assert r.ok and abs(r.gap) <= 1e-9 and r.certificate.max_violation_rel <= 1e-9, r.message
    assert r.objective == pytest.approx(h.objective, rel=1e-9)


def test_time_limit_is_a_status_with_a_feasible_answer():
    from decomp.choice.generate import generate_choice

    inst = generate_choice(3000, seed=12)
    r = decomp.solve(inst, model="sblp", method="lagrangian", time_limit=1e-4)
    assert r.termination is Termination.TIME_LIMIT
    assert r.certificate.max_violation_rel <= 1e-9                # scaled to fit the legs
    assert r.solution_status.value in ("feasible", "optimal")
    h = decomp.solve(inst, model="sblp", method="highs")
    assert r.objective <= h.objective * (1 + 1e-9)                 # a feasible point is below the optimum
    assert r.bound >= h.objective * (1 - 1e-9)                     # and the dual bound above it
