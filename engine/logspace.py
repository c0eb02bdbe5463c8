"""Log-densities and log tail probabilities that keep their digits everywhere.

The textbook forms of many log-densities are differences of large numbers: at a
shape of 1e15 ``a*log(b) - lgamma(a) + (a-1)*log(x) - b*x`` is a sum of terms near
3e16 whose result is near -18, and double precision leaves it no correct digit.
The forms here regroup the same quantities so that no large terms cancel:

- ``log_gamma_pdf(a, y) = (a - 1)*log(y) - y - lgamma(a)`` (also the log Poisson
  probability of k = a - 1 at rate y) as ``-stirlerr(k) - log(2 pi k)/2 - bd0(k, y)``
  (the split of C. Loader, "Fast and accurate computation of binomial probabilities",
  2000), with the deviance term ``bd0(k, y) = -k*log1pmx(y/k - 1)`` taken from a
  series where it is small;
  the binomial, Poisson, gamma, inverse gamma, beta and negative binomial
  log-densities are sums of a few of these;
- ``lrising(a, d) = lgamma(a + d) - lgamma(a)`` from Stirling's series for the two
  arguments (DLMF 5.11.1), its derivatives ``psi_diff`` from the asymptotic series of
  the polygamma functions (DLMF 5.15.8), differenced term by term with ``expm1``;
- ``log P(a, x)``, ``log Q(a, x)`` (regularised incomplete gamma) and ``log I_x(a, b)``
  (regularised incomplete beta) from scipy where the value is a normal double, and
  in log space where it would underflow: the continued fractions of DLMF 8.9.2 and
  8.17.22 (modified Lentz), the power series of DLMF 8.7.1, or, where the parameters
  are so large that those need too many terms, the log-density at the cut plus the
  log of the tail integral ``int_0^inf f(x + s)/f(x) ds`` by Gauss-Laguerre
  quadrature in ``u = c*s`` (``c`` the decay rate of the density at the cut): there
  the tail is within a few percent of an exponential, so 40 nodes give full
  precision;
- upper tails of the beta-binomial and hypergeometric distributions by summing their
  probability ratios in log space from the largest term.

Everything is vectorised over numpy arrays; nothing here imports sympy.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.special as sc

LOG_2PI = math.log(2 * math.pi)
#: Regularised tail values below this are recomputed in log space.
TINY = 1e-280
#: Arguments from which Stirling's and the polygamma asymptotic series are used.
SERIES_FROM = 10.0
#: Below this size the textbook lgamma forms lose less than about 3e-13 (absolute) and
#: are used for speed; from it on, the forms without cancellation.
PLAIN_BELOW = 200.0
#: The same for the beta-binomial, by n + a + b (its textbook form has six lgammas).
BBINOM_PLAIN_BELOW = 500.0


def _bernoulli(n: int) -> float:
    """Bernoulli number B_n for even n >= 2, from the exact rational recurrence."""
    from fractions import Fraction
    b = [Fraction(1)]
    for m in range(1, n + 1):
        b.append(-sum(math.comb(m + 1, j) * b[j] for j in range(m)) / (m + 1))
    return float(b[n])


_B2K = [_bernoulli(2 * k) for k in range(1, 11)]
#: Stirling's series: lgamma(z) - (z - 1/2) log z + z - log(2 pi)/2 ~ sum c_k z^(1-2k).
_STIRLING = [b / ((2 * k) * (2 * k - 1)) for k, b in enumerate(_B2K, start=1)]
#: Gauss-Laguerre nodes and log weights for the tail integrals.
_LAG_U, _LAG_W = np.polynomial.laguerre.laggauss(40)
_LAG_LOGW = np.log(_LAG_W)


def _arrays(*args):
    return np.broadcast_arrays(*[np.asarray(a, dtype=float) for a in args])


def _choose(mask, when_true, when_false, *args):
    """``when_true(*args)`` where `mask` holds and ``when_false(*args)`` elsewhere, each
    evaluated on its own elements only (and on whole arrays where the mask is uniform)."""
    mask = np.asarray(mask, bool)
    if mask.all():
        return np.asarray(when_true(*args), dtype=float)
    if not mask.any():
        return np.asarray(when_false(*args), dtype=float)
    shape = np.broadcast_shapes(mask.shape, *[np.shape(a) for a in args])
    m = np.broadcast_to(mask, shape)
    out = np.empty(shape)
    out[m] = when_true(*[np.broadcast_to(a, shape)[m] for a in args])
    out[~m] = when_false(*[np.broadcast_to(a, shape)[~m] for a in args])
    return out


def _terms_for(ratio_max: float, most: int) -> int:
    """How many terms of a series whose terms fall by `ratio_max` (at most) each reach
    1e-18 of the first."""
    if not ratio_max > 0:
        return 1
    if ratio_max >= 1:
        return most
    return int(min(most, max(1, math.ceil(math.log(1e-18) / math.log(ratio_max)))))


def stirlerr(z):
    """``lgamma(z) - (z - 1/2) log z + z - log(2 pi)/2``; the series, valid for z >= 10."""
    z = np.asarray(z, dtype=float)
    y = 1.0 / z
    if y.size == 0:
        return y
    y2 = y * y
    # the terms fall roughly like y^2 (for y <= 1/10, by well under 1/25 each)
    n = _terms_for(4 * float(np.nanmax(y2)), 9)
    acc = np.full(y.shape, _STIRLING[n - 1])
    for c in reversed(_STIRLING[:n - 1]):
        acc *= y2
        acc += c
    return y * acc


def _log1pmx_series(t):
    # log1p(t) = 2 atanh(u), u = t / (2 + t): log1p(t) - t = -t u + 2 u^3 (1/3 + u^2/5 + ...),
    # |u| < 0.2 here, so at most 12 terms reach 1e-17
    u = t / (2 + t)
    u2 = u * u
    if u.size == 0:
        return u
    n = _terms_for(float(np.nanmax(u2)), 12)
    acc = np.full(u.shape, 1.0 / (2 * n + 1))
    for j in range(n - 2, -1, -1):
        acc *= u2
        acc += 1.0 / (2 * j + 3)
    return -t * u + 2 * u * u2 * acc


def log1pmx(t, r=None):
    """``log(1 + t) - t``, accurate also where it is tiny (t near 0); `r` = 1 + t may be
    given where it is known more precisely (a ratio near 0)."""
    t = np.asarray(t, dtype=float)
    with np.errstate(all="ignore"):
        near = (t > -1 / 3) & (t < 0.5)
        if r is None:
            return _choose(near, _log1pmx_series, lambda t_: np.log1p(t_) - t_, t)
        return _choose(near, lambda t_, r_: _log1pmx_series(t_),
                       lambda t_, r_: np.log(r_) - t_, t, np.asarray(r, dtype=float))


def _log_gamma_pdf_plain(a, y):
    return sc.xlogy(a - 1, y) - y - sc.gammaln(a)


def _log_gamma_pdf_split(a, y):
    # -stirlerr(k) - log(2 pi k)/2 - bd0(k, y) with k = a - 1, bd0 = k log(k/y) + y - k
    k = a - 1
    dev = np.where(np.isinf(y), -np.inf, k * log1pmx((y - k) / k, y / k))
    return -stirlerr(k) - 0.5 * (LOG_2PI + np.log(k)) + dev


def log_gamma_pdf(a, y):
    """``(a - 1)*log(y) - y - lgamma(a)``, the log of the gamma(a, 1) density at y, for
    a > 0 and y >= 0; with k = a - 1 it is the log Poisson probability of k at rate y.
    Stable at large a and y (no terms near a*log(a) cancel)."""
    a = np.asarray(a, dtype=float)
    y = np.asarray(y, dtype=float)
    with np.errstate(all="ignore"):
        return _choose(a >= PLAIN_BELOW, _log_gamma_pdf_split, _log_gamma_pdf_plain, a, y)


def lbinom(k, n, p, q=None):
    """log of the binomial probability ``C(n, k) p^k q^(n-k)`` (real k, n), q = 1 - p."""
    k, n, p = (np.asarray(v, dtype=float) for v in (k, n, p))
    q = 1 - p if q is None else np.asarray(q, dtype=float)
    with np.errstate(all="ignore"):
        return (log_gamma_pdf(k + 1, n * p) + log_gamma_pdf(n - k + 1, n * q)
                - log_gamma_pdf(n + 1, n))


def _beta_split(x, a, b, y):
    # (n + 1) times the binomial(n, x) probability of a - 1, n = a + b - 2
    n = a + b - 2
    return (np.log1p(n) + log_gamma_pdf(a, n * x) + log_gamma_pdf(b, n * y)
            - log_gamma_pdf(n + 1, n))


def _beta_plain(x, a, b, y):
    return (sc.xlogy(a - 1, x) + sc.xlogy(b - 1, y)
            - (sc.gammaln(a) + sc.gammaln(b) - sc.gammaln(a + b)))


def _binom_plain(k, n, p):
    return (sc.gammaln(n + 1) - sc.gammaln(k + 1) - sc.gammaln(n - k + 1) + sc.xlogy(k, p)
            + sc.xlog1py(n - k, -p))


def binom_logpmf(k, n, p):
    """log of the binomial(n, p) probability of k, stable at large n (three Poisson
    terms, `lbinom`); the textbook form below n = PLAIN_BELOW."""
    k, n, p = (np.asarray(v, dtype=float) for v in (k, n, p))
    with np.errstate(all="ignore"):
        return _choose(n >= PLAIN_BELOW, lbinom, _binom_plain, k, n, p)


def beta_logpdf(x, a, b, y=None):
    """log of the beta(a, b) density at x (y = 1 - x), stable at large a and b."""
    x, a, b = (np.asarray(v, dtype=float) for v in (x, a, b))
    with np.errstate(all="ignore"):
        y = 1 - x if y is None else np.asarray(y, dtype=float)
        return _choose(a + b >= PLAIN_BELOW, _beta_split, _beta_plain, x, a, b, y)


def _nbinom_split(x, r, p):
    # r/(x + r) times the binomial(x + r, 1 - p) probability of x
    m = x + r
    return (np.log(r) - np.log(m) + log_gamma_pdf(x + 1, m * (1 - p))
            + log_gamma_pdf(r + 1, m * p) - log_gamma_pdf(m + 1, m))


def _nbinom_plain(x, r, p):
    return (sc.gammaln(x + r) - sc.gammaln(r) - sc.gammaln(x + 1) + r * np.log(p)
            + sc.xlog1py(x, -p))


def nbinom_logpmf(x, r, p):
    """log of the negative binomial(r, p) probability of x failures, stable at large r, x."""
    x, r, p = (np.asarray(v, dtype=float) for v in (x, r, p))
    with np.errstate(all="ignore"):
        return _choose(x + r >= PLAIN_BELOW, _nbinom_split, _nbinom_plain, x, r, p)


def _lrising_series(a, d):
    ad = a + d
    return ((a - 0.5) * np.log1p(d / a) + d * np.log(ad) - d + (stirlerr(ad) - stirlerr(a)))


def _lrising_plain(a, d):
    return np.where(d == 0, 0.0, sc.gammaln(a + d) - sc.gammaln(a))


def lrising(a, d):
    """``lgamma(a + d) - lgamma(a)`` (the log of the rising factorial), for a, a + d > 0."""
    a = np.asarray(a, dtype=float)
    d = np.asarray(d, dtype=float)
    with np.errstate(all="ignore"):
        big = (a >= PLAIN_BELOW) & (a + d >= SERIES_FROM)
        return _choose(big, _lrising_series, _lrising_plain, a, d)


def _lbeta_stirling(a, b):
    # a >= b >= 10: Stirling's series for the three lgammas, the z log z terms grouped
    # as log1p and log of ratios (no large terms cancel)
    return (-(a - 0.5) * np.log1p(b / a) + (b - 0.5) * np.log(b / (a + b))
            - 0.5 * np.log(a + b) + 0.5 * LOG_2PI + (stirlerr(a) + stirlerr(b) - stirlerr(a + b)))


def _lbeta_small(a, b):
    # b < 10 (the smaller): lgamma(b) - lrising(a, b), stable however large a is
    return sc.gammaln(b) - lrising(a, b)


def lbeta(a, b):
    """``log B(a, b)`` for a, b > 0, to full precision also where one or both are large
    (scipy's betaln loses up to 1e-11 relative with one argument near 1e6 and the other
    small)."""
    a, b = np.asarray(a, dtype=float), np.asarray(b, dtype=float)
    with np.errstate(all="ignore"):
        big, small = np.maximum(a, b), np.minimum(a, b)
        return _choose(small >= SERIES_FROM, _lbeta_stirling, _lbeta_small, big, small)


def _psi_series(m: int) -> list[tuple[int, float]]:
    """(power p, coefficient C) with psi^(m)(z) ~ [log z if m == 0] + sum C z^-p (DLMF 5.15.8)."""
    if m == 0:
        return [(1, -0.5)] + [(2 * k, -b / (2 * k)) for k, b in enumerate(_B2K, start=1)]
    sign = (-1.0) ** (m + 1)
    terms = [(m, sign * math.factorial(m - 1)), (m + 1, sign * math.factorial(m) / 2)]
    for k, b in enumerate(_B2K, start=1):
        terms.append((2 * k + m, sign * b * math.factorial(2 * k + m - 1) / math.factorial(2 * k)))
    return terms


def psi_diff(m, a, d):
    """``polygamma(m, a + d) - polygamma(m, a)``, without cancellation at large a."""
    m = int(np.asarray(m).flat[0])
    a, d = _arrays(a, d)
    out = np.empty(a.shape)
    with np.errstate(all="ignore"):
        ad = a + d
        big = (a >= SERIES_FROM) & (ad >= SERIES_FROM) & (m <= 4)
        s = ~big
        out[s] = sc.polygamma(m, ad[s]) - sc.polygamma(m, a[s])
        ab, db = a[big], d[big]
        L = np.log1p(db / ab)
        acc = L.copy() if m == 0 else np.zeros_like(L)
        for p, c in _psi_series(m):
            # (a + d)^-p - a^-p = a^-p expm1(-p log1p(d/a)): no cancellation
            acc += c * np.exp(-p * np.log(ab)) * np.expm1(-p * L)
        out[big] = acc
    return out


def log1p_sq(w):
    """``log(1 + w^2)`` without overflow of w^2."""
    w = np.abs(np.asarray(w, dtype=float))
    with np.errstate(all="ignore"):
        return _choose(w > 1e150, lambda v: 2 * np.log(v) + np.log1p(1 / (v * v)),
                       lambda v: np.log1p(v * v), w)


# -- tails in log space ----------------------------------------------------------

def _laguerre_tail(h, c):
    """log of ``int_0^inf exp(h(s)) ds`` for h(0) = 0, h'(0) = -c < 0 and a tail that is
    nearly exponential on the scale 1/c: Gauss-Laguerre in u = c*s.

    `h` maps an array of s, shape (m, nodes), to h(s); c has shape (m,)."""
    c = np.asarray(c, dtype=float)[:, None]
    u = _LAG_U[None, :]
    with np.errstate(all="ignore"):
        e = h(u / c) + u + _LAG_LOGW[None, :]
        e = np.where(np.isnan(e), -np.inf, e)
        top = np.max(e, axis=1, keepdims=True)
        return (top[:, 0] + np.log(np.sum(np.exp(e - top), axis=1))) - np.log(c[:, 0])


def _lentz(coef, b0, n_max: int = 3000):
    """Modified Lentz evaluation of ``b0 + a1/(1 + a2/(1 + ...))`` style continued
    fractions: `coef(i)` gives (a_i, b_i) arrays for i = 1, 2, ...; returns (value, converged)."""
    tiny = 1e-300
    f = np.where(b0 == 0, tiny, b0).astype(float)
    C = f.copy()
    D = np.zeros_like(f)
    done = np.zeros(f.shape, bool)
    with np.errstate(all="ignore"):
        for i in range(1, n_max + 1):
            an, bn = coef(i)
            D = bn + an * D
            D = np.where(np.abs(D) < tiny, tiny, D)
            C = bn + an / C
            C = np.where(np.abs(C) < tiny, tiny, C)
            D = 1.0 / D
            delta = C * D
            f = np.where(done, f, f * delta)
            done |= np.abs(delta - 1) < 1e-16
            if done.all():
                break
    return f, done


def _gamma_lower_tail(a, x):
    """log P(a, x) where it underflows (x below the mode, or a tiny x)."""
    out = np.empty(a.shape)
    logf = log_gamma_pdf(a, x)  # log of the gamma(a, 1) density at x
    r = x / (a + 1)
    series = r < 0.9
    if series.any():
        # P(a, x) = x^a e^-x / Gamma(a + 1) sum_k x^k / ((a + 1) ... (a + k)) (DLMF 8.7.1)
        aa, xx = a[series], x[series]
        term = np.ones_like(aa)
        total = np.ones_like(aa)
        for k in range(1, 700):
            term = term * xx / (aa + k)
            total += term
            if np.all(term < 1e-17 * total):
                break
        out[series] = logf[series] + np.log(xx / aa) + np.log(total)
    lag = ~series
    if lag.any():
        aa, xx = a[lag], x[lag]
        c = (aa - 1) / xx - 1

        def h(s):
            v = (aa[:, None] - 1) * np.log1p(-s / xx[:, None]) + s
            return np.where(s < xx[:, None], v, -np.inf)

        out[lag] = logf[lag] + _laguerre_tail(h, c)
    return out


def _gamma_upper_tail(a, x):
    """log Q(a, x) where it underflows (x beyond the mode)."""
    out = np.empty(a.shape)
    logf = log_gamma_pdf(a, x)
    with np.errstate(all="ignore"):
        kappa = np.abs(a - 1) / (x - a + 1) ** 2
    lag = kappa < 0.01
    if lag.any():
        aa, xx = a[lag], x[lag]
        c = 1 - (aa - 1) / xx

        def h(s):
            return (aa[:, None] - 1) * np.log1p(s / xx[:, None]) - s

        out[lag] = logf[lag] + _laguerre_tail(h, c)
    cf = ~lag
    if cf.any():
        # Q(a, x) = x^a e^-x / Gamma(a) / (x + 1 - a - 1(1 - a)/(x + 3 - a - ...)) (DLMF 8.9.2)
        aa, xx = a[cf], x[cf]

        def coef(i):
            return -i * (i - aa), xx + 2 * i + 1 - aa

        val, _ = _lentz(coef, xx + 1 - aa)
        out[cf] = logf[cf] + np.log(xx) - np.log(val)
    return out


def _log_of(v, vc, fix, tail, *args):
    """log of a probability `v` (its complement `vc` given as accurately): log1p(-vc)
    where v is near 1, log(v) elsewhere, and ``tail(*args)`` (in log space) on `fix`,
    where v underflows."""
    out = np.where(v > 0.5, np.log1p(-vc), np.log(v))
    if fix.any():
        out[fix] = tail(*[a[fix] for a in args])
    return out


def log_gammainc(a, x):
    """``log P(a, x)``, the log of the regularised lower incomplete gamma function."""
    a, x = _arrays(a, x)
    with np.errstate(all="ignore"):
        p, q = sc.gammainc(a, x), sc.gammaincc(a, x)
        fix = (p < TINY) & (a > 0) & (x > 0) & np.isfinite(x) & np.isfinite(a)
        return _log_of(p, q, fix, _gamma_lower_tail, a, x)


def log_gammaincc(a, x):
    """``log Q(a, x)``, the log of the regularised upper incomplete gamma function."""
    a, x = _arrays(a, x)
    with np.errstate(all="ignore"):
        p, q = sc.gammainc(a, x), sc.gammaincc(a, x)
        fix = (q < TINY) & (a > 0) & (x > a) & np.isfinite(x) & np.isfinite(a)
        return _log_of(q, p, fix, _gamma_upper_tail, a, x)


def _beta_lower_tail(a, b, x, y, logx, logy):
    """log I_x(a, b) where it underflows (x below the mean)."""
    out = np.empty(a.shape)
    with np.errstate(all="ignore"):
        # log of x^a y^b / (a B(a, b)): through the stable density unless x or y underflowed
        logf = beta_logpdf(x, a, b, y)
        edge = (x < 1e-300) | (y < 1e-300) | ~np.isfinite(logf)
        pref = np.where(edge, a * logx + b * logy - np.log(a) - lbeta(a, b),
                        logf + logx + logy - np.log(a))
        c = (a - 1) / x - (b - 1) / y
        kappa = np.abs((a - 1) / x**2 + (b - 1) / y**2) / c**2
    lag = (kappa < 0.01) & (c > 0) & ~edge
    if lag.any():
        aa, bb, xx, yy = a[lag], b[lag], x[lag], y[lag]

        def h(s):
            v = ((aa[:, None] - 1) * np.log1p(-s / xx[:, None])
                 + (bb[:, None] - 1) * np.log1p(s / yy[:, None]))
            return np.where(s < xx[:, None], v, -np.inf)

        out[lag] = logf[lag] + _laguerre_tail(h, c[lag])
    cf = ~lag
    if cf.any():
        # I_x(a, b) = x^a y^b / (a B(a, b)) / (1 + d1/(1 + d2/(1 + ...))) (DLMF 8.17.22)
        aa, bb, xx = a[cf], b[cf], x[cf]

        def coef(i):
            m = i // 2
            if i % 2:
                d = -(aa + m) * (aa + bb + m) * xx / ((aa + 2 * m) * (aa + 2 * m + 1))
            else:
                d = m * (bb - m) * xx / ((aa + 2 * m - 1) * (aa + 2 * m))
            return d, np.ones_like(aa)

        val, _ = _lentz(coef, np.ones_like(aa))
        out[cf] = pref[cf] - np.log(val)
    return out


def log_betainc(a, b, x, y=None, logx=None, logy=None):
    """``log I_x(a, b)``, the log of the regularised incomplete beta function.

    `y` = 1 - x may be given where it is known more precisely than ``1 - x`` (and
    `logx`, `logy` where x or y underflow)."""
    a, b, x = _arrays(a, b, x)
    with np.errstate(all="ignore"):
        y = 1 - x if y is None else np.broadcast_to(np.asarray(y, float), x.shape)
        logx = np.log(x) if logx is None else np.broadcast_to(np.asarray(logx, float), x.shape)
        logy = np.log1p(-x) if logy is None else np.broadcast_to(np.asarray(logy, float), x.shape)
        lo = x <= 0.5
        # each value and its complement from the argument that is exact (x or y)
        v = np.where(lo, sc.betainc(a, b, x), sc.betaincc(b, a, y))
        vc = np.where(lo, sc.betaincc(a, b, x), sc.betainc(b, a, y))
        fix = ((v < TINY) & (a > 0) & (b > 0) & (x > 0) & (y > 0)
               & np.isfinite(a) & np.isfinite(b))
        return _log_of(v, vc, fix, _beta_lower_tail, a, b, x, y, logx, logy)


def log_betaincc(a, b, x):
    """``log(1 - I_x(a, b)) = log I_(1-x)(b, a)``."""
    a, b, x = _arrays(a, b, x)
    with np.errstate(all="ignore"):
        return log_betainc(b, a, 1 - x, x, np.log1p(-x), np.log(x))


def log_t_sf(df, t):
    """``log P(T > t)`` for a standard Student-t of `df` degrees of freedom:
    half the incomplete beta ``I_(df/(df+t^2))(df/2, 1/2)`` on the upper side."""
    df, t = _arrays(df, t)
    with np.errstate(all="ignore"):
        w = t / np.sqrt(df)
        x = 1 / (1 + w * w)
        y = 1 / (1 + 1 / (w * w))
        logx = -log1p_sq(w)
        logy = logx + 2 * np.log(np.abs(w))
        half = np.log(0.5) + log_betainc(df / 2, 0.5, x, y, logx, logy)
        return np.where(t >= 0, half, np.log1p(-np.exp(half)))


def log_bdtrc(k, n, p):
    """``log P(X > k)`` for X ~ binomial(n, p): ``log I_p(k + 1, n - k)``."""
    k, n, p = _arrays(k, n, p)
    with np.errstate(all="ignore"):
        k = np.floor(k)
        inside = (k >= 0) & (k < n)
        kk = np.where(inside, k, 0.0)
        v = log_betainc(kk + 1, np.where(inside, n - kk, 1.0), p)
        return np.where(k < 0, 0.0, np.where(inside, v, -np.inf))


def _log_sum_ratios(lp0, log_ratio, steps, *, stop_early):
    """``lp0 + log(1 + r_0 + r_0 r_1 + ...)`` over `steps` terms (an array), where
    `log_ratio(j)` gives log of the ratio from term j to term j + 1 (arrays)."""
    cur = np.zeros(lp0.shape)
    top = np.zeros(lp0.shape)
    total = np.ones(lp0.shape)
    n_max = int(np.max(steps)) if steps.size else 0
    with np.errstate(all="ignore"):
        for j in range(max(n_max - 1, 0)):
            active = j + 1 < steps
            cur = np.where(active, cur + log_ratio(j), cur)
            grow = active & (cur > top)
            total = np.where(grow, total * np.exp(top - cur) + 1,
                             np.where(active, total + np.exp(cur - top), total))
            top = np.where(grow, cur, top)
            if stop_early is not None and j % 16 == 15:
                # a log-concave sequence that has fallen this far: what is left is at
                # most (j + 1) times the current term
                small = (cur - top < math.log(1e-18) - np.log(total * (j + 1))) & stop_early(j)
                if np.all(small | ~active):
                    break
    return lp0 + top + np.log(total)


def _discrete_log_sf(k, mean, lpmf, up_ratio, down_ratio, lo, hi, concave):
    """log P(X > k) for an integer X on lo..hi, from its log-pmf and its ratios:
    the upper terms summed where k is at or above the mean, else log1p(-cdf)."""
    k = np.floor(k)
    out = np.full(k.shape, np.nan)
    with np.errstate(all="ignore"):
        out[k < lo] = 0.0
        out[k >= hi] = -np.inf
        inner = (k >= lo) & (k < hi)
        upper = inner & (k + 1 >= mean)
        lower = inner & ~upper
        if upper.any():
            k0 = k[upper] + 1
            out[upper] = _log_sum_ratios(
                lpmf(k0, upper), lambda j: up_ratio(k0 + j, upper), hi[upper] - k0 + 1,
                stop_early=(lambda j: concave[upper]) if concave is not None else None)
        if lower.any():
            k0 = k[lower]
            lcdf = _log_sum_ratios(
                lpmf(k0, lower), lambda j: down_ratio(k0 - j, lower), k0 - lo[lower] + 1,
                stop_early=(lambda j: concave[lower]) if concave is not None else None)
            out[lower] = np.log1p(-np.exp(np.minimum(lcdf, 0.0)))
    return out


def _rest1(z):
    """``lgamma(z + 1) - z*log(z) + z`` for z >= 0 (0 at z = 0)."""
    z = np.asarray(z, dtype=float)
    return _choose(z >= SERIES_FROM,
                   lambda zb: 0.5 * (LOG_2PI + np.log(zb)) + stirlerr(zb),
                   lambda zs: sc.gammaln(zs + 1) - sc.xlogy(zs, zs) + zs, z)


def _rest0(z):
    """``lgamma(z) - z*log(z) + z`` for z > 0."""
    z = np.asarray(z, dtype=float)
    return _choose(z >= SERIES_FROM,
                   lambda zb: 0.5 * (LOG_2PI - np.log(zb)) + stirlerr(zb),
                   lambda zs: sc.gammaln(zs) - zs * np.log(zs) + zs, z)


def _bd0(c, e):
    """``c*log(c/e) + e - c`` (>= 0), with c = 0 giving e."""
    with np.errstate(all="ignore"):
        v = -c * log1pmx((e - c) / c, e / c)
        return np.where(c == 0, e, np.where(np.isinf(e), np.inf, v))


def _bbinom_split(k, n, a, b, data, par, _data_plain=None, _par_plain=None):
    # the z log z terms of the nine lgammas are minus the G statistic of the 2 x 2 table
    # [[k, n - k], [a, b]]: -sum over cells of bd0(cell, its expected value)
    y = n - k
    N = n + a + b
    left, right = (k + a) / N, (y + b) / N  # column shares
    g = (_bd0(k, n * left) + _bd0(y, n * right) + _bd0(a, (a + b) * left)
         + _bd0(b, (a + b) * right))
    return data + par + _rest0(k + a) + _rest0(y + b) - _rest0(N) - g


def _bbinom_plain(k, n, a, b, _data_split, _par_split, data, par):
    return data + par + sc.gammaln(k + a) + sc.gammaln(n - k + b) - sc.gammaln(n + a + b)


def bbinom_logpmf(k, n, a, b):
    """log of the beta-binomial(n, a, b) probability of k, for any n, a, b.

    With every lgamma written as ``z*log(z) - z + rest(z)``, the ``z*log(z)`` terms of
    the nine lgammas are minus the G statistic of the 2 x 2 table [[k, n - k], [a, b]]:
    ``-sum_cells c*log(c/e)``, e the cell's expected value from its row and column sums,
    which is ``-sum bd0(c, e)`` (each term >= 0, none large where the result is small);
    the linear terms cancel and the rests are small. So the form keeps its digits at
    large n and at large concentration a + b (where it tends to the binomial). Small
    n + a + b use the textbook lgamma form. Terms of the data alone or of the
    parameters alone are computed at their own (smaller) shapes."""
    k, n, a, b = (np.asarray(v, dtype=float) for v in (k, n, a, b))
    with np.errstate(all="ignore"):
        big = n + a + b >= BBINOM_PLAIN_BELOW
        data_s = _rest1(n) - _rest1(k) - _rest1(n - k) if big.any() else 0.0
        par_s = _rest0(a + b) - _rest0(a) - _rest0(b) if big.any() else 0.0
        data_p = -np.log1p(n) - lbeta(n - k + 1, k + 1) if not big.all() else 0.0
        par_p = sc.gammaln(a + b) - sc.gammaln(a) - sc.gammaln(b) if not big.all() else 0.0
        out = _choose(big, _bbinom_split, _bbinom_plain, k, n, a, b,
                      data_s, par_s, data_p, par_p)
        # zero outside the support (never NaN: a bound on a parameter n may have been
        # reduced to a statistic and checked apart from this term)
        return np.where((k < 0) | (k > n), -np.inf, out)


def log_bbinom_sf(k, n, a, b):
    """``log P(X > k)`` for X ~ beta-binomial(n, a, b)."""
    k, n, a, b = _arrays(k, n, a, b)
    k, n, a, b = (np.array(v) for v in (k, n, a, b))

    def lpmf(kk, m):
        return bbinom_logpmf(kk, n[m], a[m], b[m])

    def up(kk, m):  # P(k + 1) / P(k)
        nn, aa, bb = n[m], a[m], b[m]
        return np.log((nn - kk) * (kk + aa)) - np.log((kk + 1) * (nn - kk - 1 + bb))

    def down(kk, m):  # P(k - 1) / P(k)
        nn, aa, bb = n[m], a[m], b[m]
        return np.log(kk * (nn - kk + bb)) - np.log((nn - kk + 1) * (kk - 1 + aa))

    with np.errstate(all="ignore"):
        mean = n * a / (a + b)
    return _discrete_log_sf(k, mean, lpmf, up, down, np.zeros(k.shape), n,
                            (a >= 1) & (b >= 1))


def hypergeom_logpmf(k, N, K, n):
    """log P(X = k) for X the successes in n draws without replacement from N items of
    which K are successes, as three binomial terms at p = n/N (each near its mode)."""
    k, N, K, n = (np.asarray(v, dtype=float) for v in (k, N, K, n))
    with np.errstate(all="ignore"):
        p = n / np.maximum(N, 1)
        q = 1 - p
        out = lbinom(k, K, p, q) + lbinom(n - k, N - K, p, q) - lbinom(n, N, p, q)
        return np.where(_hypergeom_outside(k, N, K, n), -np.inf, out)


def _hypergeom_outside(k, N, K, n):
    """Where k is outside the support, or (N, K, n) is not a population and a draw from
    it (zero probability there, never NaN)."""
    return ((K < 0) | (K > N) | (n < 0) | (n > N) | (k < 0) | (k > n) | (k > K)
            | (N - K < n - k))


def log_hypergeom_sf(k, N, K, n):
    """``log P(X > k)`` for the hypergeometric X of `hypergeom_logpmf`."""
    k, N, K, n = (np.array(v) for v in _arrays(k, N, K, n))

    def lpmf(kk, m):
        return hypergeom_logpmf(kk, N[m], K[m], n[m])

    def up(kk, m):  # P(k + 1) / P(k)
        NN, KK, nn = N[m], K[m], n[m]
        return np.log((KK - kk) * (nn - kk)) - np.log((kk + 1) * (NN - KK - nn + kk + 1))

    def down(kk, m):  # P(k - 1) / P(k)
        NN, KK, nn = N[m], K[m], n[m]
        return np.log(kk * (NN - KK - nn + kk)) - np.log((KK - kk + 1) * (nn - kk + 1))

    # no population: zero probability (evaluated as the empty population, then set)
    bad = (K < 0) | (K > N) | (n < 0) | (n > N)
    N, K, n = (np.where(bad, 0.0, v) for v in (N, K, n))
    with np.errstate(all="ignore"):
        mean = n * K / np.maximum(N, 1)
        lo = np.maximum(0.0, n - (N - K))
        hi = np.minimum(n, K)
    out = _discrete_log_sf(k, mean, lpmf, up, down, lo, hi, np.ones(k.shape, bool))
    return np.where(bad, -np.inf, out)
