"""Normal expected sales and loss function against outside references."""

import numpy as np
import pytest
from scipy import integrate, stats

from decomp import normal


def test_loss_function_table_values():
    # Standard normal loss function G(z) = E[(Z - z)^+] as printed in inventory
    # texts' unit normal loss tables (e.g. Silver, Pyke & Peterson, "Inventory
    # Management and Production Planning and Scheduling", appendix table; values
    # quoted from memory to four places).
    assert normal.loss(0.0) == pytest.approx(0.3989, abs=5e-5)
    assert normal.loss(1.0) == pytest.approx(0.0833, abs=5e-5)
    assert normal.loss(2.0) == pytest.approx(0.0085, abs=5e-5)


def test_loss_matches_numerical_integration():
    # Reference: scipy.stats.norm, integrating the survival function: G(z) = int_z^inf P(Z > t) dt.
    for z in (-3.0, -0.7, 0.0, 0.4, 2.5, 6.0):
        ref, _ = integrate.quad(lambda t: stats.norm.sf(t), z, np.inf, epsabs=1e-14)
        assert normal.loss(np.array([z]))[0] == pytest.approx(ref, abs=1e-12)


def test_floored_sales_equal_textbook_minus_constant():
    # Identity: E[min(max(D,0),x)] = E[min(D,x)] - E[min(D,0)] for x >= 0 (pointwise fact).
    mean, std = np.array([10.0, 0.5, 3.0]), np.array([3.0, 1.0, 4.0])
    for x in (0.0, 0.3, 2.0, 9.0, 30.0):
        xs = np.full(3, x)
        lhs = normal.expected_sales(xs, mean, std)
        rhs = normal.textbook_expected_sales(xs, mean, std) - normal.textbook_expected_sales(np.zeros(3), mean, std)
        np.testing.assert_allclose(lhs, rhs, rtol=1e-12, atol=1e-12)


def test_expected_sales_against_scipy_expect():
    # Reference: scipy.stats.norm.expect of min(max(D,0), x).
    for mean, std, x in ((10.0, 3.0, 8.0), (0.5, 1.0, 0.7), (40.0, 25.0, 60.0)):
        ref = stats.norm(mean, std).expect(lambda d: min(max(d, 0.0), x), epsabs=1e-12)
        assert normal.expected_sales(x, mean, std) == pytest.approx(ref, rel=1e-8)


def test_fractile_is_newsvendor_quantile():
    # Newsvendor fact: at the optimum P(D > x) = a / f; reference quantile from scipy.stats.norm.ppf.
    a, f, mean, std = np.array([30.0]), np.array([100.0]), np.array([20.0]), np.array([5.0])
    x, dxda, _ = normal.fractile(a, f, mean, std)
    assert x[0] == pytest.approx(stats.norm(20, 5).ppf(1 - 0.3), rel=1e-12)
    h = 1e-4
    xp, _, _ = normal.fractile(a + h, f, mean, std)
    xm, _, _ = normal.fractile(a - h, f, mean, std)
    assert dxda[0] == pytest.approx((xp[0] - xm[0]) / (2 * h), rel=1e-6)
