"""Automatic bounds, refinement, zoom and cost (engine level).

References: scipy.stats distributions for tail masses and for the conjugate
posteriors; the conjugate formulas themselves are common practice (any Bayesian
text), restated beside each check.
"""

import math
import re
import time

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st

from engine.errors import ComputeError, GridError
from engine.refine import auto_grid, build_grid
from engine.workspace import Workspace


def one_param(kind, prior=None, log=None):
    w = Workspace()
    w.param("x", kind)
    if prior:
        w.prior("x", prior)
    if log:
        w.prior_log(log)
    return w


def held_mass(dist, spec):
    return dist.cdf(spec.hi) - dist.cdf(spec.lo)


@pytest.mark.parametrize("kind,prior,dist", [
    ("real", "normal(3, 2)", st.norm(3, 2)),
    ("real", "student_t(3, 0, 1)", st.t(3, 0, 1)),
    ("positive", "gamma(1.5, 0.2)", st.gamma(1.5, scale=1 / 0.2)),
])
def test_grid_auto_bounds_hold_all_but_1e9(kind, prior, dist):
    # the tail masses come from scipy.stats's cdf of the same distribution
    w = one_param(kind, prior)
    ag = auto_grid(w.compiled())
    assert ag.converged
    assert held_mass(dist, ag.specs[0]) >= 1 - 1e-9


def test_grid_auto_beta_half_half_reaches_the_precision_limit():
    # beta(0.5, 0.5) piles up at both ends with an unbounded density. Near 1, values
    # closer than 2^-53 are not distinct from 1 in double precision, and the mass there
    # is (2/pi) asin(sqrt(2^-53)) ~ 6.7e-9 (scipy.stats.beta.sf): no grid of floats
    # below 1 can hold more. grid auto must reach that limit and say so.
    w = one_param("unit", "beta(0.5, 0.5)")
    ag = auto_grid(w.compiled())
    dist = st.beta(0.5, 0.5)
    spec = ag.specs[0]
    limit = dist.sf(1 - 2.0**-53)
    assert dist.cdf(spec.lo) < 1e-9
    assert dist.sf(spec.hi) <= 1.5 * limit
    assert "double precision" in ag.message
    # and the posterior on that grid is right: mean 1/2, sd sqrt(1/8) (scipy.stats.beta)
    post = w.state.posterior
    w.grid_auto()
    w.compute()
    post = w.state.posterior
    assert post.param_mean("x").value == pytest.approx(0.5, abs=1e-7)
    assert post.param_sd("x").value == pytest.approx(dist.std(), rel=1e-6)


def test_grid_auto_covers_both_modes_of_a_mixture():
    # a two-component normal mixture written as a free log-density; mixture cdf from
    # scipy.stats.norm
    w = one_param("real", log="log(0.3*exp(-(x+4)^2/2) + 0.7*exp(-(x-5)^2/0.5))")
    ag = auto_grid(w.compiled())
    assert len(ag.modes) == 2
    found = sorted(m["x"] for m in ag.modes)
    assert found[0] == pytest.approx(-4, abs=1e-4) and found[1] == pytest.approx(5, abs=1e-4)
    spec = ag.specs[0]
    sd2 = math.sqrt(0.25)
    z1, z2 = 0.3 * math.sqrt(2 * math.pi), 0.7 * math.sqrt(2 * math.pi) * sd2
    w1, w2 = z1 / (z1 + z2), z2 / (z1 + z2)
    cdf = lambda v: w1 * st.norm(-4, 1).cdf(v) + w2 * st.norm(5, sd2).cdf(v)
    assert cdf(spec.hi) - cdf(spec.lo) >= 1 - 1e-9


def beta_binomial_ws():
    w = Workspace()
    w.param("p", "unit")
    w.prior("p", "beta(2, 3)")
    w.data_typed("k", ["7"])
    w.data_typed("n", ["20"])
    w.likelihood("k", "binomial(n, p)")
    return w


