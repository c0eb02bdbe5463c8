"""A non-conjugate 3-parameter model against scipy.integrate.nquad.

A logistic dose-response with a group effect: k_i successes of n_i at dose d_i
in group g_i, p_i = inv_logit(a + b log(1 + d_i) + c g_i), independent
normal(0, 5) priors. No closed form exists; the reference is adaptive
quadrature (scipy.integrate.nquad) of the same unnormalised posterior, written
out here in plain Python, over a box of +-7.5 sds around the mode in
coordinates whitened by the curvature there (mode by scipy.optimize, curvature
by central differences: the box only has to hold the mass, so the way it is
found does not enter the reference). The counts are invented test input.
"""

from __future__ import annotations

import math

import numpy as np
import pytest
from scipy import integrate, optimize

from engine.data import Column, DataSet
from engine.expr import parse_call
from engine.families import FAMILIES
from engine.model import Likelihood, Model, Prior, compile_model, make_param
from engine.posterior import compute
from engine.refine import auto_grid, build_grid

DOSE = [0.0, 1.0, 3.0, 9.0, 0.0, 1.0, 3.0, 9.0]
GROUP = [0.0, 0.0, 0.0, 0.0, 1.0, 1.0, 1.0, 1.0]
TRIALS = [40, 40, 40, 40, 40, 40, 40, 40]
SUCCESSES = [3, 9, 19, 33, 5, 14, 26, 37]
PRIOR_SD = 5.0
BOX = 7.5      # half-width of the box, in whitened sds
REL = 1e-6


def _engine_posterior():
    d = DataSet()
    for name, vals in (("dose", DOSE), ("grp", GROUP), ("n", TRIALS), ("k", SUCCESSES)):
        d, _ = d.with_column(Column(name, np.asarray(vals, float)))
    m = Model()
    for name in "abc":
        m, _ = m.with_param(make_param(name, "real"))
    names = m.symbols(d)
    for name in "abc":
        fname, args = parse_call(f"normal(0, {PRIOR_SD:g})", names, FAMILIES)
        m, _ = m.with_prior(Prior(name, fname, args))
    fname, args = parse_call("binomial(n, inv_logit(a + b * log1p(dose) + c * grp))", names,
                             FAMILIES)
    m, _ = m.with_likelihood(Likelihood("k", fname, args))
    c = compile_model(m, d)
    ag = auto_grid(c)
    assert ag.converged, ag.message
    return compute(c, build_grid(c.params, ag.specs))


# -- the reference, in plain Python ------------------------------------------

_ROWS = [(math.log1p(d), g, n, k,
          math.lgamma(n + 1) - math.lgamma(k + 1) - math.lgamma(n - k + 1))
         for d, g, n, k in zip(DOSE, GROUP, TRIALS, SUCCESSES)]
_LOG_PRIOR0 = -3 * math.log(PRIOR_SD * math.sqrt(2 * math.pi))


def _log_post(a: float, b: float, c: float) -> float:
    """log prior + log likelihood: normal(0, 5) densities and binomial pmfs."""
    lp = _LOG_PRIOR0 - (a * a + b * b + c * c) / (2 * PRIOR_SD ** 2)
    for ld, g, n, k, lchoose in _ROWS:
        eta = a + b * ld + c * g
        # log p and log(1 - p) for p = 1 / (1 + exp(-eta)), without overflow
        if eta > 0:
            lp1 = -math.log1p(math.exp(-eta))
            lq = lp1 - eta
        else:
            lq = -math.log1p(math.exp(eta))
            lp1 = lq + eta
        lp += lchoose + k * lp1 + (n - k) * lq
    return lp


def _reference():
    res = optimize.minimize(lambda v: -_log_post(*v), np.zeros(3), method="BFGS",
                            options={"gtol": 1e-10})
    x0, top = res.x, -res.fun
    h = 1e-4 * np.maximum(1.0, np.abs(x0))
    hess = np.zeros((3, 3))
    for i in range(3):
        for j in range(3):
            def at(si, sj):
                v = x0.copy()
                v[i] += si * h[i]
                v[j] += sj * h[j]
                return _log_post(*v)
            hess[i, j] = (at(1, 1) - at(1, -1) - at(-1, 1) + at(-1, -1)) / (4 * h[i] * h[j])
    chol = np.linalg.cholesky(np.linalg.inv(-hess))
    L = [[float(v) for v in row] for row in chol]
    m = [float(v) for v in x0]
    det = float(np.prod(np.diag(chol)))

    def integrand(z3, z2, z1, which):
        a = m[0] + L[0][0] * z1
        b = m[1] + L[1][0] * z1 + L[1][1] * z2
        c = m[2] + L[2][0] * z1 + L[2][1] * z2 + L[2][2] * z3
        f = math.exp(_log_post(a, b, c) - top) * det
        return f if which < 0 else f * (a, b, c)[which]

    # the largest value of the integrand on the box's faces (on a 9 x 9 mesh each)
    t = np.linspace(-BOX, BOX, 9)
    faces = max(integrand(*np.roll([s, u, w], r), -1) / det
                for r in range(3) for s in (-BOX, BOX) for u in t for w in t)
    box = [(-BOX, BOX)] * 3
    opts = {"epsabs": 1e-10, "epsrel": 1e-8, "limit": 100}
    z, _ = integrate.nquad(integrand, box, args=(-1,), opts=opts)
    means = [integrate.nquad(integrand, box, args=(k,), opts=opts)[0] / z for k in range(3)]
    return math.log(z) + top, means, faces


@pytest.fixture(scope="module")
def both():
    return _engine_posterior(), _reference()


def test_log_evidence_agrees_with_nquad(both):
    post, (log_z, _, _) = both
    assert post.log_evidence.value == pytest.approx(log_z, rel=REL)


@pytest.mark.parametrize("k, name", list(enumerate("abc")))
def test_means_agree_with_nquad(both, k, name):
    post, (_, means, _) = both
    assert post.param_mean(name).value == pytest.approx(means[k], rel=REL)


def test_the_boxes_hold_the_mass(both):
    # the reference box: the posterior on its faces is below 1e-8 of its peak (it is
    # ~2e-9 here, where a normal density would be 7e-13: the tails are a little
    # heavier), so the mass outside is far below the 1e-6 compared
    post, (_, _, faces) = both
    assert faces < 1e-8
    # the engine's grid: little mass in its outer cells
    for name in "abc":
        assert max(post.diagnostics.edge_mass[name]) < 1e-9, name
