"""Every family's log-density and log survival function against scipy.stats.

Reference: scipy.stats (logpdf / logpmf / logsf of the frozen distribution each
family names in its `scipy` field, whose parameterisation is checked here too
by the values agreeing). Off the support the log-density is -inf."""

from __future__ import annotations

import numpy as np
import pytest
import scipy.stats as st
import sympy as sp

from engine import families as fam
from engine import special as S
from engine.data import Column, DataSet
from engine.errors import ModelError
from engine.families import FAMILIES
from engine.model import Likelihood, Model, compile_model, make_param

MODULES = [S.NAMESPACE, "scipy", "numpy"]  # as engine/model.py compiles

# scipy.stats.geom itself takes log1p(-1) at p = 1 (the reference, not the engine)
pytestmark = pytest.mark.filterwarnings("ignore:divide by zero encountered in log1p")

# family -> several argument values (each a valid point of the parameter space)
ARGS = {
    "normal": [(0.0, 1.0), (-3.5, 0.2), (100.0, 30.0)],
    "student_t": [(1.0, 0.0, 1.0), (3.5, -2.0, 0.5), (30.0, 10.0, 4.0)],
    "cauchy": [(0.0, 1.0), (5.0, 0.1)],
    "lognormal": [(0.0, 1.0), (2.0, 0.3), (-1.0, 2.0)],
    "exponential": [(1.0,), (0.01,), (25.0,)],
    "gamma": [(0.5, 1.0), (1.0, 2.0), (7.5, 0.3)],
    "inv_gamma": [(0.5, 1.0), (3.0, 2.0), (10.0, 50.0)],
    "beta": [(0.5, 0.5), (1.0, 1.0), (2.0, 9.0), (30.0, 4.0)],
    "uniform": [(0.0, 1.0), (-3.0, 7.0)],
    "weibull": [(0.7, 2.0), (1.0, 1.0), (3.5, 10.0)],
    "half_normal": [(1.0,), (0.1,), (20.0,)],
    "half_cauchy": [(1.0,), (0.1,)],
    "logistic": [(0.0, 1.0), (3.0, 0.2)],
    "laplace": [(0.0, 1.0), (-2.0, 3.0)],
    "bernoulli": [(0.0,), (0.3,), (1.0,)],
    "binomial": [(10.0, 0.3), (1.0, 0.5), (50.0, 0.0), (50.0, 1.0), (200.0, 0.97)],
    "poisson": [(0.5,), (7.0,), (120.0,), (0.0,)],
    "neg_binomial": [(1.0, 0.5), (3.5, 0.2), (20.0, 0.9), (2.0, 1.0)],
    "beta_binomial": [(10.0, 1.0, 1.0), (20.0, 0.5, 3.0), (5.0, 10.0, 2.0)],
    "geometric": [(0.5,), (0.05,), (1.0,)],
    "hypergeometric": [(20.0, 7.0, 5.0), (50.0, 25.0, 30.0), (1000.0, 30.0, 100.0), (12.0, 12.0, 4.0)],
}

# family -> constant arguments that break a constraint, and what the message says
BAD_ARGS = {
    "normal": ((0, -1), r"`normal` needs sd > 0; here mean = 0, sd = -1"),
    "student_t": ((0, 0, 1), r"`student_t` needs df > 0; scale > 0; here df = 0"),
    "cauchy": ((0, 0), r"`cauchy` needs scale > 0"),
    "lognormal": ((0, -2), r"`lognormal` needs sdlog > 0"),
    "exponential": ((-1,), r"`exponential` needs rate > 0; here rate = -1"),
    "gamma": ((2, 0), r"`gamma` needs shape > 0; rate > 0; here shape = 2, rate = 0"),
    "inv_gamma": ((-1, 1), r"`inv_gamma` needs shape > 0"),
    "beta": ((1, -0.5), r"`beta` needs a > 0; b > 0; here a = 1, b = -0.5"),
    "uniform": ((3, 3), r"`uniform` needs lo < hi; here lo = 3, hi = 3"),
    "weibull": ((0, 1), r"`weibull` needs shape > 0"),
    "half_normal": ((0,), r"`half_normal` needs sd > 0"),
    "half_cauchy": ((-3,), r"`half_cauchy` needs scale > 0"),
    "logistic": ((0, -1), r"`logistic` needs scale > 0"),
    "laplace": ((0, 0), r"`laplace` needs scale > 0"),
    "bernoulli": ((1.5,), r"`bernoulli` needs 0 <= p <= 1; here p = 1.5"),
    "binomial": ((2.5, 0.5), r"`binomial` needs n a whole number >= 0; 0 <= p <= 1; "
                             r"here n = 2.5, p = 0.5"),
    "poisson": ((-1,), r"`poisson` needs rate >= 0; here rate = -1"),
    "neg_binomial": ((2, 0), r"`neg_binomial` needs r > 0; 0 < p <= 1; here r = 2, p = 0"),
    "beta_binomial": ((-1, 1, 1), r"`beta_binomial` needs n a whole number >= 0"),
    "geometric": ((1.2,), r"`geometric` needs 0 < p <= 1; here p = 1.2"),
    "hypergeometric": ((10, 12, 3), r"`hypergeometric` needs N a whole number >= 0; K a whole "
                                    r"number, 0 <= K <= N; .*here N = 10, K = 12, n = 3"),
}


