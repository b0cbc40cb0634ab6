"""The Pyomo formulations in models/: the erf-free normal CDF, the expected-sales
expressions, and agreement of the Pyomo and array forms of every model."""

import numpy as np
import pytest
from scipy import special, stats

from decomp import SolverOptions, Termination, ladder, normal, solve
from models import dlp, normal_cdf, pnlp, pwl

pyo = pytest.importorskip("pyomo.environ")


def _grid_model(z):
    m = pyo.ConcreteModel()
    m.I = pyo.RangeSet(0, len(z) - 1)
    m.z = pyo.Var(m.I, initialize=dict(enumerate(np.asarray(z).tolist())))
    return m


# -- the normal CDF ---------------------------------------------------------

SPLIT = 7.07106781186547   # West's branch point, checked from both sides


def test_cdf_numpy_twin_error_against_scipy_ndtr():
    # Reference: scipy.special.ndtr (Cephes). Requirement: absolute error <= 1e-14 on [-38, 38].
    z = np.concatenate([np.linspace(-38.0, 38.0, 1_520_001),
                        [-SPLIT, SPLIT, np.nextafter(SPLIT, 0), -37.0, 37.0, 0.0]])
    assert np.max(np.abs(normal_cdf.cdf_array(z) - special.ndtr(z))) <= 1e-14
    assert np.max(np.abs(normal_cdf.upper_tail_array(z) - special.ndtr(-z))) <= 1e-14


def test_pyomo_cdf_expression_is_its_numpy_twin_and_matches_ndtr():
    # The Pyomo expression evaluated by pyomo's value() at grid points, against the
    # numpy twin (same formula, same order of operations) and scipy.special.ndtr.
    z = np.concatenate([np.linspace(-38.0, 38.0, 761), [-SPLIT, SPLIT, -37.0, 37.0, -37.5, 0.0]])
    m = _grid_model(z)
    got = np.array([pyo.value(normal_cdf.cdf(m.z[i])) for i in m.I])
    tail = np.array([pyo.value(normal_cdf.upper_tail(m.z[i])) for i in m.I])
    np.testing.assert_allclose(got, normal_cdf.cdf_array(z), rtol=1e-14, atol=0)
    np.testing.assert_allclose(tail, normal_cdf.upper_tail_array(z), rtol=1e-14, atol=0)
    assert np.max(np.abs(got - special.ndtr(z))) <= 1e-14
    # the expression carries Expr_if nodes (on the sign and the ranges)
    assert "Expr_if" in type(normal_cdf.cdf(m.z[0])).__name__


def test_cdf_derivative_is_the_density():
    # Reference: scipy.stats.norm.pdf. Two routes: pyomo's differentiate (reverse
    # numeric) on each Expr_if branch -- it has no rule for Expr_if itself -- and the
    # gradient of the whole expression as Ipopt gets it (PyNumero on the ASL).
    from pyomo.core.expr.calculus.derivatives import Modes, differentiate

    m = pyo.ConcreteModel()
    m.t = pyo.Var()
    for t in (0.0, 0.3, 1.7, 4.0, 7.0):
        m.t.set_value(t)
        d = differentiate(normal_cdf.tail_rational(m.t), wrt=m.t, mode=Modes.reverse_numeric)
        assert -d == pytest.approx(stats.norm.pdf(t), rel=1e-8)
    for t in (7.2, 10.0, 20.0, 36.0):
        m.t.set_value(t)
        d = differentiate(normal_cdf.tail_continued_fraction(m.t), wrt=m.t, mode=Modes.reverse_numeric)
        assert -d == pytest.approx(stats.norm.pdf(t), rel=1e-7)

    from pyomo.contrib.pynumero.asl import AmplInterface
    if not AmplInterface.available():
        pytest.skip("PyNumero ASL library not built (scripts/build_pynumero.py)")
    from pyomo.contrib.pynumero.interfaces.pyomo_nlp import PyomoNLP

    z = np.linspace(-37.0, 37.0, 741)
    g = _grid_model(z)
    g.obj = pyo.Objective(expr=sum(normal_cdf.cdf(g.z[i]) for i in g.I))
    nlp = PyomoNLP(g)
    zz = z[[v.index() for v in nlp.get_pyomo_variables()]]
    grad = nlp.evaluate_grad_objective()
    dens = stats.norm.pdf(zz)
    assert np.max(np.abs(grad - dens)) <= 1e-14
    assert np.max(np.abs(grad / dens - 1.0)) <= 1e-7


