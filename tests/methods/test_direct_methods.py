"""The direct methods (highs, ipopt on arrays; their Pyomo twins in test_models_pyomo):
mathematical facts, status tables and limits (the hand-solved networks: test_canned_networks)."""

import logging
import pathlib
import re

import numpy as np
import pytest
from scipy import stats

from decomp import Instance, SolutionStatus, SolverOptions, Termination, normal, solve
from decomp.methods import highs as m_highs
from decomp.methods import ipopt as m_ipopt
from decomp.methods import pyomo_highs as m_pyomo_highs
from decomp.methods import pyomo_ipopt as m_pyomo_ipopt

pytestmark = pytest.mark.solver


# -- mathematical facts ------------------------------------------------------

def test_jensen_pnlp_at_most_dlp_on_the_ladder(rungs):
    # Jensen's inequality: min(., x) is concave, so E[min(D, x)] <= min(E[D], x); for a
    # PNLP-feasible x, min(x, mean) is DLP-feasible and earns at least as much, so the
    # PNLP optimum (textbook sales E[min(D, x)]) is at most the DLP optimum. Our PNLP
    # objective floors demand at zero, which adds the constant -sum_j f_j E[min(D_j, 0)] >= 0;
    # it is taken off before comparing.
    for name, inst in rungs.items():
        p = solve(inst, "pnlp", "ipopt")
        d = solve(inst, "dlp", "highs")
        assert p.ok and d.ok, name
        floor_const = float(inst.fare @ normal.textbook_expected_sales(np.zeros(inst.n_products), inst.mean, inst.std))
        assert floor_const <= 0
        assert p.objective + floor_const <= d.objective * (1 + 1e-12), name
        assert p.objective < d.objective, name     # on these instances the floor constant is tiny


def test_single_leg_fractile_condition():
    # Newsvendor/Littlewood fact: on one leg, every product with x_j > 0 has
    # f_j P(D_j > x_j) = bid price; those with x_j = 0 have f_j P(D_j > 0) <= bid price.
    # P(D > x) from scipy.stats.norm.sf.
    fares = [400.0, 260.0, 180.0, 120.0, 70.0]
    means = [12.0, 20.0, 30.0, 35.0, 40.0]
    stds = [4.0, 6.0, 9.0, 10.0, 12.0]
    inst = Instance.from_lists([("X1", "AAA", "BBB", 60.0)],
                               [(f"C{k}", ["X1"], f, m, s) for k, (f, m, s) in enumerate(zip(fares, means, stds))])
    r = solve(inst, "pnlp", "ipopt")
    assert r.ok
    bp = r.bid_price_array[0]
    assert bp > 0
    x = r.allocation
    assert x.sum() == pytest.approx(60.0, rel=1e-9)
    sold = x > 1e-6
    assert sold.sum() >= 3
    tail = stats.norm.sf(x, loc=means, scale=stds)
    np.testing.assert_allclose(np.array(fares)[sold] * tail[sold], bp, rtol=1e-7)
    unsold = ~sold
    assert np.all(np.array(fares)[unsold] * stats.norm.sf(0, np.array(means)[unsold], np.array(stds)[unsold]) <= bp * (1 + 1e-7))


