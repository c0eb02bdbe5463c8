"""A beta-binomial model with a positive concentration parameter, through the
workspace, against an independent reference computed here with scipy.integrate.

The counts are invented for this test (a scenario of our own): 8 groups of 20 trials
whose success counts vary about as much as binomial counts would, so the likelihood
is flat toward large concentrations (the beta-binomial tends to the binomial) and
the posterior of the concentration follows its prior far out, to 1e12 and beyond.
There the textbook lgamma form of the beta-binomial has no correct digit; `grid
auto` must still size a grid and `compute` must match the reference.

Reference: the log-likelihood from the exact product form of the rising factorials
for whole-number counts, B(y + a, n - y + b) / B(a, b) = prod_(j<y) (a + j)
prod_(j<n-y) (b + j) / prod_(j<n) (a + b + j) (common practice), summed as logs, and
the posterior integrals by scipy.integrate.dblquad over (mu, log kappa).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, stats

from engine.workspace import Workspace

Y = [12, 9, 11, 10, 13, 8, 10, 12]   # invented counts, for this test only
N = 20
M, S = 3.4, 3.0                       # prior: log(kappa) ~ normal(3.4, 3)


def loglik(mu: float, kappa: float) -> float:
    a, b = mu * kappa, (1 - mu) * kappa
    j = np.arange(N)
    total = 0.0
    for y in Y:
        total += (math.log(math.comb(N, y)) + np.sum(np.log(a + j[:y]))
                  + np.sum(np.log(b + j[:N - y])) - np.sum(np.log(a + b + j)))
    return float(total)


@pytest.fixture(scope="module")
def reference():
    # integrand over (mu, u = log kappa): likelihood x normal(M, S) density of u
    # (the lognormal prior of kappa with the Jacobian of u), mu uniform on (0, 1);
    # the moments [1, mu, mu^2, u, u^2] integrated together (scipy.integrate.quad_vec),
    # over u below and above log(1000) for P(kappa > 1000)
    def inner(u):
        def f(mu):
            d = math.exp(loglik(mu, math.exp(u))) * stats.norm.pdf(u, M, S)
            return d * np.array([1.0, mu, mu * mu])
        v, _ = integrate.quad_vec(f, 0.0, 1.0, epsabs=0, epsrel=1e-11, points=[0.53])
        return np.concatenate([v, [v[0] * u, v[0] * u * u]])

    cut = math.log(1000.0)
    low, _ = integrate.quad_vec(inner, M - 12 * S, cut, epsabs=0, epsrel=1e-10)
    high, _ = integrate.quad_vec(inner, cut, M + 12 * S, epsabs=0, epsrel=1e-10)
    t = low + high
    Z = t[0]
    m_mu, m2_mu, m_u, m2_u = t[1] / Z, t[2] / Z, t[3] / Z, t[4] / Z
    return dict(log_z=math.log(Z), mean_mu=m_mu, sd_mu=math.sqrt(m2_mu - m_mu**2),
                mean_logk=m_u, sd_logk=math.sqrt(m2_u - m_u**2), p1000=high[0] / Z)


@pytest.fixture(scope="module")
def ws():
    w = Workspace()
    w.param("mu", "unit")
    w.param("kappa", "positive")
    w.prior("kappa", f"lognormal({M}, {S})")
    w.data_typed("y", [str(v) for v in Y])
    w.data_typed("n", [str(N)] * len(Y))
    w.likelihood("y", "beta_binomial(n, mu*kappa, (1-mu)*kappa)")
    w.auto = w.grid_auto().found
    w.compute()
    return w


def test_grid_auto_sizes_the_concentration_axis(ws):
    spec = {s.name: s for s in ws.auto.specs}["kappa"]
    assert ws.auto.converged
    assert math.isfinite(spec.lo) and math.isfinite(spec.hi) and spec.lo < spec.hi
    # the posterior follows the prior out to large concentrations: the axis reaches them
    assert spec.hi > 1e10


def test_compute_matches_the_reference(ws, reference):
    ev = ws.evidence().values[0]
    assert ev == pytest.approx(reference["log_z"], abs=1e-8)
    summ = {r.name: r for r in ws.summary().rows}
    assert summ["mu"].mean.value == pytest.approx(reference["mean_mu"], rel=1e-9)
    assert summ["mu"].sd.value == pytest.approx(reference["sd_mu"], rel=1e-7)
    m = ws.mean("log(kappa)")
    assert m.values[0] == pytest.approx(reference["mean_logk"], rel=1e-8)
    assert ws.sd("log(kappa)").values[0] == pytest.approx(reference["sd_logk"], rel=1e-7)
    p = ws.prob("kappa > 1000")
    assert p.values[0] == pytest.approx(reference["p1000"], abs=1e-8)


def test_reference_likelihood_is_the_beta_binomial():
    # the product form against scipy.stats.betabinom at a moderate concentration,
    # where scipy's lgamma form is accurate
    got = loglik(0.4, 7.5)
    ref = float(np.sum(stats.betabinom.logpmf(Y, N, 0.4 * 7.5, 0.6 * 7.5)))
    assert got == pytest.approx(ref, rel=1e-13)
    # and it tends to the binomial (scipy.stats.binom) at a huge concentration
    far = loglik(0.4, 1e14)
    assert far == pytest.approx(float(np.sum(stats.binom.logpmf(Y, N, 0.4))), abs=1e-9)