def test_loss_expression_against_printed_table_and_scipy():
    # Standard normal loss table values G(0)=0.3989, G(1)=0.0833, G(2)=0.0085 (unit
    # normal loss table of Silver, Pyke & Peterson, "Inventory Management and
    # Production Planning and Scheduling"; four places, quoted from memory).
    m = pyo.ConcreteModel()
    m.z = pyo.Var()
    for z, printed in ((0.0, 0.3989), (1.0, 0.0833), (2.0, 0.0085)):
        m.z.set_value(z)
        assert pyo.value(normal_cdf.loss(m.z)) == pytest.approx(printed, abs=5e-5)
    # and against scipy.stats.norm: G(z) = pdf(z) - z sf(z)
    for z in (-6.0, -1.3, 0.0, 0.8, 3.5, 9.0):
        m.z.set_value(z)
        ref = stats.norm.pdf(z) - z * stats.norm.sf(z)
        assert pyo.value(normal_cdf.loss(m.z)) == pytest.approx(ref, rel=1e-12, abs=1e-15)


# -- the models' expressions ------------------------------------------------

@pytest.fixture(scope="module")
def p100():
    return ladder.load_rung("p100")


def test_pnlp_expected_sales_expression_matches_scipy(p100):
    # Reference: scipy.stats.norm.expect of min(max(D, 0), x) for a few products, and
    # decomp.normal (erfcx based) for all of them.
    rng = np.random.default_rng(3)
    x = np.maximum(0.0, p100.mean + p100.std * rng.normal(size=p100.n_products))
    m = pnlp.build(p100, x0=x)
    got = np.array([pyo.value(m.expected_sales[j]) for j in p100.product_ids.tolist()])
    np.testing.assert_allclose(got, normal.expected_sales(x, p100.mean, p100.std), rtol=1e-12, atol=1e-10)
    for j in (0, 17, 55):
        ref = stats.norm(p100.mean[j], p100.std[j]).expect(lambda d: min(max(d, 0.0), x[j]), epsabs=1e-12)
        assert got[j] == pytest.approx(ref, rel=1e-8)
    # floored sales = textbook E[min(D, x)] minus the constant E[min(D, 0)] (pointwise identity)
    textbook = normal.textbook_expected_sales(x, p100.mean, p100.std)
    const = normal.textbook_expected_sales(np.zeros_like(x), p100.mean, p100.std)
    np.testing.assert_allclose(got, textbook - const, rtol=1e-10, atol=1e-9)


def test_models_have_named_components(p100):
    for m in (dlp.build(p100), pnlp.build(p100), pwl.build(p100, 4)):
        assert len(m.capacity) == p100.n_legs
        assert len(m.expected_sales) == p100.n_products
        assert m.revenue.sense == pyo.maximize
        assert set(m.LEGS) == set(p100.leg_ids.tolist())


def test_zero_std_products_are_linear_up_to_the_mean():
    from decomp import Instance

    inst = Instance.from_lists([("L1", "AAA", "BBB", 5.0)],
                               [("P1", ["L1"], 100.0, 3.0, 0.0), ("P2", ["L1"], 50.0, 6.0, 2.0)])
    m = pnlp.build(inst)
    assert m.x["P1"].ub == 3.0 and m.x["P2"].ub is None
    m.x["P1"].set_value(2.0)
    assert pyo.value(m.expected_sales["P1"]) == 2.0


# -- Pyomo form against array form -----------------------------------------

@pytest.mark.solver
def test_pnlp_pyomo_and_array_forms_agree():
    # Same model, two routes to Ipopt: objective to 1e-8 relative, bid prices to 1e-6 relative.
    inst = ladder.load_rung("p1k")
    a = solve(inst, "pnlp", "ipopt")
    b = solve(inst, "pnlp", "pyomo-ipopt")
    assert a.ok and b.ok
    assert b.objective == pytest.approx(a.objective, rel=1e-8)
    np.testing.assert_allclose(b.bid_price_array, a.bid_price_array, rtol=1e-6, atol=1e-6 * a.bid_price_array.max())


@pytest.mark.solver
@pytest.mark.parametrize("model", ["dlp", "pwl"])
def test_lp_pyomo_and_array_forms_agree(model):
    # Objective to 1e-8 relative. LP duals need not be unique (degenerate vertices), so
    # each route's bid prices are checked by strong duality: the LP dual objective at
    # them equals the optimum (the certificate's gap), and they are >= 0.
    inst = ladder.load_rung("p1k")
    opts = SolverOptions(segments=8)
    a = solve(inst, model, "highs", options=opts)
    b = solve(inst, model, "pyomo-highs", options=opts)
    assert a.ok and b.ok
    assert b.objective == pytest.approx(a.objective, rel=1e-8)
    for r in (a, b):
        assert r.certificate.min_bid_price >= -1e-9
        assert abs(r.certificate.gap) <= 1e-9
        assert r.certificate.dual_value == pytest.approx(a.objective, rel=1e-9)
