"""The booking simulation with customer choice.

* The epoch-wise simulation must give exactly what taking customers one by one gives
  (a plain loop written here, per path and per customer, from the multinomial logit's
  definition): same sales, same revenue.
* Customers: Poisson counts per market (scipy.stats.poisson's mean and variance), common
  random numbers (the same customers for every policy and batch split).
* The sales LP's value bounds every policy's expected revenue (Liu and van Ryzin 2008;
  checked on the sample mean with its 95% interval).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

import decomp
from decomp.choice import simulation as cs
from decomp.choice.generate import generate_choice

from support.choice_networks import random_network

pytestmark = [pytest.mark.solver, pytest.mark.filterwarnings("ignore::decomp.io.UnusedLegWarning")]


def _one_by_one(instance, policy, customers, every, forecast, horizon):
    """Per path, per customer: the plain definition of the simulation (no epochs, no vectorization)."""
    tables = cs.Tables.of(instance)
    P, L = instance.n_products, instance.n_legs
    times = [] if every is None else list(np.arange(every, horizon, every) / horizon)
    revenue, sales = [], []
    for p in range(len(customers.paths)):
        cap = np.floor(instance.capacity + 1e-9)
        counts = cs.SolveCounts()
        got = policy.prices(instance, cap.copy(), 0.0, forecast, None, counts)
        bid = np.zeros(L) if got is None else got
        step, rev, sold = 0, 0.0, np.zeros(P)
        for k in range(customers.counts[p]):
            t, m, u = customers.time[p, k], customers.market[p, k], customers.u[p, k]
            moved = False
            while step < len(times) and t >= times[step]:
                step, moved = step + 1, True
            if moved and policy.model is not None:
                got = policy.prices(instance, cap.copy(), times[step - 1], forecast, bid.copy(), counts)
                bid = bid if got is None else got
            prods = tables.products[m]
            real = prods < P
            avail = np.array([r and all(cap[i] >= 1 for i in instance.leg_index[instance.leg_ptr[j]:
                                                                                   instance.leg_ptr[j + 1]])
                              for j, r in zip(prods, real)])
            disp = np.array([sum(bid[i] for i in instance.leg_index[instance.leg_ptr[j]:instance.leg_ptr[j + 1]])
                             if r else 0.0 for j, r in zip(prods, real)])
            offer = policy.offer(tables, np.array([m]), prods[None], avail[None], disp[None])[0] & avail
            w = np.where(offer, tables.weight[prods], 0.0)
            total = tables.w0[m] + w.sum()
            edge = 0.0
            for j, wj in zip(prods, w):
                if wj > 0 and u < edge + wj / total:
                    rev += instance.fare[j]
                    sold[j] += 1
                    cap[instance.leg_index[instance.leg_ptr[j]:instance.leg_ptr[j + 1]]] -= 1
                    break
                edge += wj / total
        revenue.append(rev)
        sales.append(sold)
    return np.array(revenue), np.array(sales)


@pytest.mark.parametrize("spec, every", [("fcfs", None), ("sblp:highs", None), ("dlp:highs", None),
                                         ("sblp:lagrangian", 20.0), ("dlp:highs", 10.0)])
def test_epochs_equal_one_customer_at_a_time(spec, every):
    inst = random_network(21, legs=4, markets=10, tightness=0.5)
    policy = cs.parse_policies(spec)[0]
    customers = cs.sample_customers(inst.markets, np.arange(6), seed=3)
    forecast = cs.independent_forecast(inst)
    out = cs.run_policy(inst, cs.Tables.of(inst), policy, customers, every=every, forecast=forecast,
                        counts=cs.SolveCounts(), horizon=60.0)
    rev, sold = _one_by_one(inst, policy, customers, every, forecast, 60.0)
    assert np.array_equal(out.sales, sold)
    assert np.allclose(out.revenue, rev, rtol=1e-12)
    assert sold.sum() > 0


def test_fixed_bid_prices_are_the_sblp_policy_priced_once():
    # The bench's revenue pricing on networks with markets: fixed bid prices, each customer offered the best
    # revenue-ordered available set; the sblp policy without re-optimization (checked above against the
    # customer-by-customer loop), for any split of the paths into batches.
    from decomp.benchsuite.measure import price_bid_prices

    inst = random_network(23, legs=4, markets=10, tightness=0.5)
    policy = cs.parse_policies("sblp:highs")[0]
    customers = cs.sample_customers(inst.markets, np.arange(7), seed=5)
    out = cs.run_policy(inst, cs.Tables.of(inst), policy, customers, every=None, forecast=None,
                        counts=cs.SolveCounts(), horizon=60.0)
    pi = policy.prices(inst, np.floor(inst.capacity + 1e-9), 0.0, None, None, cs.SolveCounts())
    for chunk in (1, 3, 7):
        assert np.array_equal(cs.path_revenues_for_bid_prices(inst, pi, 7, seed=5, chunk=chunk), out.revenue)
    assert out.revenue.sum() > 0
    assert price_bid_prices(inst, pi, 7, 5)["mean"] == pytest.approx(out.revenue.mean(), rel=1e-12)


def test_small_window_gives_the_same_answer():
    inst = random_network(22, legs=3, markets=8, tightness=0.4)
    policy = cs.parse_policies("sblp:highs")[0]
    customers = cs.sample_customers(inst.markets, np.arange(5), seed=1)
    args = dict(every=None, forecast=cs.independent_forecast(inst), counts=cs.SolveCounts(), horizon=60.0)
    a = cs.run_policy(inst, cs.Tables.of(inst), policy, customers, window=4096, **args)
    b = cs.run_policy(inst, cs.Tables.of(inst), policy, customers, window=3, **args)
    assert np.array_equal(a.sales, b.sales) and np.array_equal(a.revenue, b.revenue)


def test_customers_are_poisson_by_market_and_common_to_batches():
    inst = random_network(5, markets=3)
    mk = inst.markets
    c = cs.sample_customers(mk, np.arange(400), seed=9)
    per = np.stack([np.bincount(c.market[k, :c.counts[k]], minlength=mk.n_markets) for k in range(400)])
    for m in range(mk.n_markets):
        lam = mk.arrivals[m]
        # Poisson: mean = variance = arrivals (scipy.stats.poisson); 99.9% normal bands on 400 paths
        se = np.sqrt(stats.poisson(lam).var() / 400)
        assert abs(per[:, m].mean() - stats.poisson(lam).mean()) < 3.3 * se
    again = cs.sample_customers(mk, np.arange(200, 210), seed=9)
    assert np.array_equal(again.market[:, :again.counts.max()], c.market[200:210, :again.counts.max()])
    assert np.all(np.diff(c.time[0, :c.counts[0]]) >= 0)


def test_best_available_set_is_revenue_ordered():
    # The same set as decomp.choice.mnl.best_offer, row by row (checked there against enumeration).
    from decomp.choice import mnl

    rng = np.random.default_rng(4)
    inst = random_network(8, markets=6)
    tables = cs.Tables.of(inst)
    for m in range(inst.markets.n_markets):
        prods = tables.products[m]
        real = prods < inst.n_products
        avail = real & (rng.random(len(prods)) < 0.8)
        r = rng.normal(150, 100, len(prods))
        got = cs.best_available_set(tables, np.array([m]), prods[None], avail[None], (tables.fare[prods] - r)[None])[0]
        k = np.flatnonzero(avail)
        mp = mnl.MarketProducts(index=k, market=np.zeros(len(k), dtype=np.int64), weight=tables.weight[prods[k]],
                                w0=np.array([tables.w0[m]]), arrivals=np.array([1.0]))
        _, offered = mnl.best_offer(mp, (tables.fare[prods] - r)[k])
        assert set(k[offered].tolist()) == set(np.flatnonzero(got).tolist())


def test_policies_against_the_bound_and_each_other():
    inst = generate_choice(600, seed=2)
    cfg = cs.ChoiceSimConfig(policies="sblp:highs,dlp:highs,fcfs", paths=60, reoptimize_every=None, seed=4)
    res = cs.simulate(inst, cfg)
    s = res.summary()
    assert s["bound"]["value"] == pytest.approx(decomp.solve(inst, model="sblp", method="highs").objective, rel=1e-9)
    for p in s["policies"]:
        # Liu and van Ryzin 2008: no policy earns more than the bound in expectation
        assert p["revenue"]["low"] <= s["bound"]["value"]
        assert p["share_of_bound"]["mean"] == pytest.approx(p["revenue"]["mean"] / s["bound"]["value"])
    first = s["policies"][0]
    for p in s["policies"][1:]:
        d = p["vs_first"]
        assert d["n"] == 60 and d["halfwidth"] > 0
        assert d["mean"] == pytest.approx(p["revenue"]["mean"] - first["revenue"]["mean"])
        # common random numbers: the paired interval is narrower than the unpaired one
        assert d["halfwidth"] < d["unpaired_halfwidth"]
    assert set(s["policies"][0]["by_market_group"]) == {"strong", "weak"}


def test_unknown_policy_is_refused():
    from decomp.simulation.errors import SimulationConfigError

    with pytest.raises(SimulationConfigError, match="sblp"):
        cs.parse_policies("emsrb")


def test_cheapest_open_forecast_by_hand():
    # One market, weights 1 (fare 300), 2 (fare 200), 3 (fare 100), w0 = 4, 10 arrivals: product k as the
    # cheapest open fare sells 10 w_k / (w0 + weights at or above its fare).
    import pandas as pd

    from decomp.choice import spiral, with_markets

    legs = pd.DataFrame({"leg": ["NV1"], "origin": ["QAA"], "destination": ["QBB"], "capacity": [5.0]})
    products = pd.DataFrame({"product": ["A", "B", "C"], "legs": ["NV1"] * 3, "fare": [300.0, 200.0, 100.0],
                             "mean": [1.0] * 3, "std": [1.0] * 3, "market": ["M"] * 3,
                             "preference_weight": [1.0, 2.0, 3.0]})
    inst = with_markets(decomp.Instance.from_frames(legs, products),
                        pd.DataFrame({"market": ["M"], "arrivals": [10.0], "no_purchase_weight": [4.0]}))
    assert np.allclose(spiral.cheapest_open_forecast(inst), [10 * 1 / 5, 10 * 2 / 7, 10 * 3 / 10])
    assert np.allclose(cs.independent_forecast(inst), [10 / 10, 20 / 10, 30 / 10])
    # re-estimation: sales per customer offered the product, times the market's arrivals
    new = spiral.reestimate(inst, [9.0, 9.0, 9.0], sales=np.array([1.0, 2.0, 0.0]),
                            offered=np.array([4.0, 8.0, 0.0]))
    assert np.allclose(new, [10 * 1 / 4, 10 * 2 / 8, 9.0])                # never offered: kept
    assert spiral.top_products(inst).tolist() == [True, False, False]


def test_reestimation_loop_runs_on_the_same_customers():
    from decomp.choice import spiral

    inst = generate_choice(400, seed=6)
    pol = cs.parse_policies("dlp:highs")[0]
    cycles = spiral.run(inst, pol, cycles=3, paths=20, seed=2, bound=1e9)
    assert [c.cycle for c in cycles] == [0, 1, 2]
    assert cycles[0].vs_first is None and cycles[1].vs_first["n"] == 20
    # cycle 0 sells with the cheapest-open forecast, which is above the everything-open one
    assert cycles[0].forecast_total >= cs.independent_forecast(inst)[inst.markets.in_market].sum()
    again = spiral.run(inst, pol, cycles=1, paths=20, seed=2, bound=1e9)
    assert again[0].revenue == cycles[0].revenue


@pytest.mark.integration         # decomp in a subprocess
def test_simulate_command_with_markets(tmp_path):
    import json
    import subprocess
    import sys

    net = tmp_path / "net"
    decomp.write_instance(generate_choice(300, seed=8), net)
    out = tmp_path / "sim"
    run = subprocess.run([sys.executable, "-m", "decomp.cli", "simulate", str(net), "--paths", "12",
                          "--reoptimize-every", "30", "--policies", "sblp:highs,dlp:highs", "--reestimate", "2",
                          "--out", str(out)], capture_output=True, text=True)
    assert run.returncode == 0, run.stderr
    data = json.loads((out / "simulation.json").read_text())
    assert [p["policy"] for p in data["policies"]] == ["sblp:highs", "dlp:highs", "fcfs"]
    assert all(0 < p["share_of_bound"]["mean"] <= 1.2 for p in data["policies"])
    assert all(p["reoptimizations"]["non_optimal"] == 0 for p in data["policies"])
    assert len(data["reestimation"]["dlp:highs"]) == 2
    assert "share of the bound" in (out / "simulation.md").read_text()
    bad = subprocess.run([sys.executable, "-m", "decomp.cli", "simulate", str(net), "--forecast-bias", "0.1",
                          "--out", str(tmp_path / "x")], capture_output=True, text=True)
    assert bad.returncode == 2 and "markets" in bad.stderr
