"""A prototype of the frame rules' path through the engine (a test helper).

What phase 2 will wire into `compute`: a compiled quadrat model -> its log-density
in the unconstrained scales (engine/refine.py's target, Jacobians included) ->
the mode and the curvature there (engine/refine.py's mode finding and symbolic
Hessian) -> the frame -> a rule's node set -> the log-density at the nodes -> the
reduction, with the parameters in their own units as the derived values.

For the sparse rule a first pass at level 3 in the frame at the mode gives the
posterior mean and covariance, and the frame is re-centred on them
(`frame.moment_frame`); the level is then raised on the re-centred frame, reusing
the nested nodes already evaluated, until the estimated errors meet the targets
or the next level would pass the budget.

Everything is counted: evaluations of the mode search (through the engine's own
evaluation function) and of the rule.
"""

from __future__ import annotations

from contextlib import contextmanager
from dataclasses import dataclass

import numpy as np

from engine import refine
from engine.errors import ComputeError
from engine.frame import Frame, check_frame, make_frame, moment_frame
from engine.model import Compiled
from engine.posterior import Estimate
from engine.reduction import RuleReduction, reduce_nodes
from engine.sparse import hermite, hermite_points, sparse, sparse_points


@dataclass(frozen=True)
class FrameSetup:
    target: object
    frame: Frame
    mode_evaluations: int
    messages: tuple[str, ...]


@dataclass(frozen=True)
class PipelineResult:
    """One rule's answer on a model, with what it cost.

    Attributes
    ----------
    rule : str
        The rule and its final setting, e.g. ``sparse level 5``.
    reduction : RuleReduction
    log_evidence : Estimate
    means, sds : tuple of Estimate
        Of the parameters in their own units.
    rule_evaluations : int
        Distinct log-density evaluations of the rule's passes.
    mode_evaluations : int
        Log-density evaluations of the mode search and curvature.
    met_targets : bool
        Whether the estimated errors met the targets.
    """

    rule: str
    reduction: RuleReduction
    log_evidence: Estimate
    means: tuple[Estimate, ...]
    sds: tuple[Estimate, ...]
    rule_evaluations: int
    mode_evaluations: int
    met_targets: bool


@contextmanager
def _counted():
    """Count the points the engine's mode search evaluates."""
    count = [0]
    original = refine.evaluate_block

    def counting(compiled, theta):
        count[0] += len(theta[0]) if theta else 1
        return original(compiled, theta)

    refine.evaluate_block = counting
    try:
        yield count
    finally:
        refine.evaluate_block = original


def setup(compiled: Compiled) -> FrameSetup:
    """The frame at the best mode of `compiled` (continuous parameters only)."""
    with _counted() as count:
        target = refine._Target(compiled, {})
        modes = refine.find_modes(compiled, {})
        u = modes[0].u
        H = refine._symbolic_hessian_u(target, u)
        if H is None:
            H = refine._hessian(target, u, np.full(u.size, 1e-4))
    names = tuple(p.name for p in compiled.params if not p.discrete)
    frame = make_frame(u, -H, names=names)
    with _counted() as probe:
        chk = check_frame(frame, frame.log_density(target))
    return FrameSetup(target, frame, count[0] + probe[0],
                      tuple(chk.messages) + ((frame.health.message,) if frame.health.message else ()))


