"""Conditions as 0/1 indicators inside formulas: ``r1 * (year <= k) + r2 * (year > k)``.

A condition in parentheses used where a number is expected (an operand of
arithmetic, a function's argument) is 1 where it holds and 0 where it does not (the
indicator of a set, common practice). At the top of a `prob` it is still a condition.

References: numpy's own comparisons (general-purpose library) for the values;
scipy.stats for likelihood sums; and for a change-point Poisson model, the posterior
over the change point in closed form: with gamma(a, b) priors on the two rates, each
segment's counts c_1..c_m integrate to b^a Gamma(a + S) / (Gamma(a) (b + m)^(a + S)
prod c_i!), S = sum c_i (Poisson-gamma conjugacy, common practice), summed here over
every change year with numpy.

The yearly counts are invented for these tests (a scenario of our own).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats as st
import sympy as sp
from scipy.special import gammaln

from engine.data import Column, DataSet
from engine.errors import FormulaError
from engine.expr import parse
from engine.model import Likelihood, Model, compile_model, make_param
from engine.workspace import Workspace

YEARS = np.arange(1851, 1891)
COUNTS = np.array([2, 0, 2, 3, 3, 6, 4, 3, 1, 3, 2, 0, 2, 3, 4, 0, 4, 1, 3, 1, 2, 2, 0, 0,
                   1, 1, 0, 0, 2, 1, 1, 0, 0, 0, 2, 2, 1, 1, 1, 2])  # invented
KS = np.arange(1852, 1890)   # change years: the rate is r1 up to k, r2 after it
A, B = 2.0, 1.0              # gamma(shape 2, rate 1) priors on r1 and r2

SYM = {n: sp.Symbol(n, real=True) for n in ("year", "k", "r1", "r2", "x")}


def _segment(c):
    S, m = float(np.sum(c)), len(c)
    return (A * math.log(B) - gammaln(A) + gammaln(A + S) - (A + S) * math.log(B + m)
            - float(np.sum(gammaln(np.asarray(c) + 1.0)))), S, m


@pytest.fixture(scope="module")
def reference():
    logp, m1, m2 = [], [], []
    for k in KS:
        before, after = COUNTS[YEARS <= k], COUNTS[YEARS > k]
        l1, S1, n1 = _segment(before)
        l2, S2, n2 = _segment(after)
        logp.append(l1 + l2)
        m1.append((A + S1) / (B + n1))   # posterior mean of a gamma rate
        m2.append((A + S2) / (B + n2))
    logp = np.array(logp)
    top = logp.max()
    w = np.exp(logp - top)
    Z = w.sum()
    p = w / Z
    return dict(log_z=float(top + math.log(Z / len(KS))), p=p,
                mean_k=float(np.sum(KS * p)), mean_r1=float(np.sum(p * m1)),
                mean_r2=float(np.sum(p * m2)), p1870=float(p[KS > 1870].sum()))


@pytest.fixture(scope="module")
def ws():
    w = Workspace()
    w.param("k", "int", lo=int(KS[0]), hi=int(KS[-1]))
    w.param("r1", "positive")
    w.param("r2", "positive")
    w.prior("r1", "gamma(2, 1)")
    w.prior("r2", "gamma(2, 1)")
    w.data_typed("year", ["1851:1890"])
    w.data_typed("count", [str(int(c)) for c in COUNTS])
    w.likelihood("count", "poisson(r1 * (year <= k) + r2 * (year > k))")
    w.grid_auto()
    w.compute()
    return w


def test_change_point_posterior_matches_the_closed_form(ws, reference):
    assert ws.evidence().values[0] == pytest.approx(reference["log_z"], abs=1e-8)
    rows = {r.name: r for r in ws.summary().rows}
    assert rows["k"].mean.value == pytest.approx(reference["mean_k"], rel=1e-10)
    assert rows["r1"].mean.value == pytest.approx(reference["mean_r1"], rel=1e-8)
    assert rows["r2"].mean.value == pytest.approx(reference["mean_r2"], rel=1e-8)


def test_prob_takes_a_condition_and_mean_takes_its_indicator(ws, reference):
    p = ws.prob("k > 1870").values[0]
    assert p == pytest.approx(reference["p1870"], abs=1e-10)
    assert ws.mean("(k > 1870)").values[0] == pytest.approx(p, abs=1e-12)
    # parenthesised at the top of a prob it is still the condition
    assert ws.prob("(k > 1870)").values[0] == pytest.approx(p, abs=1e-12)


def test_indicator_values_over_rows_and_grid_points():
    e = parse("2 * (year > k) - (0 < x <= 1) + exp(year <= k)", SYM)
    fn = sp.lambdify([SYM["year"], SYM["k"], SYM["x"]], e, modules="numpy")
    year = np.array([[1850.0, 1860.0, 1870.0]])     # rows
    k = np.array([[1855.0], [1860.0], [1875.0]])    # grid points
    x = np.array([[0.0, 0.5, 1.0]])
    want = (2 * (year > k) - ((x > 0) & (x <= 1)) + np.exp((year <= k).astype(float)))
    assert np.array_equal(fn(year, k, x), want)


def test_constant_indicators_fold():
    assert parse("(3 > 2) + (1 == 2) + 1", SYM) == 2
    assert parse("min(1, 2 > 1)", SYM) == 1


@pytest.mark.parametrize("text, pattern, condition", [
    ("year > k", r"`year > k` is a condition, not a number; for 1 where it holds and 0 "
                 r"where not, put it in parentheses: \(year > k\) at column 1", False),
    ("  not k > 3", r"`not k > 3` is a condition, not a number.* at column 3", False),
    ("r1 * ((k > 1) and 2)", r"`2` is a number, not a condition \(compare it, as in x > 0\) "
                             r"at column 19", False),
    ("r1 * (k > )", r"cannot read the formula here at column 11", False),
    ("r1 * (k > 1", r"at column", False),
    ("r1 * (k is 2)", r"`Is` comparisons are not allowed at column 7", False),
    ("(k > 1) + 1", r"`\(k > 1\) \+ 1` is a number, not a condition", True),
])
def test_misuse_gets_one_line_with_its_place(text, pattern, condition):
    with pytest.raises(FormulaError, match=pattern):
        parse(text, SYM, condition=condition)


def test_a_bare_condition_is_refused_by_mean_with_the_fix(ws):
    with pytest.raises(FormulaError, match=r"put it in parentheses: \(k > 1870\)"):
        ws.mean("k > 1870")


def _normal_model(mean_text: str):
    """y ~ normal(mean_text, 0.7) over the invented counts as y, by year."""
    m = make_param("m", "real")
    d = make_param("d", "real")
    k = make_param("k", "int", lo=1852, hi=1889)
    model = Model()
    for p in (m, d, k):
        model, _ = model.with_param(p)
    data = DataSet()
    data, _ = data.with_column(Column("y", COUNTS.astype(float)))
    data, _ = data.with_column(Column("year", YEARS.astype(float)))
    names = {"m": m.symbol, "d": d.symbol, "k": k.symbol, "year": sp.Symbol("year", real=True)}
    lk = Likelihood("y", "normal", (parse(mean_text, names), sp.Float(0.7)))
    model, _ = model.with_likelihood(lk)
    return model, data


@pytest.mark.parametrize("mean_text, reduces", [
    ("m + d * (year > 1870)", True),   # data alone in the indicator: sums reduce
    ("m + d * (year > k)", False),     # a parameter in it: summed row by row
])
def test_sufficient_statistics_reduce_or_fall_back(mean_text, reduces):
    model, data = _normal_model(mean_text)
    theta = [np.array([1.0, 2.5, 0.3]), np.array([-0.5, 1.0, 2.0]),
             np.array([1860.0, 1870.0, 1881.0])]
    rows = compile_model(model, data, reduce=False).log_likelihood(theta)
    c = compile_model(model, data).verified(theta)
    assert c.reduced is reduces
    got = c.log_likelihood(theta)
    for i in range(3):
        split = 1870.0 if "1870" in mean_text else theta[2][i]
        mu = theta[0][i] + theta[1][i] * (YEARS > split)
        ref = float(np.sum(st.norm(mu, 0.7).logpdf(COUNTS)))  # scipy.stats
        assert got[i] == pytest.approx(ref, rel=1e-12)
        assert rows[i] == pytest.approx(ref, rel=1e-12)


def test_an_indicator_in_a_denominator_is_an_error_with_its_place_not_a_crash():
    # 1/(p < m) is 1/0 where the condition fails: sympy's complex infinity there, which
    # must compile (as NaN) and be reported by the pass, not end in an internal error
    from engine.errors import ComputeError
    w = Workspace()
    w.param("m", "real")
    w.param("p", "unit")
    w.data_typed("y", ["1", "2", "3"])
    w.likelihood("y", "normal(m, 1/(p < m))")
    w.grid("m", -3.0, 3.0, 21)
    w.grid("p", 0.01, 0.99, 21)
    with pytest.raises(ComputeError, match=r"the log-density is NaN at .* first at m = "):
        w.compute()
