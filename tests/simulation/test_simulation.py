"""Booking simulation: the request process, the controls, the bound and the statistics.

External checks and their sources:
* scipy.stats (Poisson / negative binomial pmfs and survival functions, the
  normal quantile) for the exact two-class expected revenue and the moments.
* Littlewood (1972): protect y* = max{y : f_h P(D_h >= y) > f_l} seats for the
  high fare; with low-fare demand arriving first and independent demands the
  expected revenue R(y) has R(y) - R(y-1) = P(D_l >= C-y+1) (f_h P(D_h >= y) - f_l),
  so y* maximizes it (a mathematical fact derived here, stated in that paper).
* EMSR-b with two classes is Littlewood's rule with a normal high-fare demand
  (common practice; Belobaba's heuristic, quoted from memory).
* Linear programming duality / relaxation: any integer booking is feasible for
  the hindsight LP, so the LP value bounds every policy's revenue (a fact).
"""

from __future__ import annotations

import numpy as np
import pytest
from scipy import stats

from decomp.instance import Instance
from decomp.simulation import (BookingCurve, ForecastError, NestedPolicy, SimulationConfig, SimulationConfigError,
                               emsrb_levels, parse_policies, revenue_for_bid_prices, sample_totals, simulate)
from decomp.simulation.booking import fare_rank, remaining_forecast, sample_paths

LOW_FIRST = BookingCurve(low_window=(0.0, 0.5), high_window=(0.5, 1.0))

C, F_H, F_L = 12, 300.0, 100.0
M_L, M_H = 10.0, 6.0           # low fare Poisson(10); high fare negative binomial mean 6, std 3
S_L, S_H = np.sqrt(M_L), 3.0


def two_class_leg():
    return Instance.from_lists([("K100", "AAX", "BBX", C)],
                               [("K100-H", ["K100"], F_H, M_H, S_H), ("K100-L", ["K100"], F_L, M_L, S_L)])


def _laws():
    # the gamma-Poisson mixture of decomp.simulation.booking as scipy's nbinom(n, p)
    k = M_H ** 2 / (S_H ** 2 - M_H)
    return stats.poisson(M_L), stats.nbinom(k, k / (k + M_H))


def analytic_revenue(y: int) -> float:
    """E[f_l min(D_l, C-y) + f_h min(D_h, C - min(D_l, C-y))], summed over the pmfs (scipy.stats)."""
    dl, dh = _laws()
    top = int(dl.ppf(1 - 1e-15)) + 1
    d = np.arange(top + 1)
    p = dl.pmf(d)
    p[-1] += dl.sf(top)
    low = np.minimum(d, C - y)
    # E[min(D_h, k)] = sum_{i<k} P(D_h > i)
    cum = np.r_[0.0, np.cumsum(dh.sf(np.arange(C)))]
    return float(np.sum(p * (F_L * low + F_H * cum[C - low])))


def littlewood_level() -> int:
    _, dh = _laws()
    ys = np.arange(1, C + 1)
    ok = F_H * dh.sf(ys - 1) > F_L           # P(D_h >= y) = sf(y - 1)
    return int(ys[ok].max()) if ok.any() else 0


def two_class_config(levels, paths=3000):
    pols = [NestedPolicy([y]) for y in levels]
    return SimulationConfig(policies=pols, paths=paths, horizon=60.0, reoptimize_every=(60.0,), seed=11,
                            curve=LOW_FIRST, chunk=1000, add_fcfs=False)


@pytest.fixture(scope="module")
def two_class_run():
    y = littlewood_level()
    levels = [y - 1, y, y + 1]
    return levels, simulate(two_class_leg(), two_class_config(levels))


# ------------------------------------------------------------------ the request process
def test_totals_match_forecast_moments():
    rng = np.random.default_rng(5)
    n = 200_000
    mean = np.array([4.0, 4.0, 4.0, 3.0])
    std = np.array([3.0, 2.0, 1.2, 0.0])           # over-dispersed, Poisson, under-dispersed, deterministic
    draws = sample_totals(rng, np.tile(mean, n), np.tile(std, n)).reshape(n, 4)
    for j in range(3):
        ci = stats.ttest_1samp(draws[:, j], mean[j]).confidence_interval(0.999)
        assert ci.low <= mean[j] <= ci.high
    # variances: exact for the mixture and Poisson; binomial n = round(16 / (4 - 1.44)) = 6, so m (1 - p) = 4 (1 - 4/6)
    np.testing.assert_allclose(draws[:, :3].var(axis=0), [9.0, 4.0, 4 * (1 - 4 / 6)], rtol=0.03)
    assert np.all(draws[:, 3] == 3)


