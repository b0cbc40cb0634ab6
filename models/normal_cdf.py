"""The standard normal CDF, density and loss function as Pyomo expressions.

Pyomo has no erf, so the CDF is built from a published double-precision
approximation: Hart (1968), "Computer Approximations", algorithm 5666, in the
form given by G. West (2005), "Better approximations to cumulative normal
functions", Wilmott Magazine (his Figure 2). For t = |z|:

* t < 7.07106781186547 (= 5 sqrt 2): Q(t) = exp(-t^2/2) N(t) / D(t), a
  degree-6 over degree-7 rational function (coefficients below);
* 7.07... <= t <= 37: the continued fraction
  Q(t) = exp(-t^2/2) / (sqrt(2 pi) (t + 1/(t + 2/(t + 3/(t + 4/(t + 0.65))))));
* t > 37: Q(t) = 0;

and Phi(z) = Q(-z) for z < 0, 1 - Q(z) otherwise (Q the upper tail). The sign
and the ranges are ``Expr_if`` nodes, so the NL writer and Ipopt see one
smooth-to-rounding expression.

Every formula is written once over a small "backend" (exp and if-then-else),
so :func:`cdf` (Pyomo) and :func:`cdf_array` (numpy, used by the tests on a
fine grid) are the same arithmetic in the same order.
"""

from __future__ import annotations

import math

import numpy as np

#: Numerator of West's Figure 2, highest power first (Horner order).
_NUM = (3.52624965998911e-02, 0.700383064443688, 6.37396220353165, 33.912866078383,
        112.079291497871, 221.213596169931, 220.206867912376)
#: Denominator, highest power first.
_DEN = (8.83883476483184e-02, 1.75566716318264, 16.064177579207, 86.7807322029461,
        296.564248779674, 637.333633378831, 793.826512519948, 440.413735824752)
_SPLIT = 7.07106781186547
_CUTOFF = 37.0
_SQRT_2PI = 2.506628274631          # as printed by West
_INV_SQRT_2PI = 1.0 / math.sqrt(2.0 * math.pi)


class _Pyomo:
    @staticmethod
    def exp(v):
        import pyomo.environ as pyo

        return pyo.exp(v)

    @staticmethod
    def where(cond, a, b):
        from pyomo.core.expr import Expr_if

        return Expr_if(IF=cond, THEN=a, ELSE=b)


class _Numpy:
    exp = staticmethod(np.exp)

    @staticmethod
    def where(cond, a, b):
        return np.where(cond, a, b)


def _horner(coeffs, t):
    out = coeffs[0] * t + coeffs[1]
    for c in coeffs[2:]:
        out = out * t + c
    return out


def tail_rational(t, be=_Pyomo):
    """Q(t) for 0 <= t < 7.07: exp(-t^2/2) N(t) / D(t) (Hart 5666 as printed by West)."""
    return be.exp(-t * t / 2.0) * _horner(_NUM, t) / _horner(_DEN, t)


def tail_continued_fraction(t, be=_Pyomo):
    """Q(t) for 7.07 <= t <= 37 (West's continued fraction)."""
    b = t + 0.65
    b = t + 4.0 / b
    b = t + 3.0 / b
    b = t + 2.0 / b
    b = t + 1.0 / b
    return be.exp(-t * t / 2.0) / b / _SQRT_2PI


def tail_nonneg(t, be=_Pyomo):
    """Q(t) for t >= 0: the rational function below 7.07, the continued fraction up to 37, then 0."""
    return be.where(t < _SPLIT, tail_rational(t, be),
                    be.where(t <= _CUTOFF, tail_continued_fraction(t, be), 0.0))


def abs_by_sign(z, be=_Pyomo):
    """|z| as ``Expr_if(z < 0, -z, z)``."""
    return be.where(z < 0, -z, z)


def upper_tail_given(z, tail_abs, be=_Pyomo):
    """P(Z > z) from Q(|z|) (``tail_abs``): Q(|z|) for z >= 0, 1 - Q(|z|) for z < 0.

    Lets a model hold |z| and Q(|z|) in named Expressions, which the NL writer
    emits once as shared subexpressions: one rational function per product."""
    return be.where(z < 0, 1.0 - tail_abs, tail_abs)


def upper_tail(z, be=_Pyomo):
    """P(Z > z) = 1 - Phi(z), with ``Expr_if`` on the sign of z.

    (Each branch carries its own copy of Q: the NL writer inlines shared
    unnamed subexpressions, so an inline |z| would be repeated at every use.)"""
    return be.where(z < 0, 1.0 - tail_nonneg(-z, be), tail_nonneg(z, be))


def cdf(z, be=_Pyomo):
    """Phi(z), with ``Expr_if`` on the sign of z."""
    return be.where(z < 0, tail_nonneg(-z, be), 1.0 - tail_nonneg(z, be))


def pdf(z, be=_Pyomo):
    """phi(z) = exp(-z^2/2) / sqrt(2 pi)."""
    return _INV_SQRT_2PI * be.exp(-z * z / 2.0)


def loss(z, be=_Pyomo, tail_abs=None):
    """Standard normal loss G(z) = E[(Z - z)^+] = phi(z) - z (1 - Phi(z)).

    ``tail_abs``: Q(|z|) when the caller holds it already (a named Expression)."""
    if tail_abs is None:
        return pdf(z, be) - z * upper_tail(z, be)
    return pdf(z, be) - z * upper_tail_given(z, tail_abs, be)


# -- numpy twins: the same formulas through the numpy backend -----------------

def cdf_array(z):
    z = np.asarray(z, dtype=np.float64)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        return cdf(z, _Numpy)


def upper_tail_array(z):
    z = np.asarray(z, dtype=np.float64)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        return upper_tail(z, _Numpy)


def loss_array(z):
    z = np.asarray(z, dtype=np.float64)
    with np.errstate(over="ignore", divide="ignore", invalid="ignore"):
        return loss(z, _Numpy)