def test_refine_until_converges_to_beta_binomial_closed_form():
    # posterior beta(2+7, 3+13); evidence C(20,7) B(9,16) / B(2,3) (common practice)
    w = beta_binomial_ws()
    w.grid("p", 0.001, 0.9, 21)
    rep = w.refine(until=1e-8)
    assert rep.converged
    post = w.state.posterior
    ref = st.beta(9, 16)
    logz = math.log(sc.comb(20, 7)) + sc.betaln(9, 16) - sc.betaln(2, 3)
    assert post.log_evidence.value == pytest.approx(logz, abs=1e-7)
    assert post.param_mean("p").value == pytest.approx(ref.mean(), abs=1e-7)
    assert post.param_sd("p").value == pytest.approx(ref.std(), abs=1e-7)
    for q in (0.025, 0.5, 0.975):
        assert post.quantile("p", q).value == pytest.approx(ref.ppf(q), abs=1e-7)
    # each step re-used the nodes it shared with the one before
    for step in rep.steps[1:]:
        assert step.evaluated < step.points


def test_refine_until_stops_at_once_when_the_nested_errors_are_below_the_tolerance():
    # posterior beta(9, 16), evidence C(20,7) B(9,16) / B(2,3) (common practice; scipy):
    # 201 nodes on the logit scale already reach about 1e-13, so `until 1e-6` needs no
    # finer pass; it says so, and the answers it keeps are well within the tolerance
    w = beta_binomial_ws()
    w.grid("p", 0.001, 0.9, 201)
    w.compute()
    before = w.state.posterior
    rep = w.refine(until=1e-6)
    assert rep.converged
    assert re.match(r"already within 1e-06: every value's estimated error is below it "
                    r"\(the largest, `[a-z0-9 ]+`, [0-9.e+-]+\); no finer pass$", rep.message)
    assert len(rep.steps) == 1
    post = w.state.posterior
    assert post.grid.size == 201 and post is before
    ref = st.beta(9, 16)
    logz = math.log(sc.comb(20, 7)) + sc.betaln(9, 16) - sc.betaln(2, 3)
    for est, want in [(post.log_evidence, logz), (post.param_mean("p"), ref.mean()),
                      (post.param_sd("p"), ref.std()),
                      (post.quantile("p", 0.975), ref.ppf(0.975))]:
        assert est.error < 1e-6
        assert abs(est.value - want) < 1e-8   # far inside the tolerance, as claimed


def test_refine_until_keeps_to_the_budget_across_steps():
    # each step's blocks are slowed (the progress callback sleeps) so that the steps
    # spend the budget: the step that would go past what is left is not run, and the
    # message says so, with what was spent
    w = beta_binomial_ws()
    w.grid("p", 0.001, 0.9, 11)
    w.compute()
    w.budget_seconds = 1.0
    rep = w.refine(until=1e-300, progress=lambda done, total: time.sleep(0.3))
    assert not rep.converged
    assert re.match(r"stopped: the next step \([0-9,]+ points\) would take about .+, beyond "
                    r"what is left of the budget of 1 s \([0-9]+ s spent\); not run$", rep.message)
    assert 2 <= len(rep.steps) <= 5
    assert sum(st_.seconds for st_ in rep.steps[1:]) < 1.0 + 0.5


