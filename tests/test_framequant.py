"""Means and sds of lets and expressions over several parameters on rules in the
frame (engine/framequant.py), and the refusal of their quantiles and probabilities.

References:
- the conjugate normal linear model with known sd (common practice, written from
  memory; tests/test_framerun.py): b | y ~ N(m, V); the moments of a product of two
  jointly normal variables by Isserlis' theorem (Isserlis 1918):
  E[b1 b2] = m1 m2 + V12,
  Var(b1 b2) = m1^2 V22 + m2^2 V11 + 2 m1 m2 V12 + V11 V22 + V12^2;
  exp(b1) is lognormal: mean exp(m1 + V11 / 2), variance (exp(V11) - 1) exp(2 m1 + V11);
- the regression with an unknown sd of tests/reference_regression.py: given s,
  b | s, y ~ N(m(s), V(s)) in closed form, so E[b1 / s] and E[(b1 / s)^2] are 1-D
  integrals over t = log s, done here by scipy.integrate.quad_vec;
- the discrete mixture of tests/test_framerun.py (mu | k normal for each k, P(k | y)
  from the normal-normal marginals, scipy.stats.multivariate_normal).
Data are invented (seeded) test inputs.
"""

from __future__ import annotations

import math
import re

import numpy as np
import pytest
import scipy.stats as st
from scipy import integrate

from engine.errors import QuadratError
from engine.workspace import Workspace
from reference_regression import invented_case, log_marginal_given_s, log_prior_s
from test_framerun import (SD, TAU, _known_sd_case, _known_sd_workspace, _regression_session)


def _posterior_normal(X, y):
    # b | y ~ N(m, V), V = (X^T X / sd^2 + I / tau^2)^-1 (module docstring)
    V = np.linalg.inv(X.T @ X / SD ** 2 + np.eye(X.shape[1]) / TAU ** 2)
    return V @ X.T @ y / SD ** 2, V


@pytest.mark.parametrize("rule,setting", [("sparse", None), ("hermite", 3), ("rotated", 0.5)])
def test_product_and_exponential_of_normal_coefficients(rule, setting):
    X, y = _known_sd_case()
    m, V = _posterior_normal(X, y)
    ws = _known_sd_workspace(X, y)
    ws.let("g", "b1 * b2")
    ws.rule(rule, setting)
    # Isserlis' theorem (module docstring)
    mean_g = m[1] * m[2] + V[1, 2]
    sd_g = math.sqrt(m[1] ** 2 * V[2, 2] + m[2] ** 2 * V[1, 1] + 2 * m[1] * m[2] * V[1, 2]
                     + V[1, 1] * V[2, 2] + V[1, 2] ** 2)
    for text in ("g", "b1 * b2"):
        a, b = ws.mean(text).detail, ws.sd(text).detail
        assert abs(a.value - mean_g) <= 1e-6 * sd_g, (text, a.value, mean_g)
        assert abs(b.value - sd_g) <= 1e-6 * sd_g, (text, b.value, sd_g)
        # the error estimate is stated and covers the true error
        assert a.error is not None and abs(a.value - mean_g) <= max(2 * a.error, 1e-12)
        assert b.error is not None and abs(b.value - sd_g) <= max(2 * b.error, 1e-12)
    # lognormal moments (module docstring)
    mean_e = math.exp(m[1] + V[1, 1] / 2)
    sd_e = math.sqrt((math.exp(V[1, 1]) - 1) * math.exp(2 * m[1] + V[1, 1]))
    a, b = ws.mean("exp(b1) + 0 * b2").detail, ws.sd("exp(b1) + 0 * b2").detail
    assert abs(a.value - mean_e) <= 1e-6 * sd_e
    assert abs(b.value - sd_e) <= 1e-6 * sd_e


def _standardised_reference(case):
    # E[b1 / s] and sd(b1 / s): b | s, y normal in closed form (tests/reference_regression.py),
    # then scipy.integrate.quad_vec over t = log s
    X, y, tau = case.X, case.y, case.tau
    e, Q = np.linalg.eigh(X.T @ X)
    c = Q.T @ (X.T @ y)

    def lp(t):
        s = np.exp(t)
        return log_marginal_given_s(case, s) + log_prior_s(case, s) + t

    ts = np.linspace(-6, 4, 20001)
    top = float(np.max(lp(ts)))
    centre = float(ts[np.argmax(lp(ts))])

    def f(t):
        s = math.exp(t)
        w = math.exp(float(lp(np.array(t))) - top)
        inv = 1 / (e + s * s / tau ** 2)
        mb = Q @ (inv * c)
        Vb = s * s * (Q * inv) @ Q.T
        return w * np.array([1.0, mb[1] / s, (Vb[1, 1] + mb[1] ** 2) / s ** 2])

    v = integrate.quad_vec(f, centre - 3, centre + 3, epsabs=0, epsrel=1e-12, limit=2000)[0]
    mean = v[1] / v[0]
    return mean, math.sqrt(v[2] / v[0] - mean ** 2)


