"""Model compilation: sums over rows reduced to sufficient statistics give the
same log-likelihood as row-by-row evaluation, and bad declarations end in one
clear line naming the problem and its place.

The row-wise sums are the reference for the reductions; the row-wise sums
themselves are checked against scipy.stats in test_families.py."""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st
from scipy import integrate

from engine.data import Column, DataSet
from engine.errors import DataError, ModelError
from engine.expr import parse, parse_call
from engine.families import FAMILIES
from engine.grid import Grid, make_axis
from engine.model import (Likelihood, Model, Prior, ReducedTerm, RowTerm, compile_model,
                          make_param)
from engine.posterior import compute


def dataset(**cols) -> DataSet:
    d = DataSet()
    for name, vals in cols.items():
        d, _ = d.with_column(Column(name, np.asarray(vals, float)))
    return d


def build(params, data: DataSet, likelihoods=(), priors=()) -> Model:
    """A model from text, through the engine's own parser.

    params: (name, kind, kwargs); likelihoods: (column, "family(args)") or
    (None, "log formula"); priors: (name, "family(args)")."""
    m = Model()
    for name, kind, kw in params:
        m, _ = m.with_param(make_param(name, kind, **kw))
    names = m.symbols(data)
    for target, text in priors:
        fname, args = parse_call(text, names, FAMILIES)
        m, _ = m.with_prior(Prior(target, fname, args, text=text))
    for col, text in likelihoods:
        if col is None:
            m, _ = m.with_likelihood(Likelihood(None, None, log=parse(text, names), text=text))
        else:
            fname, args = parse_call(text, names, FAMILIES)
            m, _ = m.with_likelihood(Likelihood(col, fname, args, text=text))
    return m


def random_points(rng, spec: dict[str, tuple[float, float]], n: int = 200):
    return [rng.uniform(lo, hi, n) for lo, hi in spec.values()]


# ---------------------------------------------------------------------------
# reduction against row-wise sums

RNG = np.random.default_rng(20240611)
X = RNG.uniform(-2, 3, 60)

REDUCTION_CASES = {
    "normal mean and sd": (
        [("mu", "real", {}), ("sigma", "positive", {})],
        dict(y=RNG.normal(1.5, 2.0, 60)),
        [("y", "normal(mu, sigma)")],
        {"mu": (-3, 5), "sigma": (0.3, 6)}),
    "regression with a linear predictor": (
        [("a", "real", {}), ("b", "real", {}), ("s", "positive", {})],
        dict(x=X, y=0.5 + 1.7 * X + RNG.normal(0, 0.4, 60)),
        [("y", "normal(a + b * x, s)")],
        {"a": (-1, 2), "b": (0, 3), "s": (0.1, 2)}),
    "quadratic regression": (
        [("a", "real", {}), ("b", "real", {}), ("c", "real", {})],
        dict(x=X, y=1 - X + 0.3 * X ** 2 + RNG.normal(0, 0.5, 60)),
        [("y", "normal(a + b * x + c * x^2, 0.5)")],
        {"a": (0, 2), "b": (-2, 0), "c": (0, 1)}),
    "poisson rate": (
        [("r", "positive", {})],
        dict(k=RNG.poisson(4.2, 60)),
        [("k", "poisson(r)")],
        {"r": (0.5, 12)}),
    "poisson regression on exposure": (
        [("r", "positive", {})],
        dict(k=RNG.poisson(3.0, 60), t=RNG.uniform(0.5, 2, 60)),
        [("k", "poisson(r * t)")],
        {"r": (0.5, 6)}),
    "binomial with trials per row": (
        [("p", "unit", {})],
        dict(n=RNG.integers(5, 30, 60), k=RNG.integers(0, 5, 60)),
        [("k", "binomial(n, p)")],
        {"p": (0.01, 0.99)}),
    "gamma shape and rate": (
        [("a", "positive", {}), ("b", "positive", {})],
        dict(y=RNG.gamma(3.0, 0.5, 60)),
        [("y", "gamma(a, b)")],
        {"a": (0.5, 8), "b": (0.2, 5)}),
    "exponential": (
        [("lam", "positive", {})],
        dict(y=RNG.exponential(2.0, 60)),
        [("y", "exponential(lam)")],
        {"lam": (0.05, 3)}),
    "lognormal": (
        [("m", "real", {}), ("s", "positive", {})],
        dict(y=RNG.lognormal(0.3, 0.8, 60)),
        [("y", "lognormal(m, s)")],
        {"m": (-1, 1.5), "s": (0.2, 3)}),
    "uniform with unknown upper end": (
        [("h", "positive", {})],
        dict(y=RNG.uniform(0, 4, 60)),
        [("y", "uniform(0, h)")],
        {"h": (2, 9)}),   # below max(y) the likelihood is zero: checked too
    "bernoulli": (
        [("p", "unit", {})],
        dict(y=RNG.integers(0, 2, 60)),
        [("y", "bernoulli(p)")],
        {"p": (0.01, 0.99)}),
    "weibull with shape known": (
        [("lam", "positive", {})],
        dict(y=RNG.weibull(1.5, 60) * 3),
        [("y", "weibull(1.5, lam)")],
        {"lam": (0.5, 8)}),
    "free log term": (
        [("mu", "real", {})],
        dict(y=RNG.normal(0, 1, 60)),
        [(None, "-(y - mu)^2 / 2 - abs(y - mu)")],
        {"mu": (-2, 2)}),
}


