"""Axes, transforms and tensor grids walked in bounded blocks.

A continuous parameter is gridded on a scale of its own: `linear` (the value
itself), `log` (positive parameters) or `logit` (bounded ones), with the Jacobian
of the transform folded into the log weights. On the log and logit scales a
posterior that piles up against a domain edge becomes a smooth, decaying function,
which is what the trapezoid rule integrates geometrically well. Discrete
parameters are summed exactly over their values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Iterator, Sequence

import numpy as np
import scipy.special as sc

from .errors import GridError
from .model import Param
from .rules import RULES, rule as make_rule

DEFAULT_POINTS = 101
#: Largest number of points one axis may have.
MAX_AXIS_POINTS = 10**7


# ---------------------------------------------------------------------------
# scales: one table of the transforms between an axis's coordinate u and the
# parameter's values on its domain [lo, hi]

@dataclass(frozen=True)
class Derivatives:
    """What the chain rule through a scale needs at one u (for curvatures).

    Attributes
    ----------
    first, second : float
        ``d value / du`` and ``d2 value / du2``.
    logjac_second : float
        ``d2 log |d value / du| / du2``.
    """

    first: float
    second: float
    logjac_second: float


@dataclass(frozen=True)
class Scale:
    """One scale of the table `SCALE_TABLE`.

    Attributes
    ----------
    name : str
    to_value : callable
        ``to_value(u, lo, hi)``: values from coordinates, any shape.
    to_u : callable
        ``to_u(v, lo, hi)``: the inverse.
    logjac : callable
        ``logjac(u, lo, hi)``: ``log |d value / du|``.
    derivatives : callable
        ``derivatives(u, lo, hi)`` at a float `u`: a `Derivatives`, or None where
        they overflow.
    limits : (float, float)
        How far u may reach: beyond these, values round to the domain's edge in
        double precision (1 - 1e-16 == 1).
    """

    name: str
    to_value: Callable
    to_u: Callable
    logjac: Callable
    derivatives: Callable
    limits: tuple[float, float]


def _linear_value(u, lo, hi):
    return u


def _linear_u(v, lo, hi):
    return v


def _linear_logjac(u, lo, hi):
    return np.zeros_like(u, dtype=float)


def _linear_derivatives(u, lo, hi):
    return Derivatives(1.0, 0.0, 0.0)


def _log_value(u, lo, hi):
    return lo + np.exp(u)


def _log_u(v, lo, hi):
    with np.errstate(all="ignore"):
        return np.log(v - lo)


def _log_logjac(u, lo, hi):
    return np.array(u, float)


def _log_derivatives(u, lo, hi):
    if u > 700:
        return None
    d = math.exp(u)
    return Derivatives(d, d, 0.0)


def _logit_value(u, lo, hi):
    return lo + (hi - lo) * sc.expit(u)


def _logit_u(v, lo, hi):
    with np.errstate(all="ignore"):
        return sc.logit((v - lo) / (hi - lo))


def _logit_logjac(u, lo, hi):
    # log[(hi - lo) * s * (1 - s)], s = expit(u), without overflow
    return math.log(hi - lo) + sc.log_expit(u) + sc.log_expit(-u)


def _logit_derivatives(u, lo, hi):
    s = float(sc.expit(u))
    first = (hi - lo) * s * (1 - s)
    return Derivatives(first, first * (1 - 2 * s), -2 * s * (1 - s))


#: The scales an axis may use, by name: transforms, log-Jacobians and limits of u.
SCALE_TABLE: dict[str, Scale] = {
    "linear": Scale("linear", _linear_value, _linear_u, _linear_logjac, _linear_derivatives,
                    (-math.inf, math.inf)),
    "log": Scale("log", _log_value, _log_u, _log_logjac, _log_derivatives, (-700.0, 700.0)),
    "logit": Scale("logit", _logit_value, _logit_u, _logit_logjac, _logit_derivatives,
                   (-700.0, 36.0)),
}
#: The scales' names, in the table's order.
SCALES = tuple(SCALE_TABLE)


def unconstrained_scale(p: Param) -> str:
    """The scale on which the domain of continuous `p` becomes the whole real line."""
    if p.kind == "positive":
        return "log"
    if p.kind in ("unit", "interval"):
        return "logit"
    return "linear"



@dataclass(frozen=True)
class Axis:
    """One axis of a tensor grid.

    Attributes
    ----------
    name : str
        The parameter.
    lo, hi : float
        Bounds in the parameter's own units.
    n : int
        Number of nodes.
    scale : str
        ``linear``, ``log``, ``logit`` or ``discrete``.
    rule : str
        The 1-D rule (``discrete`` for a discrete parameter).
    u : ndarray, shape (n,)
        Nodes on the axis's scale.
    values : ndarray, shape (n,)
        Nodes in the parameter's units.
    weights : ndarray, shape (n,)
        Rule weights on the axis's scale.
    logjac : ndarray, shape (n,)
        ``log |d value / d u|`` at the nodes.
    logw : ndarray, shape (n,)
        ``log(weights) + logjac``: the log weight a node carries.
    coarse : tuple of ndarray
        Log weights of the nested coarse rules (``-inf`` where unused).
    """

    name: str
    lo: float
    hi: float
    n: int
    scale: str
    rule: str
    u: np.ndarray = field(repr=False)
    values: np.ndarray = field(repr=False)
    weights: np.ndarray = field(repr=False)
    logjac: np.ndarray = field(repr=False)
    logw: np.ndarray = field(repr=False)
    coarse: tuple[np.ndarray, ...] = field(repr=False)
    order: int = 2
    dom_lo: float = -math.inf
    dom_hi: float = math.inf
    nest: int = 2  # spacing factor between nested levels (1 for discrete axes)

    @property
    def discrete(self) -> bool:
        return self.scale == "discrete"

    def describe(self) -> str:
        if self.discrete:
            return f"{self.name}: {self.n} values {self.lo:g} .. {self.hi:g}, summed exactly"
        return (f"{self.name}: {self.lo:.6g} .. {self.hi:.6g}, {self.n} points, "
                f"{self.scale} scale, {self.rule}")

    def param(self) -> Param:
        """A continuous parameter with the axis's domain (enough to rebuild the axis
        with other bounds or counts)."""
        if math.isfinite(self.dom_lo) and math.isfinite(self.dom_hi):
            kind = "interval"
        elif math.isfinite(self.dom_lo):
            kind = "positive"
        else:
            kind = "real"
        return Param(self.name, kind, self.dom_lo, self.dom_hi)

    def spacing(self) -> np.ndarray:
        """Local node spacing in the parameter's units, shape (n,)."""
        if self.discrete or self.n < 2:
            return np.zeros(self.n)
        du = np.gradient(self.u)
        return np.abs(du) * np.exp(self.logjac)

    @property
    def transform(self) -> Scale:
        """The axis's entry of `SCALE_TABLE` (a discrete axis is its own values)."""
        return SCALE_TABLE["linear" if self.discrete else self.scale]

    def to_value(self, u: np.ndarray) -> np.ndarray:
        return self.transform.to_value(u, self.dom_lo, self.dom_hi)

    def to_u(self, v: np.ndarray) -> np.ndarray:
        return self.transform.to_u(np.asarray(v, float), self.dom_lo, self.dom_hi)

    def log_jacobian(self, u: np.ndarray) -> np.ndarray:
        """``log |d value / du|`` at coordinates `u`."""
        return self.transform.logjac(u, self.dom_lo, self.dom_hi)


