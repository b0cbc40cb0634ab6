"""decomp simulate never prices with a non-optimal answer without saying so.

A policy whose method ends non-optimal is solved again by the fallback of
``decomp run --fallback`` (decomp.production.fallback); the counts say how many
re-optimizations ended non-optimal, how many the fallback rescued and how many
still priced with a non-optimal answer.

External checks and their sources:
* Ipopt (the reference interior-point solver, cyipopt) solving the same
  instance directly gives the bid prices the rescued policy must price with:
  the fallback is the same call, so the arrays are equal, not just close.
* HiGHS, through its status, confirms the primary really stopped short: the
  Lagrangian dual limited to one iteration is not certified optimal on the
  p100 rung (its certificate's gap, computed independently of the method).
"""

from __future__ import annotations

import numpy as np
import pytest

from decomp.ladder import load_rung
from decomp.options import SolverOptions
from decomp.production.fallback import Fallback
from decomp.registry import solve
from decomp.simulation import SimulationConfig, simulate
from decomp.simulation import report
from decomp.simulation.booking import remaining_forecast, remaining_share
from decomp.simulation.policies import BidPricePolicy, ControlContext, FCFSPolicy


class OneIteration(BidPricePolicy):
    """The PNLP by the Lagrangian dual, stopped after one iteration: forced to end non-optimal."""

    def options(self):
        return super().options().replace(iteration_limit=1)


def _time0(inst, policy):
    ctx = ControlContext(instance=inst, mean=np.asarray(inst.mean, float), std=np.asarray(inst.std, float),
                         t_frac=0.0)
    cap = np.floor(np.asarray(inst.capacity, dtype=np.float64) + 1e-9)[None, :]
    sold = np.zeros((1, inst.n_products), dtype=np.int64)
    sub = inst.with_forecast(mean=ctx.mean, std=ctx.std, capacity=cap[0])
    return policy.controls(ctx, cap, sold, [None]), sub


@pytest.fixture(scope="module")
def p100():
    return load_rung("p100")


@pytest.mark.solver
def test_a_non_optimal_solve_prices_with_the_fallbacks_bid_prices(p100):
    cs, sub = _time0(p100, OneIteration("pnlp", "lagrangian"))
    primary = solve(sub, model="pnlp", method="lagrangian", options=SolverOptions(threads=1, iteration_limit=1))
    assert not primary.ok                           # the primary really stops short
    # the fallback of 'auto' for a normal-demand PNLP is Ipopt, cold, without the iteration limit
    direct = solve(sub, model="pnlp", method="ipopt", options=SolverOptions(threads=1))
    assert direct.ok
    assert not np.allclose(primary.bid_price_array, direct.bid_price_array, rtol=1e-6, atol=1e-6)
    np.testing.assert_array_equal(cs.states[0]["pi"], direct.bid_price_array)
    assert (cs.solves, cs.failures, cs.rescued, cs.priced_non_optimal) == (1, 1, 1, 0)
    # the status counts are those of the policy's own method
    key = f"{primary.termination.value}/{primary.solution_status.value}"
    assert cs.statuses == {key: 1}


def test_an_explicit_fallback_method_is_the_one_used(p100):
    cs, sub = _time0(p100, OneIteration("pnlp", "lagrangian", fallback=Fallback("lagrangian", "lbfgsb")))
    direct = solve(sub, model="pnlp", method="lagrangian", options=SolverOptions(threads=1, dual_method="lbfgsb"))
    np.testing.assert_array_equal(cs.states[0]["pi"], direct.bid_price_array)
    assert (cs.failures, cs.rescued + cs.priced_non_optimal) == (1, 1)
    assert cs.rescued == int(direct.ok)


def test_without_a_fallback_the_non_optimal_answer_is_counted_as_priced(p100):
    cs, sub = _time0(p100, OneIteration("pnlp", "lagrangian", fallback=None))
    primary = solve(sub, model="pnlp", method="lagrangian", options=SolverOptions(threads=1, iteration_limit=1))
    np.testing.assert_array_equal(cs.states[0]["pi"], primary.bid_price_array)
    assert (cs.solves, cs.failures, cs.rescued, cs.priced_non_optimal) == (1, 1, 0, 1)


def _run(inst, fallback):
    cfg = SimulationConfig(policies=[OneIteration("pnlp", "lagrangian", fallback=fallback), FCFSPolicy()],
                           paths=3, horizon=60.0, reoptimize_every=(30.0,), seed=5, chunk=3)
    return simulate(inst, cfg)


@pytest.mark.solver
def test_simulation_counts_every_reoptimization_and_says_so_loudly(p100):
    rescued, unrescued = _run(p100, "auto"), _run(p100, None)
    # time 0 once for all paths, then one re-optimization per path at day 30
    n_solves = 1 + 3
    a = rescued.summary()["scenarios"][0]["policies"][0]["reoptimizations"]
    b = unrescued.summary()["scenarios"][0]["policies"][0]["reoptimizations"]
    assert a == {"solves": n_solves, "non_optimal": n_solves, "rescued_by_fallback": n_solves,
                 "priced_non_optimal": 0}
    assert b == {"solves": n_solves, "non_optimal": n_solves, "rescued_by_fallback": 0,
                 "priced_non_optimal": n_solves}
    loud = "\n".join(report.header_lines(unrescued.summary()))
    assert "PRICED WITH A NON-OPTIMAL ANSWER" in loud and "bid pnlp:lagrangian" in loud
    assert "PRICED WITH A NON-OPTIMAL ANSWER" not in "\n".join(report.header_lines(rescued.summary()))
    assert "rescued by the fallback" in report.markdown(rescued.summary())
    # common random numbers: the fallback changes no request, so the hindsight bound and first come,
    # first served are the same on every path
    np.testing.assert_array_equal(rescued.bound, unrescued.bound)
    np.testing.assert_array_equal(rescued.requests, unrescued.requests)
    np.testing.assert_array_equal(rescued.revenue[0, 1], unrescued.revenue[0, 1])


@pytest.mark.solver
def test_cli_fallback_option(p100, tmp_path, capsys):
    import json

    from decomp.cli import main
    from decomp.io import write_instance

    inst_dir = tmp_path / "p100"
    write_instance(p100, inst_dir)
    base = ["simulate", str(inst_dir), "--policies", "dlp:highs", "--paths", "2", "--workers", "0",
            "--reoptimize-every", "60", "--no-progress"]
    for bad in ("lagrangian:nope", "nosuchmethod"):
        assert main([*base, "--fallback", bad, "--out", str(tmp_path / "bad")]) == 2
        assert "error" in capsys.readouterr().err
    assert main([*base, "--fallback", "none", "--out", str(tmp_path / "out")]) == 0
    data = json.loads((tmp_path / "out" / "simulation.json").read_text())
    assert data["config"]["policies"][0]["fallback"] is None
    counts = data["scenarios"][0]["policies"][0]["reoptimizations"]
    assert counts == {"solves": 1, "non_optimal": 0, "rescued_by_fallback": 0, "priced_non_optimal": 0}
    assert "WARNING" not in capsys.readouterr().err
