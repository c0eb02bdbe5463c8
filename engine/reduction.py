"""The posterior pass over any weighted node set.

Given a `NodeSet` (engine/nodes.py) and the log-density in ``z`` at its nodes,
`reduce_nodes` gives, for every level of the rule, the log of the integral (the
log evidence when the density is prior x likelihood) and the posterior mean and
covariance of the frame's coordinates ``u`` and of any derived values (the
parameters in their own units, say); then, from successive levels, estimates of
each with its error:

- rules whose levels converge geometrically (the trapezoid in z) are read by
  `posterior.combine`, as the tensor grid's nested levels are;
- polynomial rules (hermite K vs K + 2, sparse L vs L - 1) take the difference
  with the next level as the error, never extrapolated;
- the mass a rule's exploration left outside (`NodeSet.log_outside`) is added to
  every error, as the tensor grid adds the mass beyond its edges;
- rounding in signed sums (cancellation between positive and negative weights)
  is added too.

A level whose signed sum is not positive, or whose weights give a negative
variance, is flagged and not used; the answer comes from the finest usable level
and says so.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np

from .errors import ComputeError, GridError
from .frame import Frame
from .nodes import NodeSet, signed_sum, signed_sums
from .posterior import Estimate, combine

#: Relative rounding of one double-precision operation.
EPS = 2.0 ** -52


@dataclass(frozen=True)
class LevelSums:
    """What one level of a rule gives.

    Attributes
    ----------
    label : str
    log_integral : float
        ``log`` of the level's integral of ``f`` (nan where not positive).
    mean : ndarray, shape (k,)
        Posterior means of the coordinates and values (nan where unusable).
    cov : ndarray, shape (k, k)
    integral_ok : bool
        Whether the signed sum was positive.
    moments_ok : bool
        Whether every variance was positive as well.
    cancellation : float
        ``sum |terms| / sum terms`` of the integral (1 without negative weights).
    problem : str
        Why the level is not usable; empty when it is.
    structural : bool
        Whether the problem lies in the rule itself (a one-node level has no
        variance), not in how the posterior met it.
    """

    label: str
    log_integral: float
    mean: np.ndarray = field(repr=False)
    cov: np.ndarray = field(repr=False)
    integral_ok: bool
    moments_ok: bool
    cancellation: float
    problem: str = ""
    structural: bool = False


@dataclass(frozen=True)
class Moments:
    """Posterior means, sds and covariance of named quantities.

    Attributes
    ----------
    names : tuple of str
    mean, sd : tuple of Estimate
        One per name, with the error from the levels.
    cov : ndarray, shape (k, k)
        Of the level the answer comes from.
    """

    names: tuple[str, ...]
    mean: tuple[Estimate, ...]
    sd: tuple[Estimate, ...]
    cov: np.ndarray = field(repr=False)

    def of(self, name: str) -> tuple[Estimate, Estimate]:
        """Mean and sd of `name`."""
        if name not in self.names:
            raise GridError(f"no quantity `{name}`; known: {', '.join(self.names)}")
        i = self.names.index(name)
        return self.mean[i], self.sd[i]


@dataclass(frozen=True)
class RuleReduction:
    """A rule's answers, reduced from its node set.

    Attributes
    ----------
    rule : str
    settings : tuple of (str, float)
    points : int
        Nodes of the rule (log-density evaluations).
    levels : tuple of LevelSums
        Finest first.
    answer_level : int
        The level the answers come from (0 unless finer ones were unusable).
    log_integral : Estimate
        ``log`` of the integral of ``f``: the log evidence when ``f`` is prior x
        likelihood with their constants. Its error is absolute, in log units.
    u : Moments
        Of the frame's coordinates.
    values : Moments or None
        Of the derived values, when a mapping was given.
    outside : float
        Estimated share of the integral outside the nodes (0 for rules that
        cover all of space; inf where it could not be bounded).
    problems : tuple of str
        One line each: unusable levels, unbounded outside mass.
    """

    rule: str
    settings: tuple[tuple[str, float], ...]
    points: int
    levels: tuple[LevelSums, ...]
    answer_level: int
    log_integral: Estimate
    u: Moments
    values: Moments | None
    outside: float
    problems: tuple[str, ...]

    def converged(self, tol: float) -> bool:
        """Whether the log integral's error is known and below `tol` (absolute, in
        log units: a relative error of the integral)."""
        e = self.log_integral.error
        return e is not None and math.isfinite(e) and e <= tol and not self.problems


def reduce_nodes(nodes: NodeSet, logf: np.ndarray, *, frame: Frame | None = None,
                 values: Callable[[np.ndarray], np.ndarray] | None = None,
                 value_names: Sequence[str] | None = None) -> RuleReduction:
    """Reduce the log-density at a node set's nodes into a `RuleReduction`.

    Parameters
    ----------
    nodes : NodeSet
    logf : ndarray, shape (n,)
        The log-density in ``z`` at ``nodes.z`` (``-inf`` where it is zero).
    frame : Frame, keyword-only
        Maps ``z`` to the coordinates ``u`` whose moments are reported; without
        one, the moments are of ``z``.
    values : callable, keyword-only
        ``u`` of shape (n, d) -> derived values, shape (n, k) (the parameters in
        their own units, say); their moments are reported too.
    value_names : sequence of str, keyword-only
        Names of the values (default ``v0, v1, ...``).

    Returns
    -------
    RuleReduction

    Raises
    ------
    ComputeError
        The log-density is NaN or +inf at a node, or zero at every node.
    GridError
        Shapes that do not match.
    """
    logf = _checked_logf(nodes, logf)
    u = nodes.z if frame is None else frame.to_u(nodes.z)
    u_names = tuple(frame.names) if frame is not None else tuple(f"z{i}" for i in range(nodes.dims))
    X = u
    v_names: tuple[str, ...] = ()
    if values is not None:
        with np.errstate(all="ignore"):
            V = np.asarray(values(u), float).reshape(u.shape[0], -1)
        v_names = (tuple(value_names) if value_names is not None
                   else tuple(f"v{i}" for i in range(V.shape[1])))
        if len(v_names) != V.shape[1]:
            raise GridError(f"{len(v_names)} value names for {V.shape[1]} values")
        live = np.isfinite(logf)
        bad = live[:, None] & ~np.isfinite(V)
        if bad.any():
            i, j = np.unravel_index(int(np.argmax(bad)), bad.shape)
            raise ComputeError(f"the value `{v_names[j]}` is {V[i, j]} at a node where the "
                               f"posterior is not zero (u = "
                               f"{', '.join(f'{x:.6g}' for x in u[i])})")
        V = np.where(live[:, None], V, 0.0)
        X = np.column_stack([u, V])
    levels = tuple(_level(nodes, lev, logf, X) for lev in range(nodes.levels))
    usable = [i for i, s in enumerate(levels) if s.integral_ok]
    if not usable:
        raise ComputeError(f"rule `{nodes.rule}`: no level gives a positive integral "
                           f"({levels[0].problem}); the rule does not fit this posterior")
    problems = [f"rule `{nodes.rule}` {s.label}: {s.problem}" for s in levels
                if s.problem and not s.structural]
    if nodes.note:
        problems.append(f"rule `{nodes.rule}`: {nodes.note}")
    a = usable[0]
    if a != 0:
        problems.append(f"rule `{nodes.rule}`: the answer comes from {levels[a].label}, not the "
                        f"finest level")
    outside = _outside_share(nodes, levels[a].log_integral)
    if outside > 0.1:
        problems.append(f"rule `{nodes.rule}`: about {min(outside, 1):.2g} of the mass lies "
                        "outside the nodes" if math.isfinite(outside) else
                        f"rule `{nodes.rule}`: the mass outside the nodes could not be bounded "
                        "(the density does not fall off where the exploration stopped)")
    log_int = _estimate(nodes, [levels[i].log_integral for i in usable])
    rounding = levels[a].cancellation * EPS * math.sqrt(max(nodes.level_points(a), 1)) * 4
    log_int = _add_error(log_int, rounding + (math.log1p(outside) if math.isfinite(outside)
                                              else math.inf))
    mom_levels = [i for i in usable if levels[i].moments_ok]
    if not mom_levels:
        problems.append(f"rule `{nodes.rule}`: no level gives means and variances "
                        f"({levels[a].problem})")
    spread = _spread(X, logf, levels[a].mean)
    d = u.shape[1]
    u_mom = _moments(nodes, levels, mom_levels, range(d), u_names, outside, spread)
    v_mom = (_moments(nodes, levels, mom_levels, range(d, X.shape[1]), v_names, outside, spread)
             if values is not None else None)
    return RuleReduction(nodes.rule, nodes.settings, nodes.points, levels, a, log_int, u_mom,
                         v_mom, outside, tuple(problems))


def _checked_logf(nodes: NodeSet, logf) -> np.ndarray:
    logf = np.asarray(logf, float).reshape(-1)
    if logf.size != nodes.points:
        raise GridError(f"{logf.size} log-density values for the {nodes.points} nodes of rule "
                        f"`{nodes.rule}`")
    bad = np.isnan(logf) | np.isposinf(logf)
    if bad.any():
        i = int(np.argmax(bad))
        where = ", ".join(f"{v:+.3g}" for v in nodes.z[i])
        what = "NaN" if np.isnan(logf[i]) else "+inf"
        raise ComputeError(f"the log-density is {what} at {int(bad.sum()):,} of {nodes.points:,} "
                           f"nodes of rule `{nodes.rule}`, first at z = ({where})")
    if not np.isfinite(logf).any():
        raise ComputeError(f"the posterior is zero at every node of rule `{nodes.rule}`")
    return logf


def _level(nodes: NodeSet, lev: int, logf: np.ndarray, X: np.ndarray) -> LevelSums:
    t = nodes.log_weights[lev] + logf
    s = nodes.signs[lev]
    total = signed_sum(t, s)
    k = X.shape[1]
    nan_mean, nan_cov = np.full(k, np.nan), np.full((k, k), np.nan)
    label = nodes.labels[lev]
    if not total.positive:
        return LevelSums(label, math.nan, nan_mean, nan_cov, False, False, total.cancellation,
                         "its signed sum of weights x density is not positive")
    used = (s != 0) & np.isfinite(t)
    p = s[used] * np.exp(t[used] - total.log_abs)      # signed, sums to 1
    Xu = X[used]
    mean = p @ Xu
    C = Xu - mean
    cov = (C * p[:, None]).T @ C
    cov = (cov + cov.T) / 2
    var = np.diag(cov)
    if int(used.sum()) < 2:
        return LevelSums(label, total.log_abs, mean, cov, True, False, total.cancellation,
                         "one node: no variance", structural=True)
    if not np.all(var > 0):
        i = int(np.argmin(var))
        return LevelSums(label, total.log_abs, mean, cov, True, False, total.cancellation,
                         f"its weights give a variance of {var[i]:.3g} for quantity {i}")
    return LevelSums(label, total.log_abs, mean, cov, True, True, total.cancellation)


def _estimate(nodes: NodeSet, vals: list[float]) -> Estimate:
    """The answer of the first value with its error from the next ones."""
    v0 = vals[0]
    v1 = vals[1] if len(vals) > 1 else None
    v2 = vals[2] if len(vals) > 2 else None
    if nodes.convergence == "geometric":
        return combine(v0, v1, v2, order=2)
    if v1 is None or not math.isfinite(v1):
        return Estimate(v0, None, "none")
    floor = 4 * EPS * max(abs(v0), 1e-300)
    d1 = abs(v0 - v1)
    if v2 is not None and math.isfinite(v2):
        # two levels may agree by chance while both are off (seen on regressions in
        # 8 dimensions, where levels 3 and 4 of a sparse rule agreed to a fifth of
        # their error): the geometric mean with the previous difference guards this
        d1 = max(d1, math.sqrt(d1 * abs(v1 - v2)))
    return Estimate(v0, max(d1, floor), "levels")


def _add_error(e: Estimate, extra: float) -> Estimate:
    if e.error is None or extra <= 0:
        return e
    return Estimate(e.value, e.error + extra, e.method)


def _outside_share(nodes: NodeSet, log_integral: float) -> float:
    if nodes.log_outside == -math.inf:
        return 0.0
    if not math.isfinite(nodes.log_outside):
        return math.inf
    return math.exp(nodes.log_outside - log_integral)


def _spread(X: np.ndarray, logf: np.ndarray, mean: np.ndarray) -> np.ndarray:
    """Largest distance of each quantity from its mean over the nodes with mass,
    shape (k,): what the mass outside could move a mean by, per unit of mass."""
    live = np.isfinite(logf)
    return np.max(np.abs(X[live] - mean), axis=0) if live.any() else np.zeros(X.shape[1])


def _moments(nodes: NodeSet, levels: tuple[LevelSums, ...], usable: list[int], cols,
             names: tuple[str, ...], outside: float, spread: np.ndarray) -> Moments:
    cols = list(cols)
    if not usable:
        nan = tuple(Estimate(math.nan, None, "none") for _ in cols)
        return Moments(names, nan, nan, np.full((len(cols), len(cols)), np.nan))
    means, sds = [], []
    for c in cols:
        m = _estimate(nodes, [float(levels[i].mean[c]) for i in usable])
        s = _estimate(nodes, [math.sqrt(levels[i].cov[c, c]) for i in usable])
        sd0 = s.value
        # mass outside, at twice the farthest node's distance: its pull on the moments
        reach = 2 * spread[c]
        means.append(_add_error(m, outside * reach))
        sds.append(_add_error(s, outside * reach ** 2 / (2 * sd0) if sd0 > 0 else math.inf))
    a = usable[0]
    return Moments(names, tuple(means), tuple(sds), levels[a].cov[np.ix_(cols, cols)].copy())


# ---------------------------------------------------------------------------
# 1-D marginals in the conditional frame

@dataclass(frozen=True)
class MarginalLine:
    """The marginal density of one coordinate on a line of values.

    Attributes
    ----------
    index : int
        The coordinate.
    t : ndarray, shape (m,)
        Values of the coordinate (on its unconstrained scale).
    log_density : ndarray, shape (levels, m)
        ``log`` of the marginal density (unnormalised: the joint's integral over
        the others) at each value, per level of the rule over the others; nan
        where a level's signed sum is not positive.
    labels : tuple of str
    evaluations : int
        Log-density evaluations spent (m times the rule's points).
    """

    index: int
    t: np.ndarray
    log_density: np.ndarray
    labels: tuple[str, ...]
    evaluations: int


def marginal_line(frame: Frame, index: int, t: np.ndarray, nodes: NodeSet,
                  log_u: Callable[[np.ndarray], np.ndarray]) -> MarginalLine:
    """The marginal of coordinate `index` at the values `t`, integrating the other
    coordinates with `nodes` in the conditional frame (`Frame.conditional`).

    Parameters
    ----------
    frame : Frame
        In at least 2 dimensions.
    index : int
    t : ndarray, shape (m,)
    nodes : NodeSet
        A rule in ``d - 1`` dimensions.
    log_u : callable
        ``u`` of shape (n, d) -> log-density in ``u``, shape (n,).

    Returns
    -------
    MarginalLine

    Raises
    ------
    GridError
        A 1-D frame, or a rule of the wrong dimension.
    ComputeError
        The log-density is NaN or +inf at a node.
    """
    if frame.dims < 2:
        raise GridError("a 1-D frame needs no conditional rule: its density is its marginal")
    if nodes.dims != frame.dims - 1:
        raise GridError(f"the rule over the other coordinates has {nodes.dims} dimensions; it "
                        f"needs {frame.dims - 1}")
    cf = frame.conditional(index)
    t = np.asarray(t, float).reshape(-1)
    U = cf.to_u(t, nodes.z)                                  # (m, n, d)
    with np.errstate(all="ignore"):
        lf = np.asarray(log_u(U.reshape(-1, frame.dims)), float).reshape(t.size, nodes.points)
    bad = np.isnan(lf) | np.isposinf(lf)
    if bad.any():
        i, j = np.unravel_index(int(np.argmax(bad)), bad.shape)
        where = ", ".join(f"{v:.6g}" for v in U[i, j])
        raise ComputeError(f"the log-density is {'NaN' if np.isnan(lf[i, j]) else '+inf'} at "
                           f"u = ({where}), on the marginal line of `{frame.names[cf.index]}`")
    out = np.full((nodes.levels, t.size), np.nan)
    for lev in range(nodes.levels):
        log_abs, sign, _, _ = signed_sums(lf + nodes.log_weights[lev][None, :], nodes.signs[lev])
        out[lev] = np.where(sign > 0, log_abs + cf.log_det, np.nan)
    return MarginalLine(cf.index, t, out, nodes.labels, int(lf.size))
