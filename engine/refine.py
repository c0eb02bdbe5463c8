"""Automatic bounds, refinement steps and convergence verdicts.

`auto_grid` finds where the posterior mass is: the joint mode(s) in the
unconstrained space of the axes (several starts), the curvature there, a box of
safe width around every mode, then a check of the mass in the outer cells of
every axis on a coarse pass, widening until it is below a threshold.
"""

from __future__ import annotations

import math
import time
import warnings
from dataclasses import dataclass, field, replace
from typing import Callable, Sequence

import numpy as np
from scipy import optimize

from .errors import ComputeError, GridError
from .grid import (DEFAULT_POINTS, MAX_AXIS_POINTS, SCALE_TABLE, Axis, Grid, make_axis,
                   unconstrained_scale)
from .model import Compiled, Param
from .posterior import Posterior, compute, evaluate_block

#: Mass allowed in the outer cell at each end of an axis.
EDGE_MASS = 1e-9
#: Largest number of points of the coarse checking pass.
CHECK_POINTS = 200_000
#: Largest number of points `grid auto` gives a grid.
AUTO_BUDGET = 1 << 22
#: Nodes per curvature sd that `grid auto` aims for on every continuous axis.
PER_SD = 6.0
#: Widenings of one end after which `grid auto` reads the tail's power law.
HEAVY_MOVES = 6
#: A density falling as |x|^-k is proper (heavy-tailed) when k > 1 + this margin.
HEAVY_MARGIN = 0.05
#: The most nodes a heavy-tailed axis grows to (its tails are cut there, and the
#: mass beyond enters every error estimate).
HEAVY_POINTS = 100_001


@dataclass(frozen=True)
class AxisSpec:
    """What the user (or `grid auto`) asked of one axis."""

    name: str
    lo: float
    hi: float
    n: int | None = None
    scale: str | None = None


@dataclass(frozen=True)
class AutoGrid:
    """The result of `auto_grid`.

    Attributes
    ----------
    specs : tuple of AxisSpec
    modes : tuple of dict
        The separated local modes found (parameter values).
    edge_mass : dict of str to (float, float)
        Mass in the outer cells on the final check.
    converged : bool
        Whether every edge holds less than `EDGE_MASS` (or sits on a domain edge).
    improper : tuple of str
        Axes whose edge mass kept up as the bounds widened.
    message : str
    """

    specs: tuple[AxisSpec, ...]
    modes: tuple[dict[str, float], ...]
    edge_mass: dict[str, tuple[float, float]]
    converged: bool
    improper: tuple[str, ...] = ()
    message: str = ""
    widenings: int = 0


def default_points(dims: int) -> int:
    """Points per continuous axis that `grid auto` picks for `dims` parameters."""
    return {1: 201, 2: 201, 3: 101, 4: 41, 5: 21, 6: 13, 7: 9}.get(dims, 5)


# -- unconstrained coordinates -------------------------------------------------

class _Target:
    """The log posterior in unconstrained coordinates (Jacobian included)."""

    def __init__(self, compiled: Compiled, fixed: dict[str, float]):
        self.c = compiled
        self.cont = [p for p in compiled.params if not p.discrete]
        self.scales = [SCALE_TABLE[unconstrained_scale(p)] for p in self.cont]
        self.fixed = fixed

    def theta(self, U: np.ndarray) -> list[np.ndarray]:
        U = np.atleast_2d(U)
        out = []
        k = 0
        for p in self.c.params:
            if p.discrete:
                out.append(np.full(U.shape[0], self.fixed[p.name]))
            else:
                out.append(np.asarray(self.scales[k].to_value(U[:, k], p.lo, p.hi), float))
                k += 1
        return out

    def __call__(self, U: np.ndarray) -> np.ndarray:
        U = np.atleast_2d(U)
        with np.errstate(all="ignore"):
            lp = evaluate_block(self.c, self.theta(U))
        # beyond the scales' limits values round to the domain's edge: out of bounds
        for k, scale in enumerate(self.scales):
            lo, hi = scale.limits
            lp = np.where((U[:, k] < lo) | (U[:, k] > hi), -np.inf, lp)
        for k, p in enumerate(self.cont):
            lp = lp + self.scales[k].logjac(U[:, k], p.lo, p.hi)
        return np.where(np.isnan(lp), -np.inf, lp)


def _starts(target: _Target, rng: np.random.Generator, count: int) -> np.ndarray:
    """Starting points: the origin, and points spread over the unconstrained space,
    ranked by their log density."""
    d = len(target.cont)
    cands = [np.zeros(d)]
    for scale in (1.0, 3.0, 10.0, 30.0):
        cands.extend(rng.normal(0.0, scale, size=(64, d)))
    C = np.array(cands)
    # centre linear axes of bounded parameters inside their domain
    lp = target(C)
    order = [i for i in np.argsort(-lp) if np.isfinite(lp[i])]
    # the best point, then the best ones far from those already chosen, so that
    # separated modes each get a start
    good: list[np.ndarray] = []
    for sep in (2.0, 0.5, 0.0):
        for i in order:
            if len(good) >= count:
                break
            if all(np.linalg.norm(C[i] - g) > sep for g in good):
                good.append(C[i])
    if not good:
        raise ComputeError("the posterior is zero at every starting point tried; check the "
                           "data and the supports")
    return np.array(good)


