"""The exact regression reference (tests/reference_regression.py) checked by two
independent routes: scipy.stats.multivariate_normal for the coefficients'
closed-form integral, and scipy.integrate.dblquad of the full joint density for a
two-parameter case. The designs are the helper's invented ones."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats as st
from scipy import integrate

from reference_regression import (exact_reference, invented_case, log_marginal_given_s,
                                  log_prior_s)


@pytest.mark.parametrize("s", [0.8, 1.3, 2.5])
def test_closed_form_given_s_matches_the_multivariate_normal(s):
    case = invented_case(3, rows=60)
    # y ~ N(0, s^2 I + tau^2 X X') by scipy.stats
    cov = s ** 2 * np.eye(case.rows) + case.tau ** 2 * case.X @ case.X.T
    ref = st.multivariate_normal(np.zeros(case.rows), cov).logpdf(case.y)
    assert abs(float(log_marginal_given_s(case, np.array([s]))[0]) - ref) < 1e-9


def test_reference_matches_a_double_integral_of_the_joint():
    case = invented_case(1, rows=50)
    ref = exact_reference(case)
    X, y, tau = case.X, case.y, case.tau

    n, sy, syy = case.rows, float(y.sum()), float(y @ y)
    prior_b0 = lambda b: -0.5 * math.log(2 * math.pi * tau * tau) - b * b / (2 * tau * tau)
    assert abs(prior_b0(0.3) - st.norm.logpdf(0.3, 0, tau)) < 1e-14
    assert np.all(X[:, 0] == 1)

    def log_joint(b0, t):
        # the normal likelihood of y_i = b0 + noise, summed over rows (common practice)
        s = math.exp(t)
        rss = syy - 2 * b0 * sy + n * b0 * b0
        return (-n * (t + 0.5 * math.log(2 * math.pi)) - rss / (2 * s * s)
                + prior_b0(b0) + float(log_prior_s(case, np.array(s))) + t)

    top = ref.log_evidence + 10   # any scale near the peak keeps the integrand in range
    m, sd = ref.mean[0], ref.sd[0]
    t_lo, t_hi = ref.log_s_mean - 12 * ref.log_s_sd, ref.log_s_mean + 12 * ref.log_s_sd
    opts = dict(epsabs=0, epsrel=1e-10)
    # scipy.integrate.dblquad over b0 (inner) and t = log s (outer), +-12 sds
    z, _ = integrate.dblquad(lambda b, t: math.exp(log_joint(b, t) - top), t_lo, t_hi,
                             m - 12 * sd, m + 12 * sd, **opts)
    zb, _ = integrate.dblquad(lambda b, t: b * math.exp(log_joint(b, t) - top), t_lo, t_hi,
                              m - 12 * sd, m + 12 * sd, **opts)
    assert abs(math.log(z) + top - ref.log_evidence) < 1e-8
    assert abs(zb / z - ref.mean[0]) < 1e-8 * ref.sd[0]
    assert ref.error < 1e-12
