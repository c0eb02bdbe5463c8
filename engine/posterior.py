"""Streaming reduction of a tensor grid into a `Posterior`.

The grid is walked in blocks of points (about a million by default). Each block's
log-density is evaluated, weighted by the rule (and the Jacobian of the axis
scales), and reduced at once in log space against a running maximum: the
evidence, every 1-D marginal, the 2-D marginals asked for, and the first two
moments. The same sums over the nested coarse grids (every second node) are
accumulated in the same pass and give the error estimates. Memory stays
O(block + sum of axis lengths), whatever the number of points.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, field, replace
from typing import Callable, Iterator, NamedTuple, Sequence

import numpy as np
from scipy import interpolate, optimize

from .errors import ComputeError, GridError
from . import layout
from .grid import Axis, Block, Grid, check_grid
from .model import Compiled

#: Default number of grid points per block. Measured on this kind of machine (2 cores):
#: 65,536-point blocks walk a 10^7-point grid about 1.9 times faster than blocks of a
#: million, which spill out of the caches (tests/bench_cost.py prints the times).
BLOCK = 1 << 16
#: Grids up to this many points keep their log-density for later questions.
STORE_LIMIT = 1 << 24


# ---------------------------------------------------------------------------
# results

@dataclass(frozen=True)
class Estimate:
    """A number with its estimated absolute error.

    Attributes
    ----------
    value : float
    error : float or None
        Estimated absolute error; None where no nested estimate exists.
    method : str
        ``nested`` (difference with the nested coarse grid, projected where the
        convergence is geometric), ``richardson`` (value extrapolated because the
        observed order matches the rule's), ``exact`` (discrete sums) or ``none``.
    """

    value: float
    error: float | None = None
    method: str = "none"


def combine(v0: float, v1: float | None, v2: float | None = None, *, order: int = 2,
            exact: bool = False) -> Estimate:
    """Error estimate of `v0` from the values `v1`, `v2` on nested coarser grids.

    Halving the spacing divides an algebraic error by ``2**order``; for a smooth
    integrand negligible at the ends the trapezoid rule's error falls much faster
    (geometrically), and extrapolation would make the answer worse. So the value
    is extrapolated only where the observed ratio of successive differences
    matches ``2**order``; where it is far larger, the next difference is
    projected from the geometric decay; otherwise the last difference is the
    (conservative) error.
    """
    if exact:
        return Estimate(v0, 0.0, "exact")
    if v1 is None or not math.isfinite(v1):
        return Estimate(v0, None, "none")
    d1 = v0 - v1
    floor = 4e-16 * max(abs(v0), 1e-300)
    if v2 is None or not math.isfinite(v2):
        # an error of exactly 0 is for exact sums only: agreeing levels are rounding
        return Estimate(v0, max(abs(d1), floor), "nested")
    d2 = v1 - v2
    if abs(d1) <= floor:
        return Estimate(v0, floor, "nested")
    if abs(d2) <= 1e4 * floor:
        # both differences are rounding noise: converged; no order can be read
        return Estimate(v0, max(abs(d1), floor), "nested")
    ratio = d2 / d1
    expected = 2.0 ** order
    significant = abs(d2) > 1e-8 * max(abs(v0), 1e-300)
    if significant and 0.75 * expected <= ratio <= 1.35 * expected:
        extra = d1 / (ratio - 1.0)
        return Estimate(v0 + extra, abs(extra), "richardson")
    if abs(ratio) > 4 * expected:
        return Estimate(v0, max(abs(d1) / abs(ratio), floor), "nested")
    return Estimate(v0, abs(d1), "nested")


@dataclass(frozen=True)
class Interval:
    """A credible interval (or, for a multimodal HPD region, several).

    Attributes
    ----------
    lo, hi : Estimate
        The ends (the outermost ends when `pieces` has more than one).
    level : float
    kind : str
        ``central`` or ``hpd``.
    pieces : tuple of (float, float)
        The intervals of an HPD region; one for a unimodal marginal.
    """

    lo: Estimate
    hi: Estimate
    level: float
    kind: str
    pieces: tuple[tuple[float, float], ...] = ()


@dataclass(frozen=True)
class _CdfSpline:
    """A marginal's density on its axis's scale as a spline, integrated exactly.

    Attributes
    ----------
    density : BSpline
        ``g(u)``, the node masses over the rule's weights, interpolated (quintic
        where there are nodes enough).
    anti : BSpline
        Its antiderivative.
    ua, ub : float
        The ends of the axis on its scale (the cdf is 0 and 1 there).
    f0, total : float
        ``anti(ua)`` and ``anti(ub) - anti(ua)``.
    """

    density: interpolate.BSpline
    anti: interpolate.BSpline
    ua: float
    ub: float
    f0: float
    total: float

    def cdf_u(self, u: np.ndarray | float) -> np.ndarray:
        uu = np.clip(u, self.ua, self.ub)
        return np.clip((self.anti(uu) - self.f0) / self.total, 0.0, 1.0)


class Marginal:
    """The posterior marginal of one parameter on its axis.

    Built from the posterior mass each node carries. Quantiles come from a
    quintic spline of the density on the axis's scale, integrated exactly, so
    they converge much faster than the node spacing.
    """

    def __init__(self, axis: Axis, mass: np.ndarray, keep: np.ndarray | None = None,
                 weights: np.ndarray | None = None):
        keep = np.ones(axis.n, bool) if keep is None else keep
        self.axis = axis
        self.name = axis.name
        self.discrete = axis.discrete
        self.u = axis.u[keep]
        self.values = axis.values[keep]
        self.weights = (axis.weights if weights is None else weights)[keep]
        self.logjac = axis.logjac[keep]
        total = mass[keep].sum()
        if not total > 0:
            raise ComputeError(f"the marginal of `{axis.name}` has no mass on this grid")
        self.mass = mass[keep] / total
        self._spline = None

    # -- moments ---------------------------------------------------------
    @property
    def mean(self) -> float:
        return float(np.dot(self.mass, self.values))

    @property
    def sd(self) -> float:
        m = self.mean
        with np.errstate(over="ignore", invalid="ignore"):
            v = float(np.dot(self.mass, (self.values - m) ** 2))
        return math.sqrt(v) if v >= 0 else math.nan

    def tails(self) -> "Tails":
        """Power-law exponents of the density at the ends that reach to infinity."""
        if self.discrete or len(self.values) < 9:
            return Tails(None, None)
        f = self.density()
        try:
            c = self.quantile(0.5)
        except (ComputeError, ValueError):
            return Tails(None, None)
        # distances from the domain's finite edge where there is one (a power law in
        # a positive parameter is one in the parameter itself), else from the median
        lo = _power_tail(c - self.values, f) if self.axis.dom_lo == -math.inf else None
        base = self.axis.dom_lo if math.isfinite(self.axis.dom_lo) else c
        hi = _power_tail(self.values - base, f) if self.axis.dom_hi == math.inf else None
        return Tails(lo, hi)

    def density(self) -> np.ndarray:
        """Density in the parameter's units at the nodes (the pmf if discrete)."""
        if self.discrete:
            return self.mass.copy()
        return self.mass / (self.weights * np.exp(self.logjac))

    # -- the cdf ---------------------------------------------------------
    def _cdf_spline(self) -> "_CdfSpline":
        if self._spline is None:
            g = self.mass / self.weights
            k = min(5, len(self.u) - 1)
            if k < 1:
                raise ComputeError(f"`{self.name}` has one grid point: no quantiles")
            if k % 2 == 0:
                k -= 1
            spl = interpolate.make_interp_spline(self.u, g, k=k)
            anti = spl.antiderivative()
            ua, ub = self.axis.to_u(np.array([self.axis.lo, self.axis.hi]))
            ua = min(float(ua), self.u[0])
            ub = max(float(ub), self.u[-1])
            f0 = float(anti(ua))
            self._spline = _CdfSpline(spl, anti, ua, ub, f0, float(anti(ub)) - f0)
        return self._spline

    def cdf_u(self, u: np.ndarray | float) -> np.ndarray:
        return self._cdf_spline().cdf_u(u)

    def cdf(self, x: float) -> float:
        """P(parameter <= x)."""
        if self.discrete:
            return float(self.mass[self.values <= x + 1e-12 * max(1, abs(x))].sum())
        u = float(self.axis.to_u(np.array([x]))[0]) if self._inside(x) else (
            -np.inf if x <= self.axis.lo else np.inf)
        if u == -np.inf:
            return 0.0
        if u == np.inf:
            return 1.0
        return float(self.cdf_u(u))

    def _inside(self, x: float) -> bool:
        return self.axis.lo < x < self.axis.hi

    def quantile(self, q: float) -> float:
        """The q-quantile (for a discrete parameter, the smallest value with cdf >= q)."""
        if not 0 <= q <= 1:
            raise ComputeError(f"quantile level must be between 0 and 1; got {q:g}")
        if self.discrete:
            c = np.cumsum(self.mass)
            i = int(np.searchsorted(c, q - 1e-12))
            return float(self.values[min(i, len(self.values) - 1)])
        cs = self._cdf_spline()
        if q <= 0:
            return float(self.axis.to_value(np.array([cs.ua]))[0])
        if q >= 1:
            return float(self.axis.to_value(np.array([cs.ub]))[0])
        knots = np.concatenate([[cs.ua], self.u, [cs.ub]])
        c = self.cdf_u(knots)
        i = int(np.searchsorted(c, q))
        i = min(max(i, 1), len(knots) - 1)
        a, b = knots[i - 1], knots[i]
        fa, fb = float(self.cdf_u(a)) - q, float(self.cdf_u(b)) - q
        if fa == 0:
            uq = a
        elif fb == 0 or fa * fb > 0:
            uq = b if abs(fb) < abs(fa) else a
        else:
            uq = optimize.brentq(lambda t: float(self.cdf_u(t)) - q, a, b, xtol=1e-14,
                                 rtol=1e-15, maxiter=200)
        return float(self.axis.to_value(np.array([uq]))[0])

    # -- intervals ---------------------------------------------------------
    def central(self, level: float) -> tuple[float, float]:
        a = (1 - level) / 2
        return self.quantile(a), self.quantile(1 - a)

    def hpd(self, level: float) -> tuple[tuple[float, float], ...]:
        """Highest-density region (in the parameter's units) holding `level`."""
        if self.discrete:
            order = np.argsort(-self.mass, kind="stable")
            c = np.cumsum(self.mass[order])
            k = int(np.searchsorted(c, level - 1e-12)) + 1
            chosen = np.sort(self.values[order[:k]])
            return _runs(chosen, self.values)
        cs = self._cdf_spline()
        mesh = np.linspace(cs.ua, cs.ub, max(4000, 20 * len(self.u)))
        ax = self.axis

        def fnat(u):
            # density in the parameter's units: g(u) / |dv/du|
            v = np.maximum(cs.density(u), 0.0) / cs.total
            lj = ax.log_jacobian(u)
            return v / np.exp(lj)

        fm = fnat(mesh)

        def region(t):
            above = fm > t
            if not above.any():
                return []
            edges = np.flatnonzero(np.diff(above.astype(np.int8)))
            starts = ([0] if above[0] else []) + [e + 1 for e in edges if not above[e]]
            ends = [e for e in edges if above[e]] + ([len(mesh) - 1] if above[-1] else [])
            out = []
            for s, e in zip(starts, ends):
                a = mesh[s] if s == 0 else _cross(fnat, t, mesh[s - 1], mesh[s])
                b = mesh[e] if e == len(mesh) - 1 else _cross(fnat, t, mesh[e], mesh[e + 1])
                out.append((a, b))
            return out

        def mass(t):
            return sum(float(self.cdf_u(b) - self.cdf_u(a)) for a, b in region(t))

        t = _threshold(mass, level, fnat, mesh, np.diff(self.cdf_u(mesh)))
        pieces = [(float(ax.to_value(np.array([a]))[0]), float(ax.to_value(np.array([b]))[0]))
                  for a, b in region(t)]
        # a density that rises toward a grid end that is not the domain's edge: the
        # region runs on to the edge (one-sided HPD, as for a mode at p = 0); the mass
        # between is beyond the grid, below its error
        if pieces and pieces[0][0] <= ax.lo and math.isfinite(ax.dom_lo):
            pieces[0] = (float(ax.dom_lo), pieces[0][1])
        if pieces and pieces[-1][1] >= ax.hi and math.isfinite(ax.dom_hi):
            pieces[-1] = (pieces[-1][0], float(ax.dom_hi))
        return tuple(pieces)