def _hessian(f, x: np.ndarray, h: np.ndarray) -> np.ndarray:
    d = len(x)
    H = np.zeros((d, d))
    f0 = f(x[None, :])[0]
    E = np.eye(d)
    pts = []
    for i in range(d):
        pts.append(x + h[i] * E[i])
        pts.append(x - h[i] * E[i])
    for i in range(d):
        for j in range(i + 1, d):
            for si, sj in ((1, 1), (1, -1), (-1, 1), (-1, -1)):
                pts.append(x + si * h[i] * E[i] + sj * h[j] * E[j])
    vals = f(np.array(pts))
    k = 0
    for i in range(d):
        H[i, i] = (vals[k] - 2 * f0 + vals[k + 1]) / h[i] ** 2
        k += 2
    for i in range(d):
        for j in range(i + 1, d):
            a, b, c, e = vals[k:k + 4]
            H[i, j] = H[j, i] = (a - b - c + e) / (4 * h[i] * h[j])
            k += 4
    return H


@dataclass(frozen=True)
class LocalMode:
    """A local mode of the posterior in the unconstrained coordinates of `grid auto`.

    Attributes
    ----------
    u : ndarray, shape (d,)
        Where it is, one coordinate per continuous parameter (the model's order).
    log_density : float
        The unconstrained log density there (the scales' Jacobians included).
    sd : ndarray, shape (d,)
        Per-axis standard deviation from the curvature there.
    """

    u: np.ndarray
    log_density: float
    sd: np.ndarray


def find_modes(compiled: Compiled, fixed: dict[str, float], *, starts: int = 8,
               seed: int = 0) -> list[LocalMode]:
    """Local modes of the posterior in unconstrained coordinates, best first.

    Modes closer than two sds to a better one are merged into it, and modes below
    ``exp(-40)`` of the best are dropped (no mass worth a box).
    """
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return _find_modes(compiled, fixed, starts=starts, seed=seed)


def _find_modes(compiled: Compiled, fixed: dict[str, float], *, starts: int, seed: int
                ) -> list[LocalMode]:
    target = _Target(compiled, fixed)
    if not target.cont:
        return []
    return modes_of(target, starts=starts, seed=seed)


def modes_of(target: _Target, *, starts: int = 8, seed: int = 0) -> list[LocalMode]:
    """Local modes of `target` climbed from `starts` seeded starts, best first, merged
    and pruned as `find_modes` says."""
    rng = np.random.default_rng(seed)
    found = [m for m in (_climb(target, x0) for x0 in _starts(target, rng, starts))
             if m is not None]
    if not found:
        raise ComputeError("no mode found: the posterior is zero at every point the optimiser "
                           "reached")
    found.sort(key=lambda m: -m.log_density)
    modes: list[LocalMode] = []
    for m in found:
        if m.log_density < found[0].log_density - 40:
            continue
        if any(np.all(np.abs(m.u - k.u) < 2 * np.maximum(m.sd, k.sd)) for k in modes):
            continue
        modes.append(m)
    return modes


def _climb(target: _Target, x0: np.ndarray) -> LocalMode | None:
    """The mode reached from `x0` (Nelder-Mead, then BFGS), or None where the
    density stays zero."""
    d = len(target.cont)

    def nf(x):
        v = target(x[None, :])[0]
        return -v if np.isfinite(v) else 1e300

    r = optimize.minimize(nf, x0, method="Nelder-Mead",
                          options={"xatol": 1e-7, "fatol": 1e-10, "maxiter": 2000 * d,
                                   "adaptive": d > 2})
    r2 = optimize.minimize(nf, r.x, method="BFGS", options={"gtol": 1e-8})
    x = r2.x if r2.fun <= r.fun and np.all(np.isfinite(r2.x)) else r.x
    fx = -min(r.fun, r2.fun)
    if not np.isfinite(fx) or fx < -1e299:
        return None
    return LocalMode(x, fx, _curvature_sd(target, x))


def _symbolic_hessian_u(target: _Target, x: np.ndarray) -> np.ndarray | None:
    """Hessian of the unconstrained log density at `x` from the symbolic derivatives
    in the parameters (chain rule through each axis's transform), or None."""
    th = target.theta(x[None, :])
    point = {p.name: float(t[0]) for p, t in zip(target.c.params, th)}
    curv = target.c.curvature(point)
    if curv is None:
        return None
    g, H = curv.gradient, curv.hessian
    d1 = np.empty(len(x))    # d value / du
    d2 = np.empty(len(x))    # d2 value / du2
    lj2 = np.empty(len(x))   # d2 log|d value/du| / du2
    for k, (p, scale) in enumerate(zip(target.cont, target.scales)):
        der = scale.derivatives(x[k], p.lo, p.hi)
        if der is None:
            return None
        d1[k], d2[k], lj2[k] = der.first, der.second, der.logjac_second
    Hu = H * np.outer(d1, d1) + np.diag(g * d2 + lj2)
    return Hu if np.all(np.isfinite(Hu)) else None


