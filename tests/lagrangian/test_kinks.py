"""The piecewise-linear parts of the subproblems, the kinks (decomp.distributions.kinks, the dual of
decomp.lagrangian.network): exact terms, their smoothing in log(a), and the kinks of discrete
demand. References named beside each check (scipy.stats, scipy.integrate, facts of linear
programs and Jensen's inequality).
"""

from __future__ import annotations

import numpy as np
import pytest

from decomp import lagrangian as m_lagr
from decomp.generator import generate


def _one_kink(fare, mean, upper):
    """The kink table of one product of known demand (std = 0): one kink of slope fare."""
    from decomp.distributions import Products

    return Products(np.array([fare]), np.array([mean]), np.array([0.0]), upper=np.array([upper])).kinks


def test_exact_kink_terms_are_the_piecewise_linear_maximum():
    # h(a) = max_{0<=x<=w} (r - a) x over one kink (slope r = fare, width min(mean, u)):
    # the allocation is w where a < r and 0 where a > r, the term (r - a)^+ w (a fact of
    # this linear program).
    k = _one_kink(fare=10.0, mean=4.0, upper=9.0)
    for a in (3.0, 9.999, 10.5, 25.0):
        r = k.exact(np.array([a]))
        assert r.x[0] == (4.0 if a < 10.0 else 0.0)
        assert r.value[0] == pytest.approx(max(10.0 - a, 0.0) * 4.0, rel=1e-15)
    assert _one_kink(fare=10.0, mean=40.0, upper=9.0).width[0] == 9.0     # the bound u caps the mean


def test_smoothed_kink_is_the_lognormal_partial_expectation():
    # The smoothed term of a kink is E[(R - a)^+] with R = r exp(theta Z - theta^2/2), i.e.
    # scipy.stats.lognorm(s=theta, scale=r exp(-theta^2/2)); reference: the integral of its
    # sf() from a on (E[(R - a)^+] = int_a^inf P(R > t) dt for R >= 0, a mathematical fact),
    # by adaptive quadrature (scipy.integrate.quad). Its derivative in a is -P(R > a) (the
    # allocation, per unit of width), and Jensen's inequality puts it above (r - a)^+.
    from scipy import integrate
    from scipy import stats

    k = _one_kink(fare=10.0, mean=4.0, upper=9.0)
    for theta in (0.3, 0.03, 0.003):
        R = stats.lognorm(s=theta, scale=10.0 * np.exp(-0.5 * theta * theta))
        for a in (8.0, 9.9, 10.0, 10.2, 12.0):
            got = k.smoothed(np.array([a]), theta)
            ref = integrate.quad(R.sf, a, R.isf(1e-17), epsabs=1e-15, epsrel=1e-12, limit=400)[0]
            assert got.value[0] == pytest.approx(4.0 * ref, rel=1e-7, abs=1e-11)
            assert got.x[0] == pytest.approx(4.0 * R.sf(a), rel=1e-9, abs=1e-14)
            assert got.value[0] >= 4.0 * max(10.0 - a, 0.0) - 1e-12


def test_smoothed_dual_brackets_the_exact_dual():
    # q <= q_theta (Jensen, kink by kink), and the excess q_theta - q reported by the
    # evaluation is exactly their difference, on a Poisson network at random bid prices.
    inst = generate(400, seed=9)
    inst = inst.with_forecast(meta={**inst.meta, "distribution": "poisson"})
    net = m_lagr.Network(inst)
    rng = np.random.default_rng(3)
    base = m_lagr.fare_start(net)
    for theta in (3e-1, 3e-2, 3e-3):
        pi = base * rng.uniform(0.3, 2.0, net.n)
        pt = net.evaluate(pi, theta)
        exact = net.evaluate(pi)
        assert pt.exact == pytest.approx(exact.exact, rel=1e-13)
        assert pt.value >= pt.exact - 1e-12 * abs(pt.exact)
        assert pt.value - pt.exact <= 0.4 * theta * float(inst.fare.max()) * len(net.products.kinks)


