"""1-D marginals on a rule in the frame, and the questions they answer.

The marginal of a continuous parameter is evaluated on a trapezoid line along its
unconstrained scale (the scale the frame uses), the other coordinates integrated at
each point by a sparse rule in the conditional frame (`Frame.conditional`: the
others' conditional means move along the line, their conditional covariance gives
the rule's frame; engine/reduction.py's `marginal_line`). With discrete parameters
the lines of every combination's frame are added. The line is widened until its
ends are far below its top, so the mass beyond it is negligible.

Each answer (quantiles, intervals, probabilities of a condition on one parameter)
is computed on the fine line and on two checks, the coarser conditional rule and
the line's every second node; the larger difference is its error.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import ComputeError
from .framerun import NodePosterior, _Counted
from .grid import Axis, make_axis, unconstrained_scale
from .posterior import Estimate, Interval, Marginal
from .reduction import marginal_line
from .sparse import sparse

#: Nodes of the marginal line (odd: every second node forms the check line).
LINE_POINTS = 81
#: The conditional rule's level (its levels 3, 2, 1 are all on its nodes).
CONDITIONAL_LEVEL = 4
#: The line is widened until both ends are this far (nats) below its top.
END_DROP = 30.0
#: Half-width of the first line, in the frame's sds of the coordinate.
HALF_WIDTH = 8.0


@dataclass(frozen=True)
class NodeMarginal:
    """The marginal of one parameter on a rule in the frame.

    Attributes
    ----------
    name : str
    fine : Marginal
        On the full line with the finest conditional level.
    checks : tuple of Marginal
        The same with the coarser conditional level, and on every second node.
    evaluations : int
    """

    name: str
    fine: Marginal = field(repr=False)
    checks: tuple[Marginal, ...] = field(repr=False)
    evaluations: int = 0

    def _estimate(self, f) -> Estimate:
        v = float(f(self.fine))
        others = [float(f(m)) for m in self.checks]
        err = max((abs(v - o) for o in others), default=None)
        if err is not None:
            # levels that agree to the last digit still carry the solver's tolerance
            # (1e-14 of the scale): an error of 0 is for exact sums only
            sd = self.fine.sd if math.isfinite(self.fine.sd) else 0.0
            err = max(err, 1e-14 * max(abs(v), sd, 1e-300))
        return Estimate(v, err, "levels")

    def quantile(self, q: float) -> Estimate:
        return self._estimate(lambda m: m.quantile(q))

    def cdf(self, x: float) -> Estimate:
        return self._estimate(lambda m: m.cdf(x))

    def interval(self, level: float, kind: str) -> Interval:
        if kind == "central":
            lo = self._estimate(lambda m: m.central(level)[0])
            hi = self._estimate(lambda m: m.central(level)[1])
            return Interval(lo, hi, level, kind, ((lo.value, hi.value),))
        pieces = self.fine.hpd(level)
        lo = self._estimate(lambda m: m.hpd(level)[0][0])
        hi = self._estimate(lambda m: m.hpd(level)[-1][1])
        return Interval(lo, hi, level, kind, tuple(pieces))


@dataclass(frozen=True)
class _Line:
    axis: Axis
    log_mass: np.ndarray        # (levels, n): log of node mass per conditional level
    evaluations: int


def marginals(post: NodePosterior) -> dict[str, NodeMarginal]:
    """Every continuous parameter's marginal on the rule's frames."""
    out = {}
    for p in post.compiled.params:
        if not p.discrete:
            out[p.name] = marginal(post, p.name)
    return out


def marginal(post: NodePosterior, name: str) -> NodeMarginal:
    """The marginal of continuous parameter `name`.

    Raises
    ------
    ComputeError
        A discrete parameter (its sums are exact: ask `rule grid`), or no mass on
        the line.
    """
    p = post.compiled.model.param(name)
    if p.discrete:
        return _discrete(post, name)
    axis = _axis(post, name)
    lines = [_line(post, fit, name, axis) for fit in post.fits]
    total = np.logaddexp.reduce(np.stack([ln.log_mass for ln in lines]), axis=0)
    evals = sum(ln.evaluations for ln in lines)
    return _record(name, axis, total, evals)


def _discrete(post: NodePosterior, name: str) -> NodeMarginal:
    """A discrete parameter's pmf: each value's share of the frames' integrals; the
    checks move every share by its integral's error, the lower values one way and the
    higher the other (the most a cdf can move)."""
    p = post.compiled.model.param(name)
    axis = make_axis(p, p.lo, p.hi)
    log_z = np.array([f.reduction.log_integral.value for f in post.fits])
    err = np.array([f.reduction.log_integral.error or 0.0 for f in post.fits])
    at = np.array([int(np.argmin(np.abs(axis.values - f.fixed[name]))) for f in post.fits])
    top = float(np.max(log_z))

    def pmf(shift):
        return np.bincount(at, weights=np.exp(log_z - top + shift), minlength=axis.n)

    fine = Marginal(axis, pmf(np.zeros(len(at))))
    mid = np.median(axis.values[at])
    sign = np.where(axis.values[at] <= mid, 1.0, -1.0)
    checks = tuple(Marginal(axis, pmf(sg * sign * err)) for sg in (1.0, -1.0))
    return NodeMarginal(name, fine, checks, 0)


def _axis(post: NodePosterior, name: str) -> Axis:
    """The line: wide enough around every frame's centre that its ends are far below
    its top (checked on the best frame, widened up to four times)."""
    p = post.compiled.model.param(name)
    scale = unconstrained_scale(p)
    lo_u, hi_u = math.inf, -math.inf
    for fit in post.fits:
        k = fit.frame.names.index(name)
        c, sd = float(fit.frame.mode[k]), float(fit.frame.sd[k])
        lo_u, hi_u = min(lo_u, c - HALF_WIDTH * sd), max(hi_u, c + HALF_WIDTH * sd)
    best = post.fits[int(np.argmax([f.reduction.log_integral.value for f in post.fits]))]
    for _ in range(4):
        axis = _make(p, scale, lo_u, hi_u)
        ends = _ends(post, best, name, axis)
        span = hi_u - lo_u
        if ends[0] < -END_DROP and ends[1] < -END_DROP:
            return axis
        lo_u -= span / 2 if ends[0] >= -END_DROP else 0.0
        hi_u += span / 2 if ends[1] >= -END_DROP else 0.0
    return _make(p, scale, lo_u, hi_u)


def _make(p, scale: str, lo_u: float, hi_u: float) -> Axis:
    from .grid import SCALE_TABLE
    tr = SCALE_TABLE[scale]
    ulo, uhi = tr.limits
    lo_u, hi_u = max(lo_u, ulo), min(hi_u, uhi)
    lo, hi = (float(v) for v in tr.to_value(np.array([lo_u, hi_u]), p.lo, p.hi))
    lo, hi = max(lo, p.lo), min(hi, p.hi)
    return make_axis(p, lo, hi, LINE_POINTS, rule="trapezoid", scale=scale)


def _ends(post: NodePosterior, fit, name: str, axis: Axis) -> tuple[float, float]:
    """The log-density at the line's two ends relative to its top (on the best frame,
    the others at their conditional modes)."""
    target = _Counted(post.compiled, fit.fixed)
    frame = fit.frame
    k = frame.names.index(name)
    if frame.dims == 1:
        lf = target(axis.u[:, None])
    else:
        cf = frame.conditional(k)
        lf = target(cf.to_u(axis.u, np.zeros((1, frame.dims - 1)))[:, 0, :])
    top = float(np.max(lf))
    return float(lf[0] - top), float(lf[-1] - top)


def _line(post: NodePosterior, fit, name: str, axis: Axis) -> _Line:
    target = _Counted(post.compiled, fit.fixed)
    frame = fit.frame
    k = frame.names.index(name)
    logw = np.log(axis.weights)
    if frame.dims == 1:
        with np.errstate(all="ignore"):
            lf = target(axis.u[:, None])
        return _Line(axis, np.stack([lf + logw, lf + logw]), target.count)
    nodes = sparse(frame.dims - 1, CONDITIONAL_LEVEL)
    ml = marginal_line(frame, k, axis.u, nodes, target)
    levels = np.where(np.isnan(ml.log_density), -np.inf, ml.log_density)[:2]
    return _Line(axis, levels + logw[None, :], ml.evaluations)


def _record(name: str, axis: Axis, log_mass: np.ndarray, evaluations: int) -> NodeMarginal:
    top = float(np.max(log_mass[0]))
    if not math.isfinite(top):
        raise ComputeError(f"the marginal of `{name}` has no mass on its line")
    fine = Marginal(axis, np.exp(log_mass[0] - top))
    checks = []
    second = log_mass[1]
    if np.isfinite(second).any():
        checks.append(Marginal(axis, np.exp(second - np.max(second))))
    half = np.zeros(axis.n, bool)
    half[::2] = True
    w2 = np.where(half, 2 * axis.weights, 0.0)
    mass2 = np.exp(log_mass[0] - top) / axis.weights * w2
    checks.append(Marginal(axis, mass2, keep=half, weights=w2))
    return NodeMarginal(name, fine, tuple(checks), evaluations)


# ---------------------------------------------------------------------------
# probabilities of conditions on one parameter

_OPS = {"<": np.less, "<=": np.less_equal, ">": np.greater, ">=": np.greater_equal,
        "==": np.equal, "!=": np.not_equal}
_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "==": "==", "!=": "!="}


@dataclass(frozen=True)
class Comparison:
    """``NAME OP VALUE``."""

    name: str
    op: str
    value: float


def probability(nm: NodeMarginal, parts: list[Comparison]) -> Estimate:
    """P(all of `parts`), each a comparison of the marginal's parameter with a number.

    On a continuous parameter the condition is the interval it leaves (ends by the cdf,
    `==` has probability 0); on a discrete one the values that meet it are summed.
    """
    if nm.fine.discrete:
        def p_of(m):
            ok = np.ones(len(m.values), bool)
            for c in parts:
                ok &= _OPS[c.op](m.values, c.value)
            return float(m.mass[ok].sum())
        return nm._estimate(p_of)
    lo, hi = -math.inf, math.inf
    for c in parts:
        if c.op in ("==",):
            return Estimate(0.0, 0.0, "exact")
        if c.op == "!=":
            continue
        if c.op in (">", ">="):
            lo = max(lo, c.value)
        else:
            hi = min(hi, c.value)
    if lo >= hi:
        return Estimate(0.0, 0.0, "exact")

    def p_of(m):
        a = 0.0 if lo == -math.inf else m.cdf(lo)
        b = 1.0 if hi == math.inf else m.cdf(hi)
        return max(b - a, 0.0)
    return nm._estimate(p_of)
