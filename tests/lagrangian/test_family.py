"""The Lagrangian method on a randomized family of networks it was not tuned on.

The instances come from tests/support/family.py (topologies, demand families, CVs, capacity
regimes, fares and closed legs that `decomp generate` never makes). References are
outside the method's code: Ipopt (cyipopt, bound_relax_factor = 0) for normal demand,
and for every instance an independent certificate computed from scipy.stats alone
(weak duality: the Lagrangian dual at any bid prices >= 0 bounds the optimum from
above, a feasible allocation's expected revenue from below; a mathematical fact).

What is asserted, on every instance:
- the answer is feasible, its reported gap is the independent one, and it never
  claims optimality that the independent certificate does not confirm;
- it is optimal at the default tol, with certified gap <= 1e-8 by the independent
  certificate, and for normal demand its objective is within 1e-7 of Ipopt's (where
  Ipopt stops short, on some near-deterministic demand, Ipopt's feasible allocation
  must not earn more than ours).
Draws have 5 to 3,000 products. Every fifteenth draw is also solved warm after a forecast
change (means moved by up to 20%), from the unmoved draw's bid prices. The default run solves
every tenth draw; the other 270, the next 300 draws (`family_strict`), and a large tier of
30 draws of 10,000 to 100,000 products are marked slow: `make test-slow` runs them.
"""

from __future__ import annotations

import numpy as np
import pytest

from decomp import SolverOptions, Termination, solve

from support import family
from support.sweeps import thinned

SEEDS = range(300)
#: The larger sweep behind the marker: the next 300 draws.
MORE_SEEDS = range(300, 600)
#: The large tier behind the marker: draws of 10,000 to 100,000 products (the 40-class cap
#: per itinerary lifted), every topology and demand family of the small ones.
LARGE_SEEDS = range(9000, 9030)


def _checked(seed, max_products, options=None, **draw):
    inst, desc = family.draw(seed, max_products=max_products, **draw)
    r = solve(inst, "pnlp", "lagrangian", options)
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    gap = family.relative_gap(dual, primal)
    # feasible, and the certificate the result carries is the independent one
    assert viol <= 1e-9, desc
    assert r.objective == pytest.approx(primal, rel=1e-9, abs=1e-9), desc
    assert gap <= r.gap + 1e-8, desc
    if r.termination is Termination.OPTIMAL:
        assert gap <= 1e-8, desc
    else:
        assert r.solution_status.value != "optimal", desc
    return inst, desc, r, gap


@pytest.mark.solver
@pytest.mark.parametrize("seed", thinned(SEEDS, every=10))
def test_family_instance(seed):
    inst, desc, r, gap = _checked(seed, max_products=3000)
    assert r.termination is Termination.OPTIMAL, (desc, r.message)
    assert gap <= 1e-8, desc
    if desc["demand"] == "normal":
        ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-10))
        if ref.termination is Termination.OPTIMAL:
            assert r.objective == pytest.approx(ref.objective, rel=1e-7), desc
        else:
            # Ipopt stops short on some near-deterministic demand (numerical_error); its
            # allocation is still feasible (bound_relax_factor = 0), so it cannot beat an optimum
            assert ref.objective <= r.objective * (1.0 + 1e-9), desc


@pytest.mark.slow
@pytest.mark.family_strict
@pytest.mark.parametrize("seed", MORE_SEEDS)
def test_family_instance_strict(seed):
    # the next 300 draws, solved to the default tol like the first
    inst, desc, r, gap = _checked(seed, max_products=3000)
    assert r.termination is Termination.OPTIMAL, (desc, r.message)
    assert gap <= 1e-8, desc


