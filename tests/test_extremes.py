"""Every family's log-density and log survival function at extreme arguments, against
mpmath.

Reference: tests/mp_reference.py, the textbook density of each family evaluated by
mpmath in as many digits as the arguments need, and survival functions as mpmath
quadratures (or term-by-term sums) of those densities. Concentrations, shapes,
counts and degrees of freedom go up to 1e300, scales down to 1e-300, probabilities
to within 1e-15 of 0 and 1, and survival functions far into the tails where they
are far below the smallest double (log P(X > x) of -1000 and beyond).

The error measured is |got - ref| / max(1, |ref|): relative where the log-density is
large, absolute where it is near 0 (an absolute error of a log-density is the
relative error of the density).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import sympy as sp

from engine import families as fam
from engine import special as S

import mp_reference as R

MODULES = [S.NAMESPACE, "scipy", "numpy"]  # as engine/model.py compiles

# family -> [(args, x values)]: log-densities at extreme arguments
LOGPDF_CASES = {
    "normal": [((0.0, 1e-300), [0.0, 1e-300, -3e-299]), ((1e300, 1e299), [1e300, 1.5e300]),
               ((0.0, 1.0), [38.0, -1e10])],
    "student_t": [((1e15, 0.0, 1.0), [0.0, 3.0, -30.0]), ((1e300, 0.0, 1.0), [0.0, 5.0]),
                  ((3.0, 0.0, 1e-300), [1e-300, 1e-290]), ((0.5, 0.0, 1.0), [1e5, 1e100, -1e100]),
                  ((1e-3, 2.0, 1e200), [1e300])],
    "cauchy": [((0.0, 1e-300), [1.0, -1.0]), ((0.0, 1.0), [1e200, -1e200]),
               ((1e300, 1e290), [1.5e300])],
    "lognormal": [((700.0, 0.1), [math.exp(700.0), math.exp(701.0)]), ((-690.0, 2.0), [1e-300]),
                  ((0.0, 1e-10), [1.0, 1.0 + 1e-10])],
    "exponential": [((1e-300,), [1e300, 0.0]), ((1e300,), [1e-300, 0.0])],
    "gamma": [((1e15, 1e15), [1.0, 1.0 + 3e-8, 1.0 - 1e-7]), ((1e300, 1e300), [1.0]),
              ((1e-10, 1.0), [1e-300, 1.0]), ((0.5, 1e-300), [1e300]),
              ((2e5, 1e-280), [2e285])],
    "inv_gamma": [((1e15, 1e15), [1.0, 1.0 + 3e-8]), ((1e-10, 1.0), [1e-300, 1e300]),
                  ((1e300, 1e300), [1.0]), ((3.0, 1e-300), [1e-300])],
    "beta": [((1e15, 1e15), [0.5, 0.5 + 1e-8, 0.5 - 5e-8]), ((1e30, 1e30), [0.5]),
             ((0.5, 1e15), [1e-16, 5e-16]), ((1e-5, 1e-5), [1e-300, 0.5, 1 - 1e-16]),
             ((1.5, 0.7), [1e-300, 0.999])],
    "weibull": [((1e-5, 1e-300), [1.0]), ((50.0, 1e300), [1e300, 9e299]), ((0.5, 1.0), [1e-300])],
    "half_normal": [((1e-300,), [1e-300]), ((1e300,), [1e300])],
    "half_cauchy": [((1e-300,), [1.0]), ((1.0,), [1e200])],
    "logistic": [((0.0, 1e-300), [0.0, 1e-298]), ((0.0, 1.0), [800.0, -800.0])],
    "laplace": [((0.0, 1e-300), [1e-298]), ((1e300, 1e290), [1.2e300])],
    "binomial": [((1e15, 0.3), [3e14, 3e14 + 1e7]), ((1e300, 0.5), [5e299]),
                 ((100.0, 1e-300), [0.0, 1.0]), ((100.0, 1 - 1e-15), [100.0, 99.0]),
                 ((50.0, 0.5), [25.0, 0.0])],
    "poisson": [((1e15,), [1e15, 1e15 + 1e8]), ((1e300,), [1e300]), ((1e-300,), [0.0, 1.0]),
                ((1e100,), [0.0])],
    "neg_binomial": [((1e15, 0.5), [1e15, 1e15 + 1e8]), ((1e15, 1 - 1e-14), [10.0, 0.0]),
                     ((1e-10, 0.5), [0.0, 5.0]), ((3.0, 1e-12), [3e12])],
    "beta_binomial": [((20.0, 5e14, 5e14), [10.0, 0.0]), ((20.0, 5e19, 5e19), [10.0, 3.0]),
                      ((20.0, 3e299, 7e299), [6.0, 20.0]), ((1e6, 2.0, 3.0), [4e5, 1.0]),
                      ((20.0, 1e-300, 1.0), [0.0, 5.0]), ((1e15, 1e15, 1e15), [5e14])],
    "geometric": [((1e-300,), [1e100, 1.0]), ((1 - 1e-16,), [1.0, 2.0])],
    "hypergeometric": [((1e15, 5e14, 1e6), [5e5, 4.99e5]), ((1e300, 5e299, 1e3), [500.0]),
                       ((1e6, 10.0, 1e5), [1.0, 10.0]), ((50.0, 20.0, 40.0), [10.0, 20.0])],
}

# family -> [(args, x values)]: log survival functions, far into the tails
LOGSF_CASES = {
    "normal": [((0.0, 1.0), [40.0, 1e3, -40.0]), ((0.0, 1e-300), [1e-298])],
    "student_t": [((1e15, 0.0, 1.0), [3.0, 40.0, -40.0]), ((3.0, 0.0, 1.0), [1e10, 1e110, -1e10]),
                  ((0.5, 0.0, 1.0), [1e5]), ((1e6, 0.0, 1.0), [40.0]),
                  ((30.0, 0.0, 1e-300), [1e-298])],
    "cauchy": [((0.0, 1.0), [1e300, -1e300, 1e10])],
    "lognormal": [((0.0, 1.0), [math.exp(40.0), math.exp(-40.0)]), ((-690.0, 1e-3), [1e-299])],
    "exponential": [((1e-300,), [1e300])],
    "gamma": [((1e15, 1e15), [1.0 + 3e-7, 1.0 + 1.2e-6, 1.0 - 1.2e-6]), ((50.0, 1.0), [2000.0]),
              ((3.0, 1.0), [1e3, 1e-200]), ((0.5, 1.0), [900.0]), ((1e5, 1.0), [1.3e5])],
    "inv_gamma": [((3.0, 1.0), [1e120, 1e-3]), ((1e15, 1e15), [1.0 + 1.3e-6, 1.0 - 1.3e-6]),
                  ((1e5, 1e5), [1.3])],
    "beta": [((1e15, 1e15), [0.5 + 1e-7, 0.5 + 4.4e-7, 0.5 - 4.4e-7]), ((5.0, 3.0), [1e-80]),
             ((2.0, 50.0), [0.9, 0.9999999]), ((1e4, 1e4), [0.6])],
    "weibull": [((50.0, 1e300), [2e300])],
    "half_normal": [((1.0,), [40.0]), ((1e-300,), [3e-299])],
    "half_cauchy": [((1.0,), [1e300])],
    "logistic": [((0.0, 1.0), [800.0, -800.0])],
    "laplace": [((0.0, 1.0), [800.0, -800.0])],
    "binomial": [((1000.0, 0.01), [500.0, 2.0]), ((1e15, 0.3), [3e14 + 5.8e8, 3e14 - 5.8e8]),
                 ((200.0, 1 - 1e-12), [198.0])],
    "poisson": [((1.0,), [300.0]), ((1e15,), [1e15 + 1.3e9, 1e15 - 1.3e9]), ((1e-300,), [0.0])],
    "neg_binomial": [((2.0, 0.5), [1200.0]), ((1e15, 0.5), [1e15 + 1.8e9, 1e15 - 1.8e9]),
                     ((0.5, 0.999), [5000.0])],
    "beta_binomial": [((20.0, 5e14, 5e14), [15.0, 3.0]), ((2000.0, 1.0, 1.0), [1000.0]),
                      ((5000.0, 50.0, 50.0), [4900.0]), ((30.0, 0.3, 0.4), [29.0, 0.0])],
    "geometric": [((0.5,), [2000.0])],
    "hypergeometric": [((10000.0, 5000.0, 1000.0), [800.0, 300.0]),
                       ((1e6, 500.0, 1000.0), [40.0])],
}

#: The largest error allowed per family (see the module docstring for the measure).
#: 1e-12 where the result is a short sum of well-conditioned terms. Where the
#: arguments are near 1e15, the result depends on them with a condition number near
#: sqrt(1e15): an error of one rounding in n*p or a + b moves it by about 3e-9
#: relative, and no evaluation in doubles does better.
LOGPDF_TOL = {"gamma": 1e-9, "inv_gamma": 1e-9, "beta": 1e-9, "binomial": 1e-9,
              "poisson": 1e-9, "neg_binomial": 1e-9, "beta_binomial": 1e-10,
              "hypergeometric": 1e-9}
LOGSF_TOL = {"gamma": 1e-9, "inv_gamma": 1e-9, "beta": 1e-9, "binomial": 1e-9,
             "poisson": 1e-9, "neg_binomial": 1e-9}


def compiled(name: str, survival: bool):
    """The family's term as a numpy function of (x, *args), -inf where a condition fails."""
    f = fam.FAMILIES[name]
    x = sp.Symbol("x", real=True)
    syms = [sp.Symbol(f"a{i}", real=True) for i in range(len(f.params))]
    term = (f.logsf if survival else f.logpdf)(x, *syms)
    fn = sp.lambdify([x] + syms, term.expr, modules=MODULES, cse=True)
    conds = [sp.lambdify([x] + syms, c, modules=MODULES) for c in term.conds]

    def call(xs, *args):
        xs = np.asarray(xs, float)
        with np.errstate(all="ignore"):
            out = np.broadcast_to(np.asarray(fn(xs, *[np.float64(a) for a in args]), float),
                                  xs.shape).copy()
            for c in conds:
                ok = np.broadcast_to(np.asarray(c(xs, *[np.float64(a) for a in args]), bool),
                                     xs.shape)
                out[~ok] = -np.inf
        return out

    return call