def _threshold(mass, level: float, fnat, mesh: np.ndarray, cell_mass: np.ndarray) -> float:
    """The density `t` whose region {f > t} holds `level`: bracketed by ranking the
    mesh cells by density (so that a density unbounded at an edge, many decades
    above the threshold, does not swamp the search), then solved."""
    fmid = fnat(0.5 * (mesh[1:] + mesh[:-1]))
    order = np.argsort(-fmid, kind="stable")
    c = np.cumsum(cell_mass[order])
    k = int(np.searchsorted(c, level))
    if k >= len(c) or mass(0.0) < level:
        return 0.0
    n = len(order)
    for span in (2, 8, 32, 128, n):
        hi_t = float(fmid[order[max(k - span, 0)]])
        lo_t = float(fmid[order[min(k + span, n - 1)]]) if k + span < n else 0.0
        if mass(lo_t) >= level >= mass(hi_t):
            break
    else:
        lo_t, hi_t = 0.0, float(fmid.max())
    if not hi_t > lo_t:
        return lo_t
    return optimize.brentq(lambda t: mass(t) - level, lo_t, hi_t, xtol=1e-14 * hi_t,
                           rtol=1e-13, maxiter=300)


#: How much faster than over the stretch before it the density may fall over the
#: outer half of a tail and still be called a power law (a power law: 1; an
#: exponential tail: 2; a normal one: 4).
POWER_LAW_RATIO = 1.7


@dataclass(frozen=True)
class Tails:
    """The tails of a marginal: the exponent `k` of a density falling as
    ``|x|^-k`` at each end that reaches to infinity, or None (a bounded end, or
    one that falls faster than any power)."""

    lo: float | None
    hi: float | None

    def exponent(self) -> float | None:
        """The heavier of the two tails' exponents (None: neither is a power law)."""
        ks = [k for k in (self.lo, self.hi) if k is not None]
        return min(ks) if ks else None

    def moment_exists(self, power: int) -> bool:
        """Whether ``E|x|^power`` is finite: every power-law tail has k > power + 1."""
        k = self.exponent()
        return k is None or k > power + 1 + 1e-9


def _power_tail(d: np.ndarray, f: np.ndarray) -> float | None:
    """The exponent k of a density `f` falling as ``d^-k`` at the far end of the
    nodes at distances `d` from the median, or None when it falls faster.

    The log-log slope of the density over the outer half of the tail (from d/2 to
    the last node, at distance d) is compared with the slope over the stretch
    before it (d/4 to d/2): a power law has one slope, an exponential or normal
    tail steepens (twice and four times as steep); the outer slope is the exponent
    (for Student-t tails it is slightly below the asymptotic one)."""
    side = np.flatnonzero(d > 0)
    if len(side) < 5:
        return None
    e = side[np.argmax(d[side])]
    de = float(d[e])
    j2 = side[np.argmin(np.abs(d[side] - de / 2))]
    j4 = side[np.argmin(np.abs(d[side] - de / 4))]
    ds, fs = (float(d[j4]), float(d[j2]), de), (float(f[j4]), float(f[j2]), float(f[e]))
    if not (0 < ds[0] < ds[1] < ds[2]) or min(fs) <= 0 or not all(map(math.isfinite, fs)):
        return None
    outer = -math.log(fs[2] / fs[1]) / math.log(ds[2] / ds[1])
    inner = -math.log(fs[1] / fs[0]) / math.log(ds[1] / ds[0])
    if not outer > 0 or not inner > 0 or outer > POWER_LAW_RATIO * inner:
        return None
    return outer


def _cross(f, t, a, b):
    fa, fb = f(np.array([a]))[0] - t, f(np.array([b]))[0] - t
    if fa * fb > 0:
        return a if abs(fa) < abs(fb) else b
    return optimize.brentq(lambda u: f(np.array([u]))[0] - t, a, b, xtol=1e-14, rtol=1e-15)


def _runs(chosen: np.ndarray, values: np.ndarray) -> tuple[tuple[float, float], ...]:
    """Group chosen discrete values into runs of consecutive values of `values`."""
    pos = np.searchsorted(values, chosen)
    out = []
    start = prev = pos[0]
    for p in pos[1:]:
        if p != prev + 1:
            out.append((float(values[start]), float(values[prev])))
            start = p
        prev = p
    out.append((float(values[start]), float(values[prev])))
    return tuple(out)


@dataclass(frozen=True)
class Diagnostics:
    """What the pass saw that a user should know about.

    Attributes
    ----------
    zero_points : int
        Grid points where the posterior density is zero (log-density -inf).
    edge_mass : dict of str to (float, float)
        Posterior mass carried by the first and last node of each continuous axis.
    min_points_per_sd : float
        The smallest number of nodes across one posterior sd, over the axes.
    """

    zero_points: int
    edge_mass: dict[str, tuple[float, float]]
    min_points_per_sd: float
    missing: float = 0.0   # estimated posterior mass beyond the grid, all ends together
    unresolved: str = ""   # why the grid does not resolve the posterior ("" when it does)


