"""Demand distributions of the subproblems: expected sales and fractiles against
scipy.stats, the subproblem optimality conditions, the smoothing used by Newton, and
the Lagrangian method on gamma / Poisson / negative-binomial instances against LPs
solved by HiGHS (scipy.optimize.linprog)."""

import numpy as np
import pytest
from scipy import integrate, optimize, stats

from decomp import Instance, SolverOptions, solve
from decomp import distributions as D
from decomp import normal
from decomp.errors import InstanceError


# -- gamma -------------------------------------------------------------------------

@pytest.mark.parametrize("mean,std", [(10.0, 3.0), (0.05, 0.02), (4.0, 10.0), (2.0, 5.0)])
def test_gamma_expected_sales_and_fractile_match_scipy(mean, std):
    # Reference: scipy.stats.gamma with shape (mean/std)^2 and scale std^2/mean, its
    # isf() for the fractile and quadrature of its sf() for E[min(D, x)].
    # (4, 10) and (2, 5) have coefficients of variation 2.5 > 2.
    k, theta = (mean / std) ** 2, std * std / mean
    ref = stats.gamma(k, scale=theta)
    assert ref.mean() == pytest.approx(mean) and ref.std() == pytest.approx(std)
    for q in (0.9, 0.5, 0.1, 1e-3):
        x = ref.isf(q)
        got_x, _ = D.gamma_fractile(np.array([q]), mean, std)
        assert got_x[0] == pytest.approx(x, rel=1e-9)
        # E[min(D, x)] = int_0^x P(D > t) dt (identity for D >= 0), by adaptive quadrature
        # of scipy's sf (its expect() is inaccurate here: the density is singular at 0
        # for shape < 1)
        es, err = integrate.quad(ref.sf, 0.0, x, epsabs=0.0, epsrel=1e-12, limit=200)
        assert D.gamma_expected_sales(x, mean, std) == pytest.approx(es, rel=1e-9)


def test_gamma_fractile_derivative_is_minus_one_over_the_density():
    # dx/dr for P(D > x) = r: -1 / pdf(x) (inverse function rule), pdf from scipy.stats.
    mean, std = 3.0, 7.0
    ref = stats.gamma((mean / std) ** 2, scale=std * std / mean)
    r = np.array([0.7, 0.2, 0.01])
    x, dxdr = D.gamma_fractile(r, mean, std)
    assert np.allclose(dxdr, -1.0 / ref.pdf(x), rtol=1e-9)


# -- discrete ---------------------------------------------------------------------------

def _poisson_nb(mean, std):
    r, p = D.negbin_params(mean, std)
    return stats.nbinom(r, p)


@pytest.mark.parametrize("family,mean,std", [(D.POISSON, 2.5, 0.0), (D.POISSON, 0.08, 0.0),
                                             (D.NEGBIN, 4.0, 3.0), (D.NEGBIN, 0.3, 0.8)])
def test_discrete_expected_sales_and_fractile_match_scipy(family, mean, std):
    # Reference: scipy.stats.poisson / nbinom (nbinom(r, p) with r = mean^2/(var - mean),
    # p = mean/var has this mean and variance); E[min(D, n)] = sum_{k<n} P(D > k).
    ref = stats.poisson(mean) if family == D.POISSON else _poisson_nb(mean, std)
    assert ref.mean() == pytest.approx(mean)
    for n in range(0, 12):
        es = float(np.sum(ref.sf(np.arange(n))))
        got = D.discrete_expected_sales(np.array([float(n)]), np.array([family]), mean, std)[0]
        assert got == pytest.approx(es, rel=1e-12, abs=1e-15)
        assert D.discrete_sf(n, family, mean, std) == pytest.approx(ref.sf(n), rel=1e-12, abs=1e-300)
    # piecewise linear between integers
    s3, s4 = (D.discrete_expected_sales(np.array([v]), np.array([family]), mean, std)[0] for v in (3.0, 4.0))
    s35 = D.discrete_expected_sales(np.array([3.25]), np.array([family]), mean, std)[0]
    assert s35 == pytest.approx(0.75 * s3 + 0.25 * s4, rel=1e-14)
    # fractile: the smallest n with P(D > n) <= r, checked by its definition
    for r in (0.5, 0.1, 1e-4, 1e-12):
        n = D.discrete_fractile(np.array([r]), np.array([family]), mean, std)[0]
        assert ref.sf(n) <= r * (1 + 1e-12)
        assert n == 0 or ref.sf(n - 1) > r