def errors(name: str, survival: bool, cases) -> list[tuple]:
    """(error, args, x, got, ref) for every case."""
    fn = compiled(name, survival)
    ref_fn = R.logsf if survival else R.logpdf
    out = []
    for args, xs in cases:
        got = fn(np.array(xs), *args)
        for x, g in zip(xs, got):
            ref = ref_fn(name, x, *args)
            if math.isinf(ref) or math.isinf(g):
                err = 0.0 if g == ref else math.inf
            else:
                err = abs(g - ref) / max(1.0, abs(ref))
            out.append((err, args, x, float(g), ref))
    return out


def test_every_family_has_extreme_cases():
    assert set(LOGPDF_CASES) | {"uniform", "bernoulli"} == set(fam.FAMILIES)
    assert set(LOGSF_CASES) | {"uniform", "bernoulli"} == set(fam.FAMILIES)


@pytest.mark.parametrize("name", sorted(LOGPDF_CASES))
def test_logdensity_at_extreme_arguments_matches_mpmath(name):
    errs = errors(name, False, LOGPDF_CASES[name])
    worst = max(errs, key=lambda e: e[0])
    assert worst[0] <= LOGPDF_TOL.get(name, 1e-12), worst


@pytest.mark.parametrize("name", sorted(LOGSF_CASES))
def test_log_survival_far_in_the_tails_matches_mpmath(name):
    errs = errors(name, True, LOGSF_CASES[name])
    worst = max(errs, key=lambda e: e[0])
    assert worst[0] <= LOGSF_TOL.get(name, 1e-12), worst