def default_scale(p: Param, lo: float, hi: float) -> str:
    """The scale an axis of `p` on [lo, hi] uses unless told otherwise."""
    if p.discrete:
        return "discrete"
    if p.kind == "positive" and lo > 0:
        return "log"
    if p.kind in ("unit", "interval") and lo > p.lo and hi < p.hi:
        return "logit"
    return "linear"


def make_axis(p: Param, lo: float, hi: float, n: int | None = None, *,
              rule: str = "trapezoid", scale: str | None = None) -> Axis:
    """Build the axis of parameter `p` on ``[lo, hi]`` (the parameter's units).

    Raises
    ------
    GridError
        Bounds outside the domain or in the wrong order, a bad count, or a scale
        that does not fit the domain.
    """
    if p.discrete:
        vals = np.array([v for v in p.values if lo - 1e-12 <= v <= hi + 1e-12])
        if vals.size == 0:
            raise GridError(f"grid `{p.name}`: no value of `{p.name}` lies in [{lo:g}, {hi:g}]")
        z = np.zeros(vals.size)
        return Axis(p.name, float(vals[0]), float(vals[-1]), int(vals.size), "discrete",
                    "discrete", vals, vals, np.ones(vals.size), z, z, (z, z), 0, p.lo, p.hi, 1)
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise GridError(f"grid `{p.name}`: bounds must be finite numbers")
    if not lo < hi:
        raise GridError(f"grid `{p.name}`: needs LO < HI; got {lo:g} and {hi:g}")
    if lo < p.lo or hi > p.hi:
        raise GridError(f"grid `{p.name}`: [{lo:g}, {hi:g}] reaches outside the domain of "
                        f"`{p.name}` ({p.describe()})")
    n = n or p.points or DEFAULT_POINTS
    if int(n) != n or n < 1 or n > MAX_AXIS_POINTS:
        shown = n if abs(n) < 1e15 else format(float(n), "g")
        raise GridError(f"grid `{p.name}`: points must be a whole number from 1 to "
                        f"{MAX_AXIS_POINTS:,}; got {shown}")
    n = int(n)
    if rule not in RULES:
        raise GridError(f"unknown rule `{rule}`; known: {', '.join(RULES)}")
    scale = scale or default_scale(p, lo, hi)
    if scale not in SCALES:
        raise GridError(f"unknown scale `{scale}`; use linear, log or logit")
    if scale == "log" and not (math.isfinite(p.lo) and lo > p.lo):
        raise GridError(f"grid `{p.name}`: the log scale needs a lower bound above {p.lo:g}")
    if scale == "logit" and not (p.bounded and lo > p.lo and hi < p.hi):
        raise GridError(f"grid `{p.name}`: the logit scale needs bounds strictly inside "
                        f"the domain of `{p.name}`")
    tr = SCALE_TABLE[scale]
    ua, ub = tr.to_u(np.array([lo, hi]), p.lo, p.hi)
    r = make_rule(rule, float(ua), float(ub), n)
    vals = tr.to_value(r.nodes, p.lo, p.hi)
    lj = tr.logjac(r.nodes, p.lo, p.hi)
    with np.errstate(divide="ignore"):
        logw = np.log(r.weights) + lj
        coarse = tuple(np.log(c) + lj for c in r.coarse)
    return Axis(p.name, float(lo), float(hi), n, scale, rule, r.nodes, vals, r.weights, lj,
                logw, coarse, r.order, p.lo, p.hi, 3 if rule == "midpoint" else 2)


