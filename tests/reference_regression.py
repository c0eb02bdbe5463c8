"""The exact answer for a normal linear regression with an unknown sd (a test helper).

The model, as the tests declare it in quadrat:

    y_i ~ normal(b0 + b1 x1_i + ... , s),   b_j ~ normal(0, tau),   s ~ half_normal(scale).

Given s, the coefficients integrate out in closed form (the conjugate normal linear
model; standard results, written from memory and checked in
tests/test_reference_regression.py against scipy.stats.multivariate_normal and
scipy.integrate):

- y ~ N(0, s^2 I + tau^2 X X^T), so with X^T X = Q diag(e) Q^T and c = Q^T X^T y,
  log p(y | s) = -n/2 log(2 pi) - n log s - 1/2 sum_j log(1 + tau^2 e_j / s^2)
                 - (y^T y - sum_j c_j^2 / (e_j + s^2 / tau^2)) / (2 s^2);
- b | s, y ~ N(m(s), V(s)), V(s) = s^2 Q diag(1 / (e + s^2 / tau^2)) Q^T,
  m(s) = Q diag(1 / (e + s^2 / tau^2)) c.

The one integral left, over t = log s, is done by scipy.integrate.quad_vec (a
general-purpose library) to 1e-13 relative, for the evidence and the posterior
means and sds of every coefficient, of s and of log s at once.

The data are invented (a seeded design with correlated covariates); they are test
and benchmark inputs, not a scenario.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np
from scipy import integrate


@dataclass(frozen=True)
class RegressionCase:
    """An invented regression: design, response and the priors' settings.

    Attributes
    ----------
    X : ndarray, shape (n, k)
        First column all ones (the intercept b0), then covariates x1 .. x{k-1}.
    y : ndarray, shape (n,)
    tau : float
        Prior sd of every coefficient.
    scale : float
        Scale of the half-normal prior of s.
    """

    X: np.ndarray = field(repr=False)
    y: np.ndarray = field(repr=False)
    tau: float = 10.0
    scale: float = 5.0

    @property
    def k(self) -> int:
        return int(self.X.shape[1])

    @property
    def rows(self) -> int:
        return int(self.X.shape[0])

    @property
    def names(self) -> tuple[str, ...]:
        """Parameter names in the model's order: b0 .. b{k-1}, s."""
        return tuple(f"b{j}" for j in range(self.k)) + ("s",)


@dataclass(frozen=True)
class RegressionReference:
    """The exact posterior summaries.

    Attributes
    ----------
    log_evidence : float
    mean, sd : ndarray, shape (k + 1,)
        Of b0 .. b{k-1} and s, in their own units.
    log_s_mean, log_s_sd : float
        Of log s (the scale the frame uses for s).
    error : float
        quad_vec's own estimate of its relative error.
    """

    log_evidence: float
    mean: np.ndarray
    sd: np.ndarray
    log_s_mean: float
    log_s_sd: float
    error: float


def invented_case(k: int, rows: int = 200, *, seed: int = 20240917, sd: float = 1.3,
                  tau: float = 10.0, scale: float = 5.0) -> RegressionCase:
    """An invented design with `k` coefficients (intercept included) and `rows` rows.

    Covariates are standard normal with correlation 0.5 between neighbours; the
    coefficients that generate y are 1.0, 0.5, -0.8, 0.3, -0.2, 0.7, -0.4, ... and
    the noise sd is `sd`. Invented numbers, seeded, for tests and benchmarks.
    """
    rng = np.random.default_rng(seed + k)
    raw = rng.normal(size=(rows, max(k - 1, 0)))
    cov = np.array([[0.5 ** abs(i - j) for j in range(k - 1)] for i in range(k - 1)])
    xs = raw @ np.linalg.cholesky(cov).T if k > 1 else raw
    X = np.column_stack([np.ones(rows), xs])
    coef = np.array([1.0, 0.5, -0.8, 0.3, -0.2, 0.7, -0.4, 0.6, -0.1][:k])
    y = X @ coef + rng.normal(0.0, sd, rows)
    return RegressionCase(X, y, tau, scale)


