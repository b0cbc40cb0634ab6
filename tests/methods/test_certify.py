"""Certificates: violation, KKT residual, dual bounds and gaps, checked against
hand computations, scipy.optimize.linprog (HiGHS via SciPy) and weak/strong duality."""

import numpy as np
import pytest
from scipy import optimize, stats

from decomp import Instance, SolutionStatus, SolverOptions, Termination, dual, ladder, solve
from decomp.certify import certify, solution_status
from decomp.segments import segments


@pytest.fixture
def two_leg():
    # The hand-solved DLP of test_direct_methods: optimum x = (8, 2, 3), pi = (30, 120), value 1460.
    return Instance.from_lists([("A", "AAA", "HUB", 10.0), ("B", "HUB", "BBB", 5.0)],
                               [("p1", ["A"], 100.0, 8.0, 0.0), ("p2", ["A", "B"], 150.0, 6.0, 0.0),
                                ("p3", ["B"], 120.0, 4.0, 0.0)])


def test_dlp_certificate_by_hand(two_leg):
    c = certify(two_leg, "dlp", np.array([8.0, 2.0, 3.0]), np.array([30.0, 120.0]))
    assert c.primal_value == 1460.0 and c.dual_value == 1460.0 and c.gap == 0.0
    assert c.max_violation == 0.0 and c.kkt_residual == 0.0
    # an overbooked allocation: leg A carries 8 + 3 = 11 > 10, leg B 3 + 3 = 6 > 5
    c = certify(two_leg, "dlp", np.array([8.0, 3.0, 3.0]), np.array([30.0, 120.0]))
    assert c.max_violation == pytest.approx(1.0) and c.max_violation_rel == pytest.approx(1.0 / 5.0)
    # other bid prices: dual value by hand 10*0 + 5*100 + 8*100 + 6*50 + 4*20 = 1680 >= 1460
    c = certify(two_leg, "dlp", np.array([8.0, 2.0, 3.0]), np.array([0.0, 100.0]))
    assert c.dual_value == pytest.approx(1680.0)
    assert c.gap == pytest.approx((1680.0 - 1460.0) / 1460.0)
    # p2, p3 interior with reduced costs 50 and 20: relative to fares 50/150, 20/120
    assert c.kkt_residual == pytest.approx(50.0 / 150.0)


def test_negative_bid_prices_are_projected_and_reported(two_leg):
    c = certify(two_leg, "dlp", np.array([8.0, 2.0, 3.0]), np.array([-5.0, 120.0]))
    assert c.min_bid_price == -5.0
    # projected to (0, 120): 5*120 + 8*100 + 6*30 + 4*0 = 1580
    assert c.dual_value == pytest.approx(1580.0)


@pytest.mark.solver
def test_lp_dual_matches_scipy_linprog_on_the_pwl(two_leg):
    # Reference: scipy.optimize.linprog (method "highs") on the explicit PWL LP and its
    # dual min c.pi + sum w u  s.t. u_jk + a_j(pi) >= f_j s_jk, pi, u >= 0.
    inst = ladder.load_rung("p100")
    K = 3
    _, w, s = segments(inst, K)
    P, L = inst.n_products, inst.n_legs
    A = inst.A.toarray()
    Ay = np.repeat(A, K, axis=1)                       # column (j, k) -> A[:, j]
    cost = (inst.fare[:, None] * s).ravel()
    primal = optimize.linprog(-cost, A_ub=Ay, b_ub=inst.capacity, bounds=list(zip(np.zeros(P * K), w.ravel())),
                              method="highs")
    assert primal.status == 0
    r = solve(inst, "pwl", "highs", options=SolverOptions(segments=K))
    assert r.ok
    assert r.objective == pytest.approx(-primal.fun, rel=1e-10)
    # the certificate's dual value at our bid prices equals the optimum (strong duality) ...
    assert r.certificate.dual_value == pytest.approx(-primal.fun, rel=1e-10)
    # ... and at any other pi >= 0 it is an upper bound (weak duality), computed here
    # independently as the value of the dual LP with pi fixed.
    rng = np.random.default_rng(0)
    for _ in range(3):
        pi = r.bid_price_array * rng.uniform(0.5, 1.5, L)
        u = np.maximum(cost - np.repeat(inst.leg_sum(pi), K), 0.0)
        ref = inst.capacity @ pi + w.ravel() @ u
        c = certify(inst, "pwl", r.allocation, pi, segments=K)
        assert c.dual_value == pytest.approx(ref, rel=1e-12)
        assert c.dual_value >= -primal.fun * (1 - 1e-12)


@pytest.mark.solver
def test_pnlp_certificate_at_the_optimum_and_away_from_it():
    inst = ladder.load_rung("p100")
    r = solve(inst, "pnlp", "ipopt")
    c = r.certificate
    assert c.kkt_residual < 1e-6
    assert 0 <= c.gap < 1e-8
    # the Lagrangian dual at the bid prices is decomp.dual's q(pi)
    with np.errstate(all="ignore"):
        assert c.dual_value == pytest.approx(dual.evaluate(inst, r.bid_price_array).value, rel=1e-14)
    # a shrunk allocation: feasible, lower value, positive gap and KKT residual
    c2 = certify(inst, "pnlp", 0.9 * r.allocation, r.bid_price_array)
    assert c2.max_violation == 0.0 and c2.primal_value < c.primal_value
    assert c2.gap > 1e-4 and c2.kkt_residual > 1e-3
    # a grown allocation overbooks: the violation shows in seats
    c3 = certify(inst, "pnlp", 1.1 * r.allocation, r.bid_price_array)
    assert c3.max_violation > 1.0


