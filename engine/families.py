"""Named distributions as sympy log-densities, with their supports.

Each family gives its log-density (log-pmf for discrete families) *with* its
normalising constant, so that evidence computed from it is right, the conditions
under which that formula holds (parameter constraints and the support), and,
where a closed form or a standard special function exists, the log survival
function ``log P(X > x)`` used for right-censored rows.

The log-densities are written in forms that keep their digits over the whole
parameter range (shapes, counts and concentrations up to 1e300, scales down to
1e-300, probabilities at 0 and 1): see engine/logspace.py. Where the textbook form
splits into sums of data times parameters (so that sums over rows reduce to
sufficient statistics), the family gives it too, as `Term.separable`; the
reduction uses it and is checked against the stable form row by row.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np
import sympy as sp

from . import special as S
from .errors import ModelError

LOG2PI = sp.log(2 * sp.pi)


class _LazyStats:
    """scipy.stats, imported when a distribution is first frozen: importing it is most
    of quadrat's start-up time, and many sessions never need it."""

    def __getattr__(self, name):
        import scipy.stats
        return getattr(scipy.stats, name)


st = _LazyStats()


@dataclass(frozen=True)
class Term:
    """A log-density term and the conditions under which it holds.

    Where a condition is false the density is zero (log-density ``-inf``).
    `expr` is the form to evaluate; it keeps its digits at extreme arguments.
    """

    expr: sp.Expr
    conds: tuple[sp.Basic, ...] = ()
    #: The same log-density as a sum of separable pieces (the textbook form), for
    #: sufficient statistics; None where `expr` is that already or none exists.
    separable: sp.Expr | None = None


@dataclass(frozen=True)
class Family:
    """A named distribution.

    Attributes
    ----------
    name : str
        The name used in formulas such as ``y ~ normal(mu, sigma)``.
    params : tuple of str
        Names of the arguments, in order.
    discrete : bool
        Whether values are integers (log-pmf) or real (log-density).
    support : str
        The support, for `help` and error messages.
    constraints : tuple of str
        The argument constraints, for `help`.
    logpdf : callable
        ``logpdf(x, *args) -> Term``.
    logsf : callable or None
        ``logsf(x, *args) -> Term``: ``log P(X > x)``.
    scipy : callable
        ``scipy(*args)`` gives the frozen scipy.stats distribution (numeric args),
        used for truncation masses, simulation and predictive ranges.
    help : str
        One line stating the parameterisation.
    """

    name: str
    params: tuple[str, ...]
    discrete: bool
    support: str
    constraints: tuple[str, ...]
    logpdf: Callable[..., Term]
    logsf: Callable[..., Term] | None
    scipy: Callable[..., object]
    help: str

    def usage(self) -> str:
        return f"{self.name}({', '.join(self.params)})"


def _int(x):
    return sp.Eq(sp.floor(x), x)


def _pos(*a):
    return tuple(sp.Gt(v, 0) for v in a)


# -- continuous ------------------------------------------------------------

def _normal(x, m, s):
    z = (x - m) / s
    return Term(-sp.log(s) - LOG2PI / 2 - S.sqr(z) / 2, _pos(s), -sp.log(s) - LOG2PI / 2 - z**2 / 2)


def _normal_sf(x, m, s):
    return Term(S.log_ndtr(-(x - m) / s), _pos(s))


def _student_t(x, nu, m, s):
    z = (x - m) / s
    expr = (S.lrising(nu / 2, sp.Rational(1, 2)) - sp.log(nu * sp.pi) / 2 - sp.log(s)
            - (nu + 1) / 2 * S.log1p_sq(z / sp.sqrt(nu)))
    return Term(expr, _pos(nu, s))


def _student_t_sf(x, nu, m, s):
    return Term(S.log_t_sf(nu, (x - m) / s), _pos(nu, s))


def _cauchy(x, m, s):
    z = (x - m) / s
    return Term(-sp.log(sp.pi * s) - S.log1p_sq(z), _pos(s))


def _cauchy_sf(x, m, s):
    z = (x - m) / s
    # 1/2 - atan(z)/pi, written as atan2(1, z)/pi: no cancellation in the upper tail
    return Term(sp.log(sp.atan2(1, z) / sp.pi), _pos(s))


def _lognormal(x, m, s):
    z = (sp.log(x) - m) / s
    head = -sp.log(x) - sp.log(s) - LOG2PI / 2
    return Term(head - S.sqr(z) / 2, _pos(s) + (sp.Gt(x, 0),), head - z**2 / 2)