def test_beta_binomial_tends_to_the_binomial_at_large_concentration():
    # the limit of beta-binomial(n, mu*c, (1-mu)*c) as c -> inf is binomial(n, mu)
    # (common practice; the reference values here are scipy.stats.binom's)
    import scipy.stats as st
    bb = compiled("beta_binomial", False)
    ks = np.arange(21.0)
    ref = st.binom.logpmf(ks, 20, 0.3)
    for c in (1e20, 1e100, 1e300):
        got = bb(ks, 20.0, 0.3 * c, 0.7 * c)
        assert np.max(np.abs(got - ref)) < 1e-11, (c, got - ref)


# ---------------------------------------------------------------------------------
# the stable pieces themselves, and the derivatives the curvature at the mode uses

def _mp(v):
    import mpmath as mp
    return mp.mpf(float(v))


@pytest.mark.parametrize("a, d", [(0.5, 3.0), (12.0, 0.5), (250.0, 7.0), (1e15, 20.0),
                                  (1e300, 5.0), (3e5, 1e-9), (1e8, 1e8), (0.3, 1e15)])
def test_lrising_matches_mpmath(a, d):
    import mpmath as mp
    from engine import logspace as L
    # reference: lgamma(a + d) - lgamma(a) in enough digits (mpmath.loggamma)
    with mp.workdps(R._dps(a, d)):
        ref = float(mp.loggamma(_mp(a) + _mp(d)) - mp.loggamma(_mp(a)))
    got = float(L.lrising(a, d))
    assert abs(got - ref) <= 1e-14 * max(1.0, abs(ref)), (got, ref)