@pytest.mark.parametrize("case", sorted(REDUCTION_CASES))
def test_reduced_sums_equal_rowwise_sums(case):
    params, cols, liks, spec = REDUCTION_CASES[case]
    data = dataset(**cols)
    model = build(params, data, liks)
    reduced = compile_model(model, data)
    rowwise = compile_model(model, data, reduce=False)
    assert not rowwise.reduced
    theta = random_points(np.random.default_rng(1), spec)
    a = reduced.log_likelihood(theta)
    b = rowwise.log_likelihood(theta)
    assert np.array_equal(np.isneginf(a), np.isneginf(b))
    fin = np.isfinite(b)
    assert fin.sum() > 20
    assert np.allclose(a[fin], b[fin], rtol=1e-9, atol=1e-9), np.max(np.abs(a[fin] - b[fin]))


def test_reduction_happens_where_the_algebra_allows():
    # the cost of a reduced term does not grow with the rows: a user notices this
    # as speed, so check that the common conjugate cases are in fact reduced
    for case in ("normal mean and sd", "regression with a linear predictor", "poisson rate",
                 "binomial with trials per row", "quadratic regression"):
        params, cols, liks, _ = REDUCTION_CASES[case]
        data = dataset(**cols)
        c = compile_model(build(params, data, liks), data)
        terms = [t for p in c.likelihood for t in p.terms]
        assert any(isinstance(t, ReducedTerm) for t in terms), case
        assert not any(isinstance(t, RowTerm) for t in terms), case


def test_uniform_upper_end_below_the_data_is_impossible():
    params, cols, liks, _ = REDUCTION_CASES["uniform with unknown upper end"]
    data = dataset(**cols)
    c = compile_model(build(params, data, liks), data)
    top = float(np.max(cols["y"]))
    v = c.log_likelihood([np.array([top - 1e-9, top, top + 1.0])])
    assert np.isneginf(v[0])
    # reference: scipy.stats.uniform
    assert v[1] == pytest.approx(np.sum(st.uniform(0, top).logpdf(cols["y"])), rel=1e-12)
    assert v[2] == pytest.approx(np.sum(st.uniform(0, top + 1).logpdf(cols["y"])), rel=1e-12)


def test_cancellation_in_a_reduction_is_caught_and_rows_used_instead():
    # values near 1e6 with a small sd: sum(y^2) - 2 mu sum(y) + n mu^2 loses
    # digits; `verified` (run by every compute) must swap in the row-wise sum
    rng = np.random.default_rng(3)
    y = 1e6 + rng.normal(0, 1e-3, 200)
    data = dataset(y=y)
    model = build([("mu", "real", {}), ("sigma", "positive", {})], data,
                  [("y", "normal(mu, sigma)")])
    c = compile_model(model, data)
    theta = [1e6 + rng.uniform(-2e-3, 2e-3, 100), rng.uniform(5e-4, 3e-3, 100)]
    checked = c.verified(theta)
    # reference: scipy.stats.norm summed over rows
    ref = np.array([np.sum(st.norm(m, s).logpdf(y)) for m, s in zip(*theta)])
    got = checked.log_likelihood(theta)
    assert np.allclose(got, ref, rtol=1e-9, atol=1e-6)


