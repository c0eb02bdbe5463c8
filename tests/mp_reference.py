"""Reference log-densities and log survival functions in arbitrary precision (mpmath).

Each density is the textbook formula of its family (common practice; the same
parameterisations as scipy.stats), evaluated at the exact value of the given
doubles with enough digits that no cancellation can reach the result. Survival
functions are integrals (or sums) of those densities: ``log P(X > x)`` as the log
of an mpmath tanh-sinh quadrature of the density beyond x (or of 1 minus the
integral below x), with the integrand scaled by its value at the cut, so that a
tail of 1e-1000 is as accurate as one of 0.3; sums for discrete families are done
term by term. These do not share code with engine/logspace.py.
"""

from __future__ import annotations

import math

import mpmath as mp


def _dps(*values) -> int:
    big = max([1.0] + [abs(float(v)) for v in values if v != 0 and math.isfinite(float(v))])
    small = min([1.0] + [abs(float(v)) for v in values if v != 0 and math.isfinite(float(v))])
    return int(min(700, 40 + math.log10(big) + max(0.0, -math.log10(small)) / 4))


def _m(v) -> mp.mpf:
    return mp.mpf(float(v))


def lchoose(n, k):
    return mp.loggamma(n + 1) - mp.loggamma(k + 1) - mp.loggamma(n - k + 1)


def logbeta(a, b):
    return mp.loggamma(a) + mp.loggamma(b) - mp.loggamma(a + b)


# -- densities: (x, *args) as mpf -> log-density as mpf ---------------------------

def _normal(x, m, s):
    z = (x - m) / s
    return -mp.log(s) - mp.log(2 * mp.pi) / 2 - z**2 / 2


def _student_t(x, nu, m, s):
    z = (x - m) / s
    return (mp.loggamma((nu + 1) / 2) - mp.loggamma(nu / 2) - mp.log(nu * mp.pi) / 2
            - mp.log(s) - (nu + 1) / 2 * mp.log(1 + z**2 / nu))


def _cauchy(x, m, s):
    z = (x - m) / s
    return -mp.log(mp.pi * s) - mp.log(1 + z**2)


def _lognormal(x, m, s):
    z = (mp.log(x) - m) / s
    return -mp.log(x) - mp.log(s) - mp.log(2 * mp.pi) / 2 - z**2 / 2


def _exponential(x, r):
    return mp.log(r) - r * x


def _gamma(x, a, b):
    return a * mp.log(b) - mp.loggamma(a) + (a - 1) * mp.log(x) - b * x


def _inv_gamma(x, a, s):
    return a * mp.log(s) - mp.loggamma(a) - (a + 1) * mp.log(x) - s / x


def _beta(x, a, b):
    return (a - 1) * mp.log(x) + (b - 1) * mp.log(1 - x) - logbeta(a, b)


def _weibull(x, k, lam):
    return mp.log(k) - mp.log(lam) + (k - 1) * mp.log(x / lam) - (x / lam)**k


def _half_normal(x, s):
    return mp.log(2) - mp.log(s) - mp.log(2 * mp.pi) / 2 - x**2 / (2 * s**2)


def _half_cauchy(x, s):
    return mp.log(2) - mp.log(mp.pi * s) - mp.log(1 + (x / s)**2)


def _logistic(x, m, s):
    z = (x - m) / s
    return -z - mp.log(s) - 2 * mp.log(1 + mp.exp(-z))


def _laplace(x, m, s):
    return -mp.log(2 * s) - abs(x - m) / s


def _binomial(x, n, p):
    return lchoose(n, x) + x * mp.log(p) + (n - x) * mp.log(1 - p)


def _poisson(x, r):
    return x * mp.log(r) - r - mp.loggamma(x + 1)


def _neg_binomial(x, r, p):
    return (mp.loggamma(x + r) - mp.loggamma(r) - mp.loggamma(x + 1) + r * mp.log(p)
            + x * mp.log(1 - p))


def _beta_binomial(x, n, a, b):
    return lchoose(n, x) + logbeta(x + a, n - x + b) - logbeta(a, b)


def _geometric(x, p):
    return mp.log(p) + (x - 1) * mp.log(1 - p)


def _hypergeometric(x, N, K, n):
    return lchoose(K, x) + lchoose(N - K, n - x) - lchoose(N, n)