def test_refine_until_converges_on_normal_inverse_gamma():
    # y ~ normal(mu, sqrt(v)), mu | v ~ normal(m0, sqrt(v/k0)), v ~ inv_gamma(a0, b0):
    # the marginal of mu is Student-t with 2 a_n degrees of freedom, location m_n and
    # scale sqrt(b_n / (a_n k_n)); the evidence is the normal-inverse-gamma marginal
    # likelihood (common practice; conjugate updating formulas)
    rng = np.random.default_rng(11)
    y = rng.normal(1.0, 2.0, 20)
    m0, k0, a0, b0 = 0.0, 0.5, 3.0, 4.0
    w = Workspace()
    w.param("mu", "real")
    w.param("v", "positive")
    w.prior("v", f"inv_gamma({a0}, {b0})")
    w.prior("mu", f"normal({m0}, sqrt(v/{k0}))")
    w.data_typed("y", [repr(float(t)) for t in y])
    w.likelihood("y", "normal(mu, sqrt(v))")
    w.grid_auto()
    rep = w.refine(until=1e-8)
    assert rep.converged
    n, ybar = len(y), y.mean()
    kn = k0 + n
    mn = (k0 * m0 + n * ybar) / kn
    an = a0 + n / 2
    bn = b0 + 0.5 * ((y - ybar) ** 2).sum() + k0 * n * (ybar - m0) ** 2 / (2 * kn)
    tdist = st.t(2 * an, mn, math.sqrt(bn / (an * kn)))
    logz = (sc.gammaln(an) - sc.gammaln(a0) + a0 * math.log(b0) - an * math.log(bn)
            + 0.5 * math.log(k0 / kn) - n / 2 * math.log(2 * math.pi))
    post = w.state.posterior
    assert post.log_evidence.value == pytest.approx(logz, abs=1e-7)
    assert post.param_mean("mu").value == pytest.approx(tdist.mean(), abs=1e-7)
    assert post.param_sd("mu").value == pytest.approx(tdist.std(), abs=1e-7)
    assert post.param_mean("v").value == pytest.approx(st.invgamma(an, scale=bn).mean(), rel=1e-7)


def test_refine_one_axis_only():
    w = Workspace()
    w.param("a", "real")
    w.param("b", "real")
    w.prior("a", "normal(0, 1)")
    w.prior("b", "normal(0, 1)")
    w.grid("a", -8, 8, 21)
    w.grid("b", -8, 8, 21)
    w.compute()
    rep = w.refine("a")
    g = w.state.posterior.grid
    assert g.axis("a").n == 41 and g.axis("b").n == 21
    assert len(rep.steps) == 2


def test_refine_refuses_a_discrete_axis():
    w = Workspace()
    w.param("k", "int", lo=0, hi=5)
    w.compute()
    with pytest.raises(GridError, match="`k` is discrete"):
        w.refine("k")


def test_narrow_grid_warns_about_edge_mass():
    w = one_param("real", "normal(0, 1)")
    w.grid("x", -1, 8, 81)
    rep = w.compute()
    assert any("lower edge of `x`" in m for m in rep.warnings)
    assert not any("upper edge" in m for m in rep.warnings)


def test_coarse_grid_warns():
    w = one_param("real", "normal(0, 1)")
    w.grid("x", -10, 10, 21)
    rep = w.compute()
    assert any("too coarse" in m for m in rep.warnings)


def test_flat_prior_without_data_is_called_improper():
    w = Workspace()
    w.param("mu", "real")
    ag = auto_grid(w.compiled())
    assert not ag.converged
    assert "improper" in ag.message
    rep = w.compute()
    assert any("improper" in n for n in rep.notes)
    assert rep.log_evidence is None
    # not an error: a note says why there is no number (issue 15)
    a = w.evidence()
    assert math.isnan(a.detail.value)
    assert any("evidence is not defined under an improper prior" in n for n in a.notes)


def grid_of(d, n=10):
    w = Workspace()
    for i in range(d):
        w.param(f"a{i}", "real")
        w.prior(f"a{i}", "normal(0, 1)")
        w.grid(f"a{i}", -3, 3, n)
    return w


def test_cost_counts_points():
    assert grid_of(3).cost().cost.points == 1000


def test_cost_and_refusal_at_twenty_dimensions():
    w = grid_of(20)
    c = w.cost()
    assert c.cost.points == 10**20
    assert "wrong tool" in c.advice
    with pytest.raises(ComputeError, match=r"10\^20 points"):
        w.compute()
    assert w.state.posterior is None


def test_budget_refusal_names_the_cost_and_force_runs():
    w = grid_of(2, 201)
    w.budget_seconds = 1e-9
    with pytest.raises(ComputeError, match="40,401 points.*compute force"):
        w.compute()
    rep = w.compute(force=True)
    assert rep.points == 40401


