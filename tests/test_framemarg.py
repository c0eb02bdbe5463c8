"""1-D marginals on rules in the frame: quantiles, intervals, `prob`, `summary`, `plot`,
and sessions saved and replayed on such a rule.

References:
- the conjugate normal linear model with known sd (common practice, written from
  memory; tests/test_framerun.py): b | y ~ N(m, V), so each coefficient's quantiles
  and probabilities are scipy.stats.norm's;
- the regression with an unknown sd of tests/reference_regression.py: the density of
  t = log s, with the coefficients integrated in closed form, is integrated here by
  scipy.integrate.cumulative_trapezoid on 400,001 points for the quantiles of s.
Data are invented (seeded) test inputs.
"""

from __future__ import annotations

import json
import math
import re

import numpy as np
import pytest
import scipy.stats as st
from scipy import integrate, interpolate

from engine.errors import QuadratError
from reference_regression import invented_case, log_marginal_given_s, log_prior_s
from test_framechoice import _Sh
from test_framerun import (_known_sd_case, _known_sd_reference, _known_sd_workspace,
                           _regression_session)


def test_quantiles_intervals_and_probabilities_of_an_exactly_normal_posterior():
    # b_j | y ~ N(m_j, V_jj) (conjugacy, module docstring): scipy.stats.norm's values
    X, y = _known_sd_case()
    _, m, sd = _known_sd_reference(X, y)
    ws = _known_sd_workspace(X, y)
    ws.rule("sparse", 3)
    for j in range(X.shape[1]):
        ref = st.norm(m[j], sd[j])
        q = ws.quantile(f"b{j}", 0.975).detail
        assert abs(q.value - ref.ppf(0.975)) <= 1e-6 * sd[j]
        iv = ws.interval(f"b{j}", 0.9).detail
        assert abs(iv.lo - ref.ppf(0.05)) <= 1e-6 * sd[j]
        assert abs(iv.hi - ref.ppf(0.95)) <= 1e-6 * sd[j]
        cut = float(m[j] + 0.3 * sd[j])
        p = ws.prob(f"b{j} > {cut!r}").detail
        assert abs(p.value - ref.sf(cut)) <= 1e-7
        p2 = ws.prob(f"{float(m[j])!r} < b{j} and b{j} < {cut!r}").detail
        assert abs(p2.value - (ref.cdf(cut) - 0.5)) <= 1e-7
    with pytest.raises(QuadratError, match=r"`prob` of a condition other than comparisons of "
                                           r"one parameter with numbers is not answered on "
                                           r"rule `sparse`: its value comes from a step "
                                           r"function of the parameters"):
        ws.prob("b1 * b2 > 0")


def _s_quantile(case, q: float) -> float:
    # the density of t = log s: p(y | s) p(s) s (tests/reference_regression.py's closed
    # form), integrated by scipy.integrate.cumulative_trapezoid
    t = np.linspace(-3.0, 2.0, 400_001)
    s = np.exp(t)
    lp = log_marginal_given_s(case, s) + log_prior_s(case, s) + t
    f = np.exp(lp - lp.max())
    c = integrate.cumulative_trapezoid(f, t, initial=0.0)
    c /= c[-1]
    keep = np.concatenate([[True], np.diff(c) > 0])
    return float(math.exp(interpolate.interp1d(c[keep], t[keep])(q)))


def test_the_skewed_sd_of_a_regression_against_its_exact_quantiles(tmp_path):
    # 4 coefficients and an unknown sd on 200 invented rows: the quantiles of s, whose
    # posterior is skewed, to 1e-3 of its sd, each within its estimated error
    case = invented_case(4)
    sh = _regression_session(tmp_path, case)
    sh("rule sparse")
    ws = sh.app.ws
    sd_s = ws.sd("s").detail.value
    for q in (0.025, 0.5, 0.975):
        got = ws.quantile("s", q).detail
        ref = _s_quantile(case, q)
        assert abs(got.value - ref) <= 1e-3 * sd_s, q
        assert abs(got.value - ref) <= got.error, q
    p = ws.prob(f"s < {_s_quantile(case, 0.9)!r}").detail
    assert abs(p.value - 0.9) <= max(p.error, 1e-4)


def test_summary_plot_save_and_replay_on_a_frame_rule(tmp_path):
    X, y = _known_sd_case()
    _, m, sd = _known_sd_reference(X, y)
    sh = _Sh(tmp_path)
    sh.app.ws.base_dir = str(tmp_path)
    for j in range(1, X.shape[1]):
        sh(f"data x{j} = " + ", ".join(repr(float(v)) for v in X[:, j]))
    sh("data y = " + ", ".join(repr(float(v)) for v in y))
    for j in range(X.shape[1]):
        sh(f"param b{j} real", f"prior b{j} ~ normal(0, 3.0)")
    sh("likelihood y ~ normal(b0 + b1 * x1 + b2 * x2, 0.7)", "rule hermite 3")
    out = sh("summary")
    row = re.search(r"^b1\s.*\s(\S+) to (\S+)$", out, re.M)
    # the 97.5% quantile of b1: scipy.stats.norm (conjugacy, module docstring)
    assert abs(float(row.group(2)) - st.norm(m[1], sd[1]).ppf(0.975)) <= 1e-5 * abs(m[1])
    # the count is of the rule's nodes, not of grid points
    assert re.search(r"^[\d,]+ nodes of rule `hermite", out, re.M) and "grid points" not in out
    out = sh("plot b1")
    assert "b1" in out and "interval" in out
    sh("export m.json")
    doc = json.loads((tmp_path / "m.json").read_text())
    assert doc["grid"][0].startswith("rule hermite K = 5 against K = 3")
    assert abs(doc["parameters"]["b1"]["mean"]["value"] - m[1]) <= 1e-9 * sd[1]
    sh("interval b2 0.95", "prob b1 < -0.9", "save s.qd")
    text = (tmp_path / "s.qd").read_text()
    assert "\ncheck interval b2 0.95 = " in text and "\ncheck prob b1 < -0.9 = " in text
    again = _Sh(tmp_path)
    again.app.ws.base_dir = str(tmp_path)
    out = again("replay s.qd")
    assert re.search(r"replayed `s.qd`: all \d+ checks held\n$", out), out


def test_a_quantile_on_a_frame_rule_is_never_called_exact(tmp_path):
    # four independent standard normal priors, no data: every median is 0 (symmetry,
    # common practice); the levels agree to the last digit, which is not exactness
    sh = _Sh(tmp_path)
    for n in "abcd":
        sh(f"param {n} real", f"prior {n} ~ normal(0, 1)")
    sh("rule sparse", "compute")
    for n in "abcd":
        out = sh(f"quantile {n} 0.5")
        assert "exact" not in out
        assert abs(float(out.split(" = ")[1].split()[0])) < 1e-13