@pytest.mark.parametrize("negbin", [False, True])
def test_kink_slopes_match_scipy_at_small_and_large_means(negbin):
    # Reference: scipy.stats.poisson / nbinom sf. Every seat's slope is f P(D > k) to 5e-14
    # of the fare (scipy's nbinom.sf and betainc themselves differ by 1.1e-14 at mean
    # 12,339, measured), and the table stops at the first seat with P(D > k) <= 1e-12 (TAIL): at
    # large means the recurrences' rounding once kept P(D > k) near 1e-11 and the table ran
    # on to the bound (a product of mean 12,339 had 75,241 seats).
    from decomp.distributions.discrete import TAIL, DiscreteDemand

    mean = np.array([0.1, 5.0, 20.0, 21.0, 300.0, 12339.0])
    std = np.sqrt(mean) * (1.5 if negbin else 1.0)
    fare = np.linspace(50.0, 300.0, len(mean))
    table = DiscreteDemand(fare, mean, std, np.full(len(mean), negbin)).kinks(np.full(len(mean), 1e6),
                                                                             np.arange(len(mean)))
    for j in range(len(mean)):
        ref = _poisson_nb(mean[j], std[j]) if negbin else stats.poisson(mean[j])
        seats = np.arange(table.count[j])
        got = table.slope[table.ptr[j]:table.ptr[j + 1]]
        assert np.max(np.abs(got - fare[j] * ref.sf(seats))) <= 5e-14 * fare[j], mean[j]
        assert ref.sf(seats[-1]) <= TAIL and (len(seats) == 1 or ref.sf(seats[-2]) > TAIL), mean[j]


def test_discrete_subproblem_is_solved_at_that_integer():
    # max_x f S(x) - a x over a fine grid (brute force) is attained at the fractile
    f, mean, std = 100.0, 3.0, 2.5
    fam = np.array([D.NEGBIN])
    grid = np.linspace(0, 20, 20001)
    for a in (5.0, 30.0, 70.0, 99.0):
        sub = D.Subproblems(np.array([f]), np.array([mean]), np.array([std]), fam)
        v = sub.evaluate(np.array([a]))
        vals = f * D.discrete_expected_sales(grid, np.full(grid.shape, D.NEGBIN), mean, std) - a * grid
        assert v.exact_value == pytest.approx(vals.max(), rel=1e-12)
        assert f * D.discrete_expected_sales(v.x, fam, mean, std)[0] - a * v.x[0] == pytest.approx(vals.max())


def test_negbin_needs_overdispersion():
    with pytest.raises(InstanceError, match="std"):
        D.Subproblems(np.array([10.0]), np.array([4.0]), np.array([1.0]), np.array([D.NEGBIN]))


# -- normal fast path and smoothing ------------------------------------------------------

def test_normal_dual_terms_match_the_direct_formula():
    # f S(x) - a x from the fast path (no loss function per iteration) equals the
    # direct evaluation with decomp.normal.expected_sales (checked there against scipy).
    rng = np.random.default_rng(0)
    n = 2000
    f = rng.uniform(10, 500, n)
    m = rng.uniform(0.05, 50, n)
    s = m * rng.uniform(0.1, 3.0, n)
    a = f * rng.uniform(0, 1.2, n)
    sub = D.Subproblems(f, m, s)
    v = sub.evaluate(a)
    direct = f * normal.expected_sales(v.x, m, s) - a * v.x
    assert v.value == pytest.approx(direct.sum(), rel=1e-12)
    assert v.revenue == pytest.approx(float(f @ normal.expected_sales(v.x, m, s)), rel=1e-12)
    # x is the fractile: P(D > x) = a / f where x > 0 (scipy.stats.norm.sf)
    inside = v.x > 0
    assert np.allclose(stats.norm.sf(v.x[inside], m[inside], s[inside]), (a / f)[inside], rtol=1e-8, atol=1e-14)
    # w = -dx/da by central differences
    h = 1e-6 * f
    vp, vm = sub.evaluate(a + h), sub.evaluate(a - h)
    fd = -(vp.x - vm.x) / (2 * h)
    ok = inside & (vm.x > 0) & (vp.x > 0)
    assert np.allclose(v.w[ok], fd[ok], rtol=1e-4)