def _curvature_sd(target: _Target, x: np.ndarray) -> np.ndarray:
    d = len(x)
    Hs = _symbolic_hessian_u(target, x)
    if Hs is not None:
        try:
            diag = np.diag(np.linalg.inv(-Hs))
            if np.all(np.isfinite(diag)) and np.all(diag > 0):
                return np.sqrt(diag)
        except np.linalg.LinAlgError:
            pass
    h = np.full(d, 1e-3)
    sd = np.ones(d)
    for _ in range(3):
        H = _hessian(target, x, h)
        try:
            cov = np.linalg.inv(-H)
            diag = np.diag(cov)
            ok = np.all(np.isfinite(diag)) and np.all(diag > 0)
        except np.linalg.LinAlgError:
            ok = False
        if not ok:
            diag = np.array([1.0 / max(-H[i, i], 1e-12) if np.isfinite(H[i, i]) and H[i, i] < 0
                             else 1.0 for i in range(d)])
        sd = np.sqrt(diag)
        h_new = np.clip(sd * 1e-2, 1e-6, 1.0)
        if np.allclose(h_new, h, rtol=0.5):
            break
        h = h_new
    return sd


def auto_grid(compiled: Compiled, *, points: dict[str, int] | None = None,
              width: float = 8.0, edge_mass: float = EDGE_MASS,
              max_widen: int = 40) -> AutoGrid:
    """Bounds for every axis that hold all but `edge_mass` at each edge.

    The phases: the modes and a box of `width` curvature sds around them
    (`_initial_box`), checking passes that widen every end holding too much mass
    (`_widen`), the points each axis needs (`_sized_counts`), and the verdict with
    its notes (`_verdict`).

    Parameters
    ----------
    compiled : Compiled
    points : dict of str to int, keyword-only
        Points per axis for the result (default: the parameter's own `points`,
        else `default_points`).
    width : float, keyword-only
        Half-width of the first box around each mode, in curvature sds.
    edge_mass : float, keyword-only
        The most mass the outer cell at each end may hold.
    max_widen : int, keyword-only
        The most widening passes.
    """
    cont, disc = _auto_iv(compiled)
    # discrete parameters: fix them at the best value of a coarse look for the mode search
    fixed = _best_discrete(compiled, disc, cont) if disc else {}
    modes = find_modes(compiled, fixed) if cont else []
    box = _initial_box(cont, modes, width)
    # the threshold is shared by every end of every continuous axis, so that the
    # box as a whole leaves out less than `edge_mass`
    per_end = edge_mass / (2 * max(len(cont), 1))
    wid = _widen(compiled, box, per_end, max_widen)
    counts = _sized_counts(compiled, wid, points)
    specs = _box_specs(compiled.params, wid.box, counts)
    return _verdict(compiled, fixed, modes, wid, specs, per_end)


def _auto_iv(compiled: Compiled) -> tuple[list[Param], list[Param]]:
    """The continuous and the discrete parameters, once a check pass is affordable."""
    cont = [p for p in compiled.params if not p.discrete]
    disc = [p for p in compiled.params if p.discrete]
    if 3 ** len(cont) * math.prod(len(p.values) for p in disc) > 25 * CHECK_POINTS:
        raise ComputeError(
            f"grid auto: {len(cont)} continuous parameters; even 3 points per axis make "
            f"3^{len(cont)} points to check. A tensor grid grows as N^d and is the wrong tool "
            "at this many dimensions; set small grids yourself with `grid`, or fix some "
            "parameters")
    return cont, disc


@dataclass(frozen=True)
class _Box:
    """The region `grid auto` works on, per continuous axis, in unconstrained u.

    Attributes
    ----------
    lo, hi : dict of str to float
        The ends.
    sd : dict of str to float
        The narrowest curvature sd over the modes.
    scales : dict of str to str
        The unconstrained scale (a key of `SCALE_TABLE`).
    lo_moves, hi_moves : dict of str to int
        How often each end was widened.
    """

    lo: dict[str, float]
    hi: dict[str, float]
    sd: dict[str, float]
    scales: dict[str, str]
    lo_moves: dict[str, int]
    hi_moves: dict[str, int]

    def span(self, name: str) -> float:
        return self.hi[name] - self.lo[name]

    def limits(self, name: str) -> tuple[float, float]:
        return SCALE_TABLE[self.scales[name]].limits