def test_tightening_a_leg_does_not_lower_its_bid_price(rungs):
    # Fact: the optimal value V(c) of both models is concave in the capacities, so the
    # marginal value of a seat on leg i (its bid price) is non-increasing in c_i:
    # removing seats from a leg cannot lower its bid price.
    inst = rungs["p100"]
    for model, method in (("pnlp", "ipopt"), ("dlp", "highs")):
        base = solve(inst, model, method)
        assert base.ok
        order = np.argsort(-base.bid_price_array)
        for i in (order[0], order[len(order) // 2], order[-1]):
            cap = inst.capacity.copy()
            cap[i] = np.floor(0.8 * cap[i])
            tight = solve(inst.with_forecast(capacity=cap), model, method)
            assert tight.ok
            assert tight.bid_price_array[i] >= base.bid_price_array[i] - 1e-6 * max(1.0, base.bid_price_array[i])
        # and the answer moved the right way for the busiest leg
        i = order[0]
        cap = inst.capacity.copy()
        cap[i] = np.floor(0.5 * cap[i])
        assert solve(inst.with_forecast(capacity=cap), model, method).bid_price_array[i] > base.bid_price_array[i]


def test_pwl_converges_to_pnlp_as_segments_grow(rungs):
    # Chords of the concave S_j lie below it, so the PWL optimum is at most the PNLP
    # optimum; the gap closes as K grows. Measured on p1k: relative gaps 1.6e-2 (K=2),
    # 4.8e-3 (4), 1.3e-3 (8), 3.2e-4 (16), 8.0e-5 (32), 2.2e-5 (64): about K^-2, the
    # rate of chord interpolation of a smooth function.
    inst = rungs["p1k"]
    pnlp = solve(inst, "pnlp", "ipopt")
    assert pnlp.ok
    gaps = []
    for K in (2, 4, 8, 16, 32):
        r = solve(inst, "pwl", "highs", options=SolverOptions(segments=K))
        assert r.ok
        assert r.objective <= pnlp.objective * (1 + 1e-12)
        gaps.append((pnlp.objective - r.objective) / pnlp.objective)
    gaps = np.array(gaps)
    assert np.all(np.diff(gaps) < 0)
    rates = np.log2(gaps[:-1] / gaps[1:])
    assert np.all(rates > 1.5), rates          # close to 2 per doubling of K
    assert gaps[-1] < 2e-4


def test_both_highs_paths_same_objective_and_dual_feasible(rungs):
    # Strong LP duality (a mathematical fact), checked with the certificate's own LP dual:
    # bid prices >= 0 and the dual objective at them equals the optimum.
    inst = rungs["p1k"]
    a = solve(inst, "dlp", "highs")
    b = solve(inst, "dlp", "pyomo-highs")
    assert a.ok and b.ok
    assert a.objective == pytest.approx(b.objective, rel=1e-10)
    for r in (a, b):
        assert np.all(r.bid_price_array >= -1e-9)
        assert r.certificate.dual_value == pytest.approx(r.objective, rel=1e-10)
        # reduced costs consistent: products priced out are not sold, products above are sold out
        a_j = inst.leg_sum(r.bid_price_array)
        assert np.all(r.allocation[inst.fare < a_j - 1e-6] <= 1e-7)
        over = inst.fare > a_j + 1e-6
        np.testing.assert_allclose(r.allocation[over], inst.mean[over], atol=1e-7)


# -- status tables and limits --------------------------------------------------

def test_highs_status_table_covers_the_enum():
    highspy = pytest.importorskip("highspy")
    names = set(highspy.HighsModelStatus.__members__)
    assert names <= set(m_highs.STATUS), names - set(m_highs.STATUS)
    assert m_highs.termination(highspy.HighsModelStatus.kOptimal) is Termination.OPTIMAL
    assert m_highs.termination(highspy.HighsModelStatus.kTimeLimit) is Termination.TIME_LIMIT


def test_appsi_status_table_covers_the_enum():
    from pyomo.contrib.appsi.base import TerminationCondition

    assert set(TerminationCondition.__members__) <= set(m_pyomo_highs.STATUS)


def test_pyomo_status_table_covers_the_enum():
    from pyomo.opt import TerminationCondition

    assert set(TerminationCondition.__members__) <= set(m_pyomo_ipopt.PYOMO_STATUS)


def test_ipopt_status_table_covers_the_enum():
    # The enum as the installed cyipopt declares it (cython/ipopt.pxd), plus -5
    # Maximum_WallTime_Exceeded of Ipopt 3.14's IpReturnCodes_inc.h, which that file lacks.
    import cyipopt

    pxd = pathlib.Path(cyipopt.__file__).parent / "cython" / "ipopt.pxd"
    if not pxd.exists():
        pytest.skip(f"cyipopt's ipopt.pxd not installed at {pxd}")
    block = re.search(r"enum ApplicationReturnStatus:(.*?)\n\s*\n", pxd.read_text(), re.S).group(1)
    codes = {name: int(v) for name, v in re.findall(r"(\w+)\s*=\s*(-?\d+)", block)}
    assert len(codes) >= 19
    codes["Maximum_WallTime_Exceeded"] = -5
    for name, code in codes.items():
        assert code in m_ipopt.STATUS and m_ipopt.STATUS[code][0] == name


def test_unknown_codes_map_to_unknown_with_a_warning(caplog):
    with caplog.at_level(logging.WARNING):
        assert m_ipopt.termination(12345)[1] is Termination.UNKNOWN
        assert m_highs.termination("kSomethingNew") is Termination.UNKNOWN
    assert "no mapping" in caplog.text


def test_iteration_and_time_limits_come_back_as_statuses(rungs):
    inst = rungs["p1k"]
    for method in ("ipopt", "pyomo-ipopt"):
        r = solve(rungs["p100"], "pnlp", method, options=SolverOptions(iteration_limit=2))
        assert r.termination is Termination.ITERATION_LIMIT, method
        assert r.solution_status is not SolutionStatus.OPTIMAL and not r.ok
    r = solve(inst, "pnlp", "ipopt", options=SolverOptions(time_limit=1e-3))
    assert r.termination is Termination.TIME_LIMIT and not r.ok
    r = solve(inst, "dlp", "highs", options=SolverOptions(iteration_limit=1))
    assert r.termination is Termination.ITERATION_LIMIT and not r.ok
    r = solve(rungs["p100"], "pwl", "pyomo-highs", options=SolverOptions(iteration_limit=1, segments=4))
    assert r.termination is Termination.ITERATION_LIMIT and not r.ok


def test_warm_start_from_bid_prices_converges(rungs):
    inst = rungs["p1k"]
    cold = solve(inst, "pnlp", "ipopt")
    warm = solve(inst, "pnlp", "ipopt", warm_start=cold.bid_prices)
    assert warm.ok
    assert warm.objective == pytest.approx(cold.objective, rel=1e-9)


def test_results_carry_versions_and_phases(rungs):
    r = solve(rungs["p100"], "dlp", "highs")
    assert r.solver_version.startswith("HiGHS ")
    assert set(r.seconds) == {"build", "solve", "certify"}
    r = solve(rungs["p100"], "pnlp", "ipopt")
    assert r.solver_version.startswith("Ipopt 3.")
    assert r.options["ipopt"]["bound_relax_factor"] == 0.0


def test_direct_pnlp_methods_refuse_other_distributions():
    from decomp import InstanceError

    inst = Instance.from_lists([("A", "AAA", "BBB", 10.0)], [("p", ["A"], 100.0, 12.0, 4.0)],
                               distribution=["gamma"])
    for method in ("ipopt", "pyomo-ipopt"):
        with pytest.raises(InstanceError, match="normal demand only"):
            solve(inst, "pnlp", method)


@pytest.mark.solver
def test_highs_thread_count_can_change_between_solves():
    # HiGHS fact (its global scheduler is per process): a run asking for another
    # thread count than the first run used fails unless the scheduler is reset.
    # Reference answer: the same LP solved with HiGHS' defaults.
    from decomp import SolverOptions, solve
    from decomp.generator import generate

    inst = generate(200, seed=3)
    first = solve(inst, "dlp", "highs", SolverOptions(threads=2))
    second = solve(inst, "dlp", "highs", SolverOptions(threads=1))
    assert first.ok and second.ok
    assert second.objective == pytest.approx(first.objective, rel=1e-9)
