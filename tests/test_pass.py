"""The pass on sub-tensor blocks (engine/layout.py, posterior._TensorSums) against
references outside the project: the log-density summed row by row with scipy.stats on
the whole mesh, reduced by hand with the grid's own weights, and scipy.integrate for
the evidence. The grids are large enough for the tensor pass (posterior._TensorSums.SMALL)
and cut into many blocks, with pairs that cross block edges."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats as st
from scipy import integrate
from scipy.special import logsumexp

from engine.model import compile_model
from engine.posterior import _TensorSums, compute
from engine.refine import AxisSpec, build_grid
from engine.workspace import Workspace

# invented benchmark-style data (not a scenario): fixed seeds
RNG = np.random.default_rng(5)
X = np.linspace(0.0, 4.0, 25)
Y = 0.7 + 1.3 * X + RNG.normal(0.0, 0.8, X.size)


def _regression():
    w = Workspace()
    for name, kind in (("a", "real"), ("b", "real"), ("s", "positive")):
        w.param(name, kind)
    w.prior("a", "normal(0, 5)")
    w.prior("b", "normal(0, 5)")
    w.prior("s", "gamma(2, 1)")
    w.data_typed("x", [repr(float(v)) for v in X])
    w.data_typed("y", [repr(float(v)) for v in Y])
    w.likelihood("y", "normal(a + b * x, s)")
    return compile_model(w.state.model, w.state.data)


def _mesh_reference(grid):
    """Log evidence, means, covariance and 2-D marginals from scipy.stats on the mesh."""
    a, b, s = grid.axes
    A, B, S = np.meshgrid(a.values, b.values, s.values, indexing="ij")
    lp = (st.norm(0, 5).logpdf(A) + st.norm(0, 5).logpdf(B) + st.gamma(2).logpdf(S))
    for xv, yv in zip(X, Y):
        lp += st.norm.logpdf(yv, A + B * xv, S)
    t = lp + a.logw[:, None, None] + b.logw[None, :, None] + s.logw[None, None, :]
    log_z = logsumexp(t)
    w = np.exp(t - log_z)
    th = [A, B, S]
    mean = np.array([np.sum(w * v) for v in th])
    cov = np.array([[np.sum(w * (u - mean[i]) * (v - mean[j])) for j, v in enumerate(th)]
                    for i, u in enumerate(th)])
    pairs = {(0, 1): w.sum(axis=2), (0, 2): w.sum(axis=1), (1, 2): w.sum(axis=0)}
    return log_z, mean, cov, pairs


@pytest.mark.parametrize("block", [4096, 1000, 37])
def test_tensor_pass_matches_scipy_stats_on_the_mesh(block):
    c = _regression()
    grid = build_grid(c.params, [AxisSpec("a", -1.5, 3.0, 31), AxisSpec("b", 0.5, 2.1, 29),
                                 AxisSpec("s", 0.35, 2.0, 33)])
    assert _TensorSums.fits(grid)
    post = compute(c, grid, block=block)
    log_z, mean, cov, pairs = _mesh_reference(grid)
    assert post.log_mass[0] == pytest.approx(log_z, abs=1e-10)
    assert post.mean == pytest.approx(mean, rel=1e-10)
    assert post.cov == pytest.approx(cov, rel=1e-8, abs=1e-14)
    for k, ref in pairs.items():
        assert post.pairs[k] == pytest.approx(ref, rel=1e-9, abs=1e-16), k
        assert post.pairs[k].sum() == pytest.approx(1.0, rel=1e-12)
    for k, name in enumerate("abs"):
        assert post.marginals[name].mass == pytest.approx(pairs[(0, 1) if k < 2 else (0, 2)]
                                                         .sum(axis=1 - k if k < 2 else 0),
                                                         rel=1e-9, abs=1e-16)


def test_tensor_pass_evidence_matches_scipy_integrate():
    # a normal sample with unknown mean and sd: the evidence by scipy.integrate.dblquad
    y = np.random.default_rng(9).normal(2.0, 1.5, 40)
    w = Workspace()
    w.param("mu", "real")
    w.param("sigma", "positive")
    w.prior("mu", "normal(0, 10)")
    w.prior("sigma", "half_normal(5)")
    w.data_typed("y", [repr(float(v)) for v in y])
    w.likelihood("y", "normal(mu, sigma)")
    c = compile_model(w.state.model, w.state.data)
    grid = build_grid(c.params, [AxisSpec("mu", 0.0, 4.0, 201), AxisSpec("sigma", 0.7, 3.5, 201)])
    assert _TensorSums.fits(grid)
    post = compute(c, grid)

    # the normal log-likelihood from n, sum y, sum y^2 (textbook) and the two priors'
    # log-densities, written out for speed (checked against scipy.stats at one point)
    n, s1, s2 = y.size, float(y.sum()), float((y * y).sum())

    def log_joint(s, m):
        return (-0.5 * (m / 10) ** 2 - math.log(10 * math.sqrt(2 * math.pi))
                - 0.5 * (s / 5) ** 2 + math.log(math.sqrt(2 / math.pi) / 5)
                - n * math.log(s) - 0.5 * n * math.log(2 * math.pi)
                - (s2 - 2 * m * s1 + n * m * m) / (2 * s * s))

    assert log_joint(1.3, 2.2) == pytest.approx(
        st.norm(0, 10).logpdf(2.2) + st.halfnorm(scale=5).logpdf(1.3)
        + np.sum(st.norm.logpdf(y, 2.2, 1.3)), rel=1e-13)

    peak = log_joint(1.5, 2.0)
    z, _ = integrate.dblquad(lambda s, m: math.exp(log_joint(s, m) - peak), 0.0, 4.0, 0.7, 3.5,
                             epsabs=0, epsrel=1e-11)
    assert post.log_evidence.value == pytest.approx(math.log(z) + peak, abs=1e-8)
    assert post.log_evidence.error < 1e-6