class _Cache:
    """Log-density values by node, so nested rules never evaluate a node twice."""

    def __init__(self, log_z):
        self.log_z = log_z
        self.keys = np.zeros((0,), dtype="V1")
        self.values = np.zeros(0)
        self.evaluations = 0

    def __call__(self, z: np.ndarray) -> np.ndarray:
        zc = np.ascontiguousarray(z)
        keys = zc.view(np.dtype((np.void, zc.dtype.itemsize * zc.shape[1]))).reshape(-1)
        out = np.empty(z.shape[0])
        if self.keys.size and self.keys.dtype == keys.dtype:
            order = np.argsort(self.keys)
            sk = self.keys[order]
            pos = np.minimum(np.searchsorted(sk, keys), sk.size - 1)
            hit = sk[pos] == keys
        else:
            hit = np.zeros(z.shape[0], bool)
            order = pos = None
        if hit.any():
            out[hit] = self.values[order[pos[hit]]]
        if (~hit).any():
            fresh = self.log_z(z[~hit])
            out[~hit] = fresh
            self.evaluations += int((~hit).sum())
            self.keys = keys[~hit] if not self.keys.size else np.concatenate([self.keys,
                                                                               keys[~hit]])
            self.values = np.concatenate([self.values, fresh])
        return out


def _values(target):
    return lambda U: np.column_stack(target.theta(U))


def _met(red: RuleReduction, evidence_rel: float, sd_share: float) -> bool:
    le = red.log_integral
    if le.error is None or red.problems or red.values is None:
        return False
    if le.error > evidence_rel * abs(le.value):
        return False
    for m, s in zip(red.values.mean, red.values.sd):
        sd = s.value
        if m.error is None or s.error is None or m.error > sd_share * sd or s.error > sd_share * sd:
            return False
    return True


def _result(label, red, cache_evals, setup_: FrameSetup, met):
    return PipelineResult(label, red, red.log_integral, red.values.mean, red.values.sd,
                          cache_evals, setup_.mode_evaluations, met)


def run_sparse(compiled: Compiled, *, evidence_rel: float = 1e-4, sd_share: float = 1e-3,
               budget: int = 100_000, start: int = 3, s: FrameSetup | None = None
               ) -> PipelineResult:
    """Sparse levels on a re-centred frame until the estimated errors meet the targets
    (log evidence within `evidence_rel` of itself, means and sds within `sd_share`
    of the posterior sd) or the next level would pass `budget` evaluations."""
    s = s or setup(compiled)
    d = s.frame.dims
    names = s.frame.names
    first = _Cache(s.frame.log_density(s.target))
    ns = sparse(d, start)
    red = reduce_nodes(ns, first(ns.z), frame=s.frame)
    lev = red.levels[red.answer_level]
    try:
        frame = moment_frame(lev.mean, lev.cov, names=names)
    except ComputeError:   # the first pass gave no usable covariance: stay at the mode
        frame = s.frame
    cache = _Cache(frame.log_density(s.target))
    L = start
    best = None
    while True:
        ns = sparse(d, L)
        red = reduce_nodes(ns, cache(ns.z), frame=frame, values=_values(s.target),
                           value_names=names)
        best = (L, red)
        if _met(red, evidence_rel, sd_share):
            break
        if first.evaluations + sparse_points(d, L + 1) > budget:
            break
        L += 1
    L, red = best
    return _result(f"sparse level {L}", red, first.evaluations + cache.evaluations, s,
                   _met(red, evidence_rel, sd_share))


def run_hermite(compiled: Compiled, *, evidence_rel: float = 1e-4, sd_share: float = 1e-3,
                budget: int = 100_000, s: FrameSetup | None = None) -> PipelineResult:
    """The largest K (odd, checked against K + 2) that fits the budget, raised from 1
    until the estimated errors meet the targets."""
    s = s or setup(compiled)
    d = s.frame.dims
    K = 1
    best = None
    while True:
        cache = _Cache(s.frame.log_density(s.target))
        ns = hermite(d, K)
        red = reduce_nodes(ns, cache(ns.z), frame=s.frame, values=_values(s.target),
                           value_names=s.frame.names)
        best = (K, red, cache.evaluations)
        if _met(red, evidence_rel, sd_share) or hermite_points(d, K + 2) > budget:
            break
        K += 2
    K, red, n = best
    return _result(f"hermite K = {K + 2} against K = {K}", red, n, s,
                   _met(red, evidence_rel, sd_share))