def _lognormal_sf(x, m, s):
    # P(X > 0) = 1: a right-censored value may be 0 (log(0) = -inf gives log_ndtr(inf) = 0)
    return Term(S.log_ndtr(-(sp.log(x) - m) / s), _pos(s) + (sp.Ge(x, 0),))


def _exponential(x, r):
    return Term(sp.log(r) - r * x, _pos(r) + (sp.Ge(x, 0),))


def _exponential_sf(x, r):
    return Term(-r * x, _pos(r) + (sp.Ge(x, 0),))


def _gamma(x, a, b):
    # b (bx)^(a-1) e^(-bx) / Gamma(a): a Poisson-type term in a - 1 at "rate" bx
    textbook = a * sp.log(b) - S.gammaln(a) + S.xlogy(a - 1, x) - b * x
    return Term(sp.log(b) + S.log_gamma_pdf(a, b * x), _pos(a, b) + (sp.Ge(x, 0),), textbook)


def _gamma_sf(x, a, b):
    return Term(S.log_gammaincc(a, b * x), _pos(a, b) + (sp.Ge(x, 0),))


def _inv_gamma(x, a, s):
    # with y = s/x: y^(a+1) e^(-y) / (s Gamma(a)), the gamma(a, 1) density at y times y^2/s
    textbook = a * sp.log(s) - S.gammaln(a) - (a + 1) * sp.log(x) - s / x
    return Term(S.log_gamma_pdf(a, s / x) + sp.log(s) - 2 * sp.log(x),
                _pos(a, s) + (sp.Gt(x, 0),), textbook)


def _inv_gamma_sf(x, a, s):
    # P(X > 0) = 1: at x = 0, s/x = inf and P(a, inf) = 1
    return Term(S.log_gammainc(a, s / x), _pos(a, s) + (sp.Ge(x, 0),))


def _beta(x, a, b):
    textbook = (S.xlogy(a - 1, x) + S.xlog1py(b - 1, -x)
                - (S.gammaln(a) + S.gammaln(b) - S.gammaln(a + b)))
    return Term(S.beta_lpdf(x, a, b), _pos(a, b) + (sp.Ge(x, 0), sp.Le(x, 1)), textbook)


def _beta_sf(x, a, b):
    return Term(S.log_betaincc(a, b, x), _pos(a, b) + (sp.Ge(x, 0), sp.Le(x, 1)))


def _uniform(x, lo, hi):
    return Term(-sp.log(hi - lo), (sp.Lt(lo, hi), sp.Ge(x, lo), sp.Le(x, hi)))


def _uniform_sf(x, lo, hi):
    return Term(sp.log((hi - x) / (hi - lo)), (sp.Lt(lo, hi), sp.Ge(x, lo), sp.Le(x, hi)))


def _weibull(x, k, lam):
    expr = sp.log(k) - sp.log(lam) + S.xlogy(k - 1, x / lam) - (x / lam)**k
    return Term(expr, _pos(k, lam) + (sp.Ge(x, 0),))


def _weibull_sf(x, k, lam):
    return Term(-(x / lam)**k, _pos(k, lam) + (sp.Ge(x, 0),))


def _half_normal(x, s):
    head = sp.log(2) - sp.log(s) - LOG2PI / 2
    return Term(head - S.sqr(x / s) / 2, _pos(s) + (sp.Ge(x, 0),), head - x**2 / (2 * s**2))


def _half_normal_sf(x, s):
    return Term(sp.log(2) + S.log_ndtr(-x / s), _pos(s) + (sp.Ge(x, 0),))


def _half_cauchy(x, s):
    return Term(sp.log(2) - sp.log(sp.pi * s) - S.log1p_sq(x / s), _pos(s) + (sp.Ge(x, 0),))


def _half_cauchy_sf(x, s):
    # 1 - 2 atan(x/s)/pi, written as 2 atan2(1, x/s)/pi: no cancellation in the tail
    return Term(sp.log(2 * sp.atan2(1, x / s) / sp.pi), _pos(s) + (sp.Ge(x, 0),))


def _softplus(z):
    """log(1 + exp(z)) without overflow."""
    return sp.Max(z, 0) + S.log1p(sp.exp(-sp.Abs(z)))


def _logistic(x, m, s):
    z = (x - m) / s
    a = sp.Abs(z)
    return Term(-a - sp.log(s) - 2 * S.log1p(sp.exp(-a)), _pos(s))


