"""The interior-point method (decomp.lagrangian.interior) on its own, and the handover to it.

References outside the method's code: the independent certificate of tests/family.py
(scipy.stats alone; weak duality, a mathematical fact) and Ipopt (cyipopt,
bound_relax_factor = 0) for normal demand. The networks are the randomized family's
(tests/family.py) and one generated network of the low-CV class on which projected Newton
alone ended at its iteration limit.
"""

from __future__ import annotations

import time

import numpy as np
import pytest

import family
from decomp import SolverOptions, Termination, solve
from decomp.generator import generate
from decomp.lagrangian import interior
from decomp.lagrangian.hessian import LegSystem
from decomp.lagrangian.loop import Certified
from decomp.lagrangian.network import Network
from decomp.lagrangian.prices import fare_start, price_closed_legs

pytestmark = pytest.mark.solver


def _applicable(seed):
    inst, _ = family.draw(seed, max_products=3000)
    return interior.applies(Network(inst))


#: every second family draw the method applies to (no discrete demand)
SEEDS = [s for s in range(0, 300, 2) if _applicable(s)]


def _relative(dual, primal):
    return (dual - primal) / max(1.0, abs(primal))


def _interior_alone(inst, tol=1e-9):
    net = Network(inst)
    system = LegSystem(net)
    best = Certified()
    fare_max = float(inst.fare.max())
    raw, its, _ = interior.run_interior(net, system, tol, 400, None, time.perf_counter(),
                                        fare_start(net), fare_max, best)
    pi = net.full_prices(best.pi)
    price_closed_legs(inst, net, pi)          # legs of zero capacity, as solve_dual does
    return raw, its, net.full_allocation(best.x), pi


def test_the_family_sample_is_not_empty():
    assert len(SEEDS) >= 40


@pytest.mark.parametrize("seed", SEEDS)
def test_interior_point_alone_on_family_draws(seed):
    inst, desc = family.draw(seed, max_products=3000)
    raw, its, x, pi = _interior_alone(inst)
    assert raw == "optimal", (desc, its)
    primal, dual, viol = family.independent_certificate(inst, x, pi)
    assert viol <= 1e-9, desc
    assert _relative(dual, primal) <= 1e-8, desc
    if desc["demand"] == "normal":
        ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-10))
        if ref.termination is Termination.OPTIMAL:
            assert primal == pytest.approx(ref.objective, rel=1e-7), desc
        else:
            assert ref.objective <= primal * (1.0 + 1e-9), desc


def _low_cv_network():
    # a generated network of the class projected Newton alone could not finish (sweep
    # draw 7 of bench/generator_sweep.py: one hub, CV 0.065-0.144, demand 1.3-2.9 times
    # the capacity): it ended at 200 iterations with a certified gap of 1.0e-8
    return generate(5968, seed=7, demand_factor=(1.2607744487313262, 2.9044594619928015),
                    cv=(0.06473373694670354, 0.14362834833006247), fare_ratio=0.8924354333900795,
                    class_growth=1.2865351175695026, seats=95.09505796799849, hubs=1)


def test_a_low_cv_network_is_handed_over_and_solved():
    inst = _low_cv_network()
    r = solve(inst, "pnlp", "lagrangian")
    assert r.termination is Termination.OPTIMAL, r.message
    assert r.raw_status == "interior_optimal", r.message
    primal, dual, viol = family.independent_certificate(inst, r.allocation, r.bid_price_array)
    assert viol <= 1e-9
    assert _relative(dual, primal) <= 1e-8
    ref = solve(inst, "pnlp", "ipopt", SolverOptions(tol=1e-10))
    assert ref.termination is Termination.OPTIMAL
    assert primal == pytest.approx(ref.objective, rel=1e-8)
    # exact zeros on the slack legs: bid prices are 0.0 or above the reporting resolution
    pi = r.bid_price_array
    assert np.all((pi == 0.0) | (pi > 1e-9 * inst.fare.max()))


def test_discrete_demand_is_not_handed_over():
    # the barrier needs a density: Poisson and negative-binomial products keep Newton
    inst, desc = next(family.draw(s, max_products=300) for s in range(300)
                      if family.draw(s, max_products=300)[1]["demand"] == "poisson")
    assert not interior.applies(Network(inst)), desc