def log_marginal_given_s(case: RegressionCase, s: np.ndarray) -> np.ndarray:
    """``log p(y | s)`` with the coefficients integrated out, shape of `s`."""
    X, y, tau = case.X, case.y, case.tau
    e, Q = np.linalg.eigh(X.T @ X)
    c = Q.T @ (X.T @ y)
    s = np.asarray(s, float)
    s2 = s[..., None] ** 2
    quad = y @ y - np.sum(c ** 2 / (e + s2 / tau ** 2), axis=-1)
    n = case.rows
    return (-0.5 * n * math.log(2 * math.pi) - n * np.log(s)
            - 0.5 * np.sum(np.log1p(tau ** 2 * e / s2), axis=-1) - quad / (2 * s[...] ** 2))


def log_prior_s(case: RegressionCase, s: np.ndarray) -> np.ndarray:
    """The half-normal log-density of s."""
    return 0.5 * math.log(2 / math.pi) - math.log(case.scale) - s ** 2 / (2 * case.scale ** 2)


def exact_reference(case: RegressionCase) -> RegressionReference:
    """Evidence and posterior means and sds, exact up to quad_vec's 1e-13."""
    X, y, tau = case.X, case.y, case.tau
    k = case.k
    e, Q = np.linalg.eigh(X.T @ X)
    c = Q.T @ (X.T @ y)

    def log_post_t(t):
        s = np.exp(t)
        return log_marginal_given_s(case, s) + log_prior_s(case, s) + t

    # locate the peak of the density of t = log s and its width, then integrate well
    # beyond both sides (the mass past 30 widths is below exp(-400))
    ts = np.linspace(-12, 8, 40001)
    lp = log_post_t(ts)
    i = int(np.argmax(lp))
    top = float(lp[i])
    inside = ts[lp > top - 20]
    width = (inside[-1] - inside[0]) / (2 * math.sqrt(40))
    lo, hi = ts[i] - 30 * width, ts[i] + 30 * width

    def integrand(t):
        s = math.exp(t)
        w = math.exp(float(log_post_t(np.array(t))) - top)
        inv = 1 / (e + s * s / tau ** 2)
        m = Q @ (inv * c)
        V = s * s * (Q * inv) @ Q.T
        second = V + np.outer(m, m)
        return w * np.concatenate([[1.0], m, np.diag(second), [s, s * s, t, t * t]])

    res = integrate.quad_vec(integrand, lo, hi, epsabs=0, epsrel=1e-13, limit=2000)
    vals, err = res[0], res[1]
    z = vals[0]
    mean_b = vals[1:1 + k] / z
    second_b = vals[1 + k:1 + 2 * k] / z
    s1, s2, t1, t2 = vals[1 + 2 * k:] / z
    mean = np.concatenate([mean_b, [s1]])
    sd = np.sqrt(np.concatenate([second_b - mean_b ** 2, [s2 - s1 ** 2]]))
    return RegressionReference(float(math.log(z) + top), mean, sd, float(t1),
                               float(math.sqrt(t2 - t1 ** 2)), float(err / abs(z)))


def model_and_data(case: RegressionCase):
    """The quadrat model and data of `case`, declared through the engine's parser.

    Returns
    -------
    (engine.model.Model, engine.data.DataSet)
    """
    from engine.data import Column, DataSet
    from engine.expr import parse_call
    from engine.families import FAMILIES
    from engine.model import Likelihood, Model, Prior, make_param

    data = DataSet()
    for j in range(1, case.k):
        data, _ = data.with_column(Column(f"x{j}", case.X[:, j].copy()))
    data, _ = data.with_column(Column("y", case.y.copy()))
    m = Model()
    for j in range(case.k):
        m, _ = m.with_param(make_param(f"b{j}", "real"))
    m, _ = m.with_param(make_param("s", "positive"))
    names = m.symbols(data)
    for j in range(case.k):
        text = f"normal(0, {case.tau!r})"
        fname, args = parse_call(text, names, FAMILIES)
        m, _ = m.with_prior(Prior(f"b{j}", fname, args, text=text))
    text = f"half_normal({case.scale!r})"
    fname, args = parse_call(text, names, FAMILIES)
    m, _ = m.with_prior(Prior("s", fname, args, text=text))
    mu = " + ".join(["b0"] + [f"b{j} * x{j}" for j in range(1, case.k)])
    text = f"normal({mu}, s)"
    fname, args = parse_call(text, names, FAMILIES)
    m, _ = m.with_likelihood(Likelihood("y", fname, args, text=text))
    return m, data
