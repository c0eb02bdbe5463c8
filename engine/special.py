"""Special functions as sympy functions that compile to scipy.special or to the
stable numerics of engine/logspace.py.

sympy's own forms of these either lose precision in floating point (``x*log(y)``
is NaN at ``x = y = 0``, ``lgamma(a + d) - lgamma(a)`` has no correct digit at
a = 1e15), or evaluate exactly and can take unbounded time on large integer
arguments. Each function here carries its derivative where one is known (written
with the same stable pieces: ``psi_diff`` for differences of polygammas), so that
curvature at the mode can be found symbolically.
"""

from __future__ import annotations

import math

import numpy as np
import scipy.special as sc
import sympy as sp
from sympy.printing.numpy import SciPyPrinter

from . import logspace as L


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


class log_gamma_pdf(sp.Function):
    """``(a - 1)*log(y) - y - lgamma(a)``, args ``(a, y)``: the log of the gamma(a, 1)
    density at y (with k = a - 1, the log Poisson probability of k at rate y), computed
    without cancellation at large a and y."""

    nargs = 2

    @classmethod
    def eval(cls, a, y):
        if a == 1:
            return -y
        return None

    def fdiff(self, argindex=1):
        a, y = self.args
        if argindex == 1:
            return sp.log(y) - sp.polygamma(0, a)
        return (a - 1) / y - 1


class beta_lpdf(sp.Function):
    """log of the beta(a, b) density, args ``(x, a, b)``, stable at large a and b."""

    nargs = 3

    def fdiff(self, argindex=1):
        x, a, b = self.args
        if argindex == 1:
            return (a - 1) / x - (b - 1) / (1 - x)
        if argindex == 2:
            return sp.log(x) + psi_diff(0, a, b)
        return log1p(-x) + psi_diff(0, b, a)


class binom_lpmf(sp.Function):
    """log of the binomial(n, p) probability of x, args ``(x, n, p)``, stable at large n."""

    nargs = 3

    def fdiff(self, argindex=1):
        x, n, p = self.args
        if argindex == 3:
            return x / p - (n - x) / (1 - p)
        raise sp.ArgumentIndexError(self, argindex)


class nbinom_lpmf(sp.Function):
    """log of the negative binomial(r, p) probability of x, args ``(x, r, p)``."""

    nargs = 3

    def fdiff(self, argindex=1):
        x, r, p = self.args
        if argindex == 2:
            return psi_diff(0, r, x) + sp.log(p)
        if argindex == 3:
            return r / p - x / (1 - p)
        raise sp.ArgumentIndexError(self, argindex)


class bbinom_lpmf(sp.Function):
    """Beta-binomial ``log P(X = k)``, args ``(k, n, a, b)``, stable at large n and a + b."""

    nargs = 4

    def fdiff(self, argindex=1):
        k, n, a, b = self.args
        if argindex == 3:
            return psi_diff(0, a, k) - psi_diff(0, a + b, n)
        if argindex == 4:
            return psi_diff(0, b, n - k) - psi_diff(0, a + b, n)
        raise sp.ArgumentIndexError(self, argindex)


class sqr(sp.Function):
    """``w^2``, kept as a function so that sympy does not rewrite ``((x - m)/s)^2`` as
    ``(x - m)^2/s^2`` (which is 0/0 at a scale of 1e-300)."""

    nargs = 1

    def fdiff(self, argindex=1):
        return 2 * self.args[0]


class lrising(sp.Function):
    """``lgamma(a + d) - lgamma(a)``, args ``(a, d)``, without cancellation at large a."""

    nargs = 2

    @classmethod
    def eval(cls, a, d):
        if d.is_zero:
            return sp.S.Zero
        return None

    def fdiff(self, argindex=1):
        a, d = self.args
        if argindex == 1:
            return psi_diff(0, a, d)
        return sp.polygamma(0, a + d)


class psi_diff(sp.Function):
    """``polygamma(m, a + d) - polygamma(m, a)``, args ``(m, a, d)`` with m a whole number."""

    nargs = 3

    def fdiff(self, argindex=1):
        m, a, d = self.args
        if argindex == 1:
            raise sp.ArgumentIndexError(self, argindex)
        if argindex == 2:
            return psi_diff(m + 1, a, d)
        return sp.polygamma(m + 1, a + d)


class betaln(sp.Function):
    """``log B(a, b)``, accurate also where one or both arguments are large."""

    nargs = 2

    def fdiff(self, argindex=1):
        a, b = self.args
        if argindex == 1:
            return -psi_diff(0, a, b)
        return -psi_diff(0, b, a)


