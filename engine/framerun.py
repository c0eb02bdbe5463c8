"""A compiled model on a rule in the standardised frame: the node posterior.

The path, in phases: the log-density in the unconstrained scales (the scales'
Jacobians included, engine/refine.py's target) for each combination of the
discrete parameters' values (summed exactly, outside the rule); the best mode
there and the curvature (symbolic where the model allows, finite differences
otherwise); the frame (engine/frame.py) and its check along the axes; the rule's
node set (engine/sparse.py, engine/rotated.py), evaluated once per node through a
cache so that nested levels share their nodes; the reduction (engine/reduction.py)
into the evidence and the parameters' means, sds and covariance, each with its
error from successive levels and the mass outside; finally the combination over
the discrete values.

A rule with no setting is raised from a small one until the estimated errors meet
the targets (`Targets`) or the next step would pass the evaluation budget. The
`sparse` rule is re-centred on the posterior mean and covariance of a first pass
(`frame.moment_frame`), which matches a skewed posterior better than the mode's
curvature does.
"""

from __future__ import annotations

import itertools
import math
import time
import warnings
from dataclasses import dataclass, field

import numpy as np
from scipy import optimize

from . import refine
from .errors import ComputeError, GridError
from .frame import Frame, FrameCheck, check_frame, make_frame, moment_frame
from .model import Compiled
from .nodes import NodeSet
from .posterior import Estimate, prior_normaliser
from .reduction import RuleReduction, reduce_nodes
from .rotated import check_rotated, rotated
from .sparse import (check_hermite, check_sparse, hermite, hermite_points, sparse,
                     sparse_points)

#: The rules in the frame, with the name of their setting in the command language.
FRAME_RULES = {"hermite": "K", "sparse": "level", "rotated": "step"}
#: Combinations of discrete values a frame rule sums over (one frame each).
MAX_COMBINATIONS = 64
#: The sparse rule's first pass (for re-centring) and its first level when raised.
SPARSE_START = 3


@dataclass(frozen=True)
class RuleChoice:
    """The rule `compute` uses: ``grid`` (the tensor grid with its 1-D rule) or a
    rule in the frame with its setting (None: raised until the targets are met).

    Attributes
    ----------
    name : str
        ``grid``, ``hermite``, ``sparse`` or ``rotated``.
    setting : float or None
        K (hermite), level L (sparse), step H (rotated).
    """

    name: str
    setting: float | None = None

    @property
    def in_frame(self) -> bool:
        return self.name in FRAME_RULES

    def describe(self) -> str:
        if not self.in_frame or self.setting is None:
            return self.name
        value = f"{self.setting:g}" if self.name == "rotated" else f"{int(self.setting)}"
        word = FRAME_RULES[self.name]
        return f"{self.name} {value}" if word == "K" else f"{self.name} {word} {value}"


def rule_choice(name: str, setting: float | None = None) -> RuleChoice:
    """A checked `RuleChoice`.

    Raises
    ------
    GridError
        An unknown rule, or a setting out of its range.
    """
    if name == "grid":
        if setting is not None:
            raise GridError("`rule grid` takes no setting: the tensor grid is sized by `grid`")
        return RuleChoice("grid")
    if name not in FRAME_RULES:
        raise GridError(f"unknown rule `{name}`; known: grid, {', '.join(FRAME_RULES)}")
    if setting is None:
        return RuleChoice(name)
    if name == "hermite":
        check_hermite(1, setting)
        if setting > 40:
            raise GridError(f"rule `hermite` takes K from 1 to 40 points an axis; got {setting:g}")
    elif name == "sparse":
        check_sparse(1, setting)
        if setting > 8:
            raise GridError(f"rule `sparse` takes a level from 0 to 8; got {setting:g}")
    else:
        check_rotated(1, setting, 1e-8)
    return RuleChoice(name, float(setting))


@dataclass(frozen=True)
class Targets:
    """What a rule with no setting is raised to meet.

    Attributes
    ----------
    evidence_rel : float
        Error of the log evidence relative to itself.
    sd_share : float
        Errors of the means and sds as a share of the posterior sd.
    budget : int
        Log-density evaluations allowed (mode search included).
    """

    evidence_rel: float = 1e-4
    sd_share: float = 1e-3
    budget: int = 100_000