def test_poisson_kinks_are_every_seat_above_the_tail():
    # Whole-seat kinks of Poisson demand: one per seat k below the product's bound u with
    # P(D > k) > 1e-12 (and the first seat beyond, which the table's recurrence records
    # before it stops), at slope f P(D > k). Reference: scipy.stats.poisson.sf. The table's
    # slopes come from 1 - (the probabilities summed): accurate to about 1e-14 of the fare,
    # absolute, which is what a slope times a seat needs. Large capacities make u about
    # twice them, far beyond the demand's tail, where the table stops early.
    from scipy import stats

    inst = generate(300, seed=4)
    inst = inst.with_forecast(capacity=inst.capacity * 50.0,
                              meta={**inst.meta, "distribution": "poisson"})
    net = m_lagr.Network(inst)
    k = net.products.kinks
    row = {int(o): i for i, o in enumerate(k.owner)}
    for j in range(0, net.n_products, 37):
        seats = np.arange(int(net.upper[j]))
        sf = stats.poisson.sf(seats, net.products.mean[j])
        i = row[j]
        mine = k.slope[k.ptr[i]:k.ptr[i + 1]]
        assert len(mine) == int(np.sum(sf > 1e-12)) + 1 or len(mine) == int(np.sum(sf > 1e-12))
        want = net.products.fare[j] * sf[sf > 1e-12]
        assert np.all(np.abs(mine[:len(want)] - want) <= 1e-13 * net.products.fare[j] + 1e-9 * want)


def test_counts_from_the_last_answer_equal_a_direct_count():
    # KinkTable.above counts, per owner, the slopes > a level within a window; with a
    # purpose it starts from its last answer for that purpose and searches only the owners
    # whose count moved. Reference: the count by plain comparison over each owner's slopes
    # (sorted nonincreasing, a fact of expected sales: P(D > k) falls with k).
    from decomp.distributions import Products
    from decomp.distributions.products import NEGBIN, POISSON

    rng = np.random.default_rng(8)
    n = 400
    codes = np.where(rng.random(n) < 0.5, POISSON, NEGBIN).astype(np.int8)
    mean = rng.lognormal(-0.5, 1.2, n)
    std = np.where(codes == NEGBIN, 1.6 * np.sqrt(mean), 0.0)
    k = Products(rng.uniform(50, 400, n), mean, std, codes, upper=np.full(n, 60.0)).kinks
    owner_of = np.repeat(np.arange(k.n_owners), k.count)

    def direct(level, lo):
        above = np.bincount(owner_of, weights=k.slope > level[owner_of], minlength=k.n_owners).astype(np.int64)
        return np.maximum(above, lo)

    base = k.slope[k.ptr[:-1]] * rng.uniform(0.01, 1.2, k.n_owners)
    for step in range(6):                   # levels moving by up to 50%, some owners not at all
        level = base * np.where(rng.random(k.n_owners) < 0.5, 1.0, rng.uniform(0.5, 1.5, k.n_owners))
        lo = np.where(rng.random(k.n_owners) < 0.3, rng.integers(0, 3, k.n_owners), 0)
        lo = np.minimum(lo, direct(level, np.zeros(k.n_owners, np.int64)))
        assert np.array_equal(k.above(level, purpose="all"), direct(level, 0)), step
        assert np.array_equal(k.above(level, lo=lo, purpose="from"), direct(level, lo)), step