def test_censored_rows_use_the_survival_function():
    # reference: scipy.stats.weibull_min logpdf for observed rows, logsf for censored
    rng = np.random.default_rng(5)
    t = rng.weibull(1.8, 30) * 4
    flag = (rng.uniform(size=30) < 0.3).astype(float)
    data = dataset(t=t, cens=flag)
    m = Model()
    m, _ = m.with_param(make_param("k", "positive"))
    m, _ = m.with_param(make_param("lam", "positive"))
    names = m.symbols(data)
    fname, args = parse_call("weibull(k, lam)", names, FAMILIES)
    m, _ = m.with_likelihood(Likelihood("t", fname, args, censor="cens"))
    for reduce in (True, False):
        c = compile_model(m, data, reduce=reduce)
        ks, ls = np.array([0.8, 1.8, 3.0]), np.array([2.0, 4.0, 7.0])
        got = c.log_likelihood([ks, ls])
        for k, lam, g in zip(ks, ls, got):
            d = st.weibull_min(k, scale=lam)
            ref = np.sum(d.logpdf(t[flag == 0])) + np.sum(d.logsf(t[flag == 1]))
            assert g == pytest.approx(ref, rel=1e-11)


def test_a_constant_shape_with_a_special_function_compiles():
    # a likelihood whose constant part is a special function of a number
    # (gammaln(2.5)) must compile and agree with scipy.stats
    y = np.array([0.3, 1.2, 2.2, 0.9])
    data = dataset(y=y)
    model = build([("b", "positive", {})], data, [("y", "gamma(2.5, b)")])
    c = compile_model(model, data)
    got = c.log_likelihood([np.array([0.7, 2.0])])
    ref = [np.sum(st.gamma(2.5, scale=1 / b).logpdf(y)) for b in (0.7, 2.0)]
    assert np.allclose(got, ref, rtol=1e-12)


# ---------------------------------------------------------------------------
# priors: truncation to the domain (reference: scipy.stats cdfs)

def test_prior_truncated_to_a_bounded_domain_is_renormalised():
    m = build([("mu", "interval", {"lo": 0.0, "hi": 2.0})], DataSet(),
              priors=[("mu", "normal(1, 2)")])
    c = compile_model(m, DataSet())
    mass = st.norm(1, 2).cdf(2) - st.norm(1, 2).cdf(0)
    v = c.log_prior([np.array([0.5, 1.5])])
    assert np.allclose(v, st.norm(1, 2).logpdf([0.5, 1.5]) - math.log(mass), rtol=1e-12)
    assert any("truncated to its domain and renormalised" in n for n in c.notes)


def test_discrete_prior_truncated_to_int_values():
    m = build([("n", "int", {"lo": 0.0, "hi": 20.0})], DataSet(), priors=[("n", "poisson(8)")])
    c = compile_model(m, DataSet())
    vals = np.arange(0.0, 21.0)
    d = st.poisson(8)
    ref = d.logpmf(vals) - math.log(d.cdf(20))
    assert np.allclose(c.log_prior([vals]), ref, rtol=1e-12)


def _hierarchy():
    # m ~ normal(5, 2); mu in [0, 10] ~ normal(m, 1), truncated to the domain at
    # every m; y ~ normal(mu, 1)
    data = dataset(y=[8.5, 9.7, 9.1])
    m = build([("m", "real", {}), ("mu", "interval", {"lo": 0.0, "hi": 10.0})], data,
              [("y", "normal(mu, 1)")], [("m", "normal(5, 2)"), ("mu", "normal(m, 1)")])
    return compile_model(m, data), data