@pytest.mark.parametrize("m", [0, 1, 2])
@pytest.mark.parametrize("a, d", [(0.7, 2.0), (15.0, 0.5), (1e6, 3.0), (1e15, 20.0),
                                  (1e100, 1e90), (40.0, 1e-7)])
def test_polygamma_differences_match_mpmath(m, a, d):
    import mpmath as mp
    from engine import logspace as L
    # reference: mpmath.polygamma at both arguments, differenced in 60+ digits
    with mp.workdps(60 + int(math.log10(max(a, d, 1.0)))):
        ref = float(mp.polygamma(m, _mp(a) + _mp(d)) - mp.polygamma(m, _mp(a)))
    got = float(L.psi_diff(m, a, d))
    assert got == pytest.approx(ref, rel=1e-12, abs=0), (got, ref)


@pytest.mark.parametrize("t", [-0.999, -0.4, -1e-3, -1e-9, 1e-15, 2e-6, 0.3, 0.49, 0.7, 40.0])
def test_log1pmx_matches_mpmath(t):
    import mpmath as mp
    from engine import logspace as L
    with mp.workdps(60):  # reference: log1p(t) - t in 60 digits
        ref = float(mp.log1p(_mp(t)) - _mp(t))
    assert float(L.log1pmx(t)) == pytest.approx(ref, rel=2e-15, abs=0)


# family -> (args at which to differentiate, index of the continuous argument, x values)
DERIV_CASES = [
    ("gamma", (1e8, 1e8), 0, [1.0, 1.0 + 2e-4]),
    ("gamma", (3.5, 2.0), 1, [0.7]),
    ("beta", (1e7, 3e7), 1, [0.25]),
    ("beta_binomial", (20.0, 3e5, 7e5), 1, [6.0, 0.0]),
    ("beta_binomial", (20.0, 3e12, 7e12), 2, [6.0]),
    ("beta_binomial", (20.0, 0.8, 2.5), 1, [3.0]),
    ("neg_binomial", (1e9, 0.5), 0, [1e9 + 3e4]),
    ("student_t", (1e7, 0.0, 1.0), 0, [2.0]),
    ("poisson", (1e12,), 0, [1e12 + 2e6]),
    ("binomial", (1e12, 0.3), 1, [3e11 + 5e5, 3.0]),
]


@pytest.mark.parametrize("name, args, k, xs", DERIV_CASES,
                         ids=[f"{c[0]}{c[1]}[{c[2]}]" for c in DERIV_CASES])
def test_first_and_second_derivatives_match_mpmath(name, args, k, xs):
    # the curvature at the mode is found from these (sympy derivatives of the stable
    # forms); reference: mpmath.diff of the textbook log-density in enough digits
    import mpmath as mp
    f = fam.FAMILIES[name]
    x = sp.Symbol("x", real=True)
    syms = [sp.Symbol(f"a{i}", real=True) for i in range(len(f.params))]
    expr = f.logpdf(x, *syms).expr
    d1 = sp.lambdify([x] + syms, sp.diff(expr, syms[k]), modules=MODULES)
    d2 = sp.lambdify([x] + syms, sp.diff(expr, syms[k], 2), modules=MODULES)
    for xv in xs:
        with mp.workdps(2 * R._dps(xv, *args) + 40):
            def g(v):
                a = [_mp(c) for c in args]
                a[k] = v
                return R.LOGPDF[name](_mp(xv), *a)
            ref1 = float(mp.diff(g, _mp(args[k]), 1))
            ref2 = float(mp.diff(g, _mp(args[k]), 2))
        with np.errstate(all="ignore"):
            got1 = float(d1(xv, *args))
            got2 = float(d2(xv, *args))
        # the second derivative sets the grid's width: it must hold to a few digits
        # even where it is 1e-20 (a concentration of 1e12)
        assert got2 == pytest.approx(ref2, rel=1e-7), (xv, got2, ref2)
        assert got1 == pytest.approx(ref1, rel=1e-6, abs=1e-9 * abs(ref2) ** 0.5), (xv, got1, ref1)


