"""Capacity- and time-dependent bid prices (decomp.dynamic) against outside facts.

Sources named beside each check:
* Littlewood (1972): with two fare classes, low before high, protect y seats for
  the high fare where y is the largest with r_H P(D_H >= y) > r_L (optimal for
  two classes arriving low before high; the binomial law of D_H from scipy.stats).
* Monotonicity of the single-leg program (Talluri and van Ryzin 2004, section
  2.5.2, from memory): the value of a seat falls as seats remaining grow and as
  the horizon runs out.
* The whole network's dynamic program by brute force (tests/support/network_dp.py): the
  Lagrangian bound is at least its value and at most the DLP value (Topaloglu
  2009: both are results of that paper; the relaxation argument for the first is in
  decomp/dynamic/relaxation.py), and on a
  network whose products each use one leg the leg programs are the network
  program exactly.
* Convexity: a subgradient g of V at lambda satisfies V(mu) >= V(lambda) + g.(mu - lambda)
  (mathematical fact; the bound is a maximum of functions linear in lambda).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from decomp import Instance, solve
from decomp.dynamic import (DemandError, PeriodDemand, decompose, from_arrival_curves,
                            read_parquet, relax, solve_leg, write_parquet)
from decomp.dynamic.relaxation import _Network
from decomp.errors import InstanceError

from support.network_dp import check_monotone, optimal_values, policy_value


def _naive_leg(capacity, prob, revenue):
    """The textbook recursion, a product and a seat at a time (Talluri and van Ryzin 2004, 2.5)."""
    T, J = prob.shape
    V = np.zeros(capacity + 1)
    for t in range(T - 1, -1, -1):
        new = V.copy()
        for x in range(1, capacity + 1):
            for j in range(J):
                new[x] += prob[t, j] * max(0.0, revenue[j] - (V[x] - V[x - 1]))
        V = new
    return V[capacity]


def test_leg_program_matches_textbook_recursion():
    rng = np.random.default_rng(3)
    prob = rng.random((30, 5)) * 0.18
    revenue = rng.uniform(20, 200, 5)
    sol = solve_leg(7, prob, revenue)
    assert sol.value == pytest.approx(_naive_leg(7, prob, revenue), rel=1e-12)
    assert sol.bid.shape == (30, 8) and np.all(np.isinf(sol.bid[:, 0]))


@pytest.mark.parametrize("r_low,r_high,p,periods_high", [(60.0, 150.0, 0.6, 40), (100.0, 130.0, 0.3, 60),
                                                         (20.0, 200.0, 0.8, 25)])
def test_littlewood_protection_level(r_low, r_high, p, periods_high):
    # Low fare requests in the first 50 periods (prob 0.9), high fare requests after them.
    C, low = 30, 50
    T = low + periods_high
    prob = np.zeros((T, 2))
    prob[:low, 0] = 0.9
    prob[low:, 1] = p
    sol = solve_leg(C, prob, np.array([r_low, r_high]))
    # At the last low-fare period the table closes the low fare on the seats it protects.
    last_low = sol.bid[low - 1, 1:]
    protected = int(np.sum(last_low > r_low))
    # Littlewood (1972): largest y with r_H P(D_H >= y) > r_L, D_H ~ Binomial(periods_high, p) (scipy.stats).
    y = np.arange(0, C + 1)
    tail = stats.binom.sf(y - 1, periods_high, p)
    littlewood = int(y[r_high * tail > r_low].max())
    assert protected == min(littlewood, C)


def _random_instance(rng, legs=3, products=8, periods=40):
    leg_rows = [(f"L{i}", f"S{i}", f"S{i + 1}", float(rng.integers(3, 9))) for i in range(legs)]
    prods = []
    for j in range(products):
        a = int(rng.integers(0, legs))
        b = int(rng.integers(a, min(legs, a + 2)))
        prods.append((f"P{j}", [f"L{i}" for i in range(a, b + 1)], float(rng.uniform(50, 300)), 1.0, 1.0))
    inst = Instance.from_lists(leg_rows, prods)
    p = rng.random((periods, products))
    p *= 0.8 / p.sum(axis=1, keepdims=True)
    inst = inst.with_forecast(mean=p.sum(0), std=np.sqrt((p * (1 - p)).sum(0)))
    return inst, PeriodDemand(p)


@pytest.mark.solver
def test_tables_are_monotone():
    rng = np.random.default_rng(5)
    inst, demand = _random_instance(rng)
    r = solve(inst, "dlp", "highs")
    check_monotone(decompose(inst, demand, r.bid_price_array))
    check_monotone(relax(inst, demand, r.bid_price_array, iteration_limit=30).tables)


def _two_legs(connecting_demand: float, periods=14, seed=1):
    inst = Instance.from_lists([("A", "X", "H", 3), ("B", "H", "Y", 2)],
                               [("a", ["A"], 100.0, 0, 0), ("b", ["B"], 80.0, 0, 0),
                                ("ab", ["A", "B"], 150.0, 0, 0)])
    rng = np.random.default_rng(seed)
    p = rng.random((periods, 3))
    p[:, 2] *= connecting_demand
    p *= 0.9 / p.sum(axis=1, keepdims=True)
    inst = inst.with_forecast(mean=p.sum(0), std=np.sqrt((p * (1 - p)).sum(0)))
    return inst, p


@pytest.mark.solver
def test_leg_programs_equal_network_program_without_connecting_demand():
    # 2 legs, 3 products; the connecting product has no demand, so the network program
    # separates and the tables must equal the brute-force marginal seat values.
    inst, p = _two_legs(0.0)
    V = optimal_values(inst, p)                     # V_0 on the grid (4 x 3)
    r = solve(inst, "dlp", "highs")
    assert decompose(inst, PeriodDemand(p), r.bid_price_array).value == pytest.approx(V[3, 2], rel=1e-9)
    assert relax(inst, PeriodDemand(p), r.bid_price_array, iteration_limit=20).bound == pytest.approx(V[3, 2], rel=1e-9)
    # the period-0 tables hold V_1's seat values: against the network's, for every seat count
    T = p.shape[0]
    V1 = optimal_values(inst, p[1:]) if T > 1 else np.zeros_like(V)
    tb = decompose(inst, PeriodDemand(p), r.bid_price_array)
    np.testing.assert_allclose(tb.leg(0)[0, 1:], np.diff(V1[:, 2]), rtol=1e-9, atol=1e-9)
    np.testing.assert_allclose(tb.leg(1)[0, 1:], np.diff(V1[3, :]), rtol=1e-9, atol=1e-9)


@pytest.mark.solver
def test_lagrangian_bound_between_network_value_and_dlp():
    # 2 legs, 3 products with a connecting product: V (brute force) <= Lagrangian bound <= DLP.
    inst, p = _two_legs(1.0)
    V = optimal_values(inst, p)[3, 2]
    r = solve(inst, "dlp", "highs")
    out = relax(inst, PeriodDemand(p), r.bid_price_array, tol=1e-8, iteration_limit=400)
    assert V <= out.bound + 1e-9                     # Topaloglu 2009: an upper bound on the optimal value
    assert out.bound <= out.start_bound + 1e-12      # the search never reports a worse bound
    assert out.start_bound <= r.objective + 1e-6     # at the DLP duals: at most the DLP value
    assert out.bound < r.objective - 1.0             # and strictly better than the DLP here
    # The table policies earn at most V (exact policy evaluation on the network).
    for tables in (out.tables, decompose(inst, PeriodDemand(p), r.bid_price_array)):
        A = np.asarray(inst.A.todense())

        def accept(t, x, j, tables=tables):
            legs = np.flatnonzero(A[:, j])
            return inst.fare[j] >= sum(tables.leg(i)[t, x[i]] for i in legs) - 1e-9

        value = policy_value(inst, p, accept)
        assert value <= V + 1e-9
        assert value >= 0.9 * V                       # sanity (not an outside fact): the tables sell


@pytest.mark.solver
def test_subgradient_inequality():
    rng = np.random.default_rng(7)
    inst, demand = _random_instance(rng, periods=25)
    net = _Network(inst, demand)
    r = solve(inst, "dlp", "highs")
    lam = net.project(np.broadcast_to(r.bid_price_array[net.pair_leg], (demand.periods, net.K)).copy())
    v, g, _ = net.evaluate(lam)
    for _ in range(5):
        mu = net.project(lam + rng.normal(0, 20, lam.shape))
        vm, _, _ = net.evaluate(mu, want_gradient=False)
        assert vm >= v + float(np.sum(g * (mu - lam))) - 1e-8 * abs(v)


def test_projection_keeps_fare_split():
    rng = np.random.default_rng(9)
    inst, demand = _random_instance(rng, periods=6)
    net = _Network(inst, demand)
    w = net.project(rng.normal(0, 100, (6, net.K)))
    assert np.all(w >= 0)
    np.testing.assert_allclose(w @ net.M, np.broadcast_to(inst.fare, (6, inst.n_products)), rtol=1e-12)


def test_demand_from_arrival_curves_adds_up_to_the_forecast():
    from decomp.generator import generate

    inst = generate(60, seed=3)
    d = from_arrival_curves(inst, 50)
    np.testing.assert_allclose(d.totals(), inst.mean, rtol=1e-9, atol=1e-9)
    assert d.prob.shape == (50, 60) and np.all(d.prob >= 0)
    with pytest.raises(DemandError, match="at most one request per period"):
        d.require_at_most_one_request("the relaxation")


def test_period_sampling_matches_probabilities():
    # One request per period at most; the empirical frequencies match the probabilities
    # (binomial standard error, a mathematical fact).
    inst, p = _two_legs(1.0, periods=10)
    d = PeriodDemand(p)
    req = d.sample_paths(inst, np.arange(4000), seed=2)
    assert req.counts.max() <= 10
    freq = req.demand.mean(axis=0)
    se = np.sqrt(p.sum(0) / 4000)
    assert np.all(np.abs(freq - p.sum(0)) < 5 * se)
    again = d.sample_paths(inst, np.arange(10, 20), seed=2)
    np.testing.assert_array_equal(again.products, req.products[10:20])   # a path's requests: seed and index only


@pytest.mark.solver
def test_parquet_round_trip_and_bad_files(tmp_path):
    import pyarrow as pa
    import pyarrow.parquet as pq

    rng = np.random.default_rng(11)
    inst, demand = _random_instance(rng)
    r = solve(inst, "dlp", "highs")
    tb = decompose(inst, demand, r.bid_price_array)
    path = write_parquet(tb, tmp_path / "t.parquet")
    back = read_parquet(path)
    np.testing.assert_array_equal(back.values, tb.values)
    import pickle

    np.testing.assert_array_equal(pickle.loads(pickle.dumps(tb)).values, tb.values)   # tables go to Dask workers
    assert back.aligned_with(inst)
    table = pq.read_table(path)
    assert table.column_names == ["leg", "period", "seats_remaining", "bid_price"]
    # a negative bid price in row 5: the error names the file, the row and the field
    bid = table.column("bid_price").to_numpy().copy()
    bid[4] = -1.0
    bad = table.set_column(3, "bid_price", pa.array(bid))
    pq.write_table(bad, tmp_path / "bad.parquet")
    with pytest.raises(InstanceError, match=r"bad.parquet, row 5, column 'bid_price'"):
        read_parquet(tmp_path / "bad.parquet")
    pq.write_table(table.slice(0, table.num_rows - 1), tmp_path / "short.parquet")
    with pytest.raises(InstanceError, match="missing"):
        read_parquet(tmp_path / "short.parquet")