def test_zoom_keeps_points_and_shrinks_bounds():
    # posterior beta(9, 16): its central 1 - 1e-9 region from scipy.stats.beta.ppf
    w = beta_binomial_ws()
    w.grid("p", 0.0001, 0.9999, 201)
    w.compute()
    rep = w.zoom()
    a = w.state.posterior.grid.axis("p")
    ref = st.beta(9, 16)
    assert a.n == 201
    assert a.lo == pytest.approx(ref.ppf(5e-10), rel=1e-3)
    assert a.hi == pytest.approx(ref.isf(5e-10), rel=1e-3)
    assert w.state.posterior.param_mean("p").value == pytest.approx(ref.mean(), abs=1e-8)


def test_zoom_from_a_coarse_grid_keeps_the_mass():
    # a 7-point grid places the quantiles only roughly: zoom widens until no end holds
    # mass, so the zoomed bounds still hold all but 1e-8 (scipy.stats.beta for the
    # posterior beta(9, 16))
    w = beta_binomial_ws()
    w.grid("p", 0.01, 0.99, 7)
    w.compute()
    w.zoom()
    a = w.state.posterior.grid.axis("p")
    ref = st.beta(9, 16)
    assert ref.cdf(a.lo) + ref.sf(a.hi) < 1e-8
    assert a.n == 7


def test_grid_auto_refuses_twenty_dimensions_with_the_figure():
    w = Workspace()
    for i in range(20):
        w.param(f"a{i}", "real")
        w.prior(f"a{i}", "normal(0, 1)")
    with pytest.raises(ComputeError, match=r"3\^20 points.*wrong tool"):
        w.cost()


# ---------------------------------------------------------------------------
# the table of scales (engine.grid.SCALE_TABLE), used by the axes and by `grid auto`

@pytest.mark.parametrize("name,lo,hi", [("linear", -math.inf, math.inf), ("log", 2.0, math.inf),
                                        ("logit", -1.0, 3.0)])
def test_every_scale_inverts_and_its_jacobian_is_the_derivative(name, lo, hi):
    # calculus (common practice): to_u inverts to_value; exp(logjac) is d value / du,
    # checked by central differences; `derivatives` gives the first and second
    # derivatives of value and the second derivative of logjac, also by differences
    from engine.grid import SCALE_TABLE
    s = SCALE_TABLE[name]
    u = np.linspace(-4.0, 4.0, 17)
    v = s.to_value(u, lo, hi)
    assert np.allclose(s.to_u(v, lo, hi), u, rtol=0, atol=1e-12)
    h = 1e-5
    dv = (s.to_value(u + h, lo, hi) - s.to_value(u - h, lo, hi)) / (2 * h)
    assert np.allclose(np.exp(s.logjac(u, lo, hi)), dv, rtol=1e-8)
    for x in (-2.5, 0.0, 1.5):
        d = s.derivatives(x, lo, hi)
        f = lambda t: float(s.to_value(np.array(t), lo, hi))
        g = lambda t: float(s.logjac(np.array([t]), lo, hi)[0])
        hh = 1e-4
        assert d.first == pytest.approx((f(x + h) - f(x - h)) / (2 * h), rel=1e-8)
        assert d.second == pytest.approx((f(x + hh) - 2 * f(x) + f(x - hh)) / hh**2,
                                         rel=1e-5, abs=1e-6)
        assert d.logjac_second == pytest.approx((g(x + hh) - 2 * g(x) + g(x - hh)) / hh**2,
                                                rel=1e-5, abs=1e-6)


def test_scale_limits_mark_where_values_reach_the_domain_edge():
    # double precision (common practice): beyond its upper limit the logit scale's
    # values equal the domain's top; just inside they are still below it
    from engine.grid import SCALE_TABLE
    s = SCALE_TABLE["logit"]
    top = s.limits[1]
    assert float(s.to_value(np.array(top + 2.0), 0.0, 1.0)) == 1.0
    assert float(s.to_value(np.array(top - 2.0), 0.0, 1.0)) < 1.0
    assert SCALE_TABLE["log"].derivatives(SCALE_TABLE["log"].limits[1] + 1, 0.0, math.inf) is None
