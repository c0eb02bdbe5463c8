"""The density and intervals of a derived quantity.

A let or an expression of the parameters is asked the questions a parameter is
asked (where it is not a number is `finite.py`'s). Its posterior density
(`density`): a parameter's from its marginal, a strictly monotone function of one
parameter's by the change of variables, any other by the coarea formula along
grid lines (`regions.region_density`), else by differences of its cdf.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import sympy as sp
from scipy import optimize

from .errors import ComputeError
from . import questions, regions
from .posterior import Estimate, Marginal, Posterior

# ---------------------------------------------------------------------------
# the density of a derived quantity

def marginal_density(m: Marginal, xs: np.ndarray) -> np.ndarray:
    """The density of a continuous parameter's marginal at `xs` (its own units),
    from the quintic spline the quantiles use; 0 outside the axis."""
    xs = np.asarray(xs, float)
    ax = m.axis
    cs = m._cdf_spline()
    out = np.zeros(xs.shape)
    inside = (xs > ax.lo) & (xs < ax.hi)
    if inside.any():
        u = ax.to_u(xs[inside])
        ok = (u >= cs.ua) & (u <= cs.ub)
        g = np.where(ok, np.maximum(cs.density(np.clip(u, cs.ua, cs.ub)), 0.0), 0.0)
        out[inside] = g / cs.total / np.exp(ax.log_jacobian(u))
    return out


def _monotone_density(post: Posterior, mono, xs: np.ndarray) -> np.ndarray:
    """The density of a strictly monotone function of one parameter: the marginal's
    density at its inverse, over the function's slope."""
    m = post.marginal(mono.name)
    ax = m.axis
    params = post.compiled.params

    def g(v):
        v = np.atleast_1d(np.asarray(v, float))
        return np.asarray(mono.fn([v if p.name == mono.name else np.zeros_like(v)
                                   for p in params]), float)

    ua, ub = ax.u[0], ax.u[-1]
    xa, xb = float(g(ax.to_value(np.array([ua])))[0]), float(g(ax.to_value(np.array([ub])))[0])
    lo, hi = min(xa, xb), max(xa, xb)
    out = np.zeros(len(xs))
    for j, x in enumerate(np.asarray(xs, float)):
        if not lo < x < hi:
            continue
        u = optimize.brentq(lambda t: float(g(ax.to_value(np.array([t])))[0]) - x, ua, ub,
                            xtol=1e-14 * max(1.0, abs(ua) + abs(ub)), rtol=1e-15, maxiter=300)
        v = float(ax.to_value(np.array([u]))[0])
        step = max(abs(v) * 1e-6, 1e-9 * max(float(np.ptp(ax.values)), 1e-300))
        lo_v, hi_v = max(v - step, ax.values[0]), min(v + step, ax.values[-1])
        slope = abs(float(g(np.array([hi_v]))[0] - g(np.array([lo_v]))[0])) / (hi_v - lo_v)
        out[j] = float(marginal_density(m, np.array([v]))[0]) / slope if slope > 0 else 0.0
    return out


def density(post: Posterior, expr: sp.Expr, xs: np.ndarray) -> np.ndarray:
    """The posterior density of `expr` (parameters and lets) at the points `xs`.

    Parameters
    ----------
    post : Posterior
    expr : sympy expression
    xs : ndarray, shape (n,)

    Returns
    -------
    ndarray, shape (n,)
        The density in the expression's units (for an expression of discrete
        parameters only, refused: it has a pmf, not a density).
    """
    ex = questions._compile(post, expr)
    e = ex.expr
    xs = np.asarray(xs, float)
    if e.is_number:
        raise ComputeError(f"`{expr}` is a constant: it has no density")
    used = [p for p in post.compiled.params if p.symbol in e.free_symbols]
    if all(p.discrete for p in used):
        raise ComputeError(f"`{expr}` reads discrete parameters only: it has a pmf, not a "
                           "density")
    if isinstance(e, sp.Symbol):
        return marginal_density(post.marginal(e.name), xs)
    mono = questions._monotone_in_one(post, e)
    if mono is not None:
        return _monotone_density(post, mono, xs)
    dens = regions.region_density(post, e)
    if dens is not None:
        return np.array([dens(float(x), 0) for x in xs])
    # cell fractions: central differences of the cdf over a tenth of the spacing asked
    step = 0.1 * (float(np.median(np.diff(np.sort(xs)))) if len(xs) > 1 else 1e-3)
    return np.array([(questions._prob_le(post, e, x + step, 0) -
                      questions._prob_le(post, e, x - step, 0)) / (2 * step) for x in xs])