def test_low_fares_arrive_before_high_fares_and_remaining_forecast():
    inst = two_class_leg()
    req = sample_paths(inst, np.arange(50), seed=3, curve=LOW_FIRST)
    rank = fare_rank(inst)
    assert rank.tolist() == [1.0, 0.0]
    for k in range(50):
        p = req.products[k, :req.counts[k]]
        t = req.times[k, :req.counts[k]]
        assert np.all(np.diff(t) >= 0)
        assert np.all(t[p == 1] <= 0.5) and np.all(t[p == 0] >= 0.5)
    # remaining forecast: with q = 1 the forecast itself, with q = 0 nothing
    m, s = remaining_forecast([6.0], [3.0], [1.0])
    assert m[0] == 6.0 and s[0] == pytest.approx(3.0)
    m, s = remaining_forecast([6.0], [3.0], [0.0])
    assert m[0] == 0.0 and s[0] == 0.0


def test_fare_class_column_orders_classes_by_mean_fare():
    inst = Instance.from_lists([("L1", "AAX", "BBX", 10)],
                               [("a", ["L1"], 50.0, 1, 1), ("b", ["L1"], 200.0, 1, 1), ("c", ["L1"], 80.0, 1, 1)],
                               product_extra={"fare_class": ["Q", "Y", "Q"]})
    np.testing.assert_array_equal(fare_rank(inst), [0.0, 1.0, 0.0])


# ------------------------------------------------------------------ single leg, two fare classes
@pytest.mark.solver
def test_fixed_protection_matches_analytic_expected_revenue(two_class_run):
    levels, res = two_class_run
    for p, y in enumerate(levels):
        ci = res.summary()["scenarios"][0]["policies"][p]["revenue"]
        exact = analytic_revenue(y)
        assert ci["low"] <= exact <= ci["high"], (y, exact, ci)


@pytest.mark.solver
def test_littlewood_level_is_no_worse_than_its_neighbours(two_class_run):
    levels, res = two_class_run
    y = levels[1]
    # on the exact expected revenue (scipy.stats pmfs)
    assert analytic_revenue(y) >= analytic_revenue(y - 1)
    assert analytic_revenue(y) >= analytic_revenue(y + 1)
    # on the simulation, common random numbers: the paired CI of R(y*) - R(neighbour) reaches >= 0
    rev = res.revenue[0]
    for nb in (0, 2):
        d = rev[1] - rev[nb]
        ci = stats.ttest_1samp(d, 0.0).confidence_interval(0.95)
        assert ci.high >= 0.0
        assert ci.low <= analytic_revenue(y) - analytic_revenue(levels[nb]) <= ci.high


def test_emsrb_two_classes_is_littlewood_with_normal_demand():
    y = emsrb_levels([F_H, F_L], [M_H, M_L], [S_H, S_L])
    assert y[0] == pytest.approx(M_H + S_H * stats.norm.ppf(1 - F_L / F_H))


# ------------------------------------------------------------------ network: bound and DLP
def _series():
    # two legs in series; the connection competes with both locals
    legs = [("K1", "AAX", "HUB", 8), ("K2", "HUB", "CCX", 6)]
    prods = [("AH-lo", ["K1"], 90.0, 6, 0), ("AH-hi", ["K1"], 200.0, 3, 0),
             ("HC-lo", ["K2"], 70.0, 5, 0), ("HC-hi", ["K2"], 160.0, 2, 0),
             ("AC-lo", ["K1", "K2"], 140.0, 4, 0), ("AC-hi", ["K1", "K2"], 300.0, 2, 0)]
    return Instance.from_lists(legs, prods)


@pytest.mark.solver
def test_dlp_policy_reaches_hindsight_with_exact_deterministic_demand():
    inst = _series()
    cfg = SimulationConfig(policies="dlp:highs", paths=8, horizon=30.0, reoptimize_every=(30.0,), seed=2)
    res = simulate(inst, cfg)
    np.testing.assert_allclose(res.revenue[0, 0], res.bound, rtol=1e-9)
    # not trivial: first come, first served on the same paths falls short
    assert np.all(res.revenue[0, 1] < res.bound - 1.0)


