"""Lets and expressions over several parameters on a rule in the frame: their
posterior mean and sd.

Each frame's fit keeps its final rule's nodes and the log-density at them
(`framerun.FrameFit`), so an expression costs no new log-density evaluation: its
values at the nodes, in the parameters' own units, are reduced with the same
weights by `reduction.reduce_nodes`, level by level, and the error comes from
successive levels as it does for the parameters' own means (plus the mass outside
an exploration). Over the combinations of discrete values the answers are mixed
with the fits' posterior shares, as `framerun` mixes the parameters' moments.

Quantiles and probabilities of expressions over several parameters are not read
off the nodes: the weights of a polynomial rule integrate smooth functions well
but a step function (the indicator of `g <= x`) badly, and no error estimate
from successive levels bounds that honestly (`STEP_REFUSAL`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np
import sympy as sp

from .errors import ComputeError, ModelError
from .framerun import FrameFit, NodePosterior
from .model import expand_lets, param_function
from .posterior import Estimate
from .reduction import reduce_nodes
from .refine import _Target

#: Why a quantile or a probability over several parameters is refused on a frame
#: rule (one line; `framing.refuse` adds the rule that answers it).
STEP_REFUSAL = ("its value comes from a step function of the parameters, which the "
                "weights of a rule in the frame do not integrate to a stated accuracy")


@dataclass(frozen=True)
class FrameMoments:
    """Mean and sd of an expression on a rule in the frame."""

    mean: Estimate
    sd: Estimate


def moments(post: NodePosterior, expr: sp.Basic, *, text: str | None = None) -> FrameMoments:
    """The posterior mean and sd of `expr` (parameters and lets) on `post`.

    Raises
    ------
    ModelError
        The expression reads a data column.
    ComputeError
        It is not a finite number at a node where the posterior is not zero, or a
        fit kept no nodes.
    """
    c = post.compiled
    e = expand_lets(expr, c.model)
    names = {p.name for p in c.params}
    bad = sorted(x.name for x in e.free_symbols if x.name not in names)
    if bad:
        raise ModelError(f"`{bad[0]}` is a data column; a question is about parameters and lets")
    if isinstance(e, sp.Symbol):
        return FrameMoments(post.param_mean(e.name), post.param_sd(e.name))
    if e.is_number:
        value = complex(e)
        if value.imag != 0 or not math.isfinite(value.real):
            raise ComputeError(f"the expression is `{e}`, not a finite real number")
        return FrameMoments(Estimate(value.real, 0.0, "exact"), Estimate(0.0, 0.0, "exact"))
    fn = param_function(e, c.params)
    label = (text or str(expr)).strip()
    parts = [_per_fit(post, f, fn, label) for f in post.fits]
    return _mixed(post, parts)


def _per_fit(post: NodePosterior, fit: FrameFit, fn, label: str) -> tuple[Estimate, Estimate]:
    if fit.nodes is None or fit.logf is None:
        raise ComputeError("this posterior kept no nodes for its rule: `compute` again")
    target = _Target(post.compiled, fit.fixed)

    def values(u: np.ndarray) -> np.ndarray:
        return np.asarray(fn(target.theta(u)), float).reshape(-1, 1)

    red = reduce_nodes(fit.nodes, fit.logf, frame=fit.frame, values=values,
                       value_names=(label,))
    return red.values.mean[0], red.values.sd[0]


def _mixed(post: NodePosterior, parts: list[tuple[Estimate, Estimate]]) -> FrameMoments:
    """Mix per-fit moments with the fits' posterior shares; errors carried through
    the mixture, with each share's own error (from its log integral) added."""
    log_z = np.array([f.reduction.log_integral.value for f in post.fits])
    w = np.exp(log_z - log_z.max())
    p = w / w.sum()
    e_log = np.array([math.inf if f.reduction.log_integral.error is None
                      else f.reduction.log_integral.error for f in post.fits])
    m = np.array([a.value for a, _ in parts])
    s = np.array([b.value for _, b in parts])
    em = np.array([math.inf if a.error is None else a.error for a, _ in parts])
    es = np.array([math.inf if b.error is None else b.error for _, b in parts])
    mean = float(p @ m)
    var = float(p @ (s ** 2 + m ** 2) - mean ** 2) if len(parts) > 1 else float(s[0] ** 2)
    sd = math.sqrt(max(var, 0.0))
    if len(parts) == 1:
        return FrameMoments(Estimate(mean, float(em[0]), "levels"),
                            Estimate(sd, float(es[0]), "levels"))
    dev = np.abs(m - mean)
    shift = float(p @ np.where(dev > 0, dev * e_log, 0.0))
    m_err = float(p @ em) + shift
    # d var = sum p (2 s ds + 2 (m - mean) dm) + the shares' moves
    s_err = (float(p @ (s * es + dev * em)) / sd + 2 * shift) if sd > 0 else math.inf
    return FrameMoments(Estimate(mean, m_err, "levels"), Estimate(sd, s_err, "levels"))