@pytest.mark.parametrize("family", ["normal", "gamma"])
def test_smooth_terms_match_scipy_stats(family):
    # (S(x), S'(x), -S''(x)) as the interior-point method asks for them (one pass per
    # family), against scipy.stats: S'(x) = P(D > x) (sf), -S''(x) = pdf(x), and
    # S(x) = int_0^x P(D > t) dt (the identity E[min(max(D, 0), x)] = int_0^x P(D > t) dt
    # for x >= 0) by adaptive quadrature of sf. Means, CVs (0.01 to 1.5) and allocations
    # (0, inside the body, far in both tails) drawn at random.
    from decomp.distributions.gamma import GammaDemand
    from decomp.distributions.normal import NormalDemand
    rng = np.random.default_rng(4)
    n = 40
    m = rng.lognormal(-1.0, 1.5, n)
    s = m * rng.uniform(0.01, 1.5, n)
    f = rng.uniform(50, 500, n)
    z = np.concatenate([[-60.0, -3.0, 0.0, 0.5, 2.0, 8.0, 40.0], rng.uniform(-6, 6, n - 7)])
    x = np.maximum(m + s * z, 0.0)
    x[:3] = [0.0, 1e-9 * m[1], 1e-3 * m[2]]
    if family == "normal":
        fam, refs = NormalDemand(f, m, s), [stats.norm(mj, sj) for mj, sj in zip(m, s)]
    else:
        fam, refs = GammaDemand(f, m, s), [stats.gamma((mj / sj) ** 2, scale=sj * sj / mj) for mj, sj in zip(m, s)]
    sales, slope, dens = fam.terms(x)
    for j, ref in enumerate(refs):
        assert slope[j] == pytest.approx(ref.sf(x[j]), rel=1e-10, abs=1e-300), (family, j)
        if x[j] > 0:
            assert dens[j] == pytest.approx(ref.pdf(x[j]), rel=1e-9, abs=1e-300), (family, j)
        want = integrate.quad(ref.sf, 0.0, x[j], epsabs=0.0, epsrel=1e-12, limit=200)[0] if x[j] > 0 else 0.0
        assert sales[j] == pytest.approx(want, rel=1e-9, abs=1e-14 * m[j]), (family, j, m[j], s[j], x[j])


def test_family_names_are_validated():
    # built with the constructor: from_lists itself refuses an unknown distribution, as files do
    def one(distribution):
        return Instance(leg_ids=["L1"], leg_origin=["AA"], leg_destination=["BB"], capacity=[10.0],
                        product_ids=["P1"], leg_ptr=[0, 1], leg_index=[0], fare=[10.0], mean=[3.0], std=[1.0],
                        distribution=[distribution])
    with pytest.raises(InstanceError, match="row 1"):
        D.family_codes(one("weibull"))
    assert D.family_codes(one(" Gamma")).tolist() == [D.GAMMA]


# -- the Lagrangian method on non-normal instances ------------------------------------------

LEGS = [("L1", "S1", "HB", 30.0), ("L2", "S2", "HB", 20.0), ("L3", "HB", "S3", 25.0)]
ITS = [["L1"], ["L2"], ["L3"], ["L1", "L3"], ["L2", "L3"]]


def _instance(family, n=25, seed=0):
    rng = np.random.default_rng(seed)
    prods, dist = [], []
    for j in range(n):
        legs = ITS[j % len(ITS)]
        m = rng.uniform(0.5, 8.0)
        std = m * rng.uniform(0.6, 2.5) if family == "gamma" else (np.sqrt(m) * rng.uniform(1.2, 2.0)
                                                                    if family == "negbin" else 0.0)
        prods.append((f"P{j}", legs, rng.uniform(50, 300) * len(legs), m, std))
        dist.append(family)
    return Instance.from_lists(LEGS, prods, distribution=dist)