LOGPDF = {
    "normal": _normal, "student_t": _student_t, "cauchy": _cauchy, "lognormal": _lognormal,
    "exponential": _exponential, "gamma": _gamma, "inv_gamma": _inv_gamma, "beta": _beta,
    "weibull": _weibull, "half_normal": _half_normal, "half_cauchy": _half_cauchy,
    "logistic": _logistic, "laplace": _laplace, "binomial": _binomial, "poisson": _poisson,
    "neg_binomial": _neg_binomial, "beta_binomial": _beta_binomial, "geometric": _geometric,
    "hypergeometric": _hypergeometric,
}


def logpdf(name: str, x: float, *args: float) -> float:
    """The reference log-density of family `name` at `x` (doubles in, a double out)."""
    with mp.workdps(_dps(x, *args)):
        return float(LOGPDF[name](_m(x), *[_m(a) for a in args]))


# -- tails ---------------------------------------------------------------------------

def _tail_above(logf, x, hi, scale):
    """log int_x^hi exp(logf), for x at or beyond the mode (the density falls from x)."""
    f0 = logf(x)
    L = scale
    top = (hi - x) / L if hi != mp.inf else mp.inf
    pts = [mp.mpf(0)] + [mp.mpf(v) for v in (1, 4, 16, 64, 256, 1024) if v < top] + [top]
    val = mp.quad(lambda u: mp.exp(logf(x + L * u) - f0) if x + L * u < hi else 0, pts)
    return f0 + mp.log(L * val)


def _tail_below(logf, x, lo, scale):
    """log int_lo^x exp(logf), for x at or below the mode (the density rises to x)."""
    f0 = logf(x)
    L = scale
    top = (x - lo) / L if lo != -mp.inf else mp.inf
    pts = [mp.mpf(0)] + [mp.mpf(v) for v in (1, 4, 16, 64, 256, 1024) if v < top] + [top]
    val = mp.quad(lambda u: mp.exp(logf(x - L * u) - f0) if x - L * u > lo else 0, pts)
    return f0 + mp.log(L * val)


def _scale_at(logf, x, sd):
    """The distance over which the density changes by a factor e near x (at most sd);
    only roughly (it sets the scale of the quadrature, not its accuracy)."""
    h = min(sd, abs(x) if x != 0 else sd) * mp.mpf("1e-12")
    slope = abs(logf(x + h) - logf(x - h)) / (2 * h)
    return min(sd, 1 / slope) if slope > 0 else sd


def log_sf_continuous(logf, x, lo, hi, mode, sd) -> mp.mpf:
    """log P(X > x) for a unimodal density exp(logf) on (lo, hi)."""
    if x <= lo:
        return mp.mpf(0)
    if x >= hi:
        return -mp.inf
    if x >= mode:
        return _tail_above(logf, x, hi, _scale_at(logf, x, sd))
    below = _tail_below(logf, x, lo, _scale_at(logf, x, sd))
    return mp.log1p(-mp.exp(below))


def _gamma_sf(x, a, b):
    # P(X > x) for gamma(a, rate b) is Q(a, bx): the gamma(a, 1) tail beyond bx
    y = b * x
    logf = lambda t: (a - 1) * mp.log(t) - t - mp.loggamma(a)  # noqa: E731
    return log_sf_continuous(logf, y, mp.mpf(0), mp.inf, max(a - 1, mp.mpf(0)), mp.sqrt(a))


def _gamma_lower(a, y):
    """log P(a, y): the gamma(a, 1) mass below y."""
    logf = lambda t: (a - 1) * mp.log(t) - t - mp.loggamma(a)  # noqa: E731
    s = log_sf_continuous(logf, y, mp.mpf(0), mp.inf, max(a - 1, mp.mpf(0)), mp.sqrt(a))
    if s > -mp.mpf("0.5"):
        # the mass below y is small: integrate it directly
        return _tail_below(logf, y, mp.mpf(0), _scale_at(logf, y, min(y, mp.sqrt(a))))
    return mp.log1p(-mp.exp(s))


def _inv_gamma_sf(x, a, s):
    return _gamma_lower(a, s / x)