def _initial_box(cont: Sequence[Param], modes: Sequence[LocalMode], width: float) -> _Box:
    """`width` curvature sds around every mode, within the limits of each scale."""
    lo, hi, sd, scales = {}, {}, {}, {}
    for k, p in enumerate(cont):
        scales[p.name] = unconstrained_scale(p)
        ulo, uhi = SCALE_TABLE[scales[p.name]].limits
        lo[p.name] = max(min(m.u[k] - width * m.sd[k] for m in modes), ulo)
        hi[p.name] = min(max(m.u[k] + width * m.sd[k] for m in modes), uhi)
        sd[p.name] = min(m.sd[k] for m in modes)
    none = {p.name: 0 for p in cont}
    return _Box(lo, hi, sd, scales, none, dict(none))


def _box_specs(params: Sequence[Param], box: _Box, counts: dict[str, int]
               ) -> tuple[AxisSpec, ...]:
    """The axes of `box` in the parameters' units, with `counts` points each."""
    out = []
    for p in params:
        if p.discrete:
            out.append(AxisSpec(p.name, p.lo, p.hi, None, None))
            continue
        scale = box.scales[p.name]
        lo = float(SCALE_TABLE[scale].to_value(np.array(box.lo[p.name]), p.lo, p.hi))
        hi = float(SCALE_TABLE[scale].to_value(np.array(box.hi[p.name]), p.lo, p.hi))
        lo, hi = max(lo, p.lo), min(hi, p.hi)
        out.append(AxisSpec(p.name, lo, hi, counts[p.name], _fit_scale(p, lo, hi, scale)))
    return tuple(out)


def _check_counts(box: _Box, cont: Sequence[Param], disc: Sequence[Param]) -> dict[str, int]:
    """Points of the checking pass: enough to resolve the narrowest mode (two nodes
    per curvature sd, so that the total mass the edges are judged against is right),
    at least 41, within `CHECK_POINTS` in all; odd counts."""
    want = {p.name: max(41, int(math.ceil(box.span(p.name) /
                                          (box.sd[p.name] / 2 if box.sd[p.name] > 0 else 1))))
            for p in cont}
    total = math.prod(want.values()) * math.prod(len(p.values) for p in disc)
    if total > CHECK_POINTS:
        f = (CHECK_POINTS / total) ** (1 / max(len(cont), 1))
        floor = 9 if 9 ** len(cont) <= 4 * CHECK_POINTS else 3
        want = {k: max(floor, int(v * f)) for k, v in want.items()}
    return {k: v + (1 - v % 2) for k, v in want.items()}


@dataclass(frozen=True)
class _Widening:
    """Where the checking passes of `grid auto` left the box.

    Attributes
    ----------
    box : _Box
    edge : dict of str to (float, float)
        Mass at the ends of each continuous axis on the last check.
    widenings : int
        Passes that widened some end.
    improper : tuple of str
        Axes whose ends kept widening (12 times or more) with no decay of a proper
        density.
    converged : bool
        Whether the passes stopped because no end needed widening.
    heavy : dict of str to float
        Axes with power-law tails (density ~ |x|^-k, k > 1: proper, but too heavy
        to hold all but `per_end` within a grid that resolves the mode), with k;
        their widening stopped at `HEAVY_POINTS` nodes per curvature sd / `PER_SD`.
    """

    box: _Box
    edge: dict[str, tuple[float, float]]
    widenings: int
    improper: tuple[str, ...]
    converged: bool
    heavy: dict[str, float] = field(default_factory=dict)


def _widen(compiled: Compiled, box: _Box, per_end: float, max_widen: int) -> _Widening:
    """Check passes on coarse grids of the box, widening it until no end holds more
    than `per_end`, at most `max_widen` times."""
    params = compiled.params
    cont = [p for p in params if not p.discrete]
    disc = [p for p in params if p.discrete]
    edge: dict[str, tuple[float, float]] = {}
    widenings = 0
    improper: list[str] = []
    heavy: dict[str, float] = {}
    for _ in range(max_widen + 1):
        grid = build_grid(params, _box_specs(params, box, _check_counts(box, cont, disc)))
        post = compute(compiled, grid, pairs=[], store=False)
        edge = post.diagnostics.edge_mass
        for p in cont:
            if max(box.lo_moves[p.name], box.hi_moves[p.name]) >= HEAVY_MOVES \
                    and p.name not in heavy and p.name not in improper:
                k = post.tails(p.name).exponent()
                if k is not None and k > 1 + HEAVY_MARGIN:
                    heavy[p.name] = k
        frozen = {n for n in heavy
                  if box.span(n) / (box.sd[n] / PER_SD if box.sd[n] > 0 else 1) >= HEAVY_POINTS}
        wider = _widened(grid, box, edge, per_end, [p for p in cont if p.name not in frozen])
        if wider is None:
            return _Widening(box, edge, widenings, tuple(improper), True, heavy)
        box = wider
        widenings += 1
        for p in cont:
            if max(box.lo_moves[p.name], box.hi_moves[p.name]) >= 12 and p.name not in improper \
                    and p.name not in heavy:
                improper.append(p.name)
        if improper and widenings >= 14:
            break
    return _Widening(box, edge, widenings, tuple(improper), False, heavy)