def _pwl_lp(inst, breakpoints):
    """max sum_j f_j S_j(x_j) with S_j interpolated at ``breakpoints`` (P x (K+1)), by HiGHS."""
    S = np.stack([D.expected_sales(inst, breakpoints[:, k]) for k in range(breakpoints.shape[1])], axis=1)
    width = np.diff(breakpoints, axis=1)
    slope = np.diff(S, axis=1) / np.where(width > 0, width, 1.0)
    P, K = width.shape
    c = -(inst.fare[:, None] * slope).ravel()
    A = (inst.A.toarray()[:, :, None] * np.ones((1, 1, K))).reshape(inst.n_legs, P * K)
    res = optimize.linprog(c, A_ub=A, b_ub=inst.capacity, bounds=list(zip(np.zeros(P * K), width.ravel())),
                           method="highs")
    assert res.status == 0
    return -res.fun


@pytest.mark.solver
@pytest.mark.parametrize("family", ["poisson", "negbin"])
def test_discrete_instance_equals_the_exact_integer_breakpoint_lp(family):
    # With S piecewise linear between integers the PNLP *is* an LP with one segment per
    # integer (slope P(D > n)); HiGHS solves it exactly, so the Lagrangian optimum must
    # match it to the tolerance (strong duality for the LP).
    inst = _instance(family)
    r = solve(inst, "pnlp", "lagrangian", SolverOptions(iteration_limit=1000))
    assert r.ok, r.message
    nmax = 60                                    # P(D > 60) < 1e-16 for these means
    bps = np.tile(np.arange(nmax + 1, dtype=float), (inst.n_products, 1))
    lp = _pwl_lp(inst, bps)
    assert r.objective == pytest.approx(lp, rel=1e-8)


@pytest.mark.solver
def test_gamma_instance_agrees_with_pwl_lps_as_segments_grow():
    # The PWL model interpolates the concave S at breakpoints, so its optimum is below the
    # PNLP's and converges to it as K grows (error O(K^-2) for equal-probability
    # breakpoints, a known property of PWL interpolation). The breakpoints here are gamma
    # quantiles (decomp's own PWL model uses normal quantiles, so this test builds its LP
    # with scipy.optimize.linprog(method="highs")).
    inst = _instance("gamma")
    r = solve(inst, "pnlp", "lagrangian")
    assert r.ok
    k_shape, theta = D.gamma_params(inst.mean, inst.std)
    errs = []
    for K in (8, 32, 128):
        levels = np.arange(1, K + 1) / (K + 1)
        q = stats.gamma.ppf(levels[None, :], k_shape[:, None], scale=theta[:, None])
        bps = np.concatenate([np.zeros((inst.n_products, 1)), q], axis=1)
        lp = _pwl_lp(inst, bps)
        assert lp <= r.objective * (1 + 1e-9)
        errs.append((r.objective - lp) / r.objective)
    assert errs[0] > errs[1] > errs[2]
    assert errs[2] < 2e-3


def test_kink_prefix_sums_keep_their_digits_in_a_large_table():
    # A p1m table of discrete demand holds tens of millions of kinks. Each owner's prefix
    # sums of r w must be as exact as summing that owner's kinks alone: the reference is
    # math.fsum (exactly rounded summation, Python's standard library).
    import math
    from decomp.distributions.kinks import KinkTable
    rng = np.random.default_rng(0)
    count = rng.integers(0, 50, 200_000)
    slope = rng.uniform(1.0, 1000.0, int(count.sum()))
    table = KinkTable(np.arange(len(count)), count, slope, np.ones(len(slope)))
    worst = 0.0
    for o in rng.choice(len(count), 500, replace=False):
        vals = slope[table.ptr[o]:table.ptr[o + 1]]
        got = table.cum_rw[table.pp[o]:table.pp[o] + count[o] + 1]
        ref = [math.fsum(vals[:n]) for n in range(count[o] + 1)]
        worst = max(worst, max(abs(g - r) for g, r in zip(got, ref)))
    assert worst <= 1e-7          # a fare of up to 1000 per seat: 1e-10 of it
    assert np.array_equal(table.cum_w[table.pp + table.count], table.count.astype(float))


