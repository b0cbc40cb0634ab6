"""Test helper: the dynamic program of a whole (small) network by brute force over all seat vectors.

V_T(x) = 0; V_t(x) = V_{t+1}(x) + sum_j p_tj max(0, r_j - (V_{t+1}(x) - V_{t+1}(x - a_j))) over the
products j whose legs all have a seat (Talluri and van Ryzin 2004, section 3.2, the network
program with at most one request per period). Also the expected revenue of a given
acceptance rule on the same network. Exponential in the number of legs: for tests only.
"""

from __future__ import annotations

import itertools

import numpy as np


def _incidence(instance):
    return np.asarray(instance.A.todense(), dtype=np.int64)          # (L, P)


def optimal_values(instance, prob):
    """V_0 over the whole grid of seat vectors: an array of shape (c_1 + 1, ..., c_L + 1)."""
    return _backward(instance, prob, lambda t, x, j, gain: max(0.0, gain))


def policy_value(instance, prob, accept):
    """Expected revenue from full capacity of the rule ``accept(t, x, j) -> bool`` (seats permitting)."""
    V = _backward(instance, prob, lambda t, x, j, gain: gain if accept(t, x, j) else 0.0)
    return float(V[tuple(np.floor(instance.capacity + 1e-9).astype(np.int64))])


def _backward(instance, prob, take):
    """The backward recursion V_t(x) = V_{t+1}(x) + sum_j p_tj take(t, x, j, f_j - (V_{t+1}(x)
    - V_{t+1}(x - A_j))) over products j that fit in x; V_0 over the whole grid."""
    A = _incidence(instance)
    cap = np.floor(instance.capacity + 1e-9).astype(np.int64)
    T, P = prob.shape
    V = np.zeros(tuple(cap + 1))
    states = list(itertools.product(*[range(c + 1) for c in cap]))
    for t in range(T - 1, -1, -1):
        new = V.copy()
        for x in states:
            x = np.array(x)
            for j in range(P):
                y = x - A[:, j]
                if np.all(y >= 0):
                    new[tuple(x)] += prob[t, j] * take(t, x, j, instance.fare[j] - (V[tuple(x)] - V[tuple(y)]))
        V = new
    return V


def check_monotone(tables) -> None:
    """Bid-price tables fall as seats remaining grow and as the horizon runs out, and stay >= 0
    (monotonicity of the single-leg program; Talluri and van Ryzin 2004, 2.5.2, from memory)."""
    for i in range(tables.n_legs):
        b = tables.leg(i)[:, 1:]
        assert np.all(np.diff(b, axis=1) <= 1e-9 * (1 + np.abs(b[:, 1:])))    # falls as seats grow
        assert np.all(np.diff(b, axis=0) <= 1e-9 * (1 + np.abs(b[1:])))      # falls as the horizon runs out
        assert np.all(b >= -1e-12)
