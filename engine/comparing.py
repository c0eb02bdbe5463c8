"""Keeping models and comparing them: evidence, Bayes factors and their cautions.

`keep` records a model's log evidence with what it was fitted to (a digest of
the data its likelihoods read) and cautions on priors much wider than their
posterior, since a Bayes factor then depends on the prior's width; `compare`
refuses models without evidence or fitted to different data.
"""

from __future__ import annotations

import hashlib
import math

import numpy as np

from . import families as fam
from .edits import checked_name, with_keep
from .errors import ComputeError, ModelError
from .posterior import Estimate, Posterior
from .results import Change, Comparison, Kept
from .framing import points_of
from .runs import fresh
from .state import Outcome, State

#: A prior this many times wider than its posterior earns a caution.
WIDE_PRIOR = 100
#: Families whose tails make a Bayes factor depend on their scale.
HEAVY_TAILED = ("cauchy", "half_cauchy", "student_t")


def keep(s: State, name: str, *, budget_seconds: float) -> Outcome:
    """The state keeping the current model under `name` (computing its posterior
    first when out of date and cheap): a `Change`."""
    checked_name(name, "keep name")
    got = fresh(s, budget_seconds=budget_seconds)
    s, post = got.state, got.result.posterior
    k = Kept(name, post.log_evidence, post.compiled.improper, data_key(s), data_rows(s),
             model_lines(s), wide_priors(s, post), points_of(post))
    new, replaced = with_keep(s, k)
    ev = (f"log evidence {post.log_evidence.value:.6g}" if post.log_evidence
          else "no evidence (improper prior)")
    return Outcome(new, Change(f"model kept as `{name}`{' (replaced)' if replaced else ''}: "
                               f"{ev}", got.result.notes))


def compare(s: State, a: str, b: str) -> Comparison:
    """The log Bayes factor of kept model `a` over kept model `b`."""
    kept = {k.name: k for k in s.keeps}
    for n in (a, b):
        if n not in kept:
            raise ModelError(f"no kept model `{n}`; keep one with `keep NAME`")
    ka, kb = kept[a], kept[b]
    for k in (ka, kb):
        if k.log_evidence is None:
            why = "; ".join(k.improper) or "its prior is improper"
            raise ComputeError(f"`{k.name}` has no evidence ({why}): a Bayes factor needs "
                               "proper priors")
    if ka.data_key != kb.data_key:
        raise ComputeError(f"`{a}` and `{b}` were fitted to different data ({ka.data_rows} "
                           f"vs {kb.data_rows}): their evidences cannot be compared")
    ea, eb = ka.log_evidence, kb.log_evidence
    err = None
    if ea.error is not None and eb.error is not None:
        err = ea.error + eb.error
    notes = list(ka.cautions) + [c for c in kb.cautions if c not in ka.cautions]
    return Comparison(ka, kb, Estimate(ea.value - eb.value, err, "difference"), tuple(notes))


def data_key(s: State) -> str:
    """A SHA-256 of the columns the likelihoods read, by name."""
    h = hashlib.sha256()
    cols = set()
    for lk in s.model.likelihoods:
        if lk.column is not None:
            cols.add(lk.column)
        else:
            cols |= {x.name for x in lk.log.free_symbols} & set(s.data.names)
    for c in sorted(cols):
        h.update(c.encode())
        h.update(np.ascontiguousarray(s.data.values(c)).tobytes())
    return h.hexdigest()


def data_rows(s: State) -> str:
    parts = [f"`{lk.column}` {s.data.get(lk.column).rows} rows" for lk in s.model.likelihoods
             if lk.column is not None and lk.column in s.data]
    return ", ".join(parts) or "no data"


def model_lines(s: State) -> tuple[str, ...]:
    m = s.model
    out = [f"param {p.name} {p.describe()}" for p in m.params]
    out += [f"prior {pr.target} ~ {pr.text}" if pr.target else f"prior log {pr.text}"
            for pr in m.priors]
    out += [f"likelihood {lk.column} ~ {lk.text}" if lk.column else f"likelihood log {lk.text}"
            for lk in m.likelihoods]
    return tuple(out)


def _prior_sd(p, pr) -> float | None:
    """The sd of the prior of parameter `p` (named prior `pr`, or None for a
    uniform one), when it has a number for one."""
    if pr is None and p.bounded:
        return (p.hi - p.lo) / math.sqrt(12)
    if pr is not None and all(not a.free_symbols for a in pr.args):
        try:
            with np.errstate(all="ignore"):
                return float(fam.get(pr.family).scipy(*[float(a) for a in pr.args]).std())
        except (TypeError, ValueError):
            return None
    return None


def wide_priors(s: State, post: Posterior) -> tuple[str, ...]:
    """Priors much wider than the posterior: the Bayes factor then depends on
    the prior's width."""
    out = []
    m = s.model
    named = {pr.target: pr for pr in m.priors if pr.target}
    for p in m.params:
        if p.discrete:
            continue
        post_sd = post.param_sd(p.name).value
        if not post_sd > 0:
            continue
        pr = named.get(p.name)
        prior_sd = _prior_sd(p, pr)
        if prior_sd is None or not math.isfinite(prior_sd):
            if pr is not None and pr.family in HEAVY_TAILED:
                out.append(f"the prior of `{p.name}` has heavy tails: the Bayes factor "
                           "depends on its scale")
            continue
        if prior_sd > WIDE_PRIOR * post_sd:
            out.append(f"the prior of `{p.name}` is {prior_sd / post_sd:.0f} times wider than "
                       "its posterior: the Bayes factor depends on the prior's width")
    return tuple(out)