@pytest.mark.parametrize("family", ["normal", "gamma"])
def test_flat_tail_leaves_the_asked_share_of_the_mean(family):
    # The restricted problem bounds a smooth part where its expected spill E[(D - x)^+] is a
    # given share of its most sales E[max(D, 0)] (decomp.lagrangian.master.FLAT_SHARE).
    # Checked against scipy.stats: E[(D - x)^+] = int_x^inf P(D > t) dt and
    # E[max(D, 0)] = int_0^inf P(D > t) dt (the tail identity), by adaptive quadrature of sf.
    # Means 0.02 to 200 (and 0 for normal demand), CVs 0.01 to 3, shares 1e-6 to 1e-15.
    from decomp.distributions.gamma import GammaDemand
    from decomp.distributions.normal import NormalDemand
    rng = np.random.default_rng(11)
    n = 24
    m = np.exp(rng.uniform(np.log(0.02), np.log(200.0), n))
    s = m * np.exp(rng.uniform(np.log(0.01), np.log(3.0), n))
    f = rng.uniform(50, 500, n)
    if family == "normal":
        m[0] = 0.0
        fam, refs = NormalDemand(f, m, s), [stats.norm(mj, sj) for mj, sj in zip(m, s)]
    else:
        fam, refs = GammaDemand(f, m, s), [stats.gamma((mj / sj) ** 2, scale=sj * sj / mj) for mj, sj in zip(m, s)]
    for share in (1e-6, 1e-12, 1e-15):
        x = fam.flat_from(share)
        assert np.all(x > m)
        for j, ref in enumerate(refs):
            most = integrate.quad(ref.sf, 0.0, np.inf, epsabs=0.0, epsrel=1e-10, limit=400)[0]
            spill = integrate.quad(ref.sf, x[j], np.inf, epsabs=0.0, epsrel=1e-10, limit=400)[0]
            assert spill == pytest.approx(share * most, rel=1e-2), (family, share, m[j], s[j])


def test_gamma_flat_point_on_threads_matches_quadrature():
    # GammaDemand.flat_from over many products runs its incomplete gamma functions in slices
    # on threads and iterates only on the products not yet converged. Reference: the same
    # products one thread at a time (the answer may not depend on the split), and
    # scipy.stats.gamma's sf integrated by adaptive quadrature (the tail identity, as above)
    # for a sample of them.
    from decomp.distributions.gamma import THREADS_FROM, GammaDemand
    rng = np.random.default_rng(12)
    n = 2 * THREADS_FROM + 7
    m = np.exp(rng.uniform(np.log(0.02), np.log(200.0), n))
    s = m * np.exp(rng.uniform(np.log(0.01), np.log(3.0), n))
    f = rng.uniform(50, 500, n)
    x2 = GammaDemand(f, m, s, threads=2).flat_from(1e-12)
    x1 = GammaDemand(f, m, s, threads=1).flat_from(1e-12)
    assert np.array_equal(x1, x2)
    for j in rng.choice(n, 12, replace=False):
        ref = stats.gamma((m[j] / s[j]) ** 2, scale=s[j] ** 2 / m[j])
        most = integrate.quad(ref.sf, 0.0, np.inf, epsabs=0.0, epsrel=1e-10, limit=400)[0]
        spill = integrate.quad(ref.sf, x2[j], np.inf, epsabs=0.0, epsrel=1e-10, limit=400)[0]
        assert spill == pytest.approx(1e-12 * most, rel=1e-2), (m[j], s[j])


def test_gamma_fractile_from_the_last_one_matches_scipy():
    # GammaDemand.respond starts each fractile from the last call's (to first order) where
    # a/f moved little. The answer must not depend on the start: checked against
    # scipy.stats.gamma.isf (the inverse of the upper tail) after a sequence of nearby and
    # far moves, and against a fresh object.
    from decomp.distributions.gamma import GammaDemand
    rng = np.random.default_rng(8)
    n = 400
    m = np.exp(rng.uniform(np.log(0.05), np.log(100.0), n))
    s = m * rng.uniform(0.05, 2.0, n)
    f = rng.uniform(50, 500, n)
    fam = GammaDemand(f, m, s)
    a = f * rng.uniform(1e-6, 0.999, n)
    for move in (0.0, 1e-9, 1e-6, 1e-3, 3e-2, 0.5):
        a = np.minimum(a * (1.0 + move * rng.uniform(-1, 1, n)), 0.9999 * f)
        x = fam.respond(a)[0]
        fresh = GammaDemand(f, m, s).respond(a)[0]
        assert np.allclose(x, fresh, rtol=1e-13, atol=0.0), move
        want = stats.gamma.isf(a / f, (m / s) ** 2, scale=s * s / m)
        assert np.allclose(x, want, rtol=1e-9, atol=0.0), move