def _widened(grid: Grid, box: _Box, edge: dict[str, tuple[float, float]], per_end: float,
             cont: Sequence[Param]) -> _Box | None:
    """`box` with every end that holds more than `per_end` moved out by half the
    span (not past a domain edge or the scale's limit); None if no end moves."""
    lo, hi = dict(box.lo), dict(box.hi)
    lo_moves, hi_moves = dict(box.lo_moves), dict(box.hi_moves)
    moved = False
    for p in cont:
        a = grid.axis(p.name)
        m_lo, m_hi = edge[p.name]
        span = box.span(p.name)
        at_lo = a.scale == "linear" and a.lo <= p.lo
        at_hi = a.scale == "linear" and a.hi >= p.hi
        ulo, uhi = box.limits(p.name)
        if m_lo > per_end and not at_lo and lo[p.name] > ulo:
            lo[p.name] = max(lo[p.name] - 0.5 * span, ulo)
            lo_moves[p.name] += 1
            moved = True
        if m_hi > per_end and not at_hi and hi[p.name] < uhi:
            hi[p.name] = min(hi[p.name] + 0.5 * span, uhi)
            hi_moves[p.name] += 1
            moved = True
    return replace(box, lo=lo, hi=hi, lo_moves=lo_moves, hi_moves=hi_moves) if moved else None


def _sized_counts(compiled: Compiled, wid: _Widening, points: dict[str, int] | None
                  ) -> dict[str, int]:
    """Points per continuous axis: the user's, else enough nodes across the narrowest
    mode (`PER_SD` per curvature sd), within `AUTO_BUDGET`, with two nested levels."""
    cont = [p for p in compiled.params if not p.discrete]
    disc = [p for p in compiled.params if p.discrete]
    npts = default_points(max(len(cont), 1))
    box = wid.box
    sized: dict[str, int] = {}
    for p in cont:
        want = box.span(p.name) / (box.sd[p.name] / PER_SD) if box.sd[p.name] > 0 else npts
        sized[p.name] = npts if p.name in wid.improper else max(npts, int(math.ceil(want)))
        if p.name in wid.heavy:
            sized[p.name] = min(sized[p.name], HEAVY_POINTS)
    total = math.prod(sized.values()) * math.prod(len(p.values) for p in disc)
    if total > AUTO_BUDGET:
        shrink = (AUTO_BUDGET / total) ** (1 / max(len(cont), 1))
        for k in sized:
            sized[k] = max(5, int(sized[k] * shrink))
    return {p.name: (points or {}).get(p.name) or p.points or _nested_count(sized[p.name])
            for p in cont}


@dataclass(frozen=True)
class _Limits:
    """Ends held back by the precision of their scale: notes for the user, and axes
    whose mass runs on to the log scale's top (an improper posterior)."""

    notes: tuple[str, ...]
    improper: tuple[str, ...]


def _limits(cont: Sequence[Param], wid: _Widening, per_end: float) -> _Limits:
    notes: list[str] = []
    improper = list(wid.improper)
    for p in cont:
        lo_lim, hi_lim = wid.box.limits(p.name)
        m_lo, m_hi = wid.edge.get(p.name, (0.0, 0.0))
        if m_hi > per_end and wid.box.hi[p.name] >= hi_lim and wid.box.scales[p.name] == "log":
            # the log scale's top is a value near 1e304, not a domain edge
            if p.name not in improper:
                improper.append(p.name)
            continue
        if m_hi > per_end and wid.box.hi[p.name] >= hi_lim:
            notes.append(f"the mass beyond the upper end of `{p.name}` stays at {m_hi:.2g}: "
                         f"values closer to {p.hi:g} are not distinct from it in double precision")
        if m_lo > per_end and wid.box.lo[p.name] <= lo_lim:
            notes.append(f"the mass beyond the lower end of `{p.name}` stays at {m_lo:.2g}: "
                         f"values closer to {p.lo:g} are not distinct from it in double precision")
    return _Limits(tuple(notes), tuple(improper))


def _verdict(compiled: Compiled, fixed: dict[str, float], modes: Sequence[LocalMode],
             wid: _Widening, specs: tuple[AxisSpec, ...], per_end: float) -> AutoGrid:
    """The `AutoGrid`: its modes in the parameters' units, and what limited it."""
    cont = [p for p in compiled.params if not p.discrete]
    lim = _limits(cont, wid, per_end)
    improper = lim.improper
    # a flat posterior has no separated modes to report
    mode_vals = _mode_values(compiled, fixed, modes[:1] if improper else modes)
    converged = wid.converged or bool(lim.notes)
    # heavy tails cut short of the edge-mass target (the rest reached it by widening)
    heavy = [n for n in wid.heavy if n not in improper and max(wid.edge.get(n, (0, 0))) > per_end]
    if heavy and not improper:
        converged = True
    if improper:
        msg = ("mass keeps piling at the edge of " + ", ".join(f"`{n}`" for n in improper) +
               " as the bounds widen: the posterior looks improper")
    elif not converged:
        msg = "the edge mass did not fall below the threshold within the widening limit"
    else:
        msg = "; ".join(lim.notes)
    if heavy:
        msg = "; ".join(([msg] if msg else []) + [
            f"`{n}` has heavy tails (density falling as |{n}|^-{wid.heavy[n]:.2g}): the grid "
            f"cuts them at {_end_text(specs, n)}, and every error estimate includes the mass "
            "beyond" for n in heavy])
    return AutoGrid(specs, tuple(mode_vals), wid.edge, converged and not improper, improper,
                    msg, wid.widenings)


