"""The other minimizers of the same dual (decomp.lagrangian.alternatives): L-BFGS-B and projected
subgradient, which never claim optimality their certificate does not show and report their
limits as statuses.
"""

from __future__ import annotations

import pytest

from decomp import SolutionStatus, SolverOptions, Termination, solve
from decomp.lagrangian.alternatives import lbfgsb_termination


@pytest.fixture(scope="module")
def lagr(rungs):
    return {name: solve(inst, "pnlp", "lagrangian") for name, inst in rungs.items()}


def test_lbfgsb_does_not_claim_optimality_without_a_certificate(rungs):
    inst = rungs["p1k"]
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(dual_method="lbfgsb", iteration_limit=40))
    assert r.termination in (Termination.ITERATION_LIMIT, Termination.NUMERICAL_ERROR, Termination.OPTIMAL)
    if r.termination is not Termination.OPTIMAL:
        assert r.solution_status is not SolutionStatus.OPTIMAL
    # whatever it reached is a valid bound pair: dual above primal
    assert r.certificate.gap >= -1e-12
    assert r.certificate.max_violation_rel <= 1e-9


def test_lbfgsb_reaches_a_loose_tolerance(rungs, lagr):
    r = solve(rungs["p100"], "pnlp", "lagrangian", SolverOptions(dual_method="lbfgsb", tol=1e-5))
    assert r.ok and r.gap <= 1e-5
    assert r.objective == pytest.approx(lagr["p100"].objective, rel=1e-5)


def test_subgradient_hits_its_iteration_limit_honestly(rungs):
    r = solve(rungs["p100"], "pnlp", "lagrangian", SolverOptions(dual_method="subgradient", iteration_limit=30))
    assert r.termination is Termination.ITERATION_LIMIT
    assert r.solution_status is SolutionStatus.FEASIBLE      # feasible, not certified
    assert r.certificate.gap > 1e-9
    assert r.iterations == 30


def test_lbfgsb_message_table():
    # scipy's L-BFGS-B messages (scipy.optimize._lbfgsb_py, quoted from its source).
    assert lbfgsb_termination("CONVERGENCE: REL_REDUCTION_OF_F_<=_FACTR*EPSMCH") is Termination.NUMERICAL_ERROR
    assert lbfgsb_termination("STOP: TOTAL NO. OF ITERATIONS REACHED LIMIT") is Termination.ITERATION_LIMIT
    assert lbfgsb_termination("ABNORMAL_TERMINATION_IN_LNSRCH") is Termination.NUMERICAL_ERROR
    assert lbfgsb_termination("something new") is Termination.UNKNOWN