def test_widths_per_owner_answer_as_widths_per_kink():
    # A table whose owners each have one width (whole seats, single kinks) keeps it per
    # owner, not per kink. Reference: the same kinks with their widths given one by one
    # (a plain repetition of each owner's width), through every query of the table, and
    # joined with a table of unequal widths.
    from decomp.distributions.kinks import KinkTable

    rng = np.random.default_rng(11)
    n = 300
    count = rng.integers(0, 9, n)
    slope = np.concatenate([np.sort(rng.uniform(1, 100, c))[::-1] for c in count])
    unit = rng.choice([1.0, 0.37, 2.5], n)
    per_owner = KinkTable(np.arange(n), count, slope, unit=unit)
    per_kink = KinkTable(np.arange(n), count, slope, width=np.repeat(unit, count))
    a = rng.uniform(1, 100, n)
    x = rng.uniform(0, 12, n)
    assert per_owner.uniform and per_kink.uniform
    assert np.array_equal(per_owner.width, per_kink.width)
    kinks = rng.integers(0, len(slope), 50)
    assert np.array_equal(per_owner.widths(kinks), per_kink.width[kinks])
    p, q = per_owner.exact(a), per_kink.exact(a)
    np.testing.assert_allclose(p.x, q.x, rtol=1e-15)
    np.testing.assert_allclose(p.value, q.value, rtol=1e-12, atol=1e-12)
    p, q = per_owner.smoothed(a, 0.05), per_kink.smoothed(a, 0.05)
    for u, v in ((p.x, q.x), (p.w, q.w), (p.value, q.value)):
        np.testing.assert_allclose(u, v, rtol=1e-12, atol=1e-12)
    np.testing.assert_allclose(per_owner.revenue(x), per_kink.revenue(x), rtol=1e-12, atol=1e-12)
    for u, v in zip(per_owner.slopes_at(x), per_kink.slopes_at(x)):
        assert np.array_equal(u, v)
    # joined with a table of unequal widths: the widths are kept per kink again
    odd = KinkTable(np.array([n]), np.array([2]), np.array([9.0, 3.0]), width=np.array([0.5, 1.5]))
    joined = KinkTable.concatenate([per_owner, odd])
    assert not joined.uniform
    assert np.array_equal(joined.width, np.concatenate([per_kink.width, [0.5, 1.5]]))
    assert joined.filled(np.append(count, 2))[-1] == 2.0


def test_kink_terms_split_over_threads_are_the_single_threads(monkeypatch):
    # Each owner's terms are its own (a fact of the separable dual), so the evaluation split
    # over threads in slices of owners gives every owner the same allocation, curvature and
    # term bit for bit, and the excess as the same sum in another order. The threshold is
    # lowered so that this network (Poisson, negative binomial and known demand) splits; the
    # guesses of the last counts (per purpose) are kept apart per table by evaluating two alike.
    from decomp import threads
    from decomp.distributions import Products, kinks
    from decomp.distributions.products import FAMILIES

    monkeypatch.setattr(kinks, "THREADS_FROM", 500)
    inst = generate(3000, seed=4)
    rng = np.random.default_rng(4)
    fare, mean = np.asarray(inst.fare), np.asarray(inst.mean) * 3.0
    names = rng.choice(["poisson", "negbin", "normal"], size=len(fare))
    codes = np.array([FAMILIES.index(n) for n in names], dtype=np.int8)
    # negative binomial: std 1.5 sqrt(mean); normal with std 0: known demand (one kink each)
    std = np.where(names == "negbin", 1.5 * np.sqrt(mean), np.where(names == "normal", 0.0, np.sqrt(mean)))

    def table():
        return Products(fare, mean, std, codes=codes, upper=np.full(len(fare), 50.0)).kinks

    one, two = table(), table()
    assert len(one) > 1000 and threads.slices(one.n_owners, 2, kinks.THREADS_FROM) != [(0, one.n_owners)]
    for step in range(4):                       # later evaluations start from the last counts
        a = fare[one.owner] * rng.uniform(0.2, 1.2, one.n_owners)
        for theta in (0.3, 0.01):
            r1, r2 = one.smoothed(a, theta, threads=1), two.smoothed(a, theta, threads=2)
            for f in ("x", "w", "value"):
                assert np.array_equal(getattr(r1, f), getattr(r2, f)), (step, theta, f)
            assert r2.excess == pytest.approx(r1.excess, rel=1e-12)
        e1, e2 = one.exact(a, threads=1), two.exact(a, threads=2)
        assert np.array_equal(e1.x, e2.x) and np.array_equal(e1.value, e2.value)
