"""New rows arriving on a rule in the frame: the posterior updated at the same nodes.

Each frame's fit keeps its final rule's nodes and the log-density at them
(`framerun.FrameFit`). When rows are appended, only the new rows' log-likelihood
is evaluated at those nodes and added; the nodes are reduced again, with their
errors from successive levels as before. The frame was built for the old
posterior, so it is checked against the new one: when the posterior mean has
moved more than `MOVED` frame sds along an axis, or the spread along a frame
axis has changed by more than a factor `SPREAD_FACTOR`, or a rule raised by
itself no longer meets its targets at the old nodes, the posterior is computed
again in a new frame, and the change says so. A `rotated` lattice was explored
and pruned for the old density, so it is always explored again.
"""

from __future__ import annotations

import math
import time
from dataclasses import replace

import numpy as np

from . import framerun
from .data import DataSet
from .errors import QuadratError
from .framerun import FrameFit, NodePosterior, Targets
from .model import Compiled, compile_model
from .plan import format_count
from .reduction import reduce_nodes
from .refine import _Target
from .results import Change
from .state import Outcome, State

#: The posterior mean may move this many frame sds (along any axis of the old
#: frame) before the frame is built again: our choice; a rule placed around a
#: normal loses accuracy fast once the mass sits off its centre.
MOVED = 1.0
#: The posterior's sd along a frame axis may change by this factor either way.
SPREAD_FACTOR = 2.0


def append(s: State, data: DataSet, message: str, *, targets: Targets) -> Outcome:
    """The state with `data` (new rows at the end of its columns), its node
    posterior updated from the new rows alone, or computed again in a new frame
    when the old one no longer fits: a `Change`."""
    post: NodePosterior = s.posterior
    try:
        old_rows = {part.key: part.rows for part in s.compiled().likelihood}
        full = compile_model(s.model, data)
        inc = compile_model(s.model, data, rows_from=old_rows)
    except QuadratError as exc:
        return Outcome(replace(s, data=data),
                       Change(message, (f"{exc}; the posterior waits until the columns agree",)))
    t0 = time.perf_counter()
    why = ("a `rotated` lattice is explored for the density it prunes"
           if post.choice.name == "rotated" else "")
    fits: list[FrameFit] = []
    for f in post.fits if not why else ():
        fit, why = _updated(full, inc, f, targets, raised=post.choice.setting is None)
        if why:
            break
        fits.append(fit)
    if why:
        new = framerun.compute(full, post.choice, targets=targets)     # a new mode search
        notes = (f"re-framed: {why}; rule {new.label}: {format_count(new.points)} evaluations",)
    else:
        new = framerun._combined(full, post.choice, tuple(fits), time.perf_counter() - t0)
        new = replace(new, mode_evaluations=post.mode_evaluations)
        notes = (f"posterior updated from the new rows alone at the same "
                 f"{format_count(new.points)} nodes of rule {new.label}",)
    ns = replace(s, data=data, steps=()).with_posterior(new)
    ns.remember(full)
    return Outcome(ns, Change(message, notes + new.problems))


def _short(red, targets: Targets) -> str:
    """Which estimate misses its target at the old nodes, with its figure."""
    le = red.log_integral
    if le.error is None or not math.isfinite(le.error) or red.problems:
        return "the log evidence's error could not be bounded"
    limit = targets.evidence_rel * max(abs(le.value), 1.0)
    if le.error > limit:
        return f"the log evidence's error would be {le.error:.2g} (target {limit:.2g})"
    for name, m, sd in zip(red.values.names, red.values.mean, red.values.sd):
        for what, est in (("mean", m), ("sd", sd)):
            share = math.inf if est.error is None else est.error / sd.value
            if not share <= targets.sd_share:
                return (f"the error of the {what} of `{name}` would be {share:.2g} of its sd "
                        f"(target {targets.sd_share:g})")
    return "the errors would pass their targets"


def _worse(new, old) -> bool:
    """Whether the new estimate's error is unknown or more than twice the old one's."""
    if new.error is None or not math.isfinite(new.error):
        return True
    return old.error is not None and new.error > 2 * old.error + 1e-12


def _updated(full: Compiled, inc: Compiled, f: FrameFit, targets: Targets, *, raised: bool
             ) -> tuple[FrameFit, str]:
    """The fit `f` with the new rows' terms added at its nodes, or the reason the
    frame no longer fits (with `f` unchanged)."""
    if f.nodes is None or f.logf is None:
        return f, "the posterior kept no nodes"
    U = f.frame.to_u(f.nodes.z)
    with np.errstate(all="ignore"):
        delta = np.asarray(inc.log_likelihood(_Target(inc, f.fixed).theta(U)), float)
    old = f.logf
    with np.errstate(invalid="ignore"):
        logf = np.where(np.isneginf(old), -np.inf, old + delta)
    values = framerun._Counted(full, f.fixed).values
    try:
        red = reduce_nodes(f.nodes, logf, frame=f.frame, values=values, value_names=f.frame.names)
    except QuadratError as exc:
        return f, f"at the old nodes: {exc}"
    cov_u = red.u.cov
    mean_u = np.array([m.value for m in red.u.mean])
    if not (np.all(np.isfinite(mean_u)) and np.all(np.isfinite(cov_u))):
        return f, "the old nodes give no usable moments for the new posterior"
    z = f.frame.to_z(mean_u[None, :])[0]
    axis = int(np.argmax(np.abs(z)))
    if abs(z[axis]) > MOVED:
        return f, (f"the posterior moved {abs(z[axis]):.2g} frame sds along frame axis {axis} "
                   f"(mostly `{f.frame.axis_name(axis)}`)")
    Li = np.linalg.inv(f.frame.chol)
    cov_z = Li @ cov_u @ Li.T
    eig = np.linalg.eigvalsh((cov_z + cov_z.T) / 2)
    ratio = math.sqrt(max(eig.max(), 1e-300)), math.sqrt(max(eig.min(), 1e-300))
    if ratio[0] > SPREAD_FACTOR or ratio[1] < 1 / SPREAD_FACTOR:
        worst = ratio[0] if ratio[0] > 1 / ratio[1] else ratio[1]
        return f, f"its spread along a frame axis changed by a factor {worst:.2g}"
    met = framerun._met(red, targets)
    if not met and (f.met or raised or _worse(red.log_integral, f.reduction.log_integral)):
        return f, f"at the old nodes {_short(red, targets)}"
    return replace(f, reduction=red, met=met, stopped="", logf=logf), ""