@dataclass(frozen=True)
class Curve:
    """A derived quantity's density on a mesh, for plots and exports.

    Attributes
    ----------
    x, density : ndarray, shape (n,)
    interval : tuple of float
        Its central 95% interval.
    """

    x: np.ndarray
    density: np.ndarray
    interval: tuple[float, float]


def curve(post: Posterior, expr: sp.Expr, *, points: int = 61, tail: float = 1e-4,
          notes: list | None = None) -> Curve:
    """The density of `expr` on `points` evenly spaced values between its `tail` and
    1 - `tail` quantiles, with its central 95% interval."""
    qs = [questions.quantile(post, expr, q, notes=notes if i == 0 else None).value
          for i, q in enumerate((tail, 0.025, 0.975, 1 - tail))]
    lo, hi = qs[0], qs[3]
    if not hi > lo:
        raise ComputeError(f"`{expr}` has no spread under the posterior: no density to draw")
    x = np.linspace(lo, hi, points)
    return Curve(x, density(post, expr, x), (qs[1], qs[2]))


def central(post: Posterior, expr: sp.Expr, level: float, *, notes: list | None = None):
    """The central `level` interval of `expr`: its two quantiles (Estimates)."""
    if not 0 < level < 1:
        raise ComputeError(f"interval level must be between 0 and 1; got {level:g}")
    a = (1 - level) / 2
    return (questions.quantile(post, expr, a, notes=notes),
            questions.quantile(post, expr, 1 - a))


def finite_or_none(v: float) -> float | None:
    return v if math.isfinite(v) else None


# ---------------------------------------------------------------------------
# the HPD interval of a derived quantity

@dataclass(frozen=True)
class HpdInterval:
    """The highest-density interval of a derived quantity.

    Attributes
    ----------
    lo, hi : Estimate
        Its ends, each with an error (the quantile's, plus how far the end moves
        when the density used to balance the ends is read another way).
    at_lowest, at_highest : bool
        Whether the density is highest at that end of the quantity's range, so the
        interval runs there (one-sided).
    """

    lo: "Estimate"
    hi: "Estimate"
    at_lowest: bool = False
    at_highest: bool = False


def _modes_on(x: np.ndarray, f: np.ndarray) -> list[float]:
    """The local maxima of a density sampled on a mesh that stand clear of the dips
    beside them (a dip below 80% of the lower peak), in increasing order."""
    peaks = [i for i in range(len(f)) if f[i] > 0 and
             (i == 0 or f[i] >= f[i - 1]) and (i == len(f) - 1 or f[i] > f[i + 1])]
    kept = peaks[:1]
    for i in peaks[1:]:
        j = kept[-1]
        dip = float(np.min(f[j:i + 1]))
        if dip < 0.8 * min(f[i], f[j]):
            kept.append(i)
        elif f[i] > f[j]:
            kept[-1] = i
    return [float(x[i]) for i in kept]