def _logistic_sf(x, m, s):
    return Term(-_softplus((x - m) / s), _pos(s))


def _laplace(x, m, s):
    return Term(-sp.log(2 * s) - sp.Abs(x - m) / s, _pos(s))


def _laplace_sf(x, m, s):
    z = (x - m) / s
    # P(X > x) = exp(-z)/2 above the location, 1 - exp(z)/2 below it
    expr = sp.Piecewise((sp.log(sp.Rational(1, 2)) - z, z >= 0),
                        (S.log1p(-sp.exp(sp.Min(z, 0)) / 2), True))
    return Term(expr, _pos(s))


# -- discrete --------------------------------------------------------------

def _bernoulli(x, p):
    return Term(S.xlogy(x, p) + S.xlog1py(1 - x, -p),
                (sp.Ge(p, 0), sp.Le(p, 1), sp.Ge(x, 0), sp.Le(x, 1), _int(x)))


def _bernoulli_sf(x, p):
    return Term(sp.log(p * (1 - x)), (sp.Ge(p, 0), sp.Le(p, 1), sp.Ge(x, 0), sp.Le(x, 1), _int(x)))


def _lchoose(n, k):
    return S.gammaln(n + 1) - S.gammaln(k + 1) - S.gammaln(n - k + 1)


def _binomial(x, n, p):
    textbook = _lchoose(n, x) + S.xlogy(x, p) + S.xlog1py(n - x, -p)
    # at large n, three Poisson probabilities (of x at rate np, of n - x at rate n(1-p),
    # over that of n at rate n): no large terms cancel
    return Term(S.binom_lpmf(x, n, p), (sp.Ge(n, 0), _int(n), sp.Ge(p, 0), sp.Le(p, 1),
                                   sp.Ge(x, 0), sp.Le(x, n), _int(x)), textbook)


def _binomial_sf(x, n, p):
    return Term(S.log_bdtrc(x, n, p), (sp.Ge(n, 0), _int(n), sp.Ge(p, 0), sp.Le(p, 1),
                                       sp.Ge(x, 0), sp.Le(x, n), _int(x)))


def _poisson(x, r):
    textbook = S.xlogy(x, r) - r - S.gammaln(x + 1)
    return Term(S.log_gamma_pdf(x + 1, r), (sp.Ge(r, 0), sp.Ge(x, 0), _int(x)), textbook)


def _poisson_sf(x, r):
    # P(X > x) = P(x + 1, r), the regularised lower incomplete gamma
    return Term(S.log_gammainc(x + 1, r), (sp.Ge(r, 0), sp.Ge(x, 0), _int(x)))


def _neg_binomial(x, r, p):
    textbook = (S.gammaln(x + r) - S.gammaln(r) - S.gammaln(x + 1) + r * sp.log(p)
                + S.xlog1py(x, -p))
    return Term(S.nbinom_lpmf(x, r, p), (sp.Gt(r, 0), sp.Gt(p, 0), sp.Le(p, 1), sp.Ge(x, 0),
                                         _int(x)), textbook)


def _neg_binomial_sf(x, r, p):
    return Term(S.log_betaincc(r, x + 1, p), (sp.Gt(r, 0), sp.Gt(p, 0), sp.Le(p, 1),
                                            sp.Ge(x, 0), _int(x)))


def _beta_binomial(x, n, a, b):
    # lchoose(n, x) + lbeta(x + a, n - x + b) - lbeta(a, b), in a form that keeps its
    # digits at large n and at large concentration a + b (where the limit is binomial)
    return Term(S.bbinom_lpmf(x, n, a, b),
                (sp.Ge(n, 0), _int(n)) + _pos(a, b) + (sp.Ge(x, 0), sp.Le(x, n), _int(x)))


def _beta_binomial_sf(x, n, a, b):
    return Term(S.log_bbinom_sf(x, n, a, b),
                (sp.Ge(n, 0), _int(n)) + _pos(a, b) + (sp.Ge(x, 0), sp.Le(x, n), _int(x)))


def _hypergeometric_conds(x, N, K, n):
    # N >= n + K - x (the failures drawn fit among the N - K failures) is written with
    # the population size alone on one side, so that a parameter N meets the data once
    return (sp.Ge(N, 0), _int(N), sp.Ge(K, 0), _int(K), sp.Ge(n, 0), _int(n), sp.Le(K, N),
            sp.Le(n, N), sp.Ge(x, 0), _int(x), sp.Le(x, K), sp.Le(x, n), sp.Ge(N, n + K - x))