@pytest.mark.solver
def test_hindsight_bounds_every_policy_on_every_path_and_crn_narrows_the_interval():
    from decomp.ladder import load_rung

    inst = load_rung("p100")
    cfg = SimulationConfig(policies="dlp:highs,partitioned:dlp,pnlp:ipopt", paths=24, horizon=60.0,
                           reoptimize_every=(30.0,), forecast_errors=(ForecastError(0.2, 1.5),), seed=4, chunk=12)
    res = simulate(inst, cfg)
    assert np.all(res.revenue <= res.bound[None, None, :] * (1 + 1e-9) + 1e-6)
    assert np.all(res.failures == 0)
    s = res.summary()["scenarios"][0]
    d = {x["policy"]: x for x in s["paired"]}["fcfs"]
    assert d["halfwidth"] < d["unpaired_halfwidth"]
    for p in s["policies"]:
        assert 0 < p["share_of_bound"]["mean"] <= 1 and 0 < p["load_factor"]["mean"] <= 1


# ------------------------------------------------------------------ reproducibility
@pytest.mark.solver
def test_same_seed_same_numbers_whatever_the_batching():
    inst = two_class_leg()
    base = dict(policies=[NestedPolicy([4]), NestedPolicy(None)], paths=60, horizon=20.0,
                reoptimize_every=(5.0,), seed=9)
    a = simulate(inst, SimulationConfig(**base, chunk=60))
    b = simulate(inst, SimulationConfig(**base, chunk=7))
    c = simulate(inst, SimulationConfig(**{**base, "seed": 10}, chunk=60))
    np.testing.assert_array_equal(a.revenue, b.revenue)
    np.testing.assert_array_equal(a.bound, b.bound)
    assert not np.array_equal(a.revenue, c.revenue)


@pytest.mark.solver
def test_sequential_paths_reach_target_halfwidth():
    inst = two_class_leg()
    cfg = SimulationConfig(policies=[NestedPolicy([5])], paths=5000, horizon=20.0, reoptimize_every=(20.0,),
                           seed=1, chunk=200, target_halfwidth=40.0)
    res = simulate(inst, cfg)
    assert res.max_paired_halfwidth() <= 40.0 or res.n_paths == 5000
    assert len(res.rounds) >= 2 and res.n_paths < 5000


@pytest.mark.integration
@pytest.mark.solver
def test_revenue_for_bid_prices():
    inst = two_class_leg()
    free, ci = revenue_for_bid_prices(inst, {"K100": 0.0}, paths=200, seed=1)
    none, _ = revenue_for_bid_prices(inst, [1e6], paths=200, seed=1)
    fcfs = simulate(inst, SimulationConfig(policies="fcfs", paths=200, seed=1, reoptimize_every=(60.0,)))
    assert free == pytest.approx(fcfs.revenue[0, 0].mean()) and ci[0] < free < ci[1]
    assert none == 0.0


# ------------------------------------------------------------------ bad specifications
@pytest.mark.parametrize("kw, words", [
    ({"paths": -5}, "positive integer"),
    ({"policies": "dlp:highs,bogus"}, "unknown policy 'bogus'"),
    ({"reoptimize_every": (90.0,)}, "longer than the booking horizon"),
    ({"policies": "pnlp:lagrangian:2"}, "tolerance must be in (0, 1)"),
    ({"policies": "fcfs,fcfs"}, "listed twice"),
])
def test_bad_specifications_are_clear_errors(kw, words):
    with pytest.raises(SimulationConfigError) as exc:
        SimulationConfig(**{"policies": "fcfs", "horizon": 60.0, **kw})
    assert words in str(exc.value)


def test_policy_checked_against_instance():
    with pytest.raises(SimulationConfigError, match="single-leg"):
        parse_policies("emsrb", instance=_series())
    with pytest.raises(SimulationConfigError, match="unknown method"):
        parse_policies("dlp:nosuchsolver", instance=_series())


def test_cli_bad_input_exits_2(tmp_path, capsys):
    from decomp.cli import main

    inst_dir = tmp_path / "leg"
    from decomp.io import write_instance

    write_instance(two_class_leg(), inst_dir)
    for argv in (["--paths", "-3"], ["--policies", "nope"], ["--reoptimize-every", "70", "--horizon", "60"]):
        code = main(["simulate", str(inst_dir), "--policies", "fcfs", "--workers", "0",
                     "--out", str(tmp_path / "out"), *argv])
        assert code == 2
        assert "error" in capsys.readouterr().err


def test_plain_bid_price_spec_accepts_ties():
    # The plain bid-price rule (accept when fare >= sum of bid prices) is its own spec.
    from decomp.simulation.policies import parse_policy

    plain = parse_policy("plain:dlp:highs")
    assert plain.ties == "accept" and plain.model == "dlp" and plain.method == "highs"
    assert parse_policy("dlp:highs").ties == "allocation"
    assert plain.label != parse_policy("dlp:highs").label
