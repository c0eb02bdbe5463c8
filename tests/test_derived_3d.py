"""Derived quantities over three parameters against references that integrate
their distribution independently.

- A difference of two hierarchical Poisson rates: given the rate of their common
  gamma prior, the two rates are independent gammas (the conjugate update, from
  memory), so P(l1 - l2 > c) is a 1-D integral inside an integral over the
  hyperparameter, done here by Gauss-Legendre and the trapezoid rule with numpy
  and scipy.special. An unused third parameter must not move it beyond the errors.
- A positive predictive value se prev / (se prev + (1 - sp)(1 - prev)) with an
  imperfect test: it increases with prev, so P(PPV <= x) integrates the
  conditional cdf of prev up to the cut over (se, sp), on a fine grid with numpy.
The counts are invented.
"""

from __future__ import annotations

import functools

import numpy as np
import pytest
from scipy import special

from engine.workspace import Workspace

Y1, Y2, T, A = 12, 5, 10.0, 2.0     # counts, exposure, the gamma prior's shape


def _rates_ws(unused: bool) -> Workspace:
    ws = Workspace()
    ws.param("l1", "positive")
    ws.param("l2", "positive")
    ws.param("beta", "positive")
    ws.prior("l1", "gamma(2, beta)")
    ws.prior("l2", "gamma(2, beta)")
    ws.prior("beta", "gamma(2, 1)")
    ws.data_typed("y1", [str(Y1)])
    ws.data_typed("y2", [str(Y2)])
    ws.data_typed("t", [str(T)])
    ws.likelihood("y1", "poisson(l1 * t)")
    ws.likelihood("y2", "poisson(l2 * t)")
    if unused:
        ws.param("z", "real")
        ws.prior("z", "normal(0, 1)")
    ws.compute()
    return ws


def _p_diff_gt(c: float) -> float:
    """P(l1 - l2 > c): given beta, l_i ~ gamma(A + y_i, rate beta + T)."""
    # beta's posterior: gamma(2, 1) prior times prod beta^A / (beta + T)^(A + y_i)
    v = np.linspace(-12.0, 4.5, 1201)            # log beta; trapezoid, tails negligible
    b = np.exp(v)
    logpb = np.log(b) - b + 2 * A * np.log(b) - (2 * A + Y1 + Y2) * np.log(b + T)
    wb = np.exp(logpb - logpb.max()) * b         # d beta = beta d v
    x, w = np.polynomial.legendre.leggauss(400)
    lo, hi = 0.0, 12.0
    l2 = (hi - lo) / 2 * x + (hi + lo) / 2
    w = w * (hi - lo) / 2
    rate = (b + T)[:, None]
    a2 = A + Y2
    log_f2 = a2 * np.log(rate) + (a2 - 1) * np.log(l2) - rate * l2 - special.gammaln(a2)
    s1 = special.gammaincc(A + Y1, np.maximum(rate * (l2 + c), 0.0))
    inner = np.sum(w * np.exp(log_f2) * s1, axis=1)
    return float(np.trapezoid(wb * inner, v) / np.trapezoid(wb, v))


@functools.lru_cache(maxsize=None)
def _rates(unused: bool) -> Workspace:
    return _rates_ws(unused)


def test_the_reference_itself_is_a_probability_of_the_right_kind():
    # c far below every difference: probability 1
    assert _p_diff_gt(-50.0) == pytest.approx(1.0, abs=1e-12)
    # the same integral by nested scipy.integrate.quad (epsrel 1e-11 to 1e-13, over
    # beta, then l2 with gamma pdf times sf from scipy.stats), run once while writing
    # this test: 0.7682450529390872
    assert _p_diff_gt(0.3) == pytest.approx(0.7682450529390872, abs=1e-10)


@pytest.mark.parametrize("unused", [False, True])
def test_p_of_a_difference_of_hierarchical_rates_within_its_error(unused):
    ref = _p_diff_gt(0.3)
    a = _rates(unused).prob("l1 - l2 > 0.3")
    assert abs(a.values[0] - ref) <= a.errors[0], (a.values[0], ref, a.errors[0])
    assert a.errors[0] < 1e-3


def test_an_unused_parameter_moves_the_probability_less_than_the_errors():
    a, b = _rates(False).prob("l1 - l2 > 0.3"), _rates(True).prob("l1 - l2 > 0.3")
    assert abs(a.values[0] - b.values[0]) <= a.errors[0] + b.errors[0]


