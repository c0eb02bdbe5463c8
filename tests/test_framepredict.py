"""`predict` on rules in the frame (engine/framepredict.py): the posterior predictive
as a mixture over the rule's nodes.

References:
- the conjugate normal linear model with known sd (common practice, written from
  memory; tests/test_framerun.py): b | y ~ N(m, V), so a new y at covariates x is
  N(x^T m, sd^2 + x^T V x), scipy.stats.norm;
- the gamma-Poisson model with exposures (common practice, written from memory):
  lam ~ gamma(a, b) (rate b), y_i ~ poisson(lam e_i) gives lam | y ~ gamma(a + sum y,
  b + sum e), and a new count with exposure e* is negative binomial with n = a + sum y,
  p = (b + sum e) / (b + sum e + e*), scipy.stats.nbinom.
Data are invented (seeded or typed) test inputs.
"""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats as st

from engine.workspace import Workspace
from test_framerun import SD, TAU, _known_sd_case, _known_sd_workspace


@pytest.mark.parametrize("rule,setting", [("sparse", None), ("hermite", 3), ("rotated", 0.5)])
def test_a_new_observation_of_the_normal_regression(rule, setting):
    X, y = _known_sd_case()
    V = np.linalg.inv(X.T @ X / SD ** 2 + np.eye(3) / TAU ** 2)
    m = V @ X.T @ y / SD ** 2
    x = np.array([1.0, 0.5, -1.0])
    ref = st.norm(x @ m, np.sqrt(SD ** 2 + x @ V @ x))     # module docstring
    ws = _known_sd_workspace(X, y)
    ws.rule(rule, setting)
    got = ws.predict("ynew", f"normal(b0 + b1 * 0.5 - b2, {SD})").detail
    tol = 1e-8 * ref.std()
    assert abs(got.mean - ref.mean()) <= tol
    assert abs(got.sd - ref.std()) <= tol
    assert abs(got.lo - ref.ppf(0.025)) <= tol and abs(got.hi - ref.ppf(0.975)) <= tol
    assert abs(ws.prob("ynew > 1").detail.value - ref.sf(1.0)) <= 1e-9
    assert abs(ws.quantile("ynew", 0.9).detail.value - ref.ppf(0.9)) <= tol
    assert ws.status().posterior == "current"


def test_a_new_count_is_negative_binomial_and_a_coarse_rule_says_how_far_it_moved():
    y = [3, 5, 2, 4, 6, 1, 3]
    e = [1.0, 1.5, 0.8, 1.2, 1.6, 0.5, 1.0]
    ws = Workspace()
    ws.data_typed("y", [str(v) for v in y])
    ws.data_typed("e", [repr(v) for v in e])
    ws.param("lam", "positive")
    ws.prior("lam", "gamma(2, 1)")
    ws.likelihood("y", "poisson(lam * e)")
    A, B = 2 + sum(y), 1 + sum(e)
    ref = st.nbinom(A, B / (B + 2.0))                       # module docstring
    ws.rule("sparse", None)
    a = ws.predict("ynew", "poisson(lam * 2.0)")
    assert abs(a.detail.mean - ref.mean()) <= 1e-6 * ref.std()
    assert abs(a.detail.sd - ref.std()) <= 1e-6 * ref.std()
    assert (a.detail.lo, a.detail.hi) == (ref.ppf(0.025), ref.ppf(0.975))
    for k in (0, 4, 7, 12):
        assert abs(ws.prob(f"ynew <= {k}").detail.value - ref.cdf(k)) <= 1e-7, k
        assert abs(ws.prob(f"ynew == {k}").detail.value - ref.pmf(k)) <= 1e-7, k
    # Gauss-Hermite with 5 points against 7 on the skewed gamma posterior: its mean
    # is off by about 2e-5 of its sd, and the answer says so with the figure
    ws.rule("hermite", 5)
    b = ws.predict("ynew", "poisson(lam * 2.0)")
    off = abs(b.detail.mean - ref.mean()) / ref.std()
    assert 1e-6 < off < 1e-3
    note = next(n for n in b.notes if "moved" in n)
    moved = float(note.split("moved ")[1].split(" ")[0])
    assert off <= 3 * moved, (off, note)