@pytest.mark.slow
@pytest.mark.parametrize("seed", LARGE_SEEDS)
def test_family_large_instance(seed):
    # 10,000 to 100,000 products per draw. The time limit is a guard, not a speed claim:
    # these solve in 0.1-5 s here (2 cores), and three of them once took 35-300 s (pricing
    # freed millions of kinks after a Newton phase ended on a negative decrement, draw 9004;
    # fixed seats overfilling a leg freed whole tables, 9022; HiGHS repairing the dual
    # infeasibility of 184,724 new columns at 0, 9007), so a regression ends as time_limit
    # and fails here instead of stalling the run.
    inst, desc, r, gap = _checked(seed, 100_000, SolverOptions(time_limit=120.0),
                                  min_products=10_000, max_classes=None)
    assert desc["products"] >= 10_000, desc
    assert r.termination is Termination.OPTIMAL, (desc, r.message)
    assert gap <= 1e-8, desc


@pytest.mark.parametrize("seed", range(0, 300, 15))
def test_family_warm_start_after_a_forecast_change(seed):
    # A nightly re-optimization starts from the last night's bid prices: every mean moved by
    # a factor U[0.8, 1.2], solved from the unmoved draw's bid prices. The warm answer must
    # be optimal by the independent certificate (weak duality, scipy.stats only) and reach
    # the cold solve's objective (one optimum: the PNLP's objective value is unique).
    inst, desc = family.draw(seed, max_products=3000)
    base = solve(inst, "pnlp", "lagrangian")
    rng = np.random.default_rng(seed + 77)
    moved = inst.with_forecast(mean=inst.mean * rng.uniform(0.8, 1.2, inst.n_products))
    cold = solve(moved, "pnlp", "lagrangian")
    warm = solve(moved, "pnlp", "lagrangian", warm_start=base.bid_price_array)
    assert warm.termination is Termination.OPTIMAL, (desc, warm.message)
    primal, dual, viol = family.independent_certificate(moved, warm.allocation, warm.bid_price_array)
    assert viol <= 1e-9, desc
    assert family.relative_gap(dual, primal) <= 1e-8, desc
    assert warm.objective == pytest.approx(cold.objective, rel=1e-8), desc


def test_family_draw_with_a_creeping_dual_is_optimal():
    # Draw 1163 (two hubs, low-CV normal and deterministic demand, tight, 52 products): the
    # dual creeps, so the certified gap keeps shrinking a little. While "any shrinking"
    # counted as progress, the LP completions stayed over their work budget and the draw
    # ended at the iteration limit (gap 1.6e-7). Now the interior-point method takes over
    # after 50 Newton iterations (no discrete demand). Checked like every family draw.
    inst, desc, r, gap = _checked(1163, max_products=3000)
    assert r.termination is Termination.OPTIMAL, (desc, r.message)
    assert gap <= 1e-8, desc


def test_the_certificate_s_expected_sales_far_above_the_demand_are_its_mean():
    # E[min(D, x)] -> E[D] as x grows (monotone convergence, a mathematical fact); the mean
    # from scipy.stats. The certificate sums P(D > k) only while it is >= 1e-16 (a product
    # priced at 0 has a bound u of some two million seats), so this checks the cut-off.
    from scipy import stats

    fams = np.array(["poisson", "poisson", "negbin", "negbin"])
    m = np.array([0.09, 40.0, 0.2, 35.0])
    s = np.array([0.3, 40.0 ** 0.5, 0.9, 20.0])
    x = np.full(4, 2.0e6 + 0.5)
    sales = family.expected_sales(fams, m, s, x)
    means = [stats.poisson(m[0]).mean(), stats.poisson(m[1]).mean(),
             stats.nbinom(m[2] ** 2 / (s[2] ** 2 - m[2]), m[2] / s[2] ** 2).mean(),
             stats.nbinom(m[3] ** 2 / (s[3] ** 2 - m[3]), m[3] / s[3] ** 2).mean()]
    assert sales == pytest.approx(means, rel=1e-12)
    # and at a moderate x, the sum of P(D > k) over the whole units below it, plus the fraction
    assert family.expected_sales(fams[:1], m[1:2], s[1:2], np.array([42.5]))[0] == pytest.approx(
        stats.poisson(40.0).sf(np.arange(42)).sum() + 0.5 * stats.poisson(40.0).sf(42), rel=1e-13)
