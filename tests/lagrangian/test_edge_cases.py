"""Edge cases of the Lagrangian method, each against an outside reference: Ipopt on the
same PNLP (the 'ipopt' method, bound_relax_factor = 0), HiGHS on the DLP, or a
mathematical fact."""

import numpy as np
import pytest

from decomp import Instance, SolverOptions, Termination, solve
from decomp.generator import generate

pytestmark = pytest.mark.solver

# Invented network for these tests: hub HB, spokes S1..S4 (no real stations).
LEGS = [("L1", "S1", "HB", 100.0), ("L2", "S2", "HB", 80.0), ("L3", "HB", "S3", 120.0),
        ("L4", "HB", "S4", 60.0)]


def _products(rng, n, fare_range=(50.0, 400.0), mean_range=(5.0, 40.0), cv_range=(0.2, 0.6)):
    its = [["L1"], ["L2"], ["L3"], ["L4"], ["L1", "L3"], ["L1", "L4"], ["L2", "L3"], ["L2", "L4"]]
    out = []
    for j in range(n):
        legs = its[j % len(its)]
        f = rng.uniform(*fare_range) * len(legs)
        m = rng.uniform(*mean_range)
        out.append((f"P{j}", legs, f, m, m * rng.uniform(*cv_range)))
    return out


def _compare_with_ipopt(inst, rel_obj=1e-8, rel_bp=1e-6, skip_legs=(), **kw):
    ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-12))
    got = solve(inst, "pnlp", "lagrangian", SolverOptions(**kw))
    assert ref.termination is Termination.OPTIMAL
    assert got.ok, (got.termination, got.gap, got.message)
    assert abs(got.objective - ref.objective) <= rel_obj * abs(ref.objective)
    bp_ref, bp = ref.bid_price_array, got.bid_price_array
    big = bp_ref >= 1e-3 * bp_ref.max()
    big &= ~np.isin(inst.leg_ids, list(skip_legs))
    assert np.all(np.abs(bp[big] - bp_ref[big]) <= rel_bp * bp_ref[big])
    assert got.certificate.max_violation_rel <= 1e-9
    return ref, got


def test_some_products_with_std_zero():
    # std = 0 products: S(x) = min(x, mean), a kink in the dual at a = f; Newton works on
    # a smoothed dual and the gap is certified on the exact one. Ipopt models these
    # products as x <= mean with linear revenue (same optimum).
    rng = np.random.default_rng(1)
    prods = _products(rng, 40)
    prods = [(p[0], p[1], p[2], p[3], 0.0 if i % 5 == 0 else p[4]) for i, p in enumerate(prods)]
    inst = Instance.from_lists(LEGS, prods)
    _compare_with_ipopt(inst, iteration_limit=1000)


def test_zero_capacity_leg():
    # Products on a leg of zero capacity sell nothing; the leg's bid price is the smallest
    # that closes them, f_j P(D_j > 0) minus their other legs' prices (here: the largest
    # such value, a fact of the subproblem's optimality condition).
    rng = np.random.default_rng(2)
    legs = [l if l[0] != "L4" else ("L4", "HB", "S4", 0.0) for l in LEGS]
    inst = Instance.from_lists(legs, _products(rng, 40))
    # any price at or above that threshold is optimal, so L4's is not compared with Ipopt's
    ref, got = _compare_with_ipopt(inst, skip_legs=("L4",))
    on_l4 = np.array(["L4" in inst.product_legs(j) for j in range(inst.n_products)])
    assert np.all(got.allocation[on_l4] == 0)
    assert got.bid_prices["L4"] > 0
    a = inst.leg_sum(got.bid_price_array)
    from decomp import distributions

    thr = inst.fare * distributions.marginal_sales(inst, np.zeros(inst.n_products))
    assert np.all(a[on_l4] >= thr[on_l4] * (1 - 1e-12))


def test_leg_used_by_no_product():
    # A leg no product uses: its gradient is its capacity > 0, so its bid price is 0.
    rng = np.random.default_rng(3)
    legs = LEGS + [("L5", "S3", "HB", 50.0)]
    inst = Instance.from_lists(legs, _products(rng, 40))
    _, got = _compare_with_ipopt(inst)
    assert got.bid_prices["L5"] == 0.0


def test_products_whose_fare_is_below_any_bid_price():
    # Cheap products on tight legs: a_j far above f_j, so x_j = 0 (fractile condition).
    rng = np.random.default_rng(4)
    prods = _products(rng, 40, mean_range=(30.0, 60.0))
    prods += [(f"C{k}", ["L1", "L3"], 0.01, 20.0, 6.0) for k in range(3)]
    inst = Instance.from_lists(LEGS, prods)
    _, got = _compare_with_ipopt(inst)
    cheap = np.array([pid.startswith("C") for pid in inst.product_ids])
    assert np.all(got.allocation[cheap] <= 1e-6)


def test_fare_range_of_one_to_a_thousand():
    rng = np.random.default_rng(5)
    prods = _products(rng, 60, fare_range=(1.0, 1000.0))
    prods[0] = ("P0", ["L1"], 1.0, 20.0, 6.0)
    prods[1] = ("P1", ["L2"], 1000.0, 20.0, 6.0)
    inst = Instance.from_lists(LEGS, prods)
    assert inst.fare.max() / inst.fare.min() >= 1000
    _compare_with_ipopt(inst)


def test_means_below_a_tenth():
    rng = np.random.default_rng(6)
    legs = [(l[0], l[1], l[2], 0.5) for l in LEGS]
    inst = Instance.from_lists(legs, _products(rng, 40, mean_range=(0.01, 0.1)))
    _compare_with_ipopt(inst)


def test_coefficients_of_variation_above_two():
    rng = np.random.default_rng(7)
    inst = Instance.from_lists(LEGS, _products(rng, 40, cv_range=(2.0, 4.0)))
    _compare_with_ipopt(inst)


def test_generator_instance_with_tight_and_loose_legs():
    # a generated network with demand factors from 0.3 (lots of slack: bid prices far
    # below 1) to 2 (tight)
    inst = generate(2000, seed=9, demand_factor=(0.3, 2.0))
    _, got = _compare_with_ipopt(inst)
    assert got.bid_price_array.min() < 1e-6 * got.bid_price_array.max()


@pytest.mark.parametrize("seed", range(5))
def test_every_product_deterministic_is_the_dlp(seed):
    # With std = 0 everywhere, E[min(D, x)] = min(mean, x) and the PNLP is the DLP (a
    # mathematical fact): the Lagrangian method, working on a smoothed dual with an LP
    # completion and the crossover, must reach HiGHS's DLP optimum, certified.
    rng = np.random.default_rng(100 + seed)
    prods = [(p[0], p[1], p[2], p[3], 0.0) for p in _products(rng, 60)]
    inst = Instance.from_lists(LEGS, prods)
    ref = solve(inst, "dlp", "highs")
    got = solve(inst, "pnlp", "lagrangian")
    assert ref.termination is Termination.OPTIMAL
    assert got.termination is Termination.OPTIMAL, (got.message, got.gap)
    assert got.objective == pytest.approx(ref.objective, rel=1e-9)
    assert got.certificate.max_violation_rel <= 1e-9