@dataclass(frozen=True)
class FrameFit:
    """One frame's answer: for one combination of the discrete values.

    Attributes
    ----------
    fixed : dict of str to float
        The discrete parameters' values (empty without any).
    frame : Frame
        The frame the final rule ran in.
    check : FrameCheck
        The frame at the mode measured along its axes.
    modes : int
        Separated local modes found (the frame is at the best one).
    health : str
        What was wrong with the curvature at the mode (empty when it was fine).
    mode_frame : Frame
        The frame at the mode (before any re-centring).
    reduction : RuleReduction
    label : str
        The rule and its final setting, e.g. ``sparse level 5 against 4``.
    setting : float
        The final setting (K, L or H).
    evaluations : int
        Distinct log-density evaluations of the rule.
    mode_evaluations : int
        Evaluations of the mode search, curvature and frame check.
    met : bool
        Whether the estimated errors met the targets.
    stopped : str
        Why a rule raised by itself stopped before meeting them (empty otherwise).
    """

    fixed: dict[str, float]
    frame: Frame
    check: FrameCheck
    modes: int
    health: str
    mode_frame: Frame
    reduction: RuleReduction
    label: str
    setting: float
    evaluations: int
    mode_evaluations: int
    met: bool
    stopped: str = ""
    nodes: NodeSet | None = field(default=None, repr=False)      # the final rule's nodes
    logf: np.ndarray | None = field(default=None, repr=False)    # the log-density at them


@dataclass(frozen=True)
class JointMode:
    """The joint mode on a rule in the frame."""

    values: dict[str, float]
    converged: bool
    message: str = ""


@dataclass(frozen=True)
class NodePosterior:
    """The posterior on a rule in the frame: evidence and moments with errors.

    Attributes
    ----------
    compiled : Compiled
    choice : RuleChoice
        The rule as set.
    label : str
        The rule as run, e.g. ``sparse level 5 against 4``.
    log_mass : Estimate
        ``log`` of the integral of prior x likelihood.
    log_evidence : Estimate or None
        None where the prior is improper.
    names : tuple of str
        Every parameter, in the model's order.
    means, sds : dict of str to Estimate
    cov : ndarray, shape (p, p)
        Posterior covariance of the parameters in their own units.
    fits : tuple of FrameFit
        One per combination of discrete values.
    points : int
        Log-density evaluations of the rules.
    mode_evaluations : int
    seconds : float
    met : bool
        Whether every fit met the targets.
    problems : tuple of str
        What the reductions and frames flagged, one line each.
    """

    compiled: Compiled
    choice: RuleChoice
    label: str
    log_mass: Estimate
    log_evidence: Estimate | None
    names: tuple[str, ...]
    means: dict[str, Estimate]
    sds: dict[str, Estimate]
    cov: np.ndarray = field(repr=False)
    fits: tuple[FrameFit, ...] = ()
    points: int = 0
    mode_evaluations: int = 0
    seconds: float = 0.0
    met: bool = False
    problems: tuple[str, ...] = ()
    marginals: dict | None = field(default=None, repr=False)   # name -> NodeMarginal

    @property
    def evaluated(self) -> int:
        return self.points + self.mode_evaluations

    def param_mean(self, name: str) -> Estimate:
        return self.means[self._name(name)]

    def param_sd(self, name: str) -> Estimate:
        return self.sds[self._name(name)]

    def marginal(self, name: str):
        """The `Marginal` of `name` on its line (after `framemarg.marginals`)."""
        if self.marginals is None or name not in self.marginals:
            raise ComputeError(f"the marginal of `{name}` has not been computed on this rule")
        return self.marginals[self._name(name)].fine

    def joint_mode(self) -> "JointMode":
        """The joint mode in the parameters' own units: from the highest frame's mode
        (found in the unconstrained scales, where the Jacobians shift it), climbed on
        the density without them."""
        best = max(self.fits, key=lambda f: f.check.log_centre - f.mode_frame.log_det)
        target = refine._Target(self.compiled, best.fixed)
        u0 = best.mode_frame.mode

        def minus(u):
            v = target(u[None, :])[0] - sum(
                float(sc.logjac(np.array([u[k]]), p.lo, p.hi)[0])
                for k, (p, sc) in enumerate(zip(target.cont, target.scales)))
            return -v if np.isfinite(v) else 1e300

        with np.errstate(all="ignore"), warnings.catch_warnings():
            warnings.simplefilter("ignore")
            r = optimize.minimize(minus, u0, method="BFGS", options={"gtol": 1e-9})
        u = r.x if r.fun <= minus(u0) and np.all(np.isfinite(r.x)) else u0
        theta = target.theta(u[None, :])
        values = {p.name: float(t[0]) for p, t in zip(self.compiled.params, theta)}
        return JointMode(values, bool(r.success), "" if r.success else
                         f"the climb to the mode in the parameters' units stopped: {r.message}")

    def _name(self, name: str) -> str:
        if name not in self.means:
            raise GridError(f"no parameter `{name}`")
        return name