def _hypergeometric(x, N, K, n):
    return Term(S.hypergeom_lpmf(x, N, K, n), _hypergeometric_conds(x, N, K, n))


def _hypergeometric_sf(x, N, K, n):
    return Term(S.log_hypergeom_sf(x, N, K, n), _hypergeometric_conds(x, N, K, n))


def _geometric(x, p):
    return Term(sp.log(p) + S.xlog1py(x - 1, -p), (sp.Gt(p, 0), sp.Le(p, 1), sp.Ge(x, 1), _int(x)))


def _geometric_sf(x, p):
    return Term(S.xlog1py(x, -p), (sp.Gt(p, 0), sp.Le(p, 1), sp.Ge(x, 1), _int(x)))


def _F(name, params, discrete, support, constraints, logpdf, logsf, scipy, help_):
    return Family(name, tuple(params), discrete, support, tuple(constraints), logpdf, logsf,
                  scipy, help_)


FAMILIES: dict[str, Family] = {f.name: f for f in [
    _F("normal", ["mean", "sd"], False, "all reals", ["sd > 0"], _normal, _normal_sf,
       lambda m, s: st.norm(m, s), "normal(mean, sd): mean and standard deviation"),
    _F("student_t", ["df", "loc", "scale"], False, "all reals", ["df > 0", "scale > 0"],
       _student_t, _student_t_sf, lambda nu, m, s: st.t(nu, m, s),
       "student_t(df, loc, scale): degrees of freedom, location, scale"),
    _F("cauchy", ["loc", "scale"], False, "all reals", ["scale > 0"], _cauchy, _cauchy_sf,
       lambda m, s: st.cauchy(m, s), "cauchy(loc, scale): location (median) and scale"),
    _F("lognormal", ["meanlog", "sdlog"], False, "x > 0", ["sdlog > 0"], _lognormal,
       _lognormal_sf, lambda m, s: st.lognorm(s, scale=np.exp(m)),
       "lognormal(meanlog, sdlog): mean and sd of log(x)"),
    _F("exponential", ["rate"], False, "x >= 0", ["rate > 0"], _exponential, _exponential_sf,
       lambda r: st.expon(scale=1 / np.asarray(r, float)), "exponential(rate): mean 1/rate"),
    _F("gamma", ["shape", "rate"], False, "x >= 0", ["shape > 0", "rate > 0"], _gamma,
       _gamma_sf, lambda a, b: st.gamma(a, scale=1 / np.asarray(b, float)),
       "gamma(shape, rate): mean shape/rate"),
    _F("inv_gamma", ["shape", "scale"], False, "x > 0", ["shape > 0", "scale > 0"], _inv_gamma,
       _inv_gamma_sf, lambda a, s: st.invgamma(a, scale=s),
       "inv_gamma(shape, scale): 1/x is gamma(shape, rate = scale)"),
    _F("beta", ["a", "b"], False, "0 <= x <= 1", ["a > 0", "b > 0"], _beta, _beta_sf,
       lambda a, b: st.beta(a, b), "beta(a, b): mean a/(a+b)"),
    _F("uniform", ["lo", "hi"], False, "lo <= x <= hi", ["lo < hi"], _uniform, _uniform_sf,
       lambda lo, hi: st.uniform(lo, np.asarray(hi, float) - lo), "uniform(lo, hi): flat on [lo, hi]"),
    _F("weibull", ["shape", "scale"], False, "x >= 0", ["shape > 0", "scale > 0"], _weibull,
       _weibull_sf, lambda k, lam: st.weibull_min(k, scale=lam),
       "weibull(shape, scale): survival exp(-(x/scale)^shape)"),
    _F("half_normal", ["sd"], False, "x >= 0", ["sd > 0"], _half_normal, _half_normal_sf,
       lambda s: st.halfnorm(scale=s), "half_normal(sd): |z| for z ~ normal(0, sd)"),
    _F("half_cauchy", ["scale"], False, "x >= 0", ["scale > 0"], _half_cauchy, _half_cauchy_sf,
       lambda s: st.halfcauchy(scale=s), "half_cauchy(scale): |z| for z ~ cauchy(0, scale)"),
    _F("logistic", ["loc", "scale"], False, "all reals", ["scale > 0"], _logistic, _logistic_sf,
       lambda m, s: st.logistic(m, s), "logistic(loc, scale): cdf inv_logit((x-loc)/scale)"),
    _F("laplace", ["loc", "scale"], False, "all reals", ["scale > 0"], _laplace, _laplace_sf,
       lambda m, s: st.laplace(m, s), "laplace(loc, scale): density exp(-|x-loc|/scale)/(2 scale)"),
    _F("bernoulli", ["p"], True, "x in {0, 1}", ["0 <= p <= 1"], _bernoulli, _bernoulli_sf,
       lambda p: st.bernoulli(p), "bernoulli(p): 1 with probability p"),
    _F("binomial", ["n", "p"], True, "x in 0..n", ["n a whole number >= 0", "0 <= p <= 1"],
       _binomial, _binomial_sf, lambda n, p: st.binom(n, p),
       "binomial(n, p): successes in n trials"),
    _F("poisson", ["rate"], True, "x in 0, 1, 2, ...", ["rate >= 0"], _poisson, _poisson_sf,
       lambda r: st.poisson(r), "poisson(rate): counts with mean rate"),
    _F("neg_binomial", ["r", "p"], True, "x in 0, 1, 2, ...", ["r > 0", "0 < p <= 1"],
       _neg_binomial, _neg_binomial_sf, lambda r, p: st.nbinom(r, p),
       "neg_binomial(r, p): failures before the r-th success, success probability p"),
    _F("beta_binomial", ["n", "a", "b"], True, "x in 0..n", ["n a whole number >= 0", "a > 0",
                                                           "b > 0"],
       _beta_binomial, _beta_binomial_sf, lambda n, a, b: st.betabinom(n, a, b),
       "beta_binomial(n, a, b): binomial(n, p) with p ~ beta(a, b)"),
    _F("geometric", ["p"], True, "x in 1, 2, 3, ...", ["0 < p <= 1"], _geometric, _geometric_sf,
       lambda p: st.geom(p), "geometric(p): trials up to and including the first success"),
    # scipy.stats.hypergeom(M, n, N) names the population M, its successes n and the
    # draws N: our (N, K, n) is its (M, n, N), in that order
    _F("hypergeometric", ["N", "K", "n"], True, "x in max(0, n-N+K)..min(n, K)",
       ["N a whole number >= 0", "K a whole number, 0 <= K <= N",
        "n a whole number, 0 <= n <= N"],
       _hypergeometric, _hypergeometric_sf, lambda N, K, n: st.hypergeom(N, K, n),
       "hypergeometric(N, K, n): successes in n draws without replacement from N items "
       "of which K are successes"),
]}