def _end_text(specs: Sequence[AxisSpec], name: str) -> str:
    x = next(sp for sp in specs if sp.name == name)
    return f"{x.lo:.3g} and {x.hi:.3g}"


def _mode_values(compiled: Compiled, fixed: dict[str, float], modes: Sequence[LocalMode]
                 ) -> list[dict[str, float]]:
    target = _Target(compiled, fixed)
    out = []
    for m in modes:
        th = target.theta(m.u[None, :])
        out.append({p.name: float(t[0]) for p, t in zip(compiled.params, th)})
    return out


def _nested_count(n: int) -> int:
    """The next count of the form 4k + 1 (two nested coarse levels)."""
    return max(5, 4 * int(math.ceil((n - 1) / 4)) + 1)


def _fit_scale(p: Param, lo: float, hi: float, preferred: str) -> str:
    if preferred == "log" and lo > p.lo:
        return "log"
    if preferred == "logit" and lo > p.lo and hi < p.hi:
        return "logit"
    return "linear"


def _best_discrete(compiled: Compiled, disc: Sequence[Param], cont: Sequence[Param]
                   ) -> dict[str, float]:
    """The discrete values of highest density on a rough look over the continuous ones."""
    rng = np.random.default_rng(1)
    vals = [np.asarray(p.values) for p in disc]
    total = math.prod(len(v) for v in vals)
    if total <= 2000:
        grids = np.meshgrid(*vals, indexing="ij")
        combos = np.column_stack([g.ravel() for g in grids])
    else:
        combos = np.column_stack([rng.choice(v, size=2000) for v in vals])
    best, best_lp = combos[0], -np.inf
    U = rng.normal(0, 2, size=(64, len(cont))) if cont else np.zeros((1, 0))
    U[0] = 0.0
    for row in combos:
        fixed = {p.name: float(v) for p, v in zip(disc, row)}
        t = _Target(compiled, fixed)
        lp = float(np.max(t(U))) if cont else float(
            evaluate_block(compiled, [np.array([fixed[p.name]]) for p in compiled.params])[0])
        if lp > best_lp:
            best, best_lp = row, lp
    return {p.name: float(v) for p, v in zip(disc, best)}


def build_grid(params: Sequence[Param], specs: Sequence[AxisSpec], *, rule: str = "trapezoid"
               ) -> Grid:
    """The grid of `specs` (one per parameter, in the model's order)."""
    by = {s.name: s for s in specs}
    counts = []
    for p in params:
        s = by.get(p.name)
        if s is None:
            raise GridError(f"no grid axis for `{p.name}`; use `grid {p.name} LO HI` or `grid auto`")
        counts.append(axis_count(p, s))
    # refuse a grid that would not fit before its axes are allocated
    from .plan import check_memory
    check_memory(counts)
    axes = [make_axis(p, by[p.name].lo, by[p.name].hi, by[p.name].n,
                      rule="trapezoid" if p.discrete else rule, scale=by[p.name].scale)
            for p in params]
    return Grid(tuple(axes))


def axis_count(p: Param, spec: AxisSpec) -> int:
    """The number of nodes the axis of `spec` will have (without building it)."""
    if p.discrete:
        return max(1, sum(1 for v in p.values if spec.lo - 1e-12 <= v <= spec.hi + 1e-12))
    n = spec.n or p.points or DEFAULT_POINTS
    return int(n) if n == n and 1 <= n <= MAX_AXIS_POINTS else 1


# ---------------------------------------------------------------------------
# refinement

@dataclass(frozen=True)
class RefineStep:
    """One row of the refinement table.

    Attributes
    ----------
    step : int
        0 for the posterior refinement started from.
    points : int
    evaluated : int
        Points whose density was evaluated (the rest were reused).
    seconds : float
    values : dict of str to float
        ``log evidence``, ``mean NAME``, ``sd NAME``, ``lo95 NAME``, ``hi95 NAME``.
    changes : dict of str to float
        Relative change of each value from the step before (empty at step 0).
    largest : float or None
        The largest of `changes`.
    moved : str
        Which value changed most.
    """

    step: int
    points: int
    evaluated: int
    seconds: float
    values: dict[str, float]
    changes: dict[str, float]
    largest: float | None
    moved: str


@dataclass(frozen=True)
class RefineResult:
    """Steps taken, the final posterior and why refinement stopped."""

    steps: tuple[RefineStep, ...]
    posterior: Posterior
    converged: bool
    message: str