def test_gamma_and_normal_in_slices_on_threads_match_one_thread_and_scipy():
    # From THREADS_FROM gamma products (decomp.threads.FROM_PRODUCTS normal ones) on, the
    # fractiles (warm and cold), the terms the interior-point method asks for and the dual
    # terms run in slices of products on threads. Each product's answer is its own, so the
    # split may not change any: the same arrays as on one thread (value sums to rounding),
    # and a sample against scipy.stats (gamma.isf, sf, pdf; norm.isf).
    from decomp import threads
    from decomp.distributions import Products
    from decomp.distributions.gamma import THREADS_FROM, GammaDemand
    rng = np.random.default_rng(21)
    n = 2 * THREADS_FROM + 5
    m = np.exp(rng.uniform(np.log(0.02), np.log(200.0), n))
    s = m * np.exp(rng.uniform(np.log(0.05), np.log(2.0), n))
    f = rng.uniform(50, 500, n)
    one, two = GammaDemand(f, m, s, threads=1), GammaDemand(f, m, s, threads=2)
    a = f * rng.uniform(1e-6, 1.2, n)
    for move in (0.0, 1e-3):                   # the second call starts from the first's fractiles
        a = a * (1.0 + move * rng.uniform(-1, 1, n))
        r1, r2 = one.respond(a), two.respond(a)
        assert np.array_equal(r1[0], r2[0]) and np.array_equal(r1[1], r2[1])
        assert r2[2] == pytest.approx(r1[2], rel=1e-13)
    x = r2[0]
    t1, t2 = one.terms(x), two.terms(x)
    assert all(np.array_equal(u, v) for u, v in zip(t1, t2))
    k, sc = (m / s) ** 2, s * s / m
    pick = rng.choice(np.flatnonzero(a < f), 200, replace=False)
    assert np.allclose(x[pick], stats.gamma.isf(a[pick] / f[pick], k[pick], scale=sc[pick]), rtol=1e-9, atol=0)
    assert np.allclose(t2[1][pick], stats.gamma.sf(x[pick], k[pick], scale=sc[pick]), rtol=1e-10, atol=1e-300)
    assert np.allclose(t2[2][pick], stats.gamma.pdf(x[pick], k[pick], scale=sc[pick]), rtol=1e-9, atol=1e-300)

    # normal products beside a kink table (known demand), as in a mixed network
    nn = threads.FROM_PRODUCTS + 11
    mn = np.exp(rng.uniform(np.log(0.05), np.log(50.0), nn))
    sn = mn * rng.uniform(0.15, 0.6, nn)
    sn[:10] = 0.0                              # known demand: kinks
    fn = rng.uniform(50, 500, nn)
    an = fn * rng.uniform(0.01, 0.99, nn)
    p1, p2 = Products(fn, mn, sn, threads=1), Products(fn, mn, sn, threads=2)
    q1, q2 = p1.respond(an), p2.respond(an)
    assert np.array_equal(q1.x, q2.x) and np.array_equal(q1.w, q2.w)
    assert q2.value == pytest.approx(q1.value, rel=1e-13)
    smooth = np.arange(10, nn)
    u1, u2 = p1.smooth_part(smooth).terms(q1.x[smooth]), p2.smooth_part(smooth).terms(q1.x[smooth])
    assert all(np.array_equal(u, v) for u, v in zip(u1, u2))
    pick = rng.choice(smooth, 200, replace=False)
    assert np.allclose(q2.x[pick], np.maximum(stats.norm.isf(an[pick] / fn[pick], mn[pick], sn[pick]), 0.0),
                       rtol=1e-9, atol=1e-12)
