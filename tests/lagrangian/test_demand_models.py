"""The Lagrangian method on generated networks of every demand model (decomp.demand_mix): a mid-size
mixed network in the default run, 10,000 and 100,000 products of each model behind `slow`.

Reference outside the project's solver code: the independent certificate of
tests/support/family.py (scipy.stats alone; weak duality, a mathematical fact).
"""

from __future__ import annotations

import pytest

from decomp import SolverOptions, Termination, solve
from decomp.generator import generate

from support import family


@pytest.mark.parametrize("name", ["mix"])
def test_a_mid_size_mixed_network_is_optimal_by_the_independent_certificate(name):
    # 5,000 products, every family of the production-like mix; the answer checked by the
    # independent certificate (scipy.stats only) and its optimality by weak duality.
    inst = generate(5000, seed=11, demand=name)
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8


@pytest.mark.slow
@pytest.mark.parametrize("name", ["gamma", "lowcv", "poisson", "negbin", "mix"])
@pytest.mark.parametrize("products", [10000, 100000])
def test_large_networks_of_every_demand_model(name, products):
    # The large tier: each named demand model on generated networks of 10,000 and 100,000
    # products, checked as the mid-size one is.
    inst = generate(products, seed=products // 1000 + 3, demand=name)
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(iteration_limit=400))
    assert r.termination is Termination.OPTIMAL, (name, products, r.message)
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert family.relative_gap(dual, primal) <= 1e-8