def hpd(post: Posterior, expr: sp.Expr, level: float, *, text: str | None = None,
        notes: list | None = None) -> HpdInterval:
    """The `level` highest-density interval of `expr`: the interval [q(a), q(a + level)]
    whose ends have equal density, a found by solving that balance (a shortest
    interval, which is the HPD region of a density with one mode). A density with
    several modes is refused (its region is a union)."""
    if not 0 < level < 1:
        raise ComputeError(f"interval level must be between 0 and 1; got {level:g}")
    text = text or str(expr)
    cv = curve(post, expr, points=121, notes=notes)
    modes = _modes_on(cv.x, cv.density)
    if len(modes) > 1:
        raise ComputeError(
            f"the density of `{text}` has {len(modes)} modes (near "
            + ", ".join(f"{m:.4g}" for m in modes)
            + "): its HPD region is a union of pieces, not given for a derived quantity; "
              f"ask for the central interval, or `plot {text}`")

    def q(a: float):
        return questions.quantile(post, expr, a)

    def logf(x: float) -> float:
        d = float(density(post, expr, np.array([x]))[0])
        return math.log(d) if d > 0 else -math.inf

    def balance(a: float) -> float:
        return logf(q(a).value) - logf(q(a + level).value)

    tiny = 1e-9
    top = 1 - level
    at_lowest = at_highest = False
    b0, b1 = balance(tiny), balance(top - tiny)
    if not (math.isfinite(b0) or math.isfinite(b1)):
        raise ComputeError(f"the density of `{text}` cannot be read at its tails: no HPD "
                           "interval; ask for the central one")
    if b0 >= 0:
        # the density is highest at the lowest values: the interval starts there
        a, at_lowest = 0.0, True
    elif b1 <= 0:
        a, at_highest = top, True
    else:
        a = optimize.brentq(balance, tiny, top - tiny, xtol=1e-12, rtol=1e-12, maxiter=100)
    lo = _lowest(post, expr) if at_lowest else q(a)
    hi = _highest(post, expr) if at_highest else q(a + level)
    # how well the ends balance: the density read from differences of quantiles
    # against the one used, moved into an error of a and so of each end
    extra = 0.0
    if not (at_lowest or at_highest):
        h = min(1e-4, a / 2, (top - a) / 2)
        if h > 0:
            fd = []
            for p in (a, a + level):
                w = q(p + h).value - q(p - h).value
                fd.append(math.log(2 * h / w) if w > 0 else math.nan)
            dlog = abs((fd[0] - fd[1]) - balance(a))
            slope = abs(balance(min(a + h, top - tiny)) - balance(max(a - h, tiny))) / (2 * h)
            if math.isfinite(dlog) and slope > 0:
                extra = dlog / slope
    def widen(e, p: float):
        if e.error is None or not math.isfinite(e.error):
            return e
        f = math.exp(logf(e.value)) if math.isfinite(logf(e.value)) else 0.0
        move = extra / f if f > 0 else 0.0
        return Estimate(e.value, e.error + move, e.method)

    return HpdInterval(lo if at_lowest else widen(lo, a), hi if at_highest else widen(hi, a + level),
                       at_lowest, at_highest)


def _end_value(post: Posterior, expr: sp.Expr, lowest: bool):
    """The lowest (or highest) value of `expr` on the posterior's support: at the
    domain's edge for a monotone function of one parameter, else its extreme over
    the grid points that carry mass."""
    ex = questions._compile(post, expr)
    mono = questions._monotone_in_one(post, ex.expr)
    if mono is not None:
        p = next(p for p in post.compiled.params if p.name == mono.name)
        edge = p.lo if (lowest == mono.rising) else p.hi
        if edge is not None and math.isfinite(edge):
            with np.errstate(all="ignore"):
                v = float(mono.fn([np.array([float(edge)]) if r.name == mono.name
                                   else np.array([0.0]) for r in post.compiled.params])[0])
            if math.isfinite(v):
                return Estimate(v, 0.0, "exact")
    ranked = questions._ranked(post, ex.fn)
    v = float(ranked.values[0] if lowest else ranked.values[-1])
    return Estimate(v, None, "none")


def _lowest(post, expr):
    return _end_value(post, expr, True)


def _highest(post, expr):
    return _end_value(post, expr, False)