# ---------------------------------------------------------------------------
# the run

def compute(compiled: Compiled, choice: RuleChoice, *, targets: Targets = Targets(),
            probe: "Probe | tuple[Probe, ...] | None" = None) -> NodePosterior:
    """The posterior of `compiled` on the frame rule `choice` (reusing the mode
    search of `probe`, when given, for the combination it was made for).

    Raises
    ------
    ComputeError
        No continuous parameter, too many discrete combinations, no mode, a
        rule that does not fit the posterior, or a density that is NaN.
    """
    t0 = time.perf_counter()
    combos = _combinations(compiled, choice)
    fits = []
    for k, fixed in enumerate(combos):
        share = Targets(targets.evidence_rel, targets.sd_share,
                        max((targets.budget - sum(f.evaluations + f.mode_evaluations
                                                  for f in fits)) // (len(combos) - k), 1))
        probes = (probe,) if isinstance(probe, Probe) else probe or ()
        known = next((pr for pr in probes if pr.fixed == fixed), None)
        fits.append(_fit(compiled, fixed, choice, share, known))
    return _combined(compiled, choice, tuple(fits), time.perf_counter() - t0)


def _combinations(compiled: Compiled, choice: RuleChoice) -> list[dict[str, float]]:
    disc = [p for p in compiled.params if p.discrete]
    if len(disc) == len(compiled.params):
        raise ComputeError(f"rule `{choice.name}` integrates continuous parameters and this model "
                           "has none: `rule grid` sums the discrete ones exactly")
    count = math.prod(len(p.values) for p in disc)
    if count > MAX_COMBINATIONS:
        raise ComputeError(f"rule `{choice.name}` builds one frame for each combination of the "
                           f"discrete values, and there are {count:,} (at most "
                           f"{MAX_COMBINATIONS}): use `rule grid`")
    return [dict(zip((p.name for p in disc), vals))
            for vals in itertools.product(*(p.values for p in disc))]


class _Counted(refine._Target):
    """The log-density in the unconstrained scales, counting its evaluations."""

    def __init__(self, compiled: Compiled, fixed: dict[str, float]):
        super().__init__(compiled, fixed)
        self.count = 0

    def __call__(self, U: np.ndarray) -> np.ndarray:
        U = np.atleast_2d(U)
        self.count += U.shape[0]
        return super().__call__(U)

    def values(self, U: np.ndarray) -> np.ndarray:
        """The continuous parameters in their own units, shape (n, d)."""
        theta = self.theta(U)
        return np.column_stack([t for p, t in zip(self.c.params, theta) if not p.discrete])


@dataclass(frozen=True)
class _Start:
    frame: Frame
    check: FrameCheck
    modes: int


def _start(target: _Counted) -> _Start:
    """The frame at the best mode, and its check along the axes."""
    with np.errstate(all="ignore"), warnings.catch_warnings():
        warnings.simplefilter("ignore")
        modes = _modes(target)
        u = modes[0].u
        H = refine._symbolic_hessian_u(target, u)
        if H is None:
            H = refine._hessian(target, u, np.clip(modes[0].sd * 1e-2, 1e-6, 1.0))
    names = tuple(p.name for p in target.cont)
    frame = make_frame(u, -H, names=names)
    return _Start(frame, check_frame(frame, frame.log_density(target)), len(modes))


def _modes(target: _Counted) -> list[refine.LocalMode]:
    """Local modes from several starts, best first (as `refine.find_modes`, on the
    counting target)."""
    return refine.modes_of(target, starts=8, seed=0)


@dataclass(frozen=True)
class Probe:
    """The frame at the best mode, measured before a rule is chosen.

    Attributes
    ----------
    frame : Frame
    check : FrameCheck
    modes : int
    fixed : dict of str to float
        The discrete values the probe used (the first combination).
    evaluations : int
    seconds_per_evaluation : float
        Measured on this machine, over a batch of points around the mode.
    """

    frame: Frame
    check: FrameCheck
    modes: int
    fixed: dict[str, float]
    evaluations: int
    seconds_per_evaluation: float


def probe(compiled: Compiled, choice: RuleChoice = RuleChoice("sparse")) -> Probe:
    """The mode, the frame and its check, for the first combination of the discrete
    values (what `compute` looks at to choose a rule, and `cost` to time one).

    Raises
    ------
    ComputeError
        As `compute`.
    """
    fixed = _combinations(compiled, choice)[0]
    target = _Counted(compiled, fixed)
    st = _start(target)
    spent = target.count
    return Probe(st.frame, st.check, st.modes, fixed, spent, _timed(target, st.frame))


def seconds_per_evaluation(compiled: Compiled) -> float:
    """The measured cost of one log-density evaluation in the unconstrained scales,
    at points spread around the origin (no mode search)."""
    disc = {p.name: p.values[0] for p in compiled.params if p.discrete}
    target = _Counted(compiled, disc)
    d = len(target.cont)
    frame = make_frame(np.zeros(d), np.eye(d), names=tuple(p.name for p in target.cont))
    return _timed(target, frame)


def _timed(target: _Counted, frame: Frame, count: int = 4096) -> float:
    """Seconds per log-density evaluation, from a batch of points around the mode
    (the best of two runs)."""
    z = np.random.default_rng(1).normal(size=(count, frame.dims))
    U = frame.to_u(z)
    best = math.inf
    for _ in range(2):
        t0 = time.perf_counter()
        target(U)
        best = min(best, time.perf_counter() - t0)
    return best / count


def probes_of(post: NodePosterior) -> tuple[Probe, ...]:
    """The mode searches of `post`'s frames, for a finer rule to reuse (counted as
    no new evaluations)."""
    return tuple(Probe(f.mode_frame, f.check, f.modes, f.fixed, 0, 0.0) for f in post.fits)


class _Cache:
    """Log-density values by node, so nested levels never evaluate a node twice."""

    def __init__(self, log_z):
        self.log_z = log_z
        self.known: dict[bytes, float] = {}
        self.evaluations = 0

    def __call__(self, z: np.ndarray) -> np.ndarray:
        z = np.ascontiguousarray(z, dtype=float)
        keys = [row.tobytes() for row in z]
        missing = [i for i, key in enumerate(keys) if key not in self.known]
        if missing:
            fresh = np.asarray(self.log_z(z[missing]), float)
            self.evaluations += len(missing)
            self.known.update(zip((keys[i] for i in missing), fresh.tolist()))
        return np.array([self.known[key] for key in keys])


@dataclass(frozen=True)
class _Pass:
    reduction: RuleReduction
    frame: Frame
    label: str
    setting: float
    evaluations: int
    stopped: str = ""          # why a raised rule stopped short of its targets
    nodes: NodeSet | None = None       # kept so that later questions reuse the nodes
    logf: np.ndarray | None = None


def _fit(compiled: Compiled, fixed: dict[str, float], choice: RuleChoice, targets: Targets,
         probe: "Probe | None" = None) -> FrameFit:
    target = _Counted(compiled, fixed)
    if probe is not None:
        st, spent = _Start(probe.frame, probe.check, probe.modes), probe.evaluations
    else:
        st = _start(target)
        spent = target.count
    budget = Targets(targets.evidence_rel, targets.sd_share, max(targets.budget - spent, 1))
    run = {"hermite": _hermite, "sparse": _sparse, "rotated": _rotated}[choice.name]
    ps = run(target, st.frame, choice.setting, budget)
    return FrameFit(fixed, ps.frame, st.check, st.modes, st.frame.health.message, st.frame,
                    ps.reduction,
                    ps.label, ps.setting, ps.evaluations, spent, _met(ps.reduction, targets),
                    "" if _met(ps.reduction, targets) else ps.stopped, ps.nodes, ps.logf)


def _reduce(nodes: NodeSet, cache: _Cache, frame: Frame, target: _Counted) -> RuleReduction:
    return reduce_nodes(nodes, cache(nodes.z), frame=frame, values=target.values,
                        value_names=frame.names)


def _hermite(target: _Counted, frame: Frame, setting: float | None, targets: Targets) -> _Pass:
    """K points an axis checked against K + 2; with no setting, K = 1, 3, 5 ... while
    the targets are not met and the next K fits the budget."""
    d = frame.dims
    cache = _Cache(frame.log_density(target))
    K = int(setting) if setting is not None else 1
    stopped = ""
    while True:
        nodes = hermite(d, K)
        red = _reduce(nodes, cache, frame, target)
        if setting is not None or _met(red, targets):
            break
        if cache.evaluations + hermite_points(d, K + 2) - (K + 2) ** d > targets.budget:
            stopped = (f"K = {K + 4} would pass the budget of {targets.budget:,} evaluations")
            break
        K += 2
    return _Pass(red, frame, f"hermite K = {K + 2} against K = {K}", K, cache.evaluations,
                 stopped, nodes, cache(nodes.z))


def _sparse(target: _Counted, frame: Frame, setting: float | None, targets: Targets) -> _Pass:
    """Level L against L - 1 on a frame re-centred on a first pass's moments; with no
    setting, levels from `SPARSE_START` up while the targets are not met and the next
    level fits the budget."""
    d = frame.dims
    first = _Cache(frame.log_density(target))
    L = _saturated(d, int(setting) if setting is not None else SPARSE_START)
    if L >= 2:
        red = reduce_nodes(sparse(d, min(L, SPARSE_START)),
                           first(sparse(d, min(L, SPARSE_START)).z), frame=frame)
        lev = red.levels[red.answer_level]
        if lev.moments_ok:
            try:
                frame = moment_frame(lev.mean, lev.cov, names=frame.names)
            except ComputeError:      # no usable covariance: stay at the mode
                pass
    cache = _Cache(frame.log_density(target))
    stopped = ""
    while True:
        nodes = sparse(d, L)
        red = _reduce(nodes, cache, frame, target)
        spent = first.evaluations + cache.evaluations
        if setting is not None or _met(red, targets):
            break
        if sparse_points(d, L + 1) == sparse_points(d, L):
            stopped = (f"level {L} is the highest: every axis has reached the 35-point "
                       "Genz-Keister rule")
            break
        if spent + sparse_points(d, L + 1) - sparse_points(d, L) > targets.budget:
            stopped = f"level {L + 1} would pass the budget of {targets.budget:,} evaluations"
            break
        L += 1
    label = f"sparse level {L} against {L - 1}" if L else "sparse level 0 (no check level)"
    return _Pass(red, frame, label, L, first.evaluations + cache.evaluations, stopped, nodes,
                 cache(nodes.z))


def _saturated(d: int, L: int) -> int:
    """The lowest level giving the same rule as level `L`: past the level where every
    axis reaches the largest Genz-Keister rule, levels add no node, and comparing two
    equal rules would show no error at all."""
    while L > 0 and sparse_points(d, L) == sparse_points(d, L - 1):
        L -= 1
    return L


def _rotated(target: _Counted, frame: Frame, setting: float | None, targets: Targets) -> _Pass:
    """The trapezoid lattice in z with step H (default 0.5), against steps 2H and 4H."""
    H = float(setting) if setting is not None else 0.5
    ex = rotated(frame.log_density(target), frame.dims, step=H,
                 max_points=max(targets.budget, 1000))
    red = reduce_nodes(ex.nodes, ex.logf, frame=frame, values=target.values,
                       value_names=frame.names)
    return _Pass(red, frame, f"rotated step {H:g} against {2 * H:g}", H, ex.nodes.points, "",
                 ex.nodes, np.asarray(ex.logf, float))


def _met(red: RuleReduction, targets: Targets) -> bool:
    le = red.log_integral
    if le.error is None or red.problems or red.values is None:
        return False
    if le.error > targets.evidence_rel * max(abs(le.value), 1.0):
        return False
    for m, s in zip(red.values.mean, red.values.sd):
        limit = targets.sd_share * s.value
        if m.error is None or s.error is None or m.error > limit or s.error > limit:
            return False
    return True


# ---------------------------------------------------------------------------
# the sum over the discrete values

def _combined(compiled: Compiled, choice: RuleChoice, fits: tuple[FrameFit, ...],
              seconds: float) -> NodePosterior:
    names = tuple(p.name for p in compiled.params)
    log_z = np.array([f.reduction.log_integral.value for f in fits])
    top = float(np.max(log_z))
    w = np.exp(log_z - top)
    total = float(w.sum())
    p = w / total
    log_mass = _log_mass(fits, p, top + math.log(total))
    X, V, E = _parts(compiled, fits)              # per fit: means, covariances, mean errors
    mean = p @ X
    second = np.einsum("k,kij->ij", p, V + np.einsum("ki,kj->kij", X, X))
    cov = second - np.outer(mean, mean)
    cov = (cov + cov.T) / 2
    e_log = np.array([math.inf if f.reduction.log_integral.error is None
                      else f.reduction.log_integral.error for f in fits])
    means, sds = {}, {}
    for i, n in enumerate(names):
        sd = math.sqrt(max(cov[i, i], 0.0))
        dev = np.abs(X[:, i] - mean[i])
        shift = float(p @ np.where(dev > 0, dev * e_log, 0.0))
        m_err = float(p @ E[:, i, 0]) + shift
        s_err = float(p @ E[:, i, 1]) + (shift * 2 if sd > 0 else 0.0)
        known = np.isfinite(E[:, i]).all()
        # an error that could not be bounded is shown as such, never left out
        means[n] = Estimate(float(mean[i]), m_err if known else math.inf, "levels")
        sds[n] = Estimate(sd, s_err if known else math.inf, "levels")
    log_ev = None
    if compiled.proper:
        norm = prior_normaliser(compiled) if compiled.free_prior else 0.0
        log_ev = Estimate(log_mass.value - norm, log_mass.error, log_mass.method)
    problems = tuple(dict.fromkeys(x for f in fits for x in _fit_problems(f, choice)))
    return NodePosterior(compiled, choice, fits[int(np.argmax(log_z))].label, log_mass, log_ev,
                         names, means, sds, cov, fits, sum(f.evaluations for f in fits),
                         sum(f.mode_evaluations for f in fits), seconds,
                         all(f.met for f in fits), problems)


def _log_mass(fits: tuple[FrameFit, ...], p: np.ndarray, value: float) -> Estimate:
    errs = [f.reduction.log_integral.error for f in fits]
    if any(e is None for e in errs):
        return Estimate(value, None, "none")
    return Estimate(value, float(p @ np.array(errs)), "levels")


def _parts(compiled: Compiled, fits: tuple[FrameFit, ...]):
    """Per fit: the means (k, p), covariances (k, p, p) and errors of mean and sd
    (k, p, 2) of every parameter; discrete ones are fixed within a fit (exact)."""
    params = compiled.params
    k, n = len(fits), len(params)
    X = np.zeros((k, n))
    V = np.zeros((k, n, n))
    E = np.zeros((k, n, 2))
    cont = [i for i, q in enumerate(params) if not q.discrete]
    for j, f in enumerate(fits):
        vals = f.reduction.values
        for i, q in enumerate(params):
            if q.discrete:
                X[j, i] = f.fixed[q.name]
        X[j, cont] = [m.value for m in vals.mean]
        V[j][np.ix_(cont, cont)] = vals.cov
        E[j, cont, 0] = [math.inf if m.error is None else m.error for m in vals.mean]
        E[j, cont, 1] = [math.inf if s.error is None else s.error for s in vals.sd]
    return X, V, E


def _fit_problems(f: FrameFit, choice: RuleChoice) -> list[str]:
    where = (" at " + ", ".join(f"{k} = {v:g}" for k, v in f.fixed.items())) if f.fixed else ""
    out = [m + where for m in f.reduction.problems]
    if f.stopped:
        out.append(f"rule `{choice.name}` stopped before its errors met their targets{where}: "
                   f"{f.stopped}; the errors shown are what it reached")
    if f.health:
        out.append(f.health + where)
    if f.modes > 1:
        out.append(f"{f.modes} separated modes{where}: the frame is built around the highest "
                   "and may miss the others' mass; `rule grid` covers them all")
    return out