def test_truncation_mass_that_depends_on_a_parameter_far_in_both_tails():
    c, _ = _hierarchy()
    ms = np.array([-30.0, -10.0, 0.0, 5.0, 15.0, 40.0])
    got = c.log_prior([ms, np.full(ms.size, 5.0)])
    # log P(0 <= mu <= 10 | m) from scipy.special.log_ndtr, as a difference of
    # lower-tail probabilities on the side of the median where both are small
    # (the upper tail by symmetry: P(mu >= x) = ndtr(m - x))
    def log_mass(m):
        a, b = (sc.log_ndtr(10 - m), sc.log_ndtr(0 - m)) if m > 5 else \
            (sc.log_ndtr(m - 0), sc.log_ndtr(m - 10))
        return a + np.log1p(-np.exp(b - a))
    ref = [st.norm(5, 2).logpdf(m) + st.norm(m, 1).logpdf(5.0) - log_mass(m) for m in ms]
    assert np.all(np.isfinite(got))
    assert np.allclose(got, ref, rtol=1e-12), (got, ref)


def test_hierarchical_truncated_prior_against_dblquad():
    c, data = _hierarchy()
    y = data.values("y")
    p_m, p_mu = c.params

    ys = [float(v) for v in y]
    r2 = math.sqrt(2.0)

    def npdf(x, m, s):
        return math.exp(-0.5 * ((x - m) / s) ** 2) / (s * math.sqrt(2 * math.pi))

    def mass(m):
        # P(0 <= mu <= 10 | m) with erfc (Python's math), the tail-accurate side
        return 0.5 * (math.erfc(-m / r2) - math.erfc((10 - m) / r2)) if m < 5 else \
            0.5 * (math.erfc((m - 10) / r2) - math.erfc(m / r2))

    def f(mu, m, g):
        lik = 1.0
        for v in ys:
            lik *= npdf(v, mu, 1.0)
        return g(m) * npdf(m, 5.0, 2.0) * npdf(mu, m, 1.0) / mass(m) * lik

    # reference: scipy.integrate.dblquad over m in [-15, 25] (the prior beyond
    # holds < 1e-22) and mu over its domain
    opts = dict(epsabs=1e-15, epsrel=1e-11)
    z = integrate.dblquad(lambda mu, m: f(mu, m, lambda m: 1.0), -15, 25, 0, 10, **opts)[0]
    mean_m = integrate.dblquad(lambda mu, m: f(mu, m, lambda m: m), -15, 25, 0, 10, **opts)[0] / z
    # a grid a user might type, reaching far below the data: `grid m -10 20 301`
    grid = Grid((make_axis(p_m, -10.0, 20.0, 301), make_axis(p_mu, 0.0, 10.0, 301)))
    post = compute(c, grid)
    assert post.log_evidence.value == pytest.approx(math.log(z), rel=1e-6)
    assert post.param_mean("m").value == pytest.approx(mean_m, rel=1e-6)


# ---------------------------------------------------------------------------
# bad declarations: one clear line each

def _one_line(exc) -> str:
    msg = str(exc.value)
    assert "\n" not in msg
    return msg


def test_unknown_name_in_a_likelihood():
    data = dataset(y=[1.0, 2.0])
    mu = make_param("mu", "real")
    m, _ = Model().with_param(mu)
    import sympy as sp
    z = sp.Symbol("z", real=True)
    m, _ = m.with_likelihood(Likelihood("y", "normal", (mu.symbol, z)))
    with pytest.raises(ModelError, match=r"likelihood `y` uses unknown `z`") as e:
        compile_model(m, data)
    _one_line(e)


def test_unknown_name_while_parsing():
    from engine.errors import FormulaError
    m, _ = Model().with_param(make_param("mu", "real"))
    with pytest.raises(FormulaError, match=r"unknown name `sigma` at column 12"):
        parse_call("normal(mu, sigma)", m.symbols(), FAMILIES)


def test_data_in_a_prior_is_refused():
    data = dataset(x=[1.0, 2.0])
    m = build([("mu", "real", {})], data, priors=[("mu", "normal(x, 1)")])
    with pytest.raises(ModelError, match=r"prior of `mu` uses `x`, which is not a parameter; "
                                         r"priors take parameters and numbers only") as e:
        compile_model(m, data)
    _one_line(e)


def test_discrete_family_on_a_continuous_parameter():
    m = build([("lam", "positive", {})], DataSet(), priors=[("lam", "poisson(3)")])
    with pytest.raises(ModelError, match=r"prior of `lam` is `poisson`, a discrete distribution, "
                                         r"but `lam` is continuous"):
        compile_model(m, DataSet())