def test_a_standardised_coefficient_of_a_regression_with_unknown_sd(tmp_path):
    # 4 coefficients and an unknown sd (5 parameters: `compute` picks a rule in the
    # frame by itself) on 200 invented rows: mean and sd of b1 / s to 1e-3 of its sd
    case = invented_case(4)
    sh = _regression_session(tmp_path, case)
    sh("let z1 = b1 / s")
    out = sh("mean z1")
    ws = sh.app.ws
    assert ws.posterior_now is not None and ws.status().posterior == "current"
    ref_mean, ref_sd = _standardised_reference(case)
    a, b = ws.mean("z1").detail, ws.sd("b1 / s").detail
    assert abs(a.value - ref_mean) <= 1e-3 * ref_sd, (a.value, ref_mean)
    assert abs(b.value - ref_sd) <= 1e-3 * ref_sd, (b.value, ref_sd)
    assert a.error is not None and a.error < 1e-2 * ref_sd
    # the shell shows the number to the digits its error supports, with no warning
    shown = re.search(r"mean z1 = (\S+)  \(± (\S+)\)", out)
    assert shown is not None, out
    assert abs(float(shown.group(1)) - ref_mean) <= 2 * float(shown.group(2))
    assert "warning" not in out


def test_an_expression_mixed_over_the_values_of_a_discrete_parameter():
    # y_i ~ normal(k mu, 1), mu ~ normal(0, 2), k uniform on {1, 2, 3} (tests/test_framerun.py):
    # mu | k, y normal with precision 1/4 + k^2 n and mean k sum(y) / precision, P(k | y) from
    # the normal-normal marginals (scipy.stats.multivariate_normal); so k mu has mean
    # sum_k P(k) k m_k and second moment sum_k P(k) k^2 (1 / prec_k + m_k^2)
    y = np.array([1.1, 2.3, 1.7, 2.9, 2.0])
    ws = Workspace()
    ws.data_typed("y", [repr(float(v)) for v in y])
    ws.param("mu", "real")
    ws.param("k", "int", lo=1, hi=3)
    ws.prior("mu", "normal(0, 2)")
    ws.likelihood("y", "normal(k * mu, 1)")
    ws.rule("sparse", 3)
    n = len(y)
    ks = np.array([1, 2, 3])
    logs = np.array([st.multivariate_normal(np.zeros(n), np.eye(n) + 4 * kk ** 2 * np.ones((n, n))
                                            ).logpdf(y) for kk in ks])
    pk = np.exp(logs - logs.max()) / np.exp(logs - logs.max()).sum()
    prec = 0.25 + ks ** 2 * n
    mk = ks * y.sum() / prec
    mean = float(pk @ (ks * mk))
    sd = math.sqrt(float(pk @ (ks ** 2 * (1 / prec + mk ** 2))) - mean ** 2)
    assert abs(ws.mean("k * mu").detail.value - mean) <= 1e-9
    assert abs(ws.sd("k * mu").detail.value - sd) <= 1e-9


def test_quantiles_and_probabilities_over_several_parameters_are_refused_with_the_reason():
    X, y = _known_sd_case()
    ws = _known_sd_workspace(X, y)
    ws.rule("hermite", 3)
    ws.compute()
    for ask in (lambda: ws.prob("b1 * b2 > 0"), lambda: ws.quantile("b1 + b2", 0.5)):
        with pytest.raises(QuadratError, match=r"not answered on rule `hermite`: its value comes "
                                               r"from a step function .*`rule grid` answers it"):
            ask()
    with pytest.raises(QuadratError, match=r"`y` is a data column"):
        ws.mean("b1 * y")
    with pytest.raises(QuadratError, match=r"the value `log\(b1 - 100\)` is nan at a node"):
        ws.mean("log(b1 - 100)")
    # the posterior is still there and current
    assert ws.status().posterior == "current"


def test_keep_and_compare_two_regressions_on_rules_in_the_frame(tmp_path):
    # 4 coefficients and an unknown sd against the same model without x3 (5 and 4
    # parameters, each on the rule `compute` picks): the log Bayes factor against the
    # difference of tests/reference_regression.py's exact log evidences
    from dataclasses import replace as _replace
    from reference_regression import exact_reference
    case = invented_case(4)
    smaller = _replace(case, X=case.X[:, :3])
    sh = _regression_session(tmp_path, case)
    sh("keep full")
    # without x3: b3's proper prior then integrates to 1, so the evidence is the smaller
    # model's
    sh("likelihood y ~ normal(b0 + b1 * x1 + b2 * x2, s)")
    sh("keep small")
    out = sh("compare full small")
    c = sh.app.ws.compare("full", "small")
    ref = exact_reference(case).log_evidence - exact_reference(smaller).log_evidence
    assert abs(c.log_bf.value - ref) <= 1e-4 * abs(exact_reference(case).log_evidence)
    assert c.log_bf.error is not None and abs(c.log_bf.value - ref) <= max(2 * c.log_bf.error,
                                                                          1e-9)
    assert "full" in out and "small" in out