@dataclass(frozen=True)
class LevelMoments:
    """Mean and covariance of the parameters on one level of the grid.

    Attributes
    ----------
    mean : ndarray, shape (d,)
    cov : ndarray, shape (d, d)
    """

    mean: np.ndarray
    cov: np.ndarray


@dataclass(frozen=True)
class Posterior:
    """The posterior on a grid, as reduced in one pass.

    Attributes
    ----------
    grid : Grid
    compiled : Compiled
    log_mass : tuple of float
        ``log`` of the integral of prior x likelihood over the grid, on the fine
        grid and on each nested coarse grid.
    log_evidence : Estimate or None
        None where the prior is improper (the evidence is then not defined).
    marginals : dict of str to Marginal
    coarse_marginals : tuple of dict
        The same marginals on the nested coarse grids.
    mean, cov : ndarray, shapes (d,) and (d, d)
    coarse_moments : tuple of LevelMoments
        The same moments on the nested coarse grids.
    pairs : dict of (int, int) to ndarray
        2-D marginal node masses (summing to 1), shape (n_i, n_j).
    best : dict of str to float
        The grid point of highest posterior density.
    best_logp : float
    diagnostics : Diagnostics
    seconds : float
    logp : ndarray or None
        The unnormalised log posterior at every point (flat), kept for small
        grids so that questions need not evaluate the model again.
    """

    grid: Grid
    compiled: Compiled
    log_mass: tuple[float, ...]
    log_evidence: Estimate | None
    marginals: dict[str, Marginal]
    coarse_marginals: tuple[dict[str, Marginal], ...]
    mean: np.ndarray
    cov: np.ndarray
    coarse_moments: tuple[LevelMoments, ...]
    pairs: dict[tuple[int, int], np.ndarray]
    best: dict[str, float]
    best_logp: float
    diagnostics: Diagnostics
    seconds: float
    logp: np.ndarray | None = field(default=None, repr=False)
    log_prior_norm: float = 0.0
    evaluated: int = 0

    @property
    def names(self) -> tuple[str, ...]:
        return self.grid.names

    @property
    def levels(self) -> int:
        return len(self.coarse_marginals)

    def marginal(self, name: str) -> Marginal:
        if name not in self.marginals:
            raise GridError(f"no parameter `{name}`")
        return self.marginals[name]

    def _levels_of(self, name: str) -> list[Marginal]:
        return [self.marginals[name]] + [c[name] for c in self.coarse_marginals]

    def _estimate(self, name: str, f: Callable[[Marginal], float], *,
                  truncation: float = 0.0) -> Estimate:
        est = self._levels_estimate(name, f)
        if est.error is not None and truncation > 0:
            est = replace(est, error=est.error + truncation)
        return est

    def _span(self, name: str) -> float:
        """How far the mass beyond the grid on the *other* axes could move a mean of
        `name`: that mass times the axis's span (its own ends are `_tail_moment`'s)."""
        a = self.grid.axis(name)
        if a.discrete:
            return 0.0
        own = sum(self._end_missing(name))
        return (a.hi - a.lo) * max(self.diagnostics.missing - own, 0.0)

    def _end_missing(self, name: str) -> tuple[float, float]:
        """The mass beyond each end of the axis of `name` (0 at a domain edge)."""
        a = self.grid.axis(name)
        if a.discrete:
            return (0.0, 0.0)
        m = self.marginals[name]
        edge = self.diagnostics.edge_mass.get(name, (0.0, 0.0))
        lo = 0.0 if a.scale == "linear" and a.lo <= a.dom_lo else max(edge[0] - m.mass[0], 0.0)
        hi = 0.0 if a.scale == "linear" and a.hi >= a.dom_hi else max(edge[1] - m.mass[-1], 0.0)
        return (float(lo), float(hi))

    def _quantile_truncation(self, name: str, q: float) -> float:
        """How far a quantile moves if the mass beyond the grid were added: the
        missing mass times dq/dp there."""
        miss = self.diagnostics.missing
        m = self.marginals[name]
        if miss <= 0 or m.discrete:
            return 0.0
        eps = min(1e-4, q / 2, (1 - q) / 2)
        if not eps > 0:
            # a quantile at 0 or 1: an end of the support, which added mass does
            # not move (an edge of the domain, or the grid's end, whose own error
            # is the missing mass itself)
            return 0.0
        try:
            slope = (m.quantile(q + eps) - m.quantile(q - eps)) / (2 * eps)
        except (ComputeError, ValueError):
            return 0.0
        return abs(slope) * miss

    def _levels_estimate(self, name: str, f: Callable[[Marginal], float]) -> Estimate:
        ms = self._levels_of(name)
        vals = [f(ms[0])]  # the fine grid's answer: its errors are the user's to see
        for m in ms[1:]:
            try:
                vals.append(f(m))
            except (ComputeError, ValueError):
                vals.append(None)
        ax = self.grid.axis(name)
        v1 = vals[1] if len(vals) > 1 else None
        v2 = vals[2] if len(vals) > 2 else None
        if self.levels == 0:
            return Estimate(vals[0], None, "none")
        exact = all(a.discrete for a in self.grid.axes)
        return combine(vals[0], v1, v2, order=ax.order or 2, exact=exact)

    def tails(self, name: str) -> Tails:
        """The power-law tails of the marginal of `name` (see `Marginal.tails`)."""
        return self.marginal(name).tails()

    def param_mean(self, name: str) -> Estimate:
        """The posterior mean; ``nan`` with method ``absent`` where it does not exist
        (a tail falling as |x|^-k with k <= 2)."""
        if not self.tails(name).moment_exists(1):
            return Estimate(math.nan, None, "absent")
        return self._estimate(name, lambda m: m.mean,
                              truncation=self._span(name) + self._tail_moment(name, 1))

    def param_sd(self, name: str) -> Estimate:
        """The posterior sd; ``nan`` with method ``absent`` where the variance does not
        exist (a tail falling as |x|^-k with k <= 3)."""
        if not self.tails(name).moment_exists(2):
            return Estimate(math.nan, None, "absent")
        m = self.marginals[name]
        var_cut = self._tail_moment(name, 2)
        sd = m.sd
        cut = var_cut / (2 * sd) if sd > 0 and var_cut < sd * sd else math.sqrt(var_cut)
        return self._estimate(name, lambda m: m.sd, truncation=self._span(name) + cut)

    def _tail_moment(self, name: str, power: int) -> float:
        """What the mass beyond each end of the grid adds to the `power`-th central
        moment of `name`: that mass times distance^power, times (k-1)/(k-1-power)
        for a tail falling as |x|^-k (the integral of the power law beyond), or 2
        for a tail that falls faster."""
        a = self.grid.axis(name)
        if a.discrete:
            return 0.0
        m = self.marginals[name]
        tails = m.tails()
        mean = m.mean
        total = 0.0
        for k, miss, end, edge in zip((tails.lo, tails.hi), self._end_missing(name),
                                      (a.lo, a.hi), (a.dom_lo, a.dom_hi)):
            if miss <= 0:
                continue
            if math.isfinite(edge):
                # the mass lies between the grid's end and the domain's edge
                total += miss * max(abs(end - mean), abs(edge - mean)) ** power
                continue
            factor = (k - 1) / (k - 1 - power) if k is not None and k > power + 1 else 2.0
            total += miss * abs(end - mean) ** power * factor
        return total

    def quantile(self, name: str, q: float) -> Estimate:
        return self._estimate(name, lambda m: m.quantile(q),
                              truncation=self._quantile_truncation(name, q))

    def interval(self, name: str, level: float = 0.95, kind: str = "central") -> Interval:
        """Central or HPD interval of parameter `name`."""
        if not 0 < level < 1:
            raise ComputeError(f"interval level must be between 0 and 1; got {level:g}")
        if kind not in ("central", "hpd"):
            raise ComputeError(f"interval kind must be `central` or `hpd`; got `{kind}`")
        if kind == "central":
            a = (1 - level) / 2
            lo = self._estimate(name, lambda m: m.central(level)[0],
                                truncation=self._quantile_truncation(name, a))
            hi = self._estimate(name, lambda m: m.central(level)[1],
                                truncation=self._quantile_truncation(name, 1 - a))
            return Interval(lo, hi, level, kind, ((lo.value, hi.value),))
        pieces = self.marginal(name).hpd(level)
        m0 = self.marginal(name)
        lo = self._estimate(name, lambda m: m.hpd(level)[0][0],
                            truncation=self._quantile_truncation(name, m0.cdf(pieces[0][0])))
        hi = self._estimate(name, lambda m: m.hpd(level)[-1][1],
                            truncation=self._quantile_truncation(name, m0.cdf(pieces[-1][1])))
        return Interval(Estimate(pieces[0][0], lo.error, lo.method),
                        Estimate(pieces[-1][1], hi.error, hi.method), level, kind, pieces)

    def correlation(self) -> np.ndarray:
        sd = np.sqrt(np.maximum(np.diag(self.cov), 0))
        with np.errstate(all="ignore"):
            return self.cov / np.outer(sd, sd)

    def pair(self, a: str, b: str) -> np.ndarray:
        """2-D marginal node masses of parameters `a` (rows) and `b` (columns)."""
        i, j = self.grid.index(a), self.grid.index(b)
        if (i, j) in self.pairs:
            return self.pairs[(i, j)]
        if (j, i) in self.pairs:
            return self.pairs[(j, i)].T
        raise ComputeError(f"the joint of `{a}` and `{b}` was not kept; compute again with it")