def tracked(post: Posterior) -> dict[str, float]:
    """The values whose movement refinement reports."""
    out: dict[str, float] = {}
    if post.log_evidence is not None:
        out["log evidence"] = post.log_evidence.value
    else:
        out["log mass"] = post.log_mass[0]
    for name in post.names:
        m = post.marginals[name]
        out[f"mean {name}"] = m.mean
        out[f"sd {name}"] = m.sd
        try:
            lo, hi = m.central(0.95)
        except (ComputeError, ValueError):
            lo = hi = math.nan
        out[f"lo95 {name}"] = lo
        out[f"hi95 {name}"] = hi
    return out


def estimated_errors(post: Posterior) -> dict[str, float] | None:
    """The nested error estimate of every value `tracked` reports, relative as
    `changes` measures moves; None where one has no estimate (no nested level)."""
    out: dict[str, float] = {}
    if post.log_evidence is not None:
        if post.log_evidence.error is None:
            return None
        out["log evidence"] = float(post.log_evidence.error)
    for name in post.names:
        m = post.marginals[name]
        try:
            ests = {f"mean {name}": post.param_mean(name), f"sd {name}": post.param_sd(name)}
            iv = post.interval(name, 0.95)
            ests[f"lo95 {name}"], ests[f"hi95 {name}"] = iv.lo, iv.hi
        except (ComputeError, ValueError):
            return None
        for k, e in ests.items():
            if e.error is None or not math.isfinite(e.error):
                return None
            out[k] = float(e.error) / max(abs(e.value), m.sd, 1e-300)
    return out


def largest_error(post: Posterior) -> tuple[str, float] | None:
    """The value with the largest estimated error, and that error (see
    `estimated_errors`)."""
    errs = estimated_errors(post)
    if not errs:
        return None
    k = max(errs, key=errs.get)
    return k, errs[k]


def changes(old: dict[str, float], new: dict[str, float], post: Posterior) -> dict[str, float]:
    """Relative changes: log evidence by its absolute change (a relative change of the
    evidence); means, sds and interval ends relative to the larger of the value's
    size and the parameter's sd, so that a value near 0 is judged by the spread."""
    return relative_changes(old, new, lambda name: post.marginals[name].sd
                            if name in post.marginals else 0.0)


def relative_changes(old: dict[str, float], new: dict[str, float],
                     sd_of: Callable[[str], float]) -> dict[str, float]:
    """`changes` with the parameter's sd read by `sd_of(name)` (any posterior kind)."""
    out = {}
    for k, v in new.items():
        if k not in old or not (math.isfinite(v) and math.isfinite(old[k])):
            continue
        d = abs(v - old[k])
        if k.startswith("log "):
            out[k] = d
            continue
        out[k] = d / max(abs(v), sd_of(k.split(" ", 1)[1]), 1e-300)
    return out


def refined_grid(grid: Grid, axis: str | None = None) -> Grid:
    """The grid with doubled resolution on one axis (or every continuous axis),
    so that the old nodes are a subset of the new (the midpoint rule triples)."""
    axes = []
    for a in grid.axes:
        if a.discrete or (axis is not None and a.name != axis):
            axes.append(a)
            continue
        if a.rule == "midpoint":
            n = 3 * a.n
        elif a.rule == "gauss":
            n = 2 * a.n
        else:
            n = 2 * a.n - 1
        axes.append(make_axis(a.param(), a.lo, a.hi, n, rule=a.rule, scale=a.scale))
    return Grid(tuple(axes))