# ---------------------------------------------------------------------------------
# through the model: sums over rows reduce to sufficient statistics with the textbook
# form, which cancels at extreme parameters; there the stable form must be summed

THROUGH = [
    # family, data, argument texts in theta, theta values
    ("gamma", [10.0, 10.00000001, 9.99999999, 10.000000005], ("theta", "theta/10"),
     [3.0, 1e8, 1e12, 2e18]),
    ("poisson", [1e12 + 3e5, 1e12 - 1e6, 1e12 + 2e6], ("theta",), [1e12, 1e12 + 1e6, 7.0e11]),
    ("binomial", [3e14 + 1e7, 3e14 - 2e7], ("1e15", "theta"), [0.3, 0.3 + 1e-8]),
    ("neg_binomial", [1e9 + 2e4, 1e9 - 3e4], ("1e9", "theta"), [0.5, 0.5 + 1e-5]),
    ("beta", [0.25, 0.25 + 1e-8, 0.25 - 2e-8], ("theta", "3*theta"), [2.0, 1e9, 1e15]),
    ("inv_gamma", [1.0, 1.0 + 1e-9, 1.0 - 2e-9], ("theta", "theta"), [5.0, 1e10, 1e17]),
]


@pytest.mark.parametrize("name, ys, texts, values", THROUGH, ids=[c[0] for c in THROUGH])
def test_reduced_sums_keep_their_digits_at_extreme_parameters(name, ys, texts, values):
    from engine.data import Column, DataSet
    from engine.expr import parse
    from engine.model import Likelihood, Model, compile_model, make_param
    kind = "unit" if name in ("binomial", "neg_binomial") else "positive"
    theta = make_param("theta", kind)
    model, _ = Model().with_param(theta)
    args = tuple(parse(t, {"theta": theta.symbol}) for t in texts)
    model, _ = model.with_likelihood(Likelihood("y", name, args))
    data, _ = DataSet().with_column(Column("y", np.array(ys)))
    c = compile_model(model, data)
    assert c.reduced  # the textbook form reduces: the check is of its precision
    got = c.log_likelihood([np.array(values)])
    for v, g in zip(values, got):
        argv = [float(eval_text(t, v)) for t in texts]
        ref = sum(R.logpdf(name, y, *argv) for y in ys)  # mpmath, term by term
        # arguments near 1e15: one rounding of n*p or a*x moves the result by ~1e-9
        # relative (the condition number; see LOGPDF_TOL)
        big = max(abs(a) for a in argv + list(ys)) > 1e6
        assert g == pytest.approx(ref, rel=3e-9 if big else 1e-12, abs=1e-12), (v, g, ref)


def eval_text(text: str, theta: float) -> float:
    """The argument texts of THROUGH at theta (they are ours: theta, theta/10, 3*theta, 1e9)."""
    table = {"theta": theta, "theta/10": theta / 10, "3*theta": 3 * theta}
    return table[text] if text in table else float(text)


@pytest.mark.parametrize("text, args", [
    ("lbeta(a, b)", (1e15, 2e15)), ("lbeta(a, b)", (3.5, 1e12)), ("lbeta(a, b)", (0.5, 0.25)),
    ("lchoose(a, b)", (1e15, 4e14)), ("lchoose(a, b)", (1e6, 3.0)), ("lchoose(a, b)", (20, 7)),
    ("lbeta(a, b)", (999998.0, 4.0)), ("lbeta(a, b)", (1e4, 7.0)), ("lbeta(a, b)", (15.0, 12.0)),
])
def test_formula_functions_lbeta_and_lchoose_keep_their_digits(text, args):
    # a formula's lbeta and lchoose at large arguments, against mpmath.loggamma
    import mpmath as mp
    from engine.expr import parse
    names = {"a": sp.Symbol("a", real=True), "b": sp.Symbol("b", real=True)}
    fn = sp.lambdify([names["a"], names["b"]], parse(text, names), modules=MODULES)
    a, b = args
    with mp.workdps(R._dps(a, b) + 20):
        A, Bv = _mp(a), _mp(b)
        ref = float(R.logbeta(A, Bv) if text.startswith("lbeta") else R.lchoose(A, Bv))
    assert float(fn(a, b)) == pytest.approx(ref, rel=1e-13)
    # and folded as a constant the same way
    folded = parse(f"{text.split('(')[0]}({float(a)!r}, {float(b)!r})", {})
    assert float(folded) == pytest.approx(ref, rel=1e-13)
