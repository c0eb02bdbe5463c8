"""Rules in the standardised frame: the 1-D Genz-Keister rules, the Smolyak and
Gauss-Hermite node sets, the explored trapezoid grid, the frame and its
diagnostics, and the reduction of node sets into evidence and moments.

Each check names its source beside it. Normal moments E x^(2k) = (2k - 1)!! and
the Gaussian integrals used as references are facts of the trade (common
practice). The designs and targets below are invented test input.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st
from scipy import integrate

from engine.errors import ComputeError, GridError
from engine.frame import check_frame, make_frame, moment_frame
from engine.nodes import NodeSet, signed_sum
from engine.reduction import marginal_line, reduce_nodes
from engine.rotated import rotated
from engine.rule_cost import rule_cost
from engine.sparse import (GK_DEGREES, GK_SIZES, genz_keister, hermite, hermite_points, sparse,
                           sparse_degree, sparse_points)


def normal_moment(k: int) -> float:
    """E x^k for x ~ N(0, 1): 0 for odd k, (k - 1)!! for even k (common practice)."""
    return 0.0 if k % 2 else float(sc.factorial2(k - 1)) if k else 1.0


def plain_weights(nodes: NodeSet, level: int = 0) -> np.ndarray:
    return nodes.signs[level] * np.exp(nodes.log_weights[level])


def std_normal_logpdf(z: np.ndarray) -> np.ndarray:
    return -0.5 * np.einsum("ij,ij->i", z, z) - 0.5 * z.shape[1] * math.log(2 * math.pi)


# ---------------------------------------------------------------------------
# the 1-D Genz-Keister rules

# The generators of Genz & Keister (1996), for the standard normal weight
# exp(-x^2 / 2) (the 3-point node sqrt(3) fixes the convention; for exp(-x^2) it
# would be sqrt(3/2)), to 10 decimals, grouped by the extension that adds them.
GK_PUBLISHED = (
    (0.0,),
    (1.7320508076,),
    (4.1849560177, 0.7410953500, 2.8612795761),
    (6.3633944943, 1.2304236340, 5.1870160399, 2.5960831150, 3.2053337945),
    (9.0169397899, 0.2489922976, 7.9807717986, 2.2336260617, 7.1221067008, 3.6353185190,
     5.6981777685, 4.7364330860),
)


@pytest.mark.parametrize("index", range(5))
def test_genz_keister_nodes_are_the_published_ones(index):
    # Genz & Keister 1996, their generators (table above), to 1e-9
    rule = genz_keister(index)
    assert rule.nodes.size == GK_SIZES[index]
    published = np.sort(np.concatenate([np.array(g) for g in GK_PUBLISHED[:index + 1]]))
    got = np.sort(np.abs(rule.nodes))[::2]  # each positive node once (0 once)
    assert np.max(np.abs(got - published)) < 1e-9
    # symmetric: every node's negative is a node
    assert np.allclose(np.sort(rule.nodes), np.sort(-rule.nodes), atol=1e-15)


@pytest.mark.parametrize("index", range(5))
def test_genz_keister_weights_sum_to_one_and_reach_their_degree(index):
    rule = genz_keister(index)
    assert abs(rule.weights.sum() - 1) < 1e-14
    deg = GK_DEGREES[index]
    # exact for every power up to the degree (normal moments: common practice) ...
    for k in range(0, deg + 1):
        terms = rule.weights * rule.nodes ** k
        # odd powers cancel between +x and -x: judge rounding by the terms' size
        assert abs(terms.sum() - normal_moment(k)) <= 1e-13 * np.abs(terms).sum() + 1e-15, k
    # ... and not for the next even one: the degree is not understated
    k = deg + 1
    got = float(np.dot(rule.weights, rule.nodes ** k))
    assert abs(got - normal_moment(k)) > 1e-9 * normal_moment(k)   # rounding: ~1e-13


def test_the_nineteen_point_rule_has_a_negative_weight():
    # Genz & Keister 1996: their 19-point rule is not positive
    assert (genz_keister(3).weights < 0).any()
    assert (genz_keister(2).weights > 0).all()


def test_genz_keister_rules_are_nested():
    for r in range(4):
        small, big = genz_keister(r), genz_keister(r + 1)
        assert np.array_equal(big.nodes[:small.nodes.size], small.nodes)


# ---------------------------------------------------------------------------
# the Smolyak rule

# Nested Smolyak point counts on the Genz-Keister rules, levels 0-4 (Gerstner &
# Griebel 1998 counting; the figures as the issue states them)
COUNTS = {2: (1, 5, 21, 65, 173), 4: (1, 9, 57, 273, 1097), 6: (1, 13, 109, 689, 3605),
          8: (1, 17, 177, 1377, 8785)}


@pytest.mark.parametrize("d", sorted(COUNTS))
def test_sparse_point_counts(d):
    # level l of an axis uses Genz-Keister rule l (1, 3, 9, 19, 35 points): that is
    # the level-to-rule map that gives these counts
    assert tuple(sparse_points(d, L) for L in range(5)) == COUNTS[d]
    assert tuple(sparse(d, L).points for L in range(5)) == COUNTS[d]


@pytest.mark.parametrize("d,L", [(2, 4), (4, 3), (8, 4)])
def test_sparse_weights_integrate_the_normal_density_to_one(d, L):
    # the integral of the standard normal density is 1 (common practice), on every level
    ns = sparse(d, L)
    lf = std_normal_logpdf(ns.z)
    for lev in range(ns.levels):
        s = signed_sum(ns.log_weights[lev] + lf, ns.signs[lev])
        assert s.sign == 1 and abs(math.expm1(s.log_abs)) < 1e-13, ns.labels[lev]
    assert (ns.signs[0] < 0).any()  # Smolyak weights are signed


def _monomials(d: int, degree: int):
    """All exponent vectors of total degree `degree` in d variables."""
    if d == 1:
        yield (degree,)
        return
    for first in range(degree + 1):
        for rest in _monomials(d - 1, degree - first):
            yield (first,) + rest


@pytest.mark.parametrize("d,L", [(3, 0), (3, 1), (3, 2), (4, 3), (2, 3)])
def test_sparse_total_degree_of_exactness(d, L):
    # exact for p(z) N(z; 0, I) with p of total degree up to sparse_degree(d, L)
    # (Smolyak's construction, Gerstner & Griebel 1998; 2L + 1 when d > L);
    # the reference is a product of normal moments (common practice)
    ns = sparse(d, L)
    w = plain_weights(ns) * np.exp(std_normal_logpdf(ns.z))
    deg = sparse_degree(d, L)
    if d > L:
        assert deg == 2 * L + 1
    for t in range(deg + 1):
        for a in _monomials(d, t):
            got = float(np.dot(w, np.prod(ns.z ** np.array(a), axis=1)))
            ref = math.prod(normal_moment(k) for k in a)
            assert abs(got - ref) <= 1e-10 * max(1.0, ref), (a, got, ref)
    # not beyond: the stated degree is the true one for some monomial of degree + 1
    worst = max(abs(float(np.dot(w, np.prod(ns.z ** np.array(a), axis=1)))
                    - math.prod(normal_moment(k) for k in a))
                for a in _monomials(d, deg + 1))
    assert worst > 1e-6


def test_sparse_coarse_levels_use_the_same_nodes():
    ns = sparse(5, 4)
    assert ns.labels == ("level 4", "level 3", "level 2")
    assert ns.level_points(1) == sparse_points(5, 3)
    assert ns.level_points(2) == sparse_points(5, 2)


# ---------------------------------------------------------------------------
# the Gauss-Hermite product rule

def test_hermite_points_and_levels():
    ns = hermite(3, 3)
    assert ns.labels == ("K = 5", "K = 3")
    # the two product grids share only the origin
    assert ns.points == 5 ** 3 + 3 ** 3 - 1 == hermite_points(3, 3)
    assert ns.level_points(0) == 125 and ns.level_points(1) == 27
    assert hermite(2, 2).points == 4 + 16   # even K: nothing shared


@pytest.mark.parametrize("K", [1, 2, 3, 5])
def test_hermite_degree_per_axis(K):
    # a K-point Gauss-Hermite rule is exact to degree 2K - 1 (common practice);
    # the product rule to that degree in each axis
    ns = hermite(2, K, compare=0)
    w = plain_weights(ns) * np.exp(std_normal_logpdf(ns.z))
    for a in range(2 * K):
        for b in range(2 * K):
            got = float(np.dot(w, ns.z[:, 0] ** a * ns.z[:, 1] ** b))
            ref = normal_moment(a) * normal_moment(b)
            assert abs(got - ref) <= 1e-10 * max(1, ref), (a, b)


def test_rules_refuse_bad_settings_with_one_line():
    with pytest.raises(GridError, match=r"rule `sparse` needs a level L"):
        sparse(3, -1)
    with pytest.raises(GridError, match=r"rule `hermite` needs a dimension"):
        hermite(0, 3)
    with pytest.raises(GridError, match=r"rule `hermite` needs K"):
        hermite(2, 0)
    with pytest.raises(GridError, match=r"rule `hermite` with K = 9 in 8 dimensions needs "
                                        r"257,405,601 points"):
        hermite(8, 9)
    with pytest.raises(GridError, match=r"rule `rotated` needs a step H"):
        rotated(lambda z: -0.5 * (z * z).sum(1), 2, step=0.0)
    with pytest.raises(GridError, match=r"Genz-Keister rules are numbered 0 to 4"):
        genz_keister(5)


# ---------------------------------------------------------------------------
# an exactly normal posterior: linear regression, known sd, normal priors

def _known_sd_regression():
    # invented design: 40 rows, intercept and two covariates; sd known
    rng = np.random.default_rng(5)
    X = np.column_stack([np.ones(40), rng.normal(size=40), rng.uniform(-1, 2, 40)])
    sigma, tau = 0.7, 3.0
    y = X @ np.array([0.4, -1.1, 0.8]) + rng.normal(0, sigma, 40)

    def log_u(B):
        r = y[None, :] - B @ X.T
        return (st.norm.logpdf(r, 0, sigma).sum(axis=1)
                + st.norm.logpdf(B, 0, tau).sum(axis=1))

    # closed form (the conjugate normal linear model; standard result, from memory):
    # posterior N(m, V), V = (X'X / sigma^2 + I / tau^2)^-1, m = V X'y / sigma^2;
    # evidence y ~ N(0, sigma^2 I + tau^2 X X') by scipy.stats
    V = np.linalg.inv(X.T @ X / sigma ** 2 + np.eye(3) / tau ** 2)
    m = V @ X.T @ y / sigma ** 2
    log_ev = st.multivariate_normal(np.zeros(40), sigma ** 2 * np.eye(40)
                                    + tau ** 2 * X @ X.T).logpdf(y)
    return log_u, m, V, float(log_ev)


@pytest.mark.parametrize("rule", ["laplace", "hermite 1", "sparse 2", "sparse 4"])
def test_an_exactly_normal_posterior_is_integrated_exactly(rule):
    log_u, m, V, log_ev = _known_sd_regression()
    frame = make_frame(m, np.linalg.inv(V), names=("b0", "b1", "b2"))
    ns = {"laplace": lambda: hermite(3, 1, compare=0), "hermite 1": lambda: hermite(3, 1),
          "sparse 2": lambda: sparse(3, 2), "sparse 4": lambda: sparse(3, 4)}[rule]()
    r = reduce_nodes(ns, frame.log_density(log_u)(ns.z), frame=frame)
    assert abs(r.log_integral.value - log_ev) < 1e-10
    if rule == "laplace":
        assert r.log_integral.error is None   # one level: no estimate claimed
        return
    assert r.log_integral.error < 1e-10
    sd = np.sqrt(np.diag(V))
    for i in range(3):
        assert abs(r.u.mean[i].value - m[i]) < 1e-10 * sd[i]
        assert abs(r.u.sd[i].value - sd[i]) < 1e-10 * sd[i]
    assert np.allclose(r.u.cov, V, rtol=1e-9, atol=0)
    assert not r.problems


# ---------------------------------------------------------------------------
# the rate of the product rule on the log-scale Poisson posterior

def _log_gamma_relative_error(a: float, K: int) -> float:
    # exp(a eta - e^eta) integrates to Gamma(a) over the real line (substitute
    # x = e^eta in Euler's integral); scipy.special.gammaln gives the exact value
    frame = make_frame([math.log(a)], [[a]])
    ns = hermite(1, K, compare=0)
    lf = frame.log_density(lambda u: a * u[:, 0] - np.exp(u[:, 0]))(ns.z)
    r = reduce_nodes(ns, lf, frame=frame)
    return math.expm1(r.log_integral.value - sc.gammaln(a))


def test_laplace_error_at_a_10_is_stirlings():
    # K = 1 is Laplace's approximation, i.e. Stirling's first term:
    # Gamma(a) ~ sqrt(2 pi) a^(a - 1/2) e^-a (1 + 1/(12 a) + 1/(288 a^2) ...)
    assert abs(_log_gamma_relative_error(10.0, 1) - (-8.296e-3)) < 5e-7


def test_the_product_rule_error_falls_as_a_to_minus_ceil_k_over_3():
    # Jin & Andersson 2020; Bilodeau, Stringer & Tang 2024: relative error
    # O(a^-ceil(K/3)). a from 20 to 400 is in the asymptotic regime and the
    # errors (>= 1e-10 at K = 9) stay far above rounding (~1e-13 here).
    a = np.geomspace(20, 400, 8)
    for K in range(1, 10):
        err = np.array([_log_gamma_relative_error(float(x), K) for x in a])
        slope = np.polyfit(np.log(a), np.log(np.abs(err)), 1)[0]
        assert abs(slope - (-math.ceil(K / 3))) < 0.15, (K, slope)


# ---------------------------------------------------------------------------
# the explored trapezoid grid

def _lattice_tail(d: int, H: float, explored: float) -> float:
    # the lattice sum of a standard normal density factorises over axes: its
    # infinite sum is the d-th power of the 1-D sum (a fact of the trade)
    k = np.arange(-400, 401)
    one = float((H * np.exp(-0.5 * (k * H) ** 2) / math.sqrt(2 * math.pi)).sum())
    return (one ** d - explored) / one ** d


@pytest.mark.parametrize("d,H", [(1, 0.5), (2, 0.5), (3, 0.5), (3, 1.0), (4, 1.0)])
def test_rotated_on_a_normal_bounds_its_own_truncation(d, H):
    ex = rotated(std_normal_logpdf, d, step=H, mass=1e-8)
    assert ex.complete
    r = reduce_nodes(ex.nodes, ex.logf)
    true_tail = _lattice_tail(d, H, math.exp(r.levels[0].log_integral))
    assert 0 < true_tail <= ex.outside <= 1e-8
    # the estimated error covers the true error of the evidence (exactly 1)
    assert abs(r.log_integral.value) <= r.log_integral.error
    assert ex.nodes.points == ex.logf.size == np.unique(ex.nodes.z, axis=0).shape[0]


def _skewed_target(a, M):
    """A posterior of gamma shape on the log scale, rotated: eta = M xi with
    independent densities exp(a_i eta_i - e^eta_i) of eta. Its normaliser is
    prod Gamma(a_i) / |det M|; E eta_i = digamma(a_i), var eta_i = trigamma(a_i)
    (the log of a gamma variable; standard results, from memory)."""
    a = np.asarray(a, float)
    M = np.asarray(M, float)

    def log_u(xi):
        eta = xi @ M.T
        return (a[None, :] * eta - np.exp(eta)).sum(axis=1)

    mode = np.linalg.solve(M, np.log(a))
    neg_h = M.T @ np.diag(a) @ M
    Minv = np.linalg.inv(M)
    log_z = float(sc.gammaln(a).sum() - math.log(abs(np.linalg.det(M))))
    mean = Minv @ sc.digamma(a)
    cov = Minv @ np.diag(sc.polygamma(1, a)) @ Minv.T
    return log_u, mode, neg_h, log_z, mean, cov


def test_rotated_on_a_skewed_2d_posterior_against_nquad():
    log_u, mode, neg_h, log_z, mean, cov = _skewed_target([3.0, 2.0], [[1.0, 0.6], [0.0, 1.0]])
    frame = make_frame(mode, neg_h, names=("p", "q"))
    ex = rotated(frame.log_density(log_u), 2, step=0.5, mass=1e-10)
    r = reduce_nodes(ex.nodes, ex.logf, frame=frame, values=lambda u: np.exp(u),
                     value_names=("exp p", "exp q"))
    # scipy.integrate.nquad of the same density in its own coordinates, over a box
    # holding all but ~exp(-40) of it
    f = lambda p, q: math.exp(float(log_u(np.array([[p, q]]))[0]) - 2.0)
    ref, ref_err = integrate.nquad(f, [[-25, 8], [-25, 8]], opts={"epsabs": 0, "epsrel": 1e-11,
                                                                  "limit": 200})
    ref_log = math.log(ref) + 2.0
    assert abs(ref_log - log_z) < 1e-9         # nquad agrees with the closed form
    err = abs(r.log_integral.value - ref_log)
    assert err <= r.log_integral.error <= 1e-8
    for i in range(2):
        assert abs(r.u.mean[i].value - mean[i]) <= max(r.u.mean[i].error, 1e-12)
        assert r.u.mean[i].error < 1e-7
        assert abs(r.u.sd[i].value - math.sqrt(cov[i, i])) <= max(r.u.sd[i].error, 1e-12)


def test_rotated_on_a_skewed_3d_posterior_and_the_polynomial_rules_there():
    M = [[1.0, 0.5, 0.0], [0.0, 1.0, -0.4], [0.3, 0.0, 1.0]]
    log_u, mode, neg_h, log_z, mean, cov = _skewed_target([2.0, 3.0, 4.0], M)
    frame = make_frame(mode, neg_h)
    log_z_frame = frame.log_density(log_u)
    ex = rotated(log_z_frame, 3, step=0.5, mass=1e-9)
    r = reduce_nodes(ex.nodes, ex.logf, frame=frame)
    err = abs(r.log_integral.value - log_z)   # closed form: products of Gamma(a_i)
    assert err <= r.log_integral.error <= 1e-7
    for i in range(3):
        assert abs(r.u.mean[i].value - mean[i]) <= r.u.mean[i].error
    # the polynomial rules are far less accurate here, and say so
    ns = sparse(3, 4)
    s = reduce_nodes(ns, log_z_frame(ns.z), frame=frame)
    s_err = abs(s.log_integral.value - log_z)
    assert s_err > 100 * err
    assert s_err <= s.log_integral.error


def test_rotated_stops_at_its_budget_and_says_so():
    ex = rotated(std_normal_logpdf, 4, step=0.25, max_points=20_000)
    assert not ex.complete
    assert "budget of 20,000" in ex.message
    assert ex.nodes.points <= 20_000


def test_rotated_finds_heavy_tails_it_cannot_bound():
    # a Cauchy density in z: the mass beyond any frontier falls off too slowly
    lc = lambda z: -np.log1p(z[:, 0] ** 2) - math.log(math.pi)
    ex = rotated(lc, 1, step=0.5, mass=1e-8, max_points=50_000)
    assert not ex.complete
    r = reduce_nodes(ex.nodes, ex.logf)
    assert r.log_integral.error > 1e-6 and r.outside > 1e-8


# ---------------------------------------------------------------------------
# signed weights

def test_a_level_with_a_negative_signed_sum_is_flagged_not_used():
    # a density concentrated on the nodes where the 19-point rule weighs negatively
    ns = sparse(1, 3)
    x0 = 2.8612795760570582
    lf = np.logaddexp(st.norm.logpdf(ns.z[:, 0], x0, 0.01), st.norm.logpdf(ns.z[:, 0], -x0, 0.01))
    r = reduce_nodes(ns, lf)
    assert not r.levels[0].integral_ok
    assert r.answer_level == 1
    assert any("level 3: its signed sum of weights x density is not positive" in p
               for p in r.problems)


def test_a_level_with_a_negative_variance_is_flagged():
    ns = sparse(1, 3)
    x0 = 2.8612795760570582
    z = ns.z[:, 0]
    lf = np.logaddexp.reduce([st.norm.logpdf(z, 0, 0.01) + 3,
                              st.norm.logpdf(z, x0, 0.01), st.norm.logpdf(z, -x0, 0.01)])
    r = reduce_nodes(ns, lf)
    assert r.levels[0].integral_ok and not r.levels[0].moments_ok
    assert any("level 3: its weights give a variance of -" in p for p in r.problems)


def test_bad_log_density_values_name_the_node():
    ns = sparse(2, 2)
    lf = std_normal_logpdf(ns.z)
    lf[7] = np.nan
    with pytest.raises(ComputeError, match=r"NaN at 1 of 21 nodes of rule `sparse`, first at z"):
        reduce_nodes(ns, lf)
    with pytest.raises(GridError, match=r"20 log-density values for the 21 nodes"):
        reduce_nodes(ns, lf[:20])
    with pytest.raises(ComputeError, match=r"zero at every node"):
        reduce_nodes(ns, np.full(21, -np.inf))


# ---------------------------------------------------------------------------
# the frame and its diagnostics

def test_frame_maps_and_standardises():
    A = np.array([[4.0, 1.2, 0.0], [1.2, 2.0, 0.3], [0.0, 0.3, 1.0]])
    fr = make_frame([1.0, -2.0, 0.5], A)
    assert np.allclose(fr.chol @ fr.chol.T, np.linalg.inv(A), rtol=1e-13)
    assert np.allclose(np.triu(fr.chol, 1), 0)
    assert abs(fr.log_det - (-0.5 * math.log(np.linalg.det(A)))) < 1e-13
    z = np.random.default_rng(1).normal(size=(5, 3))
    assert np.allclose(fr.to_z(fr.to_u(z)), z, atol=1e-13)
    assert fr.health.positive_definite and not fr.health.message


def test_conditional_frame_is_the_normal_conditional():
    # the conditional of a multivariate normal (common practice): mean line
    # mu_-k + S_-k,k / S_kk (t - mu_k), covariance S_-k,-k - S_-k,k S_k,-k / S_kk
    A = np.array([[4.0, 1.2, 0.0], [1.2, 2.0, 0.3], [0.0, 0.3, 1.0]])
    mu = np.array([1.0, -2.0, 0.5])
    S = np.linalg.inv(A)
    cf = make_frame(mu, A).conditional(1)
    o = [0, 2]
    assert np.allclose(cf.slope, S[o, 1] / S[1, 1])
    C = S[np.ix_(o, o)] - np.outer(S[o, 1], S[1, o]) / S[1, 1]
    assert np.allclose(cf.chol @ cf.chol.T, C, rtol=1e-12)
    pts = cf.to_u(np.array([0.0, 1.0]), np.zeros((1, 2)))
    assert np.allclose(pts[1, 0], [mu[0] + cf.slope[0] * 3.0, 1.0, mu[2] + cf.slope[1] * 3.0])
    with pytest.raises(GridError, match=r"coordinates 0 to 2; got `3`"):
        make_frame(mu, A).conditional(3)


def test_marginal_line_of_a_normal_is_exact():
    log_u, m, V, log_ev = _known_sd_regression()
    fr = make_frame(m, np.linalg.inv(V))
    t = m[1] + np.sqrt(V[1, 1]) * np.array([-3.0, -1.0, 0.0, 2.0])
    line = marginal_line(fr, 1, t, sparse(2, 2), log_u)
    # the marginal of a normal posterior is normal (common practice)
    ref = log_ev + st.norm.logpdf(t, m[1], math.sqrt(V[1, 1]))
    assert np.max(np.abs(line.log_density[0] - ref)) < 1e-9
    assert line.evaluations == 4 * 21


def test_marginal_line_of_a_skewed_posterior_against_quad():
    log_u, mode, neg_h, log_z, mean, cov = _skewed_target([3.0, 2.0], [[1.0, 0.6], [0.0, 1.0]])
    fr = make_frame(mode, neg_h)
    t = mode[0] + np.array([-2.0, 0.0, 1.5]) / math.sqrt(neg_h[0, 0])
    line = marginal_line(fr, 0, t, sparse(1, 4), log_u)
    for i, ti in enumerate(t):
        # scipy.integrate.quad over the other coordinate
        g = lambda q: math.exp(float(log_u(np.array([[ti, q]]))[0]) - 1.0)
        ref = math.log(integrate.quad(g, -30, 10, epsabs=0, epsrel=1e-12, limit=200)[0]) + 1.0
        err = abs(line.log_density[0, i] - ref)
        assert err <= abs(line.log_density[0, i] - line.log_density[1, i]) + 1e-12
        assert err < 1e-4


def test_diagnostics_flag_a_skewed_axis_and_pass_a_normal_one():
    log_u, mode, neg_h, *_ = _skewed_target([3.0, 200.0], np.eye(2))
    fr = make_frame(mode, neg_h, names=("p", "q"))
    chk = check_frame(fr, fr.log_density(log_u))
    assert chk.skewed == (0,)
    # exp(a eta - e^eta) about its mode in sd units: -z^2/2 - z^3 / (6 sqrt a) - ...,
    # so the asymmetry at +-2 is about -4 / (3 sqrt a) (Taylor series of e^x)
    assert abs(chk.axes[0].asymmetry - (-4 / (3 * math.sqrt(3)))) < 0.15
    assert any("frame axis 0 (mostly `p`) is skewed" in m for m in chk.messages)
    assert chk.evaluations == 9
    nfr = make_frame(np.zeros(3), np.eye(3))
    assert check_frame(nfr, std_normal_logpdf).normal


def test_diagnostics_flag_heavy_tails():
    # Student-t with 3 degrees of freedom: curvature at 0 is (nu + 1) / nu
    nu = 3.0
    log_t = lambda u: (-(nu + 1) / 2 * np.log1p(u * u / nu)).sum(axis=1)
    fr = make_frame(np.zeros(2), np.eye(2) * (nu + 1) / nu, names=("a", "b"))
    chk = check_frame(fr, fr.log_density(log_t))
    assert chk.heavy == (0, 1)
    assert chk.axes[0].heavy == (True, True)
    assert any("heavy lower and upper tail" in m for m in chk.messages)


def test_a_hessian_that_is_not_positive_definite_is_regularised_and_flagged():
    fr = make_frame([0.0, 1.0], [[1.0, 2.0], [2.0, 1.0]], names=("a", "b"))
    assert not fr.health.positive_definite
    assert fr.health.floored == 1
    assert abs(fr.health.eigenvalues[0] - (-1.0)) < 1e-12
    assert "not positive definite (smallest eigenvalue of its negative -1" in fr.health.message
    assert np.all(np.linalg.eigvalsh(fr.precision) > 0)
    # the frame still maps and standardises, on the regularised curvature
    assert np.allclose(fr.chol @ fr.chol.T, np.linalg.inv(fr.precision))


def test_frame_input_errors_name_the_problem():
    with pytest.raises(ComputeError, match=r"not finite in \(`a`, `b`\)"):
        make_frame([0.0, 0.0], [[1.0, np.nan], [np.nan, 1.0]], names=("a", "b"))
    with pytest.raises(GridError, match=r"\(`neg_hessian`\) has shape \(3, 3\)"):
        make_frame([0.0, 0.0], np.eye(3))
    with pytest.raises(ComputeError, match=r"not symmetric: \(`a`, `b`\) is 1"):
        make_frame([0.0, 0.0], [[2.0, 1.0], [0.0, 2.0]], names=("a", "b"))
    with pytest.raises(ComputeError, match=r"is zero"):
        make_frame([0.0], [[0.0]])
    with pytest.raises(ComputeError, match=r"covariance to re-centre on is not positive"):
        moment_frame([0.0, 0.0], [[1.0, 2.0], [2.0, 1.0]])


def test_moment_frame_is_the_normal_of_those_moments():
    C = np.array([[2.0, 0.3], [0.3, 0.5]])
    fr = moment_frame([1.0, 2.0], C)
    assert np.allclose(fr.cov, C) and np.allclose(fr.precision @ C, np.eye(2))
    ns = sparse(2, 2)
    r = reduce_nodes(ns, fr.log_density(lambda u: st.multivariate_normal([1, 2], C).logpdf(u))(ns.z),
                     frame=fr)
    assert abs(r.log_integral.value) < 1e-12   # a normalised density integrates to 1


# ---------------------------------------------------------------------------
# cost

def test_cost_counts_are_the_rules_counts():
    for d, L in ((2, 4), (6, 3), (8, 4)):
        c = rule_cost("sparse", d, L=L)
        assert c.points == sparse(d, L).points and c.exact_count
        assert c.exact_degree == sparse_degree(d, L)
    c = rule_cost("hermite", 4, K=3)
    assert c.points == hermite(4, 3).points == 5 ** 4 + 3 ** 4 - 1
    assert c.memory > c.points * 8 * 4


@pytest.mark.parametrize("d,H", [(1, 0.5), (2, 0.5), (3, 0.5), (3, 1.0)])
def test_rotated_cost_predicts_the_points_of_a_normal(d, H):
    c = rule_cost("rotated", d, step=H)
    ex = rotated(std_normal_logpdf, d, step=H)
    assert not c.exact_count
    assert 0.7 < c.points / ex.nodes.points < 1.4


def test_cost_refuses_unknown_rules():
    with pytest.raises(GridError, match=r"unknown rule `simplex`; known: hermite, sparse, rotated"):
        rule_cost("simplex", 3)


def test_an_incomplete_exploration_is_a_problem_of_the_answer():
    ex = rotated(std_normal_logpdf, 3, step=0.5, max_points=3_000)
    r = reduce_nodes(ex.nodes, ex.logf)
    assert any("budget of 3,000" in p for p in r.problems)
    assert not r.converged(1.0)


def test_a_value_that_is_not_finite_where_the_posterior_lives_is_refused():
    ns = sparse(2, 2)
    with pytest.raises(ComputeError, match=r"the value `w` is inf at a node"):
        reduce_nodes(ns, std_normal_logpdf(ns.z), values=lambda u: np.exp(1e3 * u[:, :1]),
                     value_names=("w",))