def test_pnlp_kkt_residual_by_hand():
    # One leg, one product, x = 10, D ~ N(12, 4), fare 100: f P(D > 10) = 100 Phi(0.5)
    # (scipy.stats.norm); with bid price 60 the residual is |69.146 - 60| / 100.
    inst = Instance.from_lists([("A", "AAA", "BBB", 10.0)], [("p", ["A"], 100.0, 12.0, 4.0)])
    c = certify(inst, "pnlp", np.array([10.0]), np.array([60.0]))
    assert c.kkt_residual == pytest.approx((100 * stats.norm.cdf(0.5) - 60.0) / 100.0, rel=1e-12)
    # at x = 0 only f P(D > 0) > a counts
    c = certify(inst, "pnlp", np.array([0.0]), np.array([200.0]))
    assert c.kkt_residual == 0.0


def test_solution_status_rules():
    inst = Instance.from_lists([("A", "AAA", "BBB", 10.0)], [("p", ["A"], 100.0, 12.0, 4.0)])
    good = certify(inst, "dlp", np.array([10.0]), np.array([100.0]))
    assert good.gap == 0.0
    assert solution_status(Termination.OPTIMAL, good, 1e-9) is SolutionStatus.OPTIMAL
    assert solution_status(Termination.ITERATION_LIMIT, good, 1e-9) is SolutionStatus.FEASIBLE
    loose = certify(inst, "dlp", np.array([10.0]), np.array([50.0]))
    assert loose.gap == pytest.approx(0.1)   # by hand: (10*50 + 12*(100-50) - 1000) / 1000
    assert solution_status(Termination.OPTIMAL, loose, 1e-9) is SolutionStatus.FEASIBLE
    assert solution_status(Termination.OPTIMAL, loose, 0.1 + 1e-12) is SolutionStatus.OPTIMAL    # gap <= tol
    over = certify(inst, "dlp", np.array([11.0]), np.array([100.0]))
    assert solution_status(Termination.OPTIMAL, over, 1e-9) is SolutionStatus.INFEASIBLE
    assert solution_status(Termination.ERROR, None, 1e-9) is SolutionStatus.NO_SOLUTION


def test_certify_is_vectorized_at_scale():
    # A 200,000-product instance certifies without per-product Python work (no timing
    # assertion here; speed is measured by the benchmark suite). Checked against
    # mathematical facts: the DLP dual at pi is c.pi + sum_j mean_j (f_j - a_j)^+ (computed
    # here from the sparse matrix directly), and weak duality -- at any pi >= 0 each
    # model's dual value bounds the value of every feasible allocation from above.
    from decomp.generator import generate
    from decomp.methods.ipopt import start_point

    inst = generate(200_000, seed=1)
    x = start_point(inst)                       # mean scaled by its tightest leg: A x <= c
    assert np.all(inst.A @ x <= inst.capacity + 1e-9)
    pi = np.random.default_rng(5).uniform(0.0, 50.0, inst.n_legs)
    a = inst.A.T @ pi
    ref = inst.capacity @ pi + inst.mean @ np.maximum(inst.fare - a, 0.0)
    for model in ("dlp", "pnlp", "pwl"):
        c = certify(inst, model, x, pi, segments=4)
        assert c.max_violation == 0.0
        assert np.isfinite(c.dual_value) and c.primal_value > 0
        assert c.dual_value >= c.primal_value, model
        if model == "dlp":
            assert c.dual_value == pytest.approx(ref, rel=1e-12)
            assert c.primal_value == pytest.approx(float(inst.fare @ x), rel=1e-12)


def test_pnlp_certificate_on_threads_matches_one_thread(monkeypatch):
    # The PNLP certificate's terms are per product: summing them over slices on
    # threads gives the one-thread certificate up to the order of the additions,
    # and the dual value equals decomp.dual.evaluate's (the same q(pi)).
    from decomp import dual as _dual
    from decomp import threads as _threads
    from decomp.generator import generate

    monkeypatch.setattr(_threads, "FROM_PRODUCTS", 0)
    inst = generate(20_000, seed=6)
    rng = np.random.default_rng(2)
    pi = rng.uniform(0.0, 50.0, inst.n_legs)
    x = rng.uniform(0.0, 1.0, inst.n_products) * inst.mean
    one = certify(inst, "pnlp", x, pi, threads=1)
    three = certify(inst, "pnlp", x, pi, threads=3)
    assert three.primal_value == pytest.approx(one.primal_value, rel=1e-13)
    assert three.dual_value == pytest.approx(one.dual_value, rel=1e-13)
    assert three.kkt_residual == one.kkt_residual
    assert one.dual_value == pytest.approx(_dual.evaluate(inst, pi).value, rel=1e-13)