def test_every_family_is_covered():
    assert set(ARGS) == set(FAMILIES) == set(BAD_ARGS)


def _compile(term: fam.Term, x: sp.Symbol, syms: list[sp.Symbol]):
    """The term as a numpy function of (x, *args): -inf where a condition fails."""
    fn = sp.lambdify([x] + syms, term.expr, modules=MODULES, cse=True)
    conds = [sp.lambdify([x] + syms, c, modules=MODULES) for c in term.conds]

    def f(xs: np.ndarray, *args) -> np.ndarray:
        a = [np.float64(v) for v in args]
        with np.errstate(all="ignore"):
            out = np.broadcast_to(np.asarray(fn(xs, *a), float), xs.shape).copy()
            for c in conds:
                ok = np.broadcast_to(np.asarray(c(xs, *a), bool), xs.shape)
                out[~ok] = -np.inf
        return out

    return f


def _num(v: float) -> sp.Expr:
    return sp.Integer(int(v)) if v == int(v) else sp.Float(v)


def _symbols(f: fam.Family):
    return sp.Symbol("x", real=True), [sp.Symbol(f"a{i}", real=True) for i in range(len(f.params))]


def _points(f: fam.Family, dist) -> tuple[np.ndarray, np.ndarray]:
    """Points on the support (into both tails) and points off it."""
    lo, hi = dist.support()
    if f.discrete:
        top = float(max(min(hi, dist.ppf(1 - 1e-12)), lo))
        on = np.arange(max(lo, 0), top + 1)
        off = np.concatenate([[lo - 1, lo - 5, lo + 0.5, lo + 2.5, top + 0.25],
                              [hi + 1, hi + 7] if np.isfinite(hi) else []])
    else:
        q = np.array([1e-10, 1e-6, 0.01, 0.1, 0.3, 0.5, 0.7, 0.9, 0.99, 1 - 1e-6, 1 - 1e-10])
        on = np.unique(dist.ppf(q))
        # the ends of a closed support belong to it
        ends = [e for e in (lo, hi) if np.isfinite(e) and np.isfinite(dist.logpdf(e))]
        on = np.concatenate([on, ends])
        off = np.array([v for v in (lo - 1e-9, lo - 1, lo - 100, hi + 1e-9, hi + 1, hi + 100)
                        if np.isfinite(v) and dist.pdf(v) == 0 and not (lo <= v <= hi)])
    return on.astype(float), off.astype(float)


CASES = [(name, args) for name in FAMILIES for args in ARGS[name]]


@pytest.mark.parametrize("name, args", CASES, ids=[f"{n}{a}" for n, a in CASES])
def test_logdensity_matches_scipy_on_and_off_support(name, args):
    f = FAMILIES[name]
    x, syms = _symbols(f)
    lp = _compile(f.logpdf(x, *syms), x, syms)
    dist = f.scipy(*args)
    on, off = _points(f, dist)
    assert on.size >= 1
    ref = dist.logpmf(on) if f.discrete else dist.logpdf(on)
    got = lp(on, *args)
    fin = np.isfinite(ref)
    # infinities (a zero pmf value inside the range, a pole at an end) agree exactly
    assert np.array_equal(got[~fin], ref[~fin]), (on[~fin], got[~fin], ref[~fin])
    assert np.allclose(got[fin], ref[fin], rtol=1e-12, atol=1e-12), \
        np.max(np.abs(got[fin] - ref[fin]))
    if off.size:
        assert np.all(np.isneginf(lp(off, *args))), (off, lp(off, *args))
        ref_off = dist.logpmf(off) if f.discrete else dist.logpdf(off)
        assert np.all(np.isneginf(ref_off))


@pytest.mark.parametrize("name, args", CASES, ids=[f"{n}{a}" for n, a in CASES])
def test_log_survival_matches_scipy(name, args):
    f = FAMILIES[name]
    assert f.logsf is not None, f"`{name}` has no survival function"
    x, syms = _symbols(f)
    ls = _compile(f.logsf(x, *syms), x, syms)
    dist = f.scipy(*args)
    on, _ = _points(f, dist)
    lo, hi = dist.support()
    # at and above the support's lower end (a censored value below it is refused as data)
    pts = np.concatenate([on, [hi + 1.0] if np.isfinite(hi) else []])
    ref = dist.logsf(pts)
    got = ls(pts, *args)
    fin = np.isfinite(ref)
    assert np.array_equal(got[~fin], ref[~fin]), (pts[~fin], got[~fin], ref[~fin])
    # relative in the tails, absolute where log P(X > x) is near 0
    assert np.allclose(got[fin], ref[fin], rtol=1e-10, atol=1e-13), \
        (pts[fin], got[fin] - ref[fin])


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_arguments_outside_the_constraints_give_zero_density(name):
    # a parameter on a grid may cross a constraint: the density there is zero,
    # never NaN
    f = FAMILIES[name]
    x, syms = _symbols(f)
    lp = _compile(f.logpdf(x, *syms), x, syms)
    bad, _ = BAD_ARGS[name]
    good = ARGS[name][0]
    xs, _ = _points(f, f.scipy(*good))
    assert np.all(np.isneginf(lp(xs, *bad)))


