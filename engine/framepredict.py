"""The posterior predictive of a new observation on a rule in the frame.

The predictive is a mixture over the rule's nodes: the family at each node's
parameters, weighted by the node's share of the posterior (the rule's weight
times the density there, signed where the rule's weights are, summing to 1), and
over the combinations of discrete values by their posterior shares. Its cdf at any
point is the posterior mean of a smooth function of the parameters (the family's
cdf), which the rule integrates as it integrates the parameters' means; the
mixture on the next coarser level of the same rule is built too, and how far the
predictive's mean, sd and 95% ends moved between the two is reported when it is
more than `LEVEL_SHARE` of its sd.
"""

from __future__ import annotations

import math
from typing import Sequence

import numpy as np
import sympy as sp

from . import families as fam
from . import predict
from .errors import ComputeError
from .framerun import NodePosterior
from .model import Model
from .nodes import signed_sum
from .predict import Predictive
from .refine import _Target

#: A predictive whose figures move more than this share of its sd between the
#: rule's two finest levels is reported with the figure (our choice: about the last
#: digit its mean and ends are shown to, which carry no error of their own).
LEVEL_SHARE = 1e-5


def predictive(post: NodePosterior, name: str, family: str, args: Sequence[sp.Expr],
               model: Model) -> tuple[Predictive, tuple[str, ...]]:
    """The posterior predictive of one new observation ``name ~ family(args)`` on
    `post`, and notes (how far it moved between the rule's two finest levels).

    Raises
    ------
    ModelError
        An argument reads a data column, or the family's arguments are miscounted.
    ComputeError
        The arguments are not finite at any node with mass.
    """
    f = fam.get(family)
    fns = predict._argument_functions(post, f, args, model)
    fine = _built(name, f, _mixture(post, fns, family, coarser=False))
    notes: tuple[str, ...] = ()
    try:
        coarse = _built(name, f, _mixture(post, fns, family, coarser=True))
    except ComputeError:
        coarse = None
    if coarse is None:
        notes = (f"the predictive of `{name}` has no coarser level of rule {post.label} to "
                 "check it against",)
    elif math.isfinite(fine.sd) and fine.sd > 0:
        moved = max(abs(fine.mean - coarse.mean), abs(fine.sd - coarse.sd),
                    abs(fine.quantile(0.025) - coarse.quantile(0.025)),
                    abs(fine.quantile(0.975) - coarse.quantile(0.975))) / fine.sd
        if not moved <= LEVEL_SHARE:
            notes = (f"the predictive of `{name}` moved {moved:.2g} of its sd between the two "
                     f"finest levels of rule {post.label}: its figures are good to about that",)
    return fine, notes


def _built(name: str, f: fam.Family, mix: predict._Mixture) -> Predictive:
    pred = predict._untabled(name, f, mix)
    return predict._with_pmf_table(pred) if f.discrete else predict._with_density_mesh(pred)


def _mixture(post: NodePosterior, fns, family: str, *, coarser: bool) -> predict._Mixture:
    """The nodes of every fit with their signed posterior shares (of the answer's
    level, or the next usable coarser one)."""
    log_z = np.array([fit.reduction.log_integral.value for fit in post.fits])
    share = np.exp(log_z - log_z.max())
    share /= share.sum()
    weights, argv = [], [[] for _ in fns]
    for p_k, fit in zip(share, post.fits):
        if fit.nodes is None or fit.logf is None:
            raise ComputeError("this posterior kept no nodes for its rule: `compute` again")
        red = fit.reduction
        usable = [i for i, lev in enumerate(red.levels) if lev.integral_ok]
        level = usable[0] if not coarser else (usable[1] if len(usable) > 1 else None)
        if level is None:
            raise ComputeError("no coarser level")
        t = fit.nodes.log_weights[level] + fit.logf
        s = fit.nodes.signs[level]
        total = signed_sum(t, s)
        used = (s != 0) & np.isfinite(t)
        w = s[used] * np.exp(t[used] - total.log_abs) * p_k
        theta = _Target(post.compiled, fit.fixed).theta(fit.frame.to_u(fit.nodes.z[used]))
        weights.append(w)
        for k, fn in enumerate(fns):
            argv[k].append(np.broadcast_to(np.asarray(fn(theta), float), w.shape))
    w = np.concatenate(weights)
    args = [np.concatenate(a) for a in argv]
    ok = np.ones(len(w), bool)
    for a in args:
        ok &= np.isfinite(a)
    if not ok.any():
        raise ComputeError(f"predict: the arguments of `{family}` are not finite anywhere")
    if not ok.all() and float(np.abs(w[~ok]).sum()) > 1e-9:
        raise ComputeError(f"predict: the arguments of `{family}` are not finite at nodes holding "
                           f"{float(np.abs(w[~ok]).sum()):.2g} of the posterior")
    return predict._Mixture(w[ok] / w[ok].sum(), tuple(a[ok] for a in args))