def test_mismatched_column_lengths():
    data = dataset(x=[1.0, 2.0, 3.0], y=[1.0, 2.0])
    m = build([("a", "real", {}), ("b", "real", {})], data, [("y", "normal(a + b * x, 1)")])
    with pytest.raises(DataError, match=r"likelihood `y`: its columns differ in length "
                                        r"\(`x` 3 rows, `y` 2 rows\)"):
        compile_model(m, data)


@pytest.mark.parametrize("family, values, row, shown", [
    ("poisson(r)", [1, 2, -1, 3], 3, "-1"),
    ("poisson(r)", [1, 2.5, 3, 3], 2, "2.5"),
    ("exponential(r)", [0.5, 1.0, 2.0, -0.25], 4, "-0.25"),
    ("gamma(2, r)", [1.0, -3.0, 2.0, 1.0], 2, "-3"),
    ("bernoulli(inv_logit(r))", [0, 1, 2, 1], 3, "2"),
])
def test_data_outside_the_support_names_column_and_row(family, values, row, shown):
    data = dataset(y=values)
    m = build([("r", "positive", {})], data, [("y", family)])
    fname = family.split("(")[0]
    with pytest.raises(DataError, match=rf"likelihood `y`: column `y` row {row} value {shown} "
                                        rf"is outside the support of `{fname}`") as e:
        compile_model(m, data)
    _one_line(e)


def test_binomial_successes_above_trials_name_the_row():
    data = dataset(n=[10, 10, 5], k=[3, 4, 6])
    m = build([("p", "unit", {})], data, [("k", "binomial(n, p)")])
    with pytest.raises(DataError, match=r"likelihood `k`: column `\w+` row 3 value \d+ is outside "
                                        r"the support of `binomial`"):
        compile_model(m, data)


def test_constant_likelihood_arguments_that_break_constraints():
    data = dataset(y=[1.0, 2.0])
    m = build([("mu", "real", {})], data, [("y", "normal(mu, -1)")])
    with pytest.raises(ModelError, match=r"`normal` needs sd > 0; here mean = mu|"
                                         r"`normal` needs sd > 0"):
        compile_model(m, data)


def test_censoring_flags_must_be_zero_or_one():
    data = dataset(t=[1.0, 2.0, 3.0], c=[0.0, 2.0, 1.0])
    m = Model()
    m, _ = m.with_param(make_param("r", "positive"))
    fname, args = parse_call("exponential(r)", m.symbols(data), FAMILIES)
    m, _ = m.with_likelihood(Likelihood("t", fname, args, censor="c"))
    with pytest.raises(DataError, match=r"likelihood `t`: column `c` row 2 value 2: censoring "
                                        r"flags must be 0 or 1"):
        compile_model(m, data)


def test_likelihood_on_a_missing_column():
    m, _ = Model().with_param(make_param("r", "positive"))
    r = m.param("r").symbol
    m, _ = m.with_likelihood(Likelihood("y", "poisson", (r,)))
    with pytest.raises(DataError, match=r"likelihood `y`: no data column `y`"):
        compile_model(m, dataset(x=[1.0]))


def test_no_parameters():
    with pytest.raises(ModelError, match=r"no parameters; declare one with `param NAME \.\.\.`"):
        compile_model(Model(), DataSet())


def test_prior_with_no_mass_on_the_domain():
    m = build([("p", "interval", {"lo": 100.0, "hi": 101.0})], DataSet(),
              priors=[("p", "normal(0, 0.01)")])
    with pytest.raises(ModelError, match=r"prior of `p` puts no mass on its domain \(in 100 101\)"):
        compile_model(m, DataSet())


@pytest.mark.parametrize("name, kind, kw, pattern", [
    ("exp", "real", {}, r"parameter name `exp` is a reserved word"),
    ("_a", "real", {}, r"parameter name `_a` must start with a letter"),
    ("a", "interval", {"lo": 2.0, "hi": 1.0}, r"`a`: `in 2 1` needs LO < HI"),
    ("a", "interval", {"lo": 0.0}, r"`a`: `in LO HI` needs two finite numbers"),
    ("n", "int", {"lo": 0.0, "hi": 2.5}, r"`n`: `int 0 2.5` needs whole numbers"),
    ("n", "int", {"lo": 0.0, "hi": 1e7}, r"`n`: 10,000,001 values; the limit is 1,000,000"),
    ("s", "set", {"values": []}, r"`s`: `set` needs at least one value"),
    ("a", "circle", {}, r"unknown domain `circle`"),
    ("a", "real", {"points": 0}, r"`points` for `a` must be a whole number from 1"),
])
def test_bad_parameter_declarations(name, kind, kw, pattern):
    with pytest.raises(ModelError, match=pattern):
        make_param(name, kind, **kw)