@dataclass(frozen=True)
class Block:
    """A sub-tensor of a grid: rows ``r0 .. r1-1`` (flat over the leading axes) times
    nodes ``c0 .. c1-1`` of the last axis; flat points ``start .. stop-1``."""

    start: int
    stop: int
    r0: int
    r1: int
    c0: int
    c1: int

    @property
    def shape(self) -> tuple[int, int]:
        return (self.r1 - self.r0, self.c1 - self.c0)


@dataclass(frozen=True)
class Grid:
    """A tensor grid: one axis per parameter, in the model's order."""

    axes: tuple[Axis, ...]

    @property
    def shape(self) -> tuple[int, ...]:
        return tuple(a.n for a in self.axes)

    @property
    def size(self) -> int:
        return math.prod(self.shape)

    @property
    def names(self) -> tuple[str, ...]:
        return tuple(a.name for a in self.axes)

    @property
    def levels(self) -> int:
        """How many nested coarse levels every axis has."""
        return min((len(a.coarse) for a in self.axes), default=0)

    def axis(self, name: str) -> Axis:
        for a in self.axes:
            if a.name == name:
                return a
        raise GridError(f"no grid axis `{name}`")

    def index(self, name: str) -> int:
        return self.names.index(name)

    def with_axis(self, axis: Axis) -> "Grid":
        return Grid(tuple(axis if a.name == axis.name else a for a in self.axes))

    def blocks(self, block: int) -> Iterator[tuple[int, int]]:
        """Ranges of flat point indices, each at most `block` long."""
        block = max(1, int(block))
        for start in range(0, self.size, block):
            yield start, min(self.size, start + block)

    def sub_blocks(self, block: int) -> Iterator["Block"]:
        """The grid in blocks shaped as sub-tensors, each about `block` points: a range of
        rows (flat indices over every axis but the last) times the whole last axis, or,
        where the last axis alone is longer than `block`, one row times a range of it.
        Blocks follow the flat order, so each is also a range of flat indices."""
        block = max(1, int(block))
        cols = self.axes[-1].n
        lead = self.size // cols
        if cols <= block:
            step = max(1, block // cols)
            for r0 in range(0, lead, step):
                r1 = min(lead, r0 + step)
                yield Block(r0 * cols, r1 * cols, r0, r1, 0, cols)
            return
        for r in range(lead):
            for c0 in range(0, cols, block):
                c1 = min(cols, c0 + block)
                yield Block(r * cols + c0, r * cols + c1, r, r + 1, c0, c1)

    def block_at(self, flat: int, block: int) -> Block:
        """The block of `sub_blocks(block)` holding flat point `flat`."""
        block = max(1, int(block))
        cols = self.axes[-1].n
        r = flat // cols
        if cols <= block:
            step = max(1, block // cols)
            r0 = (r // step) * step
            r1 = min(self.size // cols, r0 + step)
            return Block(r0 * cols, r1 * cols, r0, r1, 0, cols)
        c0 = ((flat % cols) // block) * block
        c1 = min(cols, c0 + block)
        return Block(r * cols + c0, r * cols + c1, r, r + 1, c0, c1)

    @property
    def lead_shape(self) -> tuple[int, ...]:
        """The shape of every axis but the last (the rows of a block)."""
        return self.shape[:-1]

    def indices(self, start: int, stop: int) -> tuple[np.ndarray, ...]:
        """Per-axis node indices of flat points ``start .. stop-1``."""
        flat = np.arange(start, stop, dtype=np.int64)
        return np.unravel_index(flat, self.shape)

    def point(self, flat: int) -> dict[str, float]:
        idx = np.unravel_index(flat, self.shape)
        return {a.name: float(a.values[i]) for a, i in zip(self.axes, idx)}


def check_grid(grid: Grid, params: Sequence[Param]) -> None:
    """The grid must have one axis per parameter, in the model's order."""
    names = tuple(p.name for p in params)
    if grid.names != names:
        missing = [n for n in names if n not in grid.names]
        if missing:
            raise GridError(f"no grid axis for `{missing[0]}`; use `grid {missing[0]} LO HI` "
                            "or `grid auto`")
        raise GridError("the grid's axes do not match the parameters")