def _beta_tail(x, a, b):
    """log(1 - I_x(a, b)) = log P(X > x), X ~ beta(a, b)."""
    logf = lambda t: (a - 1) * mp.log(t) + (b - 1) * mp.log(1 - t) - logbeta(a, b)  # noqa
    mode = (a - 1) / (a + b - 2) if a > 1 and b > 1 else (mp.mpf(0) if a <= 1 else mp.mpf(1))
    sd = mp.sqrt(a * b / ((a + b)**2 * (a + b + 1)))
    return log_sf_continuous(logf, x, mp.mpf(0), mp.mpf(1), mode, sd)


def _student_t_sf(x, nu, m, s):
    z = (x - m) / s
    logf = lambda t: _student_t(t, nu, mp.mpf(0), mp.mpf(1))  # noqa: E731
    return log_sf_continuous(logf, z, -mp.inf, mp.inf, mp.mpf(0), mp.mpf(1))


def _discrete_sf(logpmf, x, hi):
    """log sum_{k > x} P(k), summed term by term up to hi (or until negligible)."""
    k = mp.floor(x) + 1
    terms = []
    top = None
    while k <= hi:
        t = logpmf(k)
        terms.append(t)
        top = t if top is None or t > top else top
        if t < top - 200 and len(terms) > 10:
            break
        k += 1
    if not terms:
        return -mp.inf
    return top + mp.log(mp.fsum(mp.exp(t - top) for t in terms))


SF = {
    "normal": lambda x, m, s: mp.log(mp.erfc((x - m) / s / mp.sqrt(2)) / 2),
    "student_t": _student_t_sf,
    "cauchy": lambda x, m, s: mp.log(mp.mpf(1) / 2 - mp.atan((x - m) / s) / mp.pi),
    "lognormal": lambda x, m, s: mp.log(mp.erfc((mp.log(x) - m) / s / mp.sqrt(2)) / 2),
    "exponential": lambda x, r: -r * x,
    "gamma": _gamma_sf,
    "inv_gamma": _inv_gamma_sf,
    "beta": lambda x, a, b: _beta_tail(x, a, b),
    "weibull": lambda x, k, lam: -(x / lam)**k,
    "half_normal": lambda x, s: mp.log(mp.erfc(x / s / mp.sqrt(2))),
    "half_cauchy": lambda x, s: mp.log(1 - 2 * mp.atan(x / s) / mp.pi),
    "logistic": lambda x, m, s: -mp.log(1 + mp.exp((x - m) / s)),
    "laplace": lambda x, m, s: (mp.log(mp.mpf(1) / 2) - (x - m) / s if x >= m
                                else mp.log(1 - mp.exp((x - m) / s) / 2)),
    "binomial": lambda x, n, p: _binomial_sf(x, n, p),
    # P(X > x) = P(x + 1, r) for the Poisson
    "poisson": lambda x, r: _gamma_lower(x + 1, r),
    # P(X > x) = I_(1-p)(x + 1, r) for the negative binomial
    "neg_binomial": lambda x, r, p: _beta_tail(p, r, x + 1),
    "beta_binomial": lambda x, n, a, b: _discrete_sf(
        lambda k: _beta_binomial(k, n, a, b), x, n),
    "geometric": lambda x, p: x * mp.log(1 - p),
    "hypergeometric": lambda x, N, K, n: _discrete_sf(
        lambda k: _hypergeometric(k, N, K, n), x, min(n, K)),
}


def _binomial_sf(x, n, p):
    # P(X > x) = I_p(x + 1, n - x): the beta(x + 1, n - x) mass below p
    if x < 0:
        return mp.mpf(0)
    if x >= n:
        return -mp.inf
    upper = _beta_tail(p, x + 1, n - x)  # log(1 - I_p)
    if upper > -mp.mpf("0.5"):
        return _lower_beta(p, x + 1, n - x)
    return mp.log1p(-mp.exp(upper))


def _lower_beta(x, a, b):
    """log I_x(a, b) where it is small: the beta(a, b) mass below x, integrated directly."""
    logf = lambda t: (a - 1) * mp.log(t) + (b - 1) * mp.log(1 - t) - logbeta(a, b)  # noqa
    sd = mp.sqrt(a * b / ((a + b)**2 * (a + b + 1)))
    return _tail_below(logf, x, mp.mpf(0), _scale_at(logf, x, min(sd, x)))


def logsf(name: str, x: float, *args: float) -> float:
    """The reference log survival function ``log P(X > x)`` of family `name`."""
    with mp.workdps(_dps(x, *args)):
        return float(SF[name](_m(x), *[_m(a) for a in args]))