class lchoose(sp.Function):
    """``log C(n, k)`` for real n, k, as ``-log1p(n) - betaln(n - k + 1, k + 1)``."""

    nargs = 2

    @classmethod
    def eval(cls, n, k):
        if k.is_zero:
            return sp.S.Zero
        return None

    def fdiff(self, argindex=1):
        n, k = self.args
        if argindex == 1:
            return psi_diff(0, n - k + 1, k)
        return sp.polygamma(0, n - k + 1) - sp.polygamma(0, k + 1)


class log1p_sq(sp.Function):
    """``log(1 + w^2)``, without overflow of w^2."""

    nargs = 1

    def fdiff(self, argindex=1):
        w = self.args[0]
        return 2 * w / (1 + w**2)


class _NoDerivative(sp.Function):
    """A special function whose derivative quadrat does not need symbolically."""

    def fdiff(self, argindex=1):
        raise sp.ArgumentIndexError(self, argindex)


class log_gammainc(_NoDerivative):
    """``log P(a, x)``: log of the regularised lower incomplete gamma, args ``(a, x)``."""

    nargs = 2


class log_gammaincc(_NoDerivative):
    """``log Q(a, x)``: log of the regularised upper incomplete gamma, args ``(a, x)``."""

    nargs = 2


class log_betaincc(_NoDerivative):
    """``log(1 - I_x(a, b))``, args ``(a, b, x)``, accurate in both tails."""

    nargs = 3


class log_t_sf(_NoDerivative):
    """``log P(T > t)`` for a standard Student-t, args ``(df, t)``."""

    nargs = 2


class log_bdtrc(_NoDerivative):
    """Binomial ``log P(X > k)``, args ``(k, n, p)``."""

    nargs = 3


class log_bbinom_sf(_NoDerivative):
    """Beta-binomial ``log P(X > k)``, args ``(k, n, a, b)``."""

    nargs = 4


class hypergeom_lpmf(_NoDerivative):
    """Hypergeometric ``log P(X = k)``, args ``(k, N, K, n)`` (all whole numbers)."""

    nargs = 4


class log_hypergeom_sf(_NoDerivative):
    """Hypergeometric ``log P(X > k)``, args ``(k, N, K, n)``."""

    nargs = 4


def _lchoose(n, k):
    with np.errstate(all="ignore"):
        return -np.log1p(n) - L.lbeta(n - k + 1, k + 1)


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
    "log_gamma_pdf": L.log_gamma_pdf,
    "sqr": np.square,
    "bbinom_lpmf": L.bbinom_logpmf,
    "beta_lpdf": L.beta_logpdf,
    "nbinom_lpmf": L.nbinom_logpmf,
    "binom_lpmf": L.binom_logpmf,
    "lrising": L.lrising,
    "psi_diff": L.psi_diff,
    "betaln": L.lbeta,
    "lchoose": _lchoose,
    "log1p_sq": L.log1p_sq,
    "log_gammainc": L.log_gammainc,
    "log_gammaincc": L.log_gammaincc,
    "log_betaincc": L.log_betaincc,
    "log_t_sf": L.log_t_sf,
    "log_bdtrc": L.log_bdtrc,
    "log_bbinom_sf": L.log_bbinom_sf,
    "hypergeom_lpmf": L.hypergeom_logpmf,
    "log_hypergeom_sf": L.log_hypergeom_sf,
}


class _CodePrinter(SciPyPrinter):
    """sympy's code printer, but every float printed with all the digits of a double:
    sympy's own keeps 15 significant digits, so that ``1e15 + 1 - y`` (a constant folded
    in exact arithmetic) would be compiled as ``1.0e+15 - y``."""

    def _print_Float(self, expr):
        v = float(expr)
        return repr(v) if math.isfinite(v) else super()._print_Float(expr)

    def _print_ComplexInfinity(self, expr):
        # sympy's 1/0 (an indicator in a denominator, where it is 0): not a real
        # number, so NaN, which the conditions mask or the pass reports with its place
        return self._print(sp.nan)


def code_printer() -> SciPyPrinter:
    """The printer to lambdify with (modules ``[NAMESPACE, "scipy", "numpy"]``)."""
    return _CodePrinter({"fully_qualified_modules": False, "inline": True,
                         "allow_unknown_functions": True,
                         "user_functions": {k: k for k in NAMESPACE}})