def test_quantile_of_the_difference_within_its_error():
    ws = _rates(False)
    for q in (0.025, 0.5, 0.975):
        a = ws.quantile("l1 - l2", q)
        x, err = a.values[0], a.errors[0]
        # P(l1 - l2 > x) = 1 - q at the true quantile; the quantile's error bounds it
        lo, hi = _p_diff_gt(x + err), _p_diff_gt(x - err)
        assert lo - 1e-9 <= 1 - q <= hi + 1e-9, (q, x, err)


# ---------------------------------------------------------------------------
# the positive predictive value

K, M, SE_Y, SE_N, SP_Y, SP_N = 30, 400, 88, 100, 190, 200


@functools.lru_cache(maxsize=None)
def _ppv_ws() -> Workspace:
    ws = Workspace()
    ws.param("prev", "unit")
    ws.param("se", "unit")
    ws.param("sp", "unit")
    for name, v in (("k", K), ("m", M), ("a", SE_Y), ("na", SE_N), ("b", SP_Y), ("nb", SP_N)):
        ws.data_typed(name, [str(v)])
    ws.likelihood("k", "binomial(m, se * prev + (1 - sp) * (1 - prev))")
    ws.likelihood("a", "binomial(na, se)")
    ws.likelihood("b", "binomial(nb, sp)")
    ws.let("ppv", "se * prev / (se * prev + (1 - sp) * (1 - prev))")
    ws.grid("prev", 1e-9, 0.6, 121)
    ws.grid("se", 0.5, 0.99, 61)
    ws.grid("sp", 0.8, 0.999, 61)
    ws.compute()
    return ws


def _ppv_cdf(xs, n_prev: int, n_out: int) -> np.ndarray:
    """P(PPV <= x): prev <= x (1 - sp) / (se (1 - x) + x (1 - sp)) on each (se, sp),
    the conditional cdf of prev by cumulative trapezoid sums on the logit scale, the
    outer sums by the trapezoid rule on the logit scales (on the box of the grid)."""
    u = np.linspace(special.logit(1e-9), special.logit(0.6), n_prev)
    prev = special.expit(u)
    hu = u[1] - u[0]
    v = np.linspace(special.logit(0.5), special.logit(0.99), n_out)
    w = np.linspace(special.logit(0.8), special.logit(0.999), n_out)
    se, sp = special.expit(v), special.expit(w)
    out, tot = np.zeros(len(xs)), 0.0
    for i in range(n_out):
        S, SP = se[i], sp[:, None]
        p = S * prev[None, :] + (1 - SP) * (1 - prev[None, :])
        lg = (K * np.log(p) + (M - K) * np.log1p(-p) + np.log(prev * (1 - prev))[None, :]
              + SE_Y * np.log(S) + (SE_N - SE_Y) * np.log1p(-S) + np.log(S * (1 - S))
              + SP_Y * np.log(SP) + (SP_N - SP_Y) * np.log1p(-SP) + np.log(SP * (1 - SP)))
        f = np.exp(lg + 60)
        cum = np.concatenate([np.zeros((n_out, 1)),
                              np.cumsum((f[:, 1:] + f[:, :-1]) * hu / 2, axis=1)], axis=1)
        wi = 0.5 if i in (0, n_out - 1) else 1.0
        ws_ = np.ones(n_out)
        ws_[[0, -1]] = 0.5
        rows = np.arange(n_out)
        for j, x in enumerate(xs):
            cut = x * (1 - sp) / (S * (1 - x) + x * (1 - sp))
            t = np.clip((special.logit(np.clip(cut, 1e-300, 1)) - u[0]) / hu, 0, n_prev - 1 - 1e-9)
            k = t.astype(int)
            r = t - k
            fi, fj = f[rows, k], f[rows, k + 1]
            below = cum[rows, k] + hu * (r * fi + 0.5 * r * r * (fj - fi))
            out[j] += wi * np.dot(ws_, below)
        tot += wi * np.dot(ws_, cum[:, -1])
    return out / tot


def test_ppv_quantiles_within_their_errors():
    ws = _ppv_ws()
    qs = (0.025, 0.5, 0.975)
    got = [ws.quantile("ppv", q) for q in qs]
    xs = [g.values[0] for g in got]
    errs = [g.errors[0] for g in got]
    lo = [x - e for x, e in zip(xs, errs)]
    hi = [x + e for x, e in zip(xs, errs)]
    c1 = _ppv_cdf(lo + hi, 801, 121)
    c2 = _ppv_cdf(lo + hi, 1601, 241)
    ref = (4 * c2 - c1) / 3                 # Richardson: the reference is second order
    for i, q in enumerate(qs):
        # the true quantile lies within the stated error: the cdf crosses q in between
        assert ref[i] - 1e-7 <= q <= ref[3 + i] + 1e-7, (q, xs[i], errs[i], ref[i], ref[3 + i])
        assert errs[i] < 1e-2