def get(name: str) -> Family:
    """The family called `name`.

    Raises
    ------
    ModelError
        If there is no such family; the message lists the known ones.
    """
    try:
        return FAMILIES[name]
    except KeyError:
        known = ", ".join(sorted(FAMILIES))
        raise ModelError(f"unknown distribution `{name}`; known: {known}") from None


def density(name: str, x: sp.Expr, args: tuple[sp.Expr, ...], *, survival: bool = False) -> Term:
    """The log-density (or log survival) term of family `name` at `x`.

    Raises
    ------
    ModelError
        Unknown family, wrong number of arguments, no survival function, or a
        constant argument that breaks the family's constraints.
    """
    fam = get(name)
    if len(args) != len(fam.params):
        raise ModelError(f"`{name}` takes {len(fam.params)} argument"
                         f"{'s' if len(fam.params) != 1 else ''} ({', '.join(fam.params)}), "
                         f"got {len(args)}")
    if survival:
        if fam.logsf is None:
            raise ModelError(f"`{name}` has no survival function in quadrat; "
                             "censored rows need one")
        term = fam.logsf(x, *args)
    else:
        term = fam.logpdf(x, *args)
    check_constant_args(fam, args)
    return term


def check_constant_args(fam: Family, args: tuple[sp.Expr, ...]) -> None:
    """Refuse constant arguments that break the family's constraints.

    A dummy `x` is used so that support conditions on the value do not
    interfere; only conditions with no free symbols left are judged.
    """
    x = sp.Dummy("x")
    term = fam.logpdf(x, *args)
    for cond in term.conds:
        if cond.free_symbols:
            continue
        if cond == sp.false or cond is sp.false:
            shown = ", ".join(f"{p} = {_show(a)}" for p, a in zip(fam.params, args) if a.is_number)
            raise ModelError(f"`{fam.name}` needs {'; '.join(fam.constraints)}; here {shown}")


def _show(a: sp.Expr) -> str:
    try:
        v = float(a)
    except (TypeError, ValueError):
        return str(a)
    return f"{v:g}"
