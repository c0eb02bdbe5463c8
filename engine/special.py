"""Special functions as sympy functions that compile to scipy.special.

sympy's own forms of these either lose precision in floating point (``x*log(y)``
is NaN at ``x = y = 0``), or evaluate exactly and can take unbounded time on large
integer arguments. Each function here carries its derivative where one is known,
so that curvature at the mode can be found symbolically.
"""

from __future__ import annotations

import numpy as np
import scipy.special as sc
import sympy as sp


class xlogy(sp.Function):
    """``x*log(y)``, taken as 0 where ``x == 0`` (also at ``y == 0``)."""

    nargs = 2

    @classmethod
    def eval(cls, x, y):
        if x.is_zero:
            return sp.S.Zero
        if y == 1:
            return sp.S.Zero
        return None

    def fdiff(self, argindex=1):
        x, y = self.args
        if argindex == 1:
            return sp.log(y)
        return x / y


class xlog1py(sp.Function):
    """``x*log(1 + y)``, taken as 0 where ``x == 0`` (also at ``y == -1``)."""

    nargs = 2

    @classmethod
    def eval(cls, x, y):
        if x.is_zero or y.is_zero:
            return sp.S.Zero
        return None

    def fdiff(self, argindex=1):
        x, y = self.args
        if argindex == 1:
            return sp.log(1 + y)
        return x / (1 + y)


class log1p(sp.Function):
    """``log(1 + x)``, accurate for small ``x``."""

    nargs = 1

    @classmethod
    def eval(cls, x):
        if x.is_zero:
            return sp.S.Zero
        return None

    def fdiff(self, argindex=1):
        return 1 / (1 + self.args[0])


class expm1(sp.Function):
    """``exp(x) - 1``, accurate for small ``x``."""

    nargs = 1

    @classmethod
    def eval(cls, x):
        if x.is_zero:
            return sp.S.Zero
        return None

    def fdiff(self, argindex=1):
        return sp.exp(self.args[0])


class ndtr(sp.Function):
    """The standard normal cumulative distribution function."""

    nargs = 1

    def fdiff(self, argindex=1):
        z = self.args[0]
        return sp.exp(-z**2 / 2) / sp.sqrt(2 * sp.pi)


class log_ndtr(sp.Function):
    """``log`` of the standard normal cdf, accurate far into the lower tail."""

    nargs = 1

    def fdiff(self, argindex=1):
        z = self.args[0]
        return sp.exp(-z**2 / 2 - log_ndtr(z)) / sp.sqrt(2 * sp.pi)


class expit(sp.Function):
    """The logistic function ``1 / (1 + exp(-x))``."""

    nargs = 1

    def fdiff(self, argindex=1):
        return expit(self.args[0]) * (1 - expit(self.args[0]))


class gammaln(sp.Function):
    """``log|Gamma(x)|``; never evaluated exactly (that can take unbounded time)."""

    nargs = 1

    def fdiff(self, argindex=1):
        return sp.polygamma(0, self.args[0])


class _NoDerivative(sp.Function):
    """A special function whose derivative quadrat does not need symbolically."""

    def fdiff(self, argindex=1):
        raise sp.ArgumentIndexError(self, argindex)


class gammaincc(_NoDerivative):
    """Regularised upper incomplete gamma ``Q(a, x)``."""

    nargs = 2


class gammainc(_NoDerivative):
    """Regularised lower incomplete gamma ``P(a, x)``."""

    nargs = 2


class betaincc(_NoDerivative):
    """Regularised upper incomplete beta ``1 - I_x(a, b)``, args ``(a, b, x)``."""

    nargs = 3


class log_betaincc(_NoDerivative):
    """``log(1 - I_x(a, b))``, accurate also where ``I_x(a, b)`` is tiny."""

    nargs = 3


class stdtr(_NoDerivative):
    """Student-t cdf, args ``(df, t)``."""

    nargs = 2


class pdtrc(_NoDerivative):
    """Poisson survival ``P(X > k)``, args ``(k, rate)``."""

    nargs = 2


class bdtrc(_NoDerivative):
    """Binomial survival ``P(X > k)``, args ``(k, n, p)``."""

    nargs = 3


class bbinom_sf(_NoDerivative):
    """Beta-binomial survival ``P(X > k)``, args ``(k, n, a, b)``."""

    nargs = 4


def _bbinom_sf(k, n, a, b):
    import scipy.stats as st
    return st.betabinom.sf(k, n, a, b)


def _log_betaincc(a, b, x):
    # betaincc rounds 1 - 1e-10 to 1.0 at some arguments; log1p(-I) keeps it where
    # I is small, log(betaincc) keeps the far tail where I is near 1
    with np.errstate(all="ignore"):
        i = sc.betainc(a, b, x)
        return np.where(i < 0.5, np.log1p(-i), np.log(sc.betaincc(a, b, x)))


def _bdtrc(k, n, p):
    # P(X > k) for X ~ binomial(n, p) as the regularised incomplete beta
    # I_p(k + 1, n - k): scipy.special.bdtrc takes a floating n only with a
    # DeprecationWarning (grid and data values are floats)
    with np.errstate(all="ignore"):
        k, n, p = np.floor(k), np.asarray(n, float), np.asarray(p, float)
        inside = (k >= 0) & (k < n)
        out = sc.betainc(np.where(inside, k + 1, 1.0), np.where(inside, n - k, 1.0), p)
        return np.where(k < 0, 1.0, np.where(inside, out, 0.0))


def _stdtr(df, t):
    # scipy.special.stdtr's df must be positive; NaN where it is not
    return sc.stdtr(df, t)


# Names the generated code resolves, and what they are in scipy / numpy.
NAMESPACE = {
    "xlogy": sc.xlogy,
    "xlog1py": sc.xlog1py,
    "log1p": np.log1p,
    "expm1": np.expm1,
    "ndtr": sc.ndtr,
    "log_ndtr": sc.log_ndtr,
    "expit": sc.expit,
    "gammaln": sc.gammaln,
    "gammaincc": sc.gammaincc,
    "gammainc": sc.gammainc,
    "betaincc": sc.betaincc,
    "log_betaincc": _log_betaincc,
    "stdtr": _stdtr,
    "pdtrc": sc.pdtrc,
    "bdtrc": _bdtrc,
    "bbinom_sf": _bbinom_sf,
}