# ---------------------------------------------------------------------------
# the pass

class _Sums:
    """Running sums of the pass in log space against a common reference `M`.

    Attributes
    ----------
    M : float
        The reference: every sum is ``sum exp(log term - M)``.
    L : int
        The nested coarse levels summed besides the fine grid.
    Z : ndarray, shape (levels + 1,)
        The mass on the fine grid and on each nested coarse grid.
    marg : list of ndarray, each (levels + 1, n_axis)
        Node masses of every 1-D marginal, per level.
    S1, S2 : ndarray, shapes (levels + 1, d) and (levels + 1, d, d)
        First and second moments about `centre`, per level.
    pairs : dict of (int, int) to ndarray
        Node masses of the 2-D marginals kept (fine grid only).
    centre : ndarray, shape (d,)
        The grid's middle point (moments about it keep their digits).
    """

    def __init__(self, grid: Grid, pairs: Sequence[tuple[int, int]]):
        d = len(grid.axes)
        levels = grid.levels
        self.M = -np.inf
        self.L = levels
        self.Z = np.zeros(levels + 1)
        self.marg = [np.zeros((levels + 1, a.n)) for a in grid.axes]
        self.S1 = np.zeros((levels + 1, d))
        self.S2 = np.zeros((levels + 1, d, d))
        self.pairs = {p: np.zeros((grid.axes[p[0]].n, grid.axes[p[1]].n)) for p in pairs}
        self.centre = np.array([a.values[a.n // 2] for a in grid.axes])

    def rescale(self, new_m: float):
        if self.M == -np.inf:
            self.M = new_m
            return
        f = math.exp(self.M - new_m)
        self.Z *= f
        for m in self.marg:
            m *= f
        self.S1 *= f
        self.S2 *= f
        for p in self.pairs.values():
            p *= f
        self.M = new_m

    def add_block(self, grid: Grid, idx, theta: Sequence[np.ndarray], lp: np.ndarray) -> None:
        """Add one block's log-density `lp` at nodes `idx` to the sums of every level."""
        n = len(lp)
        lw = np.zeros(n)
        for a, i in zip(grid.axes, idx):
            lw += a.logw[i]
        t = lp + lw
        bm = float(np.max(t))
        if bm > self.M and np.isfinite(bm):
            self.rescale(bm)
        if not np.isfinite(self.M):
            return
        theta_c = np.column_stack(theta) - self.centre
        w = np.exp(t - self.M)
        self.add(0, w, idx, theta_c)
        for lev in range(self.L):
            lwc = np.zeros(n)
            for a, i in zip(grid.axes, idx):
                lwc += a.coarse[lev][i]
            m = np.isfinite(lwc)
            if m.any():
                wc = np.exp(lp[m] + lwc[m] - self.M)
                self.add(lev + 1, wc, tuple(i[m] for i in idx), theta_c[m])
        for (a_, b_), arr in self.pairs.items():
            nb = grid.axes[b_].n
            flat = idx[a_] * nb + idx[b_]
            arr += np.bincount(flat, weights=w, minlength=arr.size).reshape(arr.shape)

    def add(self, level: int, w: np.ndarray, idx, theta_c: np.ndarray):
        with np.errstate(over="ignore", invalid="ignore"):
            self._add(level, w, idx, theta_c)

    def _add(self, level: int, w: np.ndarray, idx, theta_c: np.ndarray):
        self.Z[level] += w.sum()
        for d, i in enumerate(idx):
            self.marg[d][level] += np.bincount(i, weights=w, minlength=self.marg[d].shape[1])
        tw = theta_c * w[:, None]
        self.S1[level] += tw.sum(axis=0)
        self.S2[level] += tw.T @ theta_c


class _TensorSums:
    """The sums of `_Sums`, accumulated over blocks shaped as sub-tensors.

    A block's density ``W = exp(lp - M)`` is a (rows, cols) matrix; every level's
    weight is a product of one weight per axis, so the sums are contractions: ``W @ X``
    (X: the last axis's level weights, and those times its centred values) gives each
    row's sums, the rows' level weights ``rho`` finish the leading marginals, the mass
    and the cross moments; ``rho.T @ W`` gives the last axis's marginals. No exponential
    beyond ``W`` itself, no index arithmetic per point. The weights are kept apart from
    the density (scaled to at most 1 on each axis, their logs' maxima summed in `off`),
    which is safe while the log weights span less than `SPAN` on all axes together.
    """

    SPAN = 300.0
    #: Below this many points the flat pass is quicker (the layout has a fixed cost).
    SMALL = 1 << 14

    @classmethod
    def fits(cls, grid: Grid) -> bool:
        if grid.size < cls.SMALL:
            return False
        span = 0.0
        for a in grid.axes:
            lw = a.logw[np.isfinite(a.logw)]
            if lw.size != a.n:
                return False
            span += float(lw.max() - lw.min())
        return span < cls.SPAN

    def __init__(self, grid: Grid, pairs: Sequence[tuple[int, int]]):
        d = len(grid.axes)
        L = grid.levels
        self.grid, self.d, self.L = grid, d, L
        self.Mlp = -np.inf
        self.Z = np.zeros(L + 1)
        self.marg = [np.zeros((L + 1, a.n)) for a in grid.axes]
        self.cross = np.zeros((L + 1, d, d))
        self.pairs = {p: np.zeros((grid.axes[p[0]].n, grid.axes[p[1]].n)) for p in pairs}
        self.centre = np.array([a.values[a.n // 2] for a in grid.axes])
        self.off = 0.0
        self.wl, self.tc = [], []
        for a, c in zip(grid.axes, self.centre):
            top = float(a.logw.max())
            self.off += top
            w = np.empty((L + 1, a.n))
            w[0] = np.exp(a.logw - top)
            for lev in range(L):
                w[lev + 1] = np.exp(a.coarse[lev] - top)
            self.wl.append(w)
            self.tc.append(a.values - c)
        wlast = self.wl[-1]
        self.X = np.ascontiguousarray(np.concatenate([wlast, wlast * self.tc[-1]]).T)
        self.lead_shape = grid.lead_shape
        self.n_lead = grid.size // grid.axes[-1].n
        self._table = self._rows(0, self.n_lead) if self.n_lead <= (1 << 20) else None

    def _rows(self, r0: int, r1: int):
        """Per row ``r0 .. r1-1``: leading node indices, level weights (rows, L+1) and
        centred values (rows, d-1)."""
        n = r1 - r0
        if self.d == 1:
            return (), np.ones((n, self.L + 1)), np.zeros((n, 0))
        idx = np.unravel_index(np.arange(r0, r1), self.lead_shape)
        rho = np.ones((n, self.L + 1))
        theta = np.empty((n, self.d - 1))
        for a, ix in enumerate(idx):
            rho *= self.wl[a][:, ix].T
            theta[:, a] = self.tc[a][ix]
        return idx, rho, theta

    def rows(self, r0: int, r1: int):
        if self._table is None:
            return self._rows(r0, r1)
        idx, rho, theta = self._table
        return tuple(i[r0:r1] for i in idx), rho[r0:r1], theta[r0:r1]

    def rescale(self, new_m: float):
        if self.Mlp == -np.inf:
            self.Mlp = new_m
            return
        f = math.exp(self.Mlp - new_m)
        self.Z *= f
        for m in self.marg:
            m *= f
        self.cross *= f
        for p in self.pairs.values():
            p *= f
        self.Mlp = new_m

    def add(self, blk: Block, lp: np.ndarray, top: float) -> None:
        """Add block `blk` (log-density `lp`, shape (rows, cols), its largest value `top`;
        `lp` is overwritten) to every level's sums."""
        if top > self.Mlp and np.isfinite(top):
            self.rescale(top)
        if not np.isfinite(self.Mlp):
            return
        with np.errstate(over="ignore", invalid="ignore"):
            W = np.subtract(lp, self.Mlp, out=lp)
            np.exp(W, out=W)
            self._add(blk, W)

    def _add(self, blk: Block, W: np.ndarray) -> None:
        L1 = self.L + 1
        c0, c1 = blk.c0, blk.c1
        idx, rho, theta = self.rows(blk.r0, blk.r1)
        U = W @ self.X[c0:c1]                 # (rows, 2 (L+1)): row sums, per level
        V = rho.T @ W                         # (L+1, cols): column sums, per level
        Q = rho * U[:, :L1]                   # (rows, L+1): mass of each row, per level
        self.Z += Q.sum(axis=0)
        wlast = self.wl[-1][:, c0:c1]
        self.marg[-1][:, c0:c1] += V * wlast
        if self.d == 1:
            return
        last = self.d - 1
        for a, ix in enumerate(idx):
            m = self.marg[a]
            for lev in range(L1):
                m[lev] += np.bincount(ix, weights=Q[:, lev], minlength=m.shape[1])
        # cross moments about the centre: leading pairs from the rows' masses, a leading
        # axis with the last from the rows' sums of the last axis's centred values
        self.cross[:, :last, :last] += np.einsum("rl,ra,rb->lab", Q, theta, theta)
        self.cross[:, :last, last] += np.einsum("rl,ra->la", rho * U[:, L1:], theta)
        for (a, b), arr in self.pairs.items():
            if b != last:
                nb = arr.shape[1]
                arr += np.bincount(idx[a] * nb + idx[b], weights=Q[:, 0],
                                   minlength=arr.size).reshape(arr.shape)
                continue
            wa = self.wl[a][0][idx[a]]
            self._pair_with_last(arr[:, c0:c1], idx[a], wa, rho[:, 0] / wa, V, W)

    def _pair_with_last(self, view: np.ndarray, ia: np.ndarray, wa: np.ndarray,
                        other: np.ndarray, V: np.ndarray, W: np.ndarray) -> None:
        """Add the block to the 2-D marginal of a leading axis (node `ia` of each row)
        and the last axis, kept without either axis's own weights (`finish` applies
        them): each row weighs `other`, the weights of the remaining leading axes."""
        if ia[0] == ia[-1] and np.all(ia == ia[0]):
            view[ia[0]] += V[0] / wa[0]     # the rows' column sums, known already
            return
        starts = np.flatnonzero(np.concatenate([[True], ia[1:] != ia[:-1]]))
        vals = ia[starts]
        if starts.size <= 8:
            # a few runs of one node each: one product with their indicator columns
            A = np.zeros((ia.size, starts.size))
            A[np.arange(ia.size), np.searchsorted(starts, np.arange(ia.size), "right") - 1] = other
            S = A.T @ W
            for k, v in enumerate(vals):
                view[v] += S[k]
            return
        # many runs: rows of consecutive nodes (the axis before the last), in a few
        # slices where the axis starts again
        S = np.add.reduceat(W * other[:, None], starts, axis=0) if starts.size < ia.size \
            else W * other[:, None]
        cuts = np.flatnonzero(np.diff(vals) != 1) + 1
        for lo, hi in zip(np.concatenate([[0], cuts]), np.concatenate([cuts, [vals.size]])):
            view[vals[lo]:vals[lo] + hi - lo] += S[lo:hi]

    def finish(self) -> _Sums:
        """The sums as `_Sums` holds them (first and second moments about the centre)."""
        out = _Sums.__new__(_Sums)
        d, L1 = self.d, self.L + 1
        out.L, out.Z, out.marg, out.pairs, out.centre = self.L, self.Z, self.marg, self.pairs, \
            self.centre
        out.M = self.Mlp + self.off if np.isfinite(self.Mlp) else -np.inf
        last = d - 1
        out.pairs = {(a, b): arr * self.wl[a][0][:, None] * self.wl[-1][0][None, :]
                     if b == last else arr for (a, b), arr in self.pairs.items()}
        out.S1 = np.zeros((L1, d))
        out.S2 = np.zeros((L1, d, d))
        with np.errstate(over="ignore", invalid="ignore"):
            for a in range(d):
                out.S1[:, a] = self.marg[a] @ self.tc[a]
                out.S2[:, a, a] = self.marg[a] @ (self.tc[a] ** 2)
            for a in range(d):
                for b in range(a + 1, d):
                    out.S2[:, a, b] = out.S2[:, b, a] = self.cross[:, a, b]
        return out


class _Watch:
    """What the pass notes besides the sums.

    Attributes
    ----------
    logp : ndarray or None
        The log-density of every point, when it is kept.
    nan_count, nan_first : int, int or None
        Points where the log-density is NaN, and the first of them (flat index).
    zero : int
        Points of zero density.
    best_lp, best_flat : float, int
        The highest log-density and where it is.
    """

    def __init__(self, grid: Grid, store: bool):
        self.logp = np.empty(grid.size) if store else None
        self.nan_count = 0
        self.nan_first: int | None = None
        self.zero = 0
        self.best_lp, self.best_flat = -np.inf, 0

    def see(self, grid: Grid, start: int, stop: int, lp: np.ndarray) -> None:
        """Note block ``start .. stop-1`` (NaN turned to -inf in place); refuse +inf."""
        bad = np.isnan(lp)
        if bad.any():
            self.nan_count += int(bad.sum())
            if self.nan_first is None:
                self.nan_first = start + int(np.argmax(bad))
            lp[bad] = -np.inf
        pos = np.isposinf(lp)
        if pos.any():
            where = grid.point(start + int(np.argmax(pos)))
            raise ComputeError("the log-density is +inf at " + _point_text(where) +
                               " (the density is unbounded there); keep the grid away from that "
                               "point or grid it on its log / logit scale")
        if self.logp is not None:
            self.logp[start:stop] = lp
        self.zero += int(np.isneginf(lp).sum())
        k = int(np.argmax(lp))
        if lp[k] > self.best_lp:
            self.best_lp, self.best_flat = float(lp[k]), start + k

    def see_block(self, grid: Grid, blk: Block, lp: np.ndarray, k: int,
                  neginf: bool | None) -> float:
        """Note block `blk` (log-density `lp` (rows, cols), NaN already turned to -inf,
        largest at flat position `k`); refuse +inf; the block's largest value."""
        top = float(lp.flat[k])
        if top == np.inf:
            raise ComputeError("the log-density is +inf at " + _point_text(grid.point(blk.start + k)) +
                               " (the density is unbounded there); keep the grid away from that "
                               "point or grid it on its log / logit scale")
        if self.logp is not None:
            self.logp[blk.start:blk.stop] = lp.reshape(-1)
        if top == -np.inf:
            self.zero += lp.size
        elif neginf is None or neginf:
            self.zero += int(np.count_nonzero(np.isneginf(lp)))
        if top > self.best_lp:
            self.best_lp, self.best_flat = top, blk.start + k
        return top

    def nan_block(self, blk: Block, lp: np.ndarray) -> int:
        """Count and clear the NaNs of block `lp`; its new argmax."""
        bad = np.isnan(lp)
        self.nan_count += int(bad.sum())
        if self.nan_first is None:
            self.nan_first = blk.start + int(np.argmax(bad))
        lp[bad] = -np.inf
        return int(np.argmax(lp))

    def check(self, grid: Grid, sums: _Sums) -> None:
        """Refuse a pass that met NaN, or found no mass."""
        if self.nan_count:
            where = grid.point(self.nan_first)
            raise ComputeError(
                f"the log-density is NaN at {self.nan_count:,} of {grid.size:,} grid points "
                f"({100 * self.nan_count / grid.size:.3g}%), first at {_point_text(where)}; a "
                "formula is outside its domain there (log or sqrt of a negative number, 0/0, ...)")
        if not np.isfinite(sums.M) or sums.Z[0] <= 0:
            raise ComputeError("the posterior is zero at every grid point: the data are impossible "
                               "under the model on this grid (check the data, the supports and the "
                               "grid bounds)")


def _block_theta(grid: Grid, idx) -> list[np.ndarray]:
    return [a.values[i] for a, i in zip(grid.axes, idx)]


def evaluate_block(compiled: Compiled, theta: Sequence[np.ndarray]) -> np.ndarray:
    """Unnormalised log posterior at grid points: zero prior wins over NaN likelihood."""
    with np.errstate(all="ignore"):
        lpr = compiled.log_prior(theta)
        lp = lpr + compiled.log_likelihood(theta)
    lp[np.isneginf(lpr)] = -np.inf
    return lp


# -- where each block's log-density comes from -------------------------------------

class _Stored:
    """Block source: the log-density of every point is given."""

    def __init__(self, compiled: Compiled, logp: np.ndarray):
        self.compiled = compiled
        self.logp = logp
        self.evaluated = 0

    def __call__(self, start: int, stop: int, idx, theta) -> np.ndarray:
        return np.array(self.logp[start:stop], dtype=float)

    def tensor(self, grid: Grid, blk: Block):
        return np.array(self.logp[blk.start:blk.stop], dtype=float).reshape(blk.shape), True, None


class _Fresh:
    """Block source: the model evaluated at every point (on tensor blocks, laid out
    by `engine.layout`)."""

    def __init__(self, compiled: Compiled):
        self.compiled = compiled
        self.evaluated = 0
        self.on_grid = None

    def __call__(self, start: int, stop: int, idx, theta) -> np.ndarray:
        self.evaluated += stop - start
        return evaluate_block(self.compiled, theta)

    def tensor(self, grid: Grid, blk: Block):
        """The block's log-density (rows, cols), whether it was evaluated exactly, and
        whether it may hold -inf (None: unknown)."""
        if self.on_grid is None:
            self.on_grid = layout.on_grid(self.compiled, grid)
        self.evaluated += blk.stop - blk.start
        lp, neginf = self.on_grid.block(blk)
        if lp is None:
            return self.exact(grid, blk), True, None
        return lp, False, neginf

    def exact(self, grid: Grid, blk: Block) -> np.ndarray:
        theta = _block_theta(grid, grid.indices(blk.start, blk.stop))
        return evaluate_block(self.compiled, theta).reshape(blk.shape)


class _Nested:
    """Block source: an earlier posterior on a grid this one refines gives the nodes
    the two share; the model is evaluated at the new ones only."""

    def __init__(self, compiled: Compiled, nest: list[np.ndarray], old: "Posterior"):
        self.compiled = compiled
        self.nest = nest
        self.old = old
        self.evaluated = 0

    def __call__(self, start: int, stop: int, idx, theta) -> np.ndarray:
        lp = np.empty(stop - start)
        old = [m[i] for m, i in zip(self.nest, idx)]
        shared = np.ones(stop - start, bool)
        for o in old:
            shared &= o >= 0
        if shared.any():
            flat_old = np.ravel_multi_index(tuple(o[shared] for o in old), self.old.grid.shape)
            lp[shared] = self.old.logp[flat_old]
        fresh = ~shared
        if fresh.any():
            lp[fresh] = evaluate_block(self.compiled, [t[fresh] for t in theta])
        self.evaluated += int(fresh.sum())
        return lp

    def tensor(self, grid: Grid, blk: Block):
        idx = grid.indices(blk.start, blk.stop)
        lp = self(blk.start, blk.stop, idx, _block_theta(grid, idx))
        return lp.reshape(blk.shape), True, None


def _block_source(compiled: Compiled, grid: Grid, reuse: "Posterior | None",
                  logp: np.ndarray | None):
    """The one source of block log-densities for a pass: the given `logp`, else the
    nested earlier posterior `reuse`, else fresh evaluation (of the model with its
    reduced sums verified against row-wise sums on a sample of points)."""
    if logp is not None:
        if logp.shape != (grid.size,):
            raise ComputeError("the log-density given does not match the grid")
        return _Stored(compiled, logp)
    compiled = _verified(compiled, grid)
    nest = _nesting(grid, reuse) if reuse is not None else None
    if nest is not None:
        return _Nested(compiled, nest, reuse)
    return _Fresh(compiled)


def _grid_key(grid: Grid) -> tuple:
    """The content of a grid's axes, as a cache key."""
    return tuple((a.name, a.lo, a.hi, a.n, a.scale, a.rule) for a in grid.axes)


def _verified(compiled: Compiled, grid: Grid) -> Compiled:
    """`compiled` with its reduced sums checked against row-wise sums at sample points
    of `grid` (`Compiled.verified`); kept on the compiled model per grid, so that the
    cost check's timed blocks and the pass share one check."""
    key = ("verified", _grid_key(grid))
    got = compiled._cache.get(key)
    if got is None:
        rng = np.random.default_rng(0)
        sample = tuple(np.concatenate([[a.n // 2], rng.integers(0, a.n, size=256)])
                       for a in grid.axes)
        got = compiled.verified(_block_theta(grid, sample))
        if len(compiled._cache) > 64:
            for k in [k for k in compiled._cache if k and k[0] == "verified"]:
                del compiled._cache[k]
        compiled._cache[key] = got
    return got


@dataclass(frozen=True)
class PassTiming:
    """What a pass over a grid costs on this machine, from a few of its own blocks.

    Attributes
    ----------
    fixed : float
        Seconds before the first block (the check of reduced sums, the layout).
    per_point : float
        Seconds a grid point costs in the blocks timed (their density and sums).
    finish : float
        Seconds for the marginals' splines and diagnostics after the last block.
    spent : float
        Seconds the timing itself took.
    """

    fixed: float
    per_point: float
    finish: float
    spent: float

    def seconds(self, points: int) -> float:
        return self.fixed + self.per_point * points + self.finish


#: Seconds of a pass's finish per axis node (the quintic spline of each marginal and
#: its tail checks; measured on this kind of machine, 2,001-node axes).
FINISH_PER_NODE = 3e-6


def pass_timing(compiled: Compiled, grid: Grid, *, enough: float = 0.01,
                pairs: Sequence[tuple[int, int]] | None = None) -> PassTiming:
    """Time the real pass on a few blocks in the middle of `grid`, growing the block
    (from about 1% of the grid) until one takes `enough` seconds or reaches the pass's
    own block size. Nothing is kept but the times."""
    t0 = time.perf_counter()
    check_grid(grid, compiled.params)
    pairs = _default_pairs(grid) if pairs is None else pairs
    source = _block_source(compiled, grid, None, None)
    tensor = _TensorSums.fits(grid)
    if tensor:
        source.on_grid = layout.on_grid(source.compiled, grid)
        sums = _TensorSums(grid, pairs)
    fixed = time.perf_counter() - t0
    watch = _Watch(grid, False)
    size = max(1, min(256, grid.size // 100))
    while True:
        blk = grid.block_at(grid.size // 2, size)
        took = math.inf
        for _ in range(2):  # the better of two: a shared machine stops a process now and then
            t1 = time.perf_counter()
            with np.errstate(all="ignore"):
                if tensor:
                    lp, k, neginf = _tensor_block(source, grid, blk, watch)
                    sums.add(blk, lp, float(lp.flat[k]))
                else:
                    idx = grid.indices(blk.start, blk.stop)
                    theta = _block_theta(grid, idx)
                    lp = source(blk.start, blk.stop, idx, theta)
                    lp[np.isnan(lp)] = -np.inf
                    _Sums(grid, []).add_block(grid, idx, theta, lp)
            took = min(took, time.perf_counter() - t1)
        points = blk.stop - blk.start
        per_point = took / points
        # grow while a block is quick, up to the pass's own block and 2% of the grid
        if took >= enough or size >= BLOCK or 50 * 4 * points > grid.size:
            break
        size *= 4
    finish = FINISH_PER_NODE * sum(a.n for a in grid.axes)
    return PassTiming(fixed, per_point, finish, time.perf_counter() - t0)


def _default_pairs(grid: Grid) -> list[tuple[int, int]]:
    """Every pair while the model has at most 4 parameters, each of at most 4
    million cells."""
    d = len(grid.axes)
    return [(i, j) for i in range(d) for j in range(i + 1, d)
            if d <= 4 and grid.axes[i].n * grid.axes[j].n <= 4_000_000]


def compute(compiled: Compiled, grid: Grid, *, block: int = BLOCK,
            pairs: Sequence[tuple[int, int]] | None = None,
            progress: Callable[[int, int], None] | None = None,
            store: bool | None = None, reuse: "Posterior | None" = None,
            logp: np.ndarray | None = None) -> Posterior:
    """Evaluate the posterior of `compiled` on `grid`, in blocks.

    Parameters
    ----------
    compiled : Compiled
    grid : Grid
        One axis per parameter, in the model's order.
    block : int, keyword-only
        Grid points per block (memory is O(block)).
    pairs : sequence of (int, int), keyword-only
        Which 2-D marginals to keep; by default all pairs while the model has at
        most 4 parameters and each pair has at most 4 million cells.
    progress : callable, keyword-only
        Called as ``progress(done, total)`` after each block.
    store : bool, keyword-only
        Keep the log-density of every point (default: when the grid has at most
        `STORE_LIMIT` points).
    reuse : Posterior, keyword-only
        An earlier posterior of the same model on a grid that this one refines
        (same bounds and scales, nested nodes). Its kept log-density is reused at
        the nodes the two grids share, so only the new nodes are evaluated.
    logp : ndarray, shape (points,), keyword-only
        The unnormalised log posterior at every point, already known (for example
        an earlier one plus the log-likelihood of newly appended rows): then the
        model is not evaluated at all.

    Returns
    -------
    Posterior

    Raises
    ------
    ComputeError
        The log-density is NaN or +inf somewhere, or zero everywhere.
    """
    t0 = time.perf_counter()
    check_grid(grid, compiled.params)
    pairs = _default_pairs(grid) if pairs is None else pairs
    source = _block_source(compiled, grid, reuse, logp)
    watch = _Watch(grid, grid.size <= STORE_LIMIT if store is None else store)
    if _TensorSums.fits(grid):
        tsums = _TensorSums(grid, pairs)
        for blk in grid.sub_blocks(block):
            lp, k, neginf = _tensor_block(source, grid, blk, watch)
            top = watch.see_block(grid, blk, lp, k, neginf)
            tsums.add(blk, lp, top)
            if progress is not None:
                progress(blk.stop, grid.size)
        sums = tsums.finish()
    else:
        sums = _Sums(grid, pairs)
        for start, stop in grid.blocks(block):
            idx = grid.indices(start, stop)
            theta = _block_theta(grid, idx)
            lp = source(start, stop, idx, theta)
            watch.see(grid, start, stop, lp)
            sums.add_block(grid, idx, theta, lp)
            if progress is not None:
                progress(stop, grid.size)
    watch.check(grid, sums)
    with np.errstate(all="ignore"):
        post = _finish(source.compiled, grid, sums, watch, time.perf_counter() - t0)
    return replace(post, evaluated=source.evaluated)


def _tensor_block(source, grid: Grid, blk: Block, watch: _Watch):
    """A block's log-density (rows, cols) with NaN turned to -inf and counted, the flat
    position of its largest value, and whether it may hold -inf. A laid-out block that
    meets NaN is evaluated again exactly (so that a zero prior wins over a NaN
    likelihood, as in `evaluate_block`)."""
    lp, exact, neginf = source.tensor(grid, blk)
    k = int(np.argmax(lp))
    if lp.flat[k] != lp.flat[k] and not exact:
        lp, neginf = source.exact(grid, blk), None
        k = int(np.argmax(lp))
    if lp.flat[k] != lp.flat[k]:
        k = watch.nan_block(blk, lp)
        neginf = None
    return lp, k, neginf


def _nesting(grid: Grid, old: "Posterior") -> list[np.ndarray] | None:
    """For each axis, the old node index of every new node (-1 where new), or None
    when the grids do not nest or the old log-density was not kept."""
    if old.logp is None or old.grid.names != grid.names:
        return None
    maps = []
    for a, b in zip(grid.axes, old.grid.axes):
        if a.scale != b.scale or a.rule != b.rule or a.lo != b.lo or a.hi != b.hi:
            return None
        if a.n == b.n:
            maps.append(np.arange(a.n))
            continue
        if a.discrete or a.rule == "gauss":
            return None
        if a.rule == "midpoint":
            if a.n != 3 * b.n:
                return None
            m = np.full(a.n, -1)
            m[1::3] = np.arange(b.n)
        else:
            if a.n != 2 * b.n - 1:
                return None
            m = np.full(a.n, -1)
            m[::2] = np.arange(b.n)
        maps.append(m)
    return maps


def _point_text(where: dict[str, float]) -> str:
    return ", ".join(f"{k} = {v:.6g}" for k, v in where.items())


def _finish(compiled: Compiled, grid: Grid, sums: _Sums, watch: _Watch, seconds: float
            ) -> Posterior:
    """The `Posterior` from the sums of a pass."""
    log_mass = tuple(float(math.log(z) + sums.M) if z > 0 else -math.inf for z in sums.Z)
    marg = {a.name: Marginal(a, sums.marg[k][0]) for k, a in enumerate(grid.axes)}
    coarse = _coarse_marginals(grid, sums)
    moments = _moments(sums)
    # free `prior log` terms: the prior's normaliser is found numerically
    prior_norm = prior_normaliser(compiled) if compiled.proper and compiled.free_prior else 0.0
    log_ev = _evidence(compiled, grid, log_mass, prior_norm)
    diag = _diagnostics(grid, marg, watch.zero)
    diag = replace(diag, unresolved=_resolution(compiled, grid, marg, coarse, log_mass,
                                                watch.best_flat))
    if log_ev is not None and log_ev.error is not None:
        # the mass beyond the grid is missing from the evidence too
        log_ev = replace(log_ev, error=log_ev.error + diag.missing)
    # the 2-D marginals as node masses summing to 1, like the 1-D ones
    pairs = {k: v / sums.Z[0] for k, v in sums.pairs.items()}
    return Posterior(grid, compiled, log_mass, log_ev, marg, coarse, moments[0].mean,
                     moments[0].cov, tuple(moments[1:len(coarse) + 1]), pairs,
                     grid.point(watch.best_flat), watch.best_lp, diag, seconds, watch.logp,
                     prior_norm)


def _coarse_marginals(grid: Grid, sums: _Sums) -> tuple[dict[str, Marginal], ...]:
    """The marginals of every nested coarse level, as far as each level has mass on
    every axis."""
    coarse = []
    for lev in range(grid.levels):
        cm = {}
        for k, a in enumerate(grid.axes):
            keep = np.isfinite(a.coarse[lev]) if not a.discrete else np.ones(a.n, bool)
            w = np.exp(a.coarse[lev] - a.logjac)
            try:
                cm[a.name] = Marginal(a, sums.marg[k][lev + 1], keep, weights=w)
            except ComputeError:
                return tuple(coarse)
        coarse.append(cm)
    return tuple(coarse)


def _moments(sums: _Sums) -> list[LevelMoments]:
    """Mean and covariance on every level (NaN where a level has no mass)."""
    d = len(sums.centre)
    out = []
    for lev in range(sums.L + 1):
        z = sums.Z[lev]
        if z <= 0:
            out.append(LevelMoments(np.full(d, np.nan), np.full((d, d), np.nan)))
            continue
        m1 = sums.S1[lev] / z
        cov = sums.S2[lev] / z - np.outer(m1, m1)
        out.append(LevelMoments(m1 + sums.centre, cov))
    return out


def _evidence(compiled: Compiled, grid: Grid, log_mass: tuple[float, ...], prior_norm: float
              ) -> Estimate | None:
    """The log evidence with its error; None for an improper prior."""
    if not compiled.proper:
        return None
    order = min((a.order for a in grid.axes if not a.discrete), default=2)
    exact = all(a.discrete for a in grid.axes)
    lm = [v - prior_norm for v in log_mass]
    return combine(lm[0], lm[1] if len(lm) > 1 else None,
                   lm[2] if len(lm) > 2 else None, order=order, exact=exact)


def _diagnostics(grid: Grid, marg: dict[str, Marginal], zero: int) -> Diagnostics:
    """Edge masses, the resolution of the narrowest marginal, and the mass beyond
    the grid."""
    edge = {}
    per_sd = math.inf
    missing = 0.0
    for a in grid.axes:
        if a.discrete:
            continue
        m = marg[a.name]
        edge[a.name] = _edge_masses(m)
        at_lo = a.scale == "linear" and a.lo <= a.dom_lo
        at_hi = a.scale == "linear" and a.hi >= a.dom_hi
        if not at_lo:
            missing += max(edge[a.name][0] - float(m.mass[0]), 0.0)
        if not at_hi:
            missing += max(edge[a.name][1] - float(m.mass[-1]), 0.0)
        sd = m.sd
        if sd > 0 and a.n > 1:
            h = np.median(a.spacing())
            per_sd = min(per_sd, sd / h if h > 0 else math.inf)
    return Diagnostics(zero, edge, per_sd, min(missing, 1.0))


#: Share of an axis's posterior mass in its two heaviest nodes above which the
#: posterior is called unresolved: a normal marginal holds about 0.82 there with
#: 0.67 nodes per sd, 0.66 with one node per sd (where the trapezoid rule still
#: integrates it well and the nested grids see their own error), 0.13 with the 6
#: nodes per sd `grid auto` aims for.
CELL_MASS = 0.8
#: Relative change of the grid's mass, or of an sd, from the nested coarse grid to
#: the fine one above which the two are said to disagree (smaller changes are the
#: error estimate doing its work, and are shown as such).
LEVELS_DISAGREE = 0.25


def _resolution(compiled: Compiled, grid: Grid, marg: dict[str, Marginal],
                coarse: tuple[dict[str, Marginal], ...], log_mass: tuple[float, ...],
                best_flat: int) -> str:
    """Why the grid does not resolve the posterior, or "": the mass sits in one or
    two nodes of an axis, the curvature at the best point gives an sd below the
    node spacing, or the fine and nested coarse grids disagree."""
    why = []
    best = np.unravel_index(best_flat, grid.shape)
    for k, a in enumerate(grid.axes):
        if a.discrete or a.n < 3:
            continue
        m = marg[a.name]
        top = np.sort(m.mass)[-2:]
        csd, ratio = _curvature_sd(compiled, grid, best, k)
        nodes = int(np.sum(top > 1e-3))
        if top.sum() > CELL_MASS:
            text = (f"{100 * top.sum():.3g}% of the mass of `{a.name}` sits in {nodes} grid "
                    f"node{'s' if nodes > 1 else ''}")
            if ratio < 1:
                text += (f"; the curvature at the mode gives an sd of {csd:.2g}, against a "
                         f"spacing of {csd / ratio:.2g} there")
            why.append(text)
        elif ratio < 0.5:
            why.append(f"the curvature at the mode of `{a.name}` gives an sd of {csd:.2g}, "
                       f"against a spacing of {csd / ratio:.2g} there")
        elif coarse and a.name in coarse[0]:
            sd0, sd1 = m.sd, coarse[0][a.name].sd
            if sd0 > 0 and abs(sd1 - sd0) > LEVELS_DISAGREE * sd0:
                why.append(f"the sd of `{a.name}` is {sd0:.3g} on the grid and {sd1:.3g} on "
                           "its nested coarse grid")
    if not why and len(log_mass) > 1 and math.isfinite(log_mass[1]) \
            and abs(log_mass[0] - log_mass[1]) > LEVELS_DISAGREE:
        why.append(f"the grid's mass changes by a factor {math.exp(abs(log_mass[0] - log_mass[1])):.3g} "
                   "from the nested coarse grid to the fine one")
    return "; ".join(why)


def _curvature_sd(compiled: Compiled, grid: Grid, best: tuple, k: int
                  ) -> tuple[float, float]:
    """The sd (in the parameter's units) that the second difference of the log
    density on the axis's scale gives at the best node, over a quarter of the
    spacing, and that sd over the node spacing there (both on the axis's scale);
    (nan, inf) at an end node or where the density is not curved down."""
    a = grid.axes[k]
    i = int(best[k])
    if i == 0 or i == a.n - 1:
        return math.nan, math.inf
    du = 0.25 * min(a.u[i + 1] - a.u[i], a.u[i] - a.u[i - 1])
    us = np.array([a.u[i] - du, a.u[i], a.u[i] + du])
    vals = a.to_value(us)
    theta = [np.full(3, ax.values[int(best[j])]) for j, ax in enumerate(grid.axes)]
    theta[k] = vals
    with np.errstate(all="ignore"):
        lp = evaluate_block(compiled, theta) + a.log_jacobian(us)
    d2 = (lp[0] - 2 * lp[1] + lp[2]) / du ** 2
    if not (np.isfinite(d2) and d2 < 0):
        return math.nan, math.inf
    sd_u = 1 / math.sqrt(-d2)
    return float(sd_u * math.exp(float(a.logjac[i]))), float(sd_u / (4 * du))


#: A zero of the density next to a node within this many log units of the peak is
#: a cut through the mass (a support or constraint); one whose neighbours are all
#: further down is a density that underflowed where it is negligible.
CUT_DEPTH = 600.0


@dataclass(frozen=True)
class Zeros:
    """Grid points of zero density and what they are: ``cut`` when some of them lie
    beside non-negligible mass (the edge of a support or constraint cuts through
    it), ``underflow`` when all lie where the density next to them is already below
    e^-CUT_DEPTH of its peak, ``unknown`` when the density was not kept."""

    count: int
    kind: str


def zeros(post: "Posterior") -> Zeros:
    """The zero-density points of `post` and their kind (see `Zeros`)."""
    n = post.diagnostics.zero_points
    if n == 0:
        return Zeros(0, "none")
    if post.logp is None:
        return Zeros(n, "unknown")
    lp = post.logp.reshape(post.grid.shape)
    zero = np.isneginf(lp)
    near = np.full(lp.shape, -np.inf)
    for ax in range(lp.ndim):
        if lp.shape[ax] < 2:
            continue
        lo = [slice(None)] * lp.ndim
        hi = [slice(None)] * lp.ndim
        lo[ax], hi[ax] = slice(0, -1), slice(1, None)
        near[tuple(lo)] = np.maximum(near[tuple(lo)], lp[tuple(hi)])
        near[tuple(hi)] = np.maximum(near[tuple(hi)], lp[tuple(lo)])
    cut = bool(np.any(zero & (near > post.best_logp - CUT_DEPTH)))
    return Zeros(n, "cut" if cut else "underflow")


def prior_normaliser(compiled: Compiled, points: int = 201) -> float:
    """``log`` of the integral of the prior over the whole (bounded) domain.

    Used when free ``prior log`` terms make the prior's normalising constant
    unknown. Continuous parameters use Gauss-Legendre on their full domain;
    discrete ones are summed.
    """
    from .grid import make_axis
    axes = []
    for p in compiled.params:
        if p.discrete:
            axes.append(make_axis(p, p.lo, p.hi))
        else:
            axes.append(make_axis(p, p.lo, p.hi, points, rule="gauss", scale="linear"))
    grid = Grid(tuple(axes))
    if grid.size > 50_000_000:
        raise ComputeError("the free `prior log` terms cannot be normalised: the parameters' "
                           "domains are too large to integrate over")
    total_m = -np.inf
    acc = 0.0
    for start, stop in grid.blocks(BLOCK):
        idx = grid.indices(start, stop)
        theta = _block_theta(grid, idx)
        with np.errstate(all="ignore"):
            lp = compiled.log_prior(theta)
        for a, i in zip(grid.axes, idx):
            lp = lp + a.logw[i]
        lp[np.isnan(lp)] = -np.inf
        m = float(np.max(lp))
        if not np.isfinite(m):
            continue
        if m > total_m:
            acc = acc * math.exp(total_m - m) if np.isfinite(total_m) else 0.0
            total_m = m
        acc += float(np.exp(lp - total_m).sum())
    if acc <= 0:
        raise ComputeError("the prior is zero everywhere on its domain")
    return math.log(acc) + total_m


def _edge_masses(m: Marginal) -> tuple[float, float]:
    """Mass of each outer node plus the tail beyond it.

    The tail is extrapolated from the last two nodes both as an exponential decay
    and as a power law about the marginal's median, and the larger is taken, so
    that heavy tails (Student-t, Cauchy) are not underestimated."""
    n = len(m.mass)
    if n < 3:
        return (float(m.mass[0]), float(m.mass[-1]))
    g = m.mass / m.weights
    try:
        uc = float(m.axis.to_u(np.array([m.quantile(0.5)]))[0])
    except (ComputeError, ValueError):
        uc = float(m.u[int(np.argmax(m.mass))])
    return (_tail(m.mass[0], g[0], g[1], m.u[0], m.u[1], uc),
            _tail(m.mass[-1], g[-1], g[-2], m.u[-1], m.u[-2], uc))


def _tail(mass_end, g_end, g_in, u_end, u_in, uc) -> float:
    mass_end, g_end, g_in = float(mass_end), float(g_end), float(g_in)
    if mass_end <= 0 or g_end <= 0:
        return max(mass_end, 0.0)
    if g_in <= g_end:
        return 1.0  # no decay toward the edge: the tail is not small
    h = abs(u_end - u_in)
    drop = math.log(g_in / g_end)
    tail = g_end * h / drop                        # exponential decay
    d_end, d_in = abs(u_end - uc), abs(u_in - uc)
    if d_in > 0 and d_end > d_in:
        alpha = drop / math.log(d_end / d_in) - 1.0  # density ~ d^-(alpha+1)
        tail = max(tail, g_end * d_end / alpha) if alpha > 0 else 1.0
    return min(mass_end + tail, 1.0)


# ---------------------------------------------------------------------------
# walking a computed posterior

class WeightedBlock(NamedTuple):
    """One block of a computed posterior's grid.

    Attributes
    ----------
    idx : tuple of ndarray
        Per axis, the node index of each point.
    theta : list of ndarray
        Per parameter, the value at each point.
    weights : list of ndarray
        ``weights[k]``: the normalised posterior weight of each point on level k
        (0 the fine grid), zero where a coarse level has no node.
    """

    idx: tuple
    theta: list
    weights: list


def walk(post: Posterior, *, block: int = BLOCK, coarse: bool = True
         ) -> Iterator[WeightedBlock]:
    """The grid of `post` in blocks, with the posterior weights of every level (of the
    fine grid only, where `coarse` is false)."""
    grid = post.grid
    levels = len(post.coarse_marginals) if coarse else 0
    for start, stop in grid.blocks(block):
        idx = grid.indices(start, stop)
        theta = _block_theta(grid, idx)
        if post.logp is not None:
            lp = post.logp[start:stop]
        else:
            lp = evaluate_block(post.compiled, theta)
            lp[np.isnan(lp)] = -np.inf
        lw = np.zeros(stop - start)
        for a, i in zip(grid.axes, idx):
            lw += a.logw[i]
        ws = [np.exp(lp + lw - post.log_mass[0])]
        for lev in range(levels):
            lwc = np.zeros(stop - start)
            for a, i in zip(grid.axes, idx):
                lwc += a.coarse[lev][i]
            with np.errstate(invalid="ignore"):
                ws.append(np.where(np.isfinite(lwc), np.exp(lp + lwc - post.log_mass[lev + 1]), 0.0))
        yield WeightedBlock(idx, theta, ws)