def test_name_clash_between_parameter_and_column():
    data = dataset(mu=[1.0])
    with pytest.raises(ModelError, match=r"`mu` is already a data column"):
        Model().with_param(make_param("mu", "real"), data)


@pytest.mark.parametrize("texts, pattern", [
    (["1", "2_000"], r"data `y` value 2: `2_000` is not a number"),
    (["1", "\u0661\u0662"], r"data `y` value 2: `\u0661\u0662` is not a number"),
    (["3", "4,5"], r"data `y` value 2: `4,5` is not a number"),
    (["nan"], r"data `y` value 1: `nan` is not a finite number"),
    (["-Infinity"], r"data `y` value 1: `-Infinity` is not a finite number"),
    (["1e400"], r"data `y` value 1: `1e400` is out of range"),
    (["1e101"], r"data `y` value 1: `1e\+101` is too large"),
    (["2", " "], r"data `y` value 2: missing value"),
])
def test_typed_values_that_are_not_plain_numbers(texts, pattern):
    from engine.data import typed_column
    with pytest.raises(DataError, match=pattern):
        typed_column("y", texts)


def test_typed_values_in_the_usual_notations():
    from engine.data import typed_column
    got = typed_column("y", ["3", "-.5", "+1E+3", "2.", " 7 "])
    assert list(got) == [3.0, -0.5, 1000.0, 2.0, 7.0]


# ---------------------------------------------------------------------------
# reductions that need a sign of the data: exposures and shape parameters

def _workspace_with(columns: dict, params: list, likelihood: tuple):
    from engine.workspace import Workspace
    w = Workspace()
    for name, kind in params:
        w.param(name, kind)
    for name, values in columns.items():
        w.data_typed(name, [repr(float(v)) for v in values])
    w.likelihood(*likelihood)
    return w.compiled()


def _no_rows(compiled):
    from engine.model import RowTerm
    return not any(isinstance(t, RowTerm) for part in compiled.likelihood for t in part.terms)


def test_poisson_with_an_exposure_reduces_to_statistics():
    # counts over exposures: the sum is rate-only up to sum(y log t) (scipy.stats.poisson)
    y, t = np.array([3, 0, 5, 2, 7]), np.array([1.5, 0.5, 2.0, 1.0, 3.2])
    c = _workspace_with({"y": y, "t": t}, [("rate", "real")], ("y", "poisson(rate*t)"))
    assert _no_rows(c)
    r = np.linspace(-1.0, 6.0, 29)
    got = c.log_likelihood([r])
    ref = np.array([st.poisson(x * t).logpmf(y).sum() if x >= 0 else -np.inf for x in r])
    assert np.array_equal(np.isfinite(got), np.isfinite(ref))
    fin = np.isfinite(ref)
    assert np.max(np.abs(got[fin] - ref[fin])) < 1e-9


@pytest.mark.parametrize("family,draw,ref", [
    ("gamma(a, b)", lambda rng: rng.gamma(2.5, 1 / 1.5, 40),
     lambda a, b, y: st.gamma(a, scale=1 / b).logpdf(y).sum()),
    ("beta(a, b)", lambda rng: rng.beta(2.0, 3.0, 40),
     lambda a, b, y: st.beta(a, b).logpdf(y).sum()),
])
def test_shape_parameters_reduce_to_statistics(family, draw, ref):
    # (a - 1) sum(log y) and (b - 1) sum(log(1 - y)): references from scipy.stats
    rng = np.random.default_rng(4)
    y = draw(rng)
    c = _workspace_with({"y": y}, [("a", "positive"), ("b", "positive")], ("y", family))
    assert _no_rows(c)
    A, B = rng.uniform(0.5, 5, 60), rng.uniform(0.3, 4, 60)
    got = c.log_likelihood([A, B])
    want = np.array([ref(a, b, y) for a, b in zip(A, B)])
    assert np.max(np.abs(got - want)) < 1e-9
