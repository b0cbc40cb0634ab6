"""Every method on the canned networks of tests/support/networks.py, whose optimum is worked out by
hand: one check, run for every (model, method) pair of the registry (as scipy's linprog tests run
one suite per method).

What is checked against the hand solution: the status, the revenue, the allocation, the bid prices
where the optimum fixes them (or their sums where only those are fixed: LP duality). What is
checked against mathematical facts, by decomp's own certificate (decomp.certify, computed from the
instance, not from the solver's claims): capacities kept, bid prices >= 0, and strong duality (the
dual bound at the bid prices equals the revenue).
"""

from __future__ import annotations

import pytest

from decomp import SolutionStatus, Termination, registry, solve

from support.networks import CANNED

#: The methods of each model. A method added to the registry must be added here (the first test).
METHODS = {"dlp": ("highs", "pyomo-highs"), "pnlp": ("ipopt", "pyomo-ipopt", "lagrangian"),
           "pwl": ("highs", "pyomo-highs"), "sblp": ("highs", "pyomo-highs", "lagrangian")}
#: (model, method) pairs that need neither HiGHS nor Ipopt (the sales LP's decomposition solves its
#: restricted master with HiGHS).
NO_SOLVER = {("pnlp", "lagrangian")}


def _cases():
    for net in CANNED:
        for model in net.models:
            for method in METHODS[model]:
                marks = () if (model, method) in NO_SOLVER else (pytest.mark.solver,)
                yield pytest.param(net, model, method, id=f"{net.name}-{model}-{method}", marks=marks)


def test_every_method_of_the_registry_is_checked():
    assert {(model, m) for model, methods in METHODS.items() for m in methods} == set(registry.pairs())


@pytest.mark.parametrize("net,model,method", list(_cases()))
def test_the_hand_solution(net, model, method):
    inst = net.build()
    r = solve(inst, model, method)
    assert r.termination is Termination.OPTIMAL and r.solution_status is SolutionStatus.OPTIMAL, r.message
    assert r.objective == pytest.approx(net.objective, rel=1e-8)
    assert dict(zip(inst.product_ids, r.allocation)) == pytest.approx(net.allocation, abs=1e-6)
    assert {leg: r.bid_prices[leg] for leg in net.bid_prices} == pytest.approx(net.bid_prices, rel=1e-7, abs=1e-7)
    for legs, total in net.price_sums.items():
        assert sum(r.bid_prices[leg] for leg in legs) == pytest.approx(total, rel=1e-7)
    cert = r.certificate
    assert cert.max_violation_rel <= 1e-9 and cert.min_bid_price >= 0.0
    assert cert.dual_value == pytest.approx(r.objective, rel=1e-8)