def refine(compiled: Compiled, post: Posterior, *, axis: str | None = None,
           until: float | None = None, budget_seconds: float = 600.0,
           max_steps: int = 12, progress=None, memory_limit: int | None = None
           ) -> RefineResult:
    """Refine `post` step by step; one step without `until`.

    Each step doubles the resolution (of `axis`, or of every continuous axis),
    reusing the density at the nodes the grids share, and records how the log
    evidence, means, sds and 95% interval ends moved. With `until`, steps go on
    until every change is below `until` (relative, see `changes`), or the next
    step would break the time budget or memory, or `max_steps` is reached.
    """
    from . import plan
    if axis is not None:
        a = post.grid.axis(axis)
        if a.discrete:
            raise GridError(f"`{axis}` is discrete: it is summed exactly and needs no refining")
    if all(a.discrete for a in post.grid.axes):
        raise GridError("every parameter is discrete: the sums are exact; nothing to refine")
    t0 = time.perf_counter()
    prev_vals = tracked(post)
    steps = [RefineStep(0, post.grid.size, post.evaluated or post.grid.size, post.seconds,
                        prev_vals, {}, None, "")]
    current = post
    converged = False
    message = ""
    limit = 1 if until is None else max_steps
    for k in range(1, limit + 1):
        if until is not None:
            worst = largest_error(current)
            if worst is not None and worst[1] < until:
                converged = True
                message = (f"already within {until:g}: every value's estimated error is below "
                           f"it (the largest, `{worst[0]}`, {worst[1]:.2g}); no finer pass")
                break
        grid = refined_grid(current.grid, axis)
        cost = plan.estimate(compiled, grid)
        share = 1.0 if current.logp is None else 1.0 - current.grid.size / grid.size
        predicted = cost.seconds * share
        left = budget_seconds - (time.perf_counter() - t0)
        mem_cap = memory_limit or int(0.8 * cost.machine_memory)
        if cost.memory > mem_cap:
            message = (f"stopped: the next step ({plan.format_count(grid.size)} points) needs "
                       f"about {cost.memory / 2**30:.1f} GiB of memory")
            break
        if predicted > left:
            spent = "" if k == 1 else f" ({budget_seconds - left:.0f} s spent)"
            message = (f"stopped: the next step ({plan.format_count(grid.size)} points) would "
                       f"take about {plan.format_duration(predicted)}, beyond what is left of "
                       f"the budget of {budget_seconds:.0f} s{spent}; not run")
            break
        # keep the density while another step may reuse it
        store = True if until is not None and 8 * grid.size < mem_cap // 4 else None
        new = compute(compiled, grid, reuse=current, progress=progress, store=store)
        vals = tracked(new)
        ch = changes(prev_vals, vals, new)
        big = max(ch.values()) if ch else 0.0
        moved = max(ch, key=ch.get) if ch else ""
        steps.append(RefineStep(k, grid.size, new.evaluated, new.seconds, vals, ch, big, moved))
        current, prev_vals = new, vals
        if until is not None and big < until:
            converged = True
            message = f"converged: every value moved by less than {until:g} at step {k}"
            break
    else:
        if until is not None:
            message = (f"not converged after {max_steps} steps: `{steps[-1].moved}` still "
                       f"moved by {steps[-1].largest:.2g}")
    if until is None and not message:
        message = "one step"
    return RefineResult(tuple(steps), current, converged, message)


def zoom_specs(post: Posterior, mass: float = 1 - 1e-9, *, margin: float = 0.0
               ) -> tuple[AxisSpec, ...]:
    """Axes shrunk to the central region holding `mass` of each marginal, with the
    same number of points. The region read off the current grid is widened by
    `margin` of its node spacings on each side: a coarse grid places its quantiles
    only to about a cell."""
    if not 0 < mass < 1:
        raise GridError(f"zoom mass must be between 0 and 1; got {mass:g}")
    tail = (1 - mass) / 2
    out = []
    for a in post.grid.axes:
        if a.discrete:
            out.append(AxisSpec(a.name, a.lo, a.hi, None, None))
            continue
        m = post.marginals[a.name]
        lo = m.quantile(tail)
        hi = m.quantile(1 - tail)
        if not hi > lo:
            lo, hi = a.lo, a.hi
        du = abs(a.u[1] - a.u[0]) if a.n > 1 else 0.0
        ulo, uhi = a.to_u(np.array([lo, hi]))
        lo, hi = a.to_value(np.array([ulo - margin * du, uhi + margin * du]))
        lo, hi = max(float(lo), a.lo), min(float(hi), a.hi)
        out.append(AxisSpec(a.name, lo, hi, a.n, _zoom_scale(a, lo, hi)))
    return tuple(out)


def _zoom_scale(a: Axis, lo: float, hi: float) -> str:
    scale = a.scale
    if scale in ("log", "logit") and not (lo > a.dom_lo and (scale == "log" or hi < a.dom_hi)):
        scale = "linear"
    return scale


def widen_specs(post: Posterior, specs: tuple[AxisSpec, ...], *, edge_mass: float
                ) -> tuple[tuple[AxisSpec, ...], list[str]]:
    """Specs widened by half their span (on each axis's scale) at every end of `post`'s
    grid that holds more than `edge_mass` and is not the domain's edge; and which ends."""
    out, moved = [], []
    for spec, a in zip(specs, post.grid.axes):
        if a.discrete:
            out.append(spec)
            continue
        m_lo, m_hi = post.diagnostics.edge_mass.get(a.name, (0.0, 0.0))
        at_lo = a.scale == "linear" and a.lo <= a.dom_lo
        at_hi = a.scale == "linear" and a.hi >= a.dom_hi
        ua, ub = float(a.u[0]), float(a.u[-1])
        span = ub - ua
        lo, hi = spec.lo, spec.hi
        if m_lo > edge_mass and not at_lo:
            lo = float(a.to_value(np.array([ua - 0.5 * span]))[0])
            moved.append(f"lower end of `{a.name}`")
        if m_hi > edge_mass and not at_hi:
            hi = float(a.to_value(np.array([ub + 0.5 * span]))[0])
            moved.append(f"upper end of `{a.name}`")
        lo, hi = max(lo, a.dom_lo), min(hi, a.dom_hi)
        out.append(AxisSpec(a.name, lo, hi, spec.n, _zoom_scale(a, lo, hi)))
    return tuple(out), moved