@pytest.mark.parametrize("name", sorted(FAMILIES))
def test_constant_arguments_that_break_constraints_are_refused(name):
    args, pattern = BAD_ARGS[name]
    x = sp.Symbol("x", real=True)
    with pytest.raises(ModelError, match=pattern):
        fam.density(name, x, tuple(_num(a) for a in args))


def test_unknown_family_and_argument_count():
    x = sp.Symbol("x", real=True)
    with pytest.raises(ModelError, match=r"unknown distribution `nromal`; known: bernoulli, "):
        fam.density("nromal", x, (sp.Integer(0), sp.Integer(1)))
    with pytest.raises(ModelError, match=r"`normal` takes 2 arguments \(mean, sd\), got 1"):
        fam.density("normal", x, (sp.Integer(0),))
    with pytest.raises(ModelError, match=r"`poisson` takes 1 argument \(rate\), got 2"):
        fam.density("poisson", x, (sp.Integer(1), sp.Integer(2)))


# ---------------------------------------------------------------------------
# the same densities through the engine's own compilation of a likelihood:
# sum over rows of the log-density (reduced to sufficient statistics where the
# engine can) against the sum of scipy's logpdf / logpmf over the same rows

# family -> (index of the argument that is the parameter, its kind, values to test)
THROUGH_MODEL = {
    "normal": (0, "real", [-1.0, 0.3, 2.0]),
    "student_t": (1, "real", [-1.0, 0.3, 2.0]),
    "cauchy": (1, "positive", [0.2, 1.0, 3.0]),
    "lognormal": (1, "positive", [0.2, 1.0, 3.0]),
    "exponential": (0, "positive", [0.05, 0.5, 4.0]),
    "gamma": (1, "positive", [0.05, 0.5, 4.0]),
    "inv_gamma": (0, "positive", [0.5, 3.0, 10.0]),
    "beta": (0, "positive", [0.5, 2.0, 30.0]),
    "uniform": (1, "real", [7.5, 8.0, 20.0]),
    "weibull": (0, "positive", [0.7, 1.0, 3.5]),
    "half_normal": (0, "positive", [0.5, 2.0, 20.0]),
    "half_cauchy": (0, "positive", [0.5, 2.0, 20.0]),
    "logistic": (0, "real", [-1.0, 0.3, 2.0]),
    "laplace": (1, "positive", [0.2, 1.0, 3.0]),
    "bernoulli": (0, "unit", [0.01, 0.3, 0.99]),
    "binomial": (1, "unit", [0.01, 0.3, 0.99]),
    "poisson": (0, "positive", [0.5, 7.0, 120.0]),
    "neg_binomial": (1, "unit", [0.05, 0.5, 0.95]),
    "beta_binomial": (1, "positive", [0.5, 2.0, 30.0]),
    "geometric": (0, "unit", [0.05, 0.5, 0.95]),
    "hypergeometric": (0, "int", [20.0, 31.0, 400.0]),
}


@pytest.mark.parametrize("name", sorted(FAMILIES))
@pytest.mark.parametrize("reduce", [True, False], ids=["reduced", "rowwise"])
def test_likelihood_sum_matches_scipy(name, reduce):
    f = FAMILIES[name]
    k, kind, values = THROUGH_MODEL[name]
    base = list({"bernoulli": (0.3,)}.get(name, ARGS[name][0]))
    # draws from the family itself (scipy.stats) as test input, 40 rows
    whole = [int(v) if v == int(v) else v for v in base]  # scipy wants an integer n
    y = np.asarray(f.scipy(*whole).rvs(size=40, random_state=np.random.default_rng(7)), float)
    theta = make_param("theta", kind, **({"lo": 0, "hi": 1000} if kind == "int" else {}))
    args = tuple(theta.symbol if i == k else _num(v) for i, v in enumerate(base))
    model, _ = Model().with_param(theta)
    model, _ = model.with_likelihood(Likelihood("y", name, args))
    data, _ = DataSet().with_column(Column("y", y))
    c = compile_model(model, data, reduce=reduce)
    got = c.log_likelihood([np.array(values)])
    for v, g in zip(values, got):
        a = list(base)
        a[k] = v
        d = f.scipy(*a)
        ref = float(np.sum(d.logpmf(y) if f.discrete else d.logpdf(y)))
        assert g == pytest.approx(ref, rel=1e-11, abs=1e-9), (v, g, ref)
