"""The questions, each asked of a fresh posterior.

Every question takes a `State` and returns an `Outcome`: the state (holding the
posterior computed first when it was out of date and cheap, or the same state)
and the `Answer`. Questions about a name given to `predict` are answered from
its posterior predictive distribution. Nothing is committed here.
"""

from __future__ import annotations

import math
from dataclasses import replace

import numpy as np
import sympy as sp

from . import derived, framemarg, framepredict, framequant, framing, plan, questions, runs
from .edits import future_rows
from .errors import ComputeError
from .expr import parse
from .posterior import Estimate, Interval, walk
from .predict import Predictive, predictive, sample_size
from .refine import axis_count
from .results import (Answer, Joint, Needed, NoMoment, Number, Point, Predicted, Range,
                      SampleSizeOptions, Summary, SummaryRow)
from .runs import fresh
from .state import Outcome, Prediction, State


# ---------------------------------------------------------------------------
# what a question reads

def _expr(s: State, text: str, *, condition: bool = False) -> sp.Basic:
    names = s.model.symbols()
    for other in [pr.name for pr in s.predictions] + list(s.data.names):
        names.setdefault(other, sp.Symbol(other, real=True))
    return parse(text, names, condition=condition)


def _predicted_in(s: State, e: sp.Basic) -> Prediction | None:
    found = [s.prediction(x.name) for x in e.free_symbols if s.prediction(x.name) is not None]
    if not found:
        return None
    if len(found) > 1 or e.free_symbols != {sp.Symbol(found[0].name, real=True)}:
        raise ComputeError(f"a question about the predicted `{found[0].name}` may use "
                           "only it and numbers")
    return found[0]


def _predicted_itself(s: State, e: sp.Basic) -> Prediction | None:
    pr = _predicted_in(s, e)
    if pr is not None and not isinstance(e, sp.Symbol):
        raise ComputeError(f"ask about the predicted `{pr.name}` itself (mean {pr.name}, "
                           f"sd {pr.name}, quantile {pr.name} Q)")
    return pr


def _predictive(s: State, pr: Prediction, budget_seconds: float
                ) -> tuple[Outcome, Predictive]:
    """The fresh posterior's outcome, and the predictive of `pr` under it: made once
    per prediction and posterior (kept on the memo, keyed on the posterior's basis of
    revisions), then shared by every question on it."""
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    st = got.state
    if framing.is_node(post):
        # a mixture over the rule's nodes, checked against its next coarser level
        pv, notes = st.memo.predictive(
            (st.basis, pr, "nodes"),
            lambda: framepredict.predictive(post, pr.name, pr.family, pr.args, st.model))
        if notes:
            got = Outcome(st, replace(got.result, notes=tuple(got.result.notes) + notes))
        return got, pv
    return got, st.memo.predictive(
        (st.basis, pr), lambda: predictive(post, pr.name, pr.family, pr.args, st.model))


def unresolved(post) -> str:
    """Why the grid of `post` does not resolve it ("" when it does, or for a rule in
    the frame, whose levels report on themselves)."""
    diag = getattr(post, "diagnostics", None)
    return diag.unresolved if diag is not None else ""


def _answer(got: Outcome, kind: str, label: str, detail, notes=()) -> Outcome:
    """The answer on the state `got` came to, with the notes of its posterior first."""
    return Outcome(got.state, Answer(kind, label, detail, tuple(got.result.notes) + tuple(notes),
                                     unresolved=unresolved(got.result.posterior)))


# ---------------------------------------------------------------------------
# the summaries

def summary(s: State, *, budget_seconds: float) -> Outcome:
    if framing.active(s) is not None:
        return _node_summary(s, budget_seconds)
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    rows = tuple(SummaryRow(name, post.param_mean(name), post.param_sd(name),
                            post.quantile(name, 0.025), post.quantile(name, 0.5),
                            post.quantile(name, 0.975)) for name in post.names)
    notes = list(got.result.notes)
    for lt in got.state.model.lets:
        rows += (_let_row(post, lt.name, notes),)
    return Outcome(got.state, Summary(rows, post.log_evidence, post.grid.size, tuple(notes),
                                      unresolved=unresolved(post)))


def _let_row(post, name: str, notes: list[str]) -> SummaryRow:
    """A let's summary row; its mean and sd are NaN (with a note) where they do not
    exist or cannot be given, its quantiles likewise."""
    e = sp.Symbol(name, real=True)
    try:
        mo = questions.moments(post, e, notes=notes, text=name)
        mean, sd = mo.mean, mo.sd
    except ComputeError as exc:
        notes.append(f"let `{name}`: {exc}")
        mean = sd = Estimate(math.nan)
    qs = []
    for q in (0.025, 0.5, 0.975):
        try:
            qs.append(questions.quantile(post, e, q, notes=notes if q == 0.025 else None,
                                         text=name))
        except ComputeError as exc:
            if not qs or not math.isnan(qs[-1].value):
                notes.append(f"let `{name}`: {exc}")
            qs.append(Estimate(math.nan))
    return SummaryRow(name, mean, sd, *qs, let=True)


def interval(s: State, name: str, level: float = 0.95, kind: str = "central", *,
             budget_seconds: float) -> Outcome:
    pr = s.prediction(name)
    if pr is not None:
        if kind != "central":
            raise ComputeError("a predicted observation has central intervals only")
        got, pv = _predictive(s, pr, budget_seconds)
        a = (1 - level) / 2
        lo = _pq(pv, a)
        hi = _pq(pv, 1 - a)
        return _answer(got, "interval", f"{level:g} central interval of new {name}",
                       Range(lo.value, hi.value, lo.error, hi.error, level, kind,
                             predictive=pv))
    if name not in s.model.param_names:
        framing.refuse(s, "an interval of a let or an expression")
        return _derived_interval(s, name, level, kind, budget_seconds=budget_seconds)
    if framing.active(s) is not None:
        got = _node_marginals(s, budget_seconds)
        iv: Interval = got.result.posterior.marginals[name].interval(level, kind)
    else:
        got = fresh(s, budget_seconds=budget_seconds)
        iv = got.result.posterior.interval(name, level, kind)
    notes = ()
    if len(iv.pieces) > 1:
        notes = (f"the {kind} region has {len(iv.pieces)} pieces: " + ", ".join(
            f"[{a:.6g}, {b:.6g}]" for a, b in iv.pieces),)
    p = s.model.param(name)
    lo_err, hi_err = iv.lo.error, iv.hi.error
    # an HPD region that runs to an edge of the domain ends there exactly
    if kind == "hpd" and iv.lo.value == p.lo:
        lo_err = None
        notes += (f"the region starts at the lower edge of the domain of `{name}`, where its "
                  "density is highest",)
    if kind == "hpd" and iv.hi.value == p.hi:
        hi_err = None
        notes += (f"the region ends at the upper edge of the domain of `{name}`, where its "
                  "density is highest",)
    return _answer(got, "interval", f"{level:g} {kind} interval of {name}",
                   Range(iv.lo.value, iv.hi.value, lo_err, hi_err, level, kind,
                         tuple(iv.pieces)), notes)


def _derived_interval(s: State, text: str, level: float, kind: str, *,
                      budget_seconds: float) -> Outcome:
    """The interval of a let or an expression of the parameters."""
    e = _expr(s, text)
    _predicted_itself(s, e)
    got = fresh(s, budget_seconds=budget_seconds)
    notes: list[str] = []
    if kind == "hpd":
        iv = derived.hpd(got.result.posterior, e, level, text=text.strip(), notes=notes)
        lo, hi = iv.lo, iv.hi
        if iv.at_lowest:
            notes.append(f"the region starts at the lowest value of `{text.strip()}`, where "
                         "its density is highest")
        if iv.at_highest:
            notes.append(f"the region ends at the highest value of `{text.strip()}`, where "
                         "its density is highest")
    else:
        lo, hi = derived.central(got.result.posterior, e, level, notes=notes)
    return _answer(got, "interval", f"{level:g} {kind} interval of {text.strip()}",
                   Range(lo.value, hi.value, lo.error, hi.error, level, kind,
                         ((lo.value, hi.value),)), tuple(notes))


def density(s: State, text: str, *, budget_seconds: float) -> Outcome:
    """The posterior density of a let or an expression, for a plot (a `Curve`)."""
    e = _expr(s, text)
    _predicted_itself(s, e)
    got = fresh(s, budget_seconds=budget_seconds)
    notes: list[str] = []
    c = derived.curve(got.result.posterior, e, notes=notes)
    return _answer(got, "density", f"density of {text.strip()}", c, tuple(notes))


def mode(s: State, *, budget_seconds: float) -> Outcome:
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    if framing.is_node(post):
        jm = post.joint_mode()
        return _answer(got, "mode", "joint mode " + ", ".join(jm.values),
                       Point(jm.values, jm.converged, jm.message,
                             tuple(post.sds[n].value for n in jm.values)),
                       () if jm.converged else (jm.message,))
    m = questions.mode(post)
    spreads = tuple(post.marginals[n].sd for n in m.values if n in post.marginals)
    return _answer(got, "mode", "joint mode " + ", ".join(m.values),
                   Point(dict(m.values), m.converged, m.message, spreads),
                   () if m.converged else (m.message,))


def evidence(s: State, *, budget_seconds: float) -> Outcome:
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    if post.log_evidence is None:
        # not an error: the posterior may be proper; the evidence has no meaning here
        why = "; ".join(post.compiled.improper) or "the prior is improper"
        return _answer(got, "evidence", "log evidence", Number(math.nan),
                       (f"the evidence is not defined under an improper prior ({why}); give "
                        "every parameter a proper prior to compare models",))
    ev = post.log_evidence
    return _answer(got, "evidence", "log evidence", Number(ev.value, ev.error))


# ---------------------------------------------------------------------------
# prob, mean, sd, quantile of any expression

def prob(s: State, text: str, *, budget_seconds: float) -> Outcome:
    cond = _expr(s, text, condition=True)
    pr = _predicted_in(s, cond)
    if pr is not None:
        got, pv = _predictive(s, pr, budget_seconds)
        est = pv.estimate(lambda p: _predictive_prob(p, cond, pr.name),
                          tail=pv.truncation("prob"))
        return _answer(got, "prob", f"P({text.strip()}) for a new {pr.name}",
                       Number(est.value, est.error, predictive=pv))
    if framing.active(s) is not None:
        parts = _one_parameter(s, cond)
        got = _node_marginals(s, budget_seconds)
        est = framemarg.probability(got.result.posterior.marginals[parts[0].name], parts)
        return _answer(got, "prob", f"P({text.strip()})", Number(est.value, est.error))
    got = fresh(s, budget_seconds=budget_seconds)
    notes: list[str] = []
    est = questions.probability(got.result.posterior, cond, notes=notes, text=text.strip())
    return _answer(got, "prob", f"P({text.strip()})", Number(est.value, est.error),
                   tuple(notes))


def moment(s: State, kind: str, text: str, *, budget_seconds: float) -> Outcome:
    """`mean` or `sd` of an expression, or of a predicted observation."""
    e = _expr(s, text)
    pr = _predicted_itself(s, e)
    if pr is not None:
        got, pv = _predictive(s, pr, budget_seconds)
        est = pv.estimate(lambda p: p.mean if kind == "mean" else p.sd,
                          tail=pv.truncation(kind))
        return _answer(got, kind, f"{kind} of a new {pr.name}",
                       Number(est.value, est.error, scale=pv.sd, predictive=pv))
    if framing.active(s) is not None:
        return _frame_moment(s, kind, text, e, budget_seconds)
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    notes: list[str] = []
    mo = questions.moments(post, e, notes=notes, text=text.strip())
    est = mo.mean if kind == "mean" else mo.sd
    if est.method == "absent":
        return _answer(got, kind, f"{kind} of {text.strip()}", _no_moment(post, e, kind))
    return _answer(got, kind, f"{kind} of {text.strip()}",
                   Number(float(est.value), est.error, scale=mo.sd.value), tuple(notes))


def _no_moment(post, e: sp.Basic, kind: str) -> NoMoment:
    """Why the `kind` of `e` does not exist, with its median and 95% interval."""
    ks = [(x.name, post.tails(x.name).exponent()) for x in e.free_symbols
          if x.name in post.marginals]
    ks = [(n, k) for n, k in ks if k is not None]
    name, k = min(ks, key=lambda t: t[1]) if ks else ("", math.nan)
    reason = (f"tails too heavy: the density of `{name}` falls as |{name}|^-{k:.2g}"
              if ks else "tails too heavy")
    if not isinstance(e, sp.Symbol):
        return NoMoment(kind, reason)
    iv = post.interval(e.name, 0.95, "central")
    return NoMoment(kind, reason, post.quantile(e.name, 0.5), iv.lo, iv.hi)


def _node_marginals(s: State, budget_seconds: float) -> Outcome:
    """The fresh node posterior with its 1-D marginals (computed once, kept on it)."""
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    if not framing.is_node(post) or post.marginals is not None:
        return got
    new = replace(post, marginals=framemarg.marginals(post))
    return Outcome(got.state.with_posterior(new), replace(got.result, posterior=new))


def posterior(s: State, *, budget_seconds: float) -> Outcome:
    """The fresh posterior (a `Fresh`), with its 1-D marginals on a rule in the frame."""
    return _node_marginals(s, budget_seconds)


def _node_summary(s: State, budget_seconds: float) -> Outcome:
    got = _node_marginals(s, budget_seconds)
    post = got.result.posterior
    rows = tuple(SummaryRow(n, post.param_mean(n), post.param_sd(n),
                            *(post.marginals[n].quantile(q) for q in (0.025, 0.5, 0.975)))
                 for n in post.names)
    return Outcome(got.state, Summary(rows, post.log_evidence, post.points, got.result.notes,
                                      rule=post.choice.describe()))


_SIDES = {sp.StrictLessThan: "<", sp.LessThan: "<=", sp.StrictGreaterThan: ">",
          sp.GreaterThan: ">=", sp.Equality: "==", sp.Unequality: "!="}


def _one_parameter(s: State, cond) -> list[framemarg.Comparison]:
    """A condition on a rule in the frame: comparisons of one parameter with numbers
    (`b1 > 0`, `0.5 < s and s < 2`); anything else is refused with the rule that can."""
    parts = list(cond.args) if isinstance(cond, sp.And) else [cond]
    out = []
    for c in parts:
        op = _SIDES.get(type(c))
        if op is None:
            break
        if isinstance(c.lhs, sp.Symbol) and c.rhs.is_number:
            out.append(framemarg.Comparison(c.lhs.name, op, float(c.rhs)))
        elif isinstance(c.rhs, sp.Symbol) and c.lhs.is_number:
            out.append(framemarg.Comparison(c.rhs.name, framemarg._FLIP[op], float(c.lhs)))
        else:
            break
    names = {c.name for c in out}
    if len(out) != len(parts) or len(names) != 1 or not names <= set(s.model.param_names):
        framing.refuse(s, "`prob` of a condition other than comparisons of one parameter with "
                       "numbers", why=framequant.STEP_REFUSAL)
    return out


def _frame_moment(s: State, kind: str, text: str, e: sp.Basic, budget_seconds: float
                  ) -> Outcome:
    """`mean` or `sd` of a parameter, a let or an expression on a rule in the frame
    (an expression's values at the rule's nodes, engine/framequant.py)."""
    got = fresh(s, budget_seconds=budget_seconds)
    post = got.result.posterior
    if framing.is_node(post):
        mo = framequant.moments(post, e, text=text)
        m, sd = mo.mean, mo.sd
    else:
        mo = questions.moments(post, e, text=text.strip())
        m, sd = mo.mean, mo.sd
    est = m if kind == "mean" else sd
    return _answer(got, kind, f"{kind} of {text.strip()}",
                   Number(est.value, est.error, scale=sd.value))


def quantile(s: State, text: str, q: float, *, budget_seconds: float) -> Outcome:
    e = _expr(s, text)
    pr = _predicted_itself(s, e)
    if pr is not None:
        got, pv = _predictive(s, pr, budget_seconds)
        est = _pq(pv, q)
        return _answer(got, "quantile", f"{q:g} quantile of a new {pr.name}",
                       Number(est.value, est.error, predictive=pv))
    if framing.active(s) is not None:
        if not (isinstance(e, sp.Symbol) and e.name in s.model.param_names):
            framing.refuse(s, "a quantile of an expression", why=framequant.STEP_REFUSAL)
        got = _node_marginals(s, budget_seconds)
        est = got.result.posterior.marginals[e.name].quantile(q)
        return _answer(got, "quantile", f"{q:g} quantile of {text.strip()}",
                       Number(est.value, est.error))
    got = fresh(s, budget_seconds=budget_seconds)
    notes: list[str] = []
    est = questions.quantile(got.result.posterior, e, q, notes=notes, text=text.strip())
    return _answer(got, "quantile", f"{q:g} quantile of {text.strip()}",
                   Number(est.value, est.error), tuple(notes))


# ---------------------------------------------------------------------------
# predictions and sample size

def predict(s: State, pr: Prediction, *, budget_seconds: float) -> Outcome:
    """The posterior predictive of the new observation `pr`."""
    got, pv = _predictive(s, pr, budget_seconds)
    ests = [pv.estimate(lambda p: p.mean, tail=pv.truncation("mean")),
            pv.estimate(lambda p: p.sd, tail=pv.truncation("sd")), _pq(pv, 0.025), _pq(pv, 0.975)]
    return _answer(got, "predict", f"new {pr.name} ~ {pr.text}",
                   Predicted(*(e.value for e in ests), pv, tuple(e.error for e in ests)))


def _pq(pv: Predictive, q: float) -> Estimate:
    """The q-quantile of a predictive with its error."""
    v = pv.quantile(q)
    return pv.estimate(lambda p: p.quantile(q), tail=pv.truncation("quantile", v, q))


def samplesize(s: State, name: str, width: float, options: SampleSizeOptions, *,
               progress=None, budget_seconds: float) -> Outcome:
    """How many further observations until the expected width of the interval of
    `name` is at most `width` (average length criterion)."""
    o = options
    s.model.param(name)
    framing.refuse(s, "`samplesize`")
    use = future_rows(s, o.using) if o.using is not None else None
    got = fresh(s, budget_seconds=budget_seconds)
    res = sample_size(got.result.posterior, got.state.model, name, width, level=o.level,
                      max_n=o.max_n, using=use, data=got.state.data, sims=o.sims, seed=o.seed,
                      kind=o.kind, progress=progress, budget_seconds=budget_seconds)
    return _answer(got, "samplesize", f"further observations for `{name}`",
                   Needed(res.n, res.width, res.mc_error, o.level, o.kind, res))


_REL = {sp.StrictLessThan: "<", sp.LessThan: "<=", sp.StrictGreaterThan: ">",
        sp.GreaterThan: ">=", sp.Equality: "==", sp.Unequality: "!="}
_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "==": "==", "!=": "!="}


def _predictive_prob(pv: Predictive, cond, name: str) -> float:
    """P(cond) for a condition on one predicted observation: comparisons with
    numbers, or a range `a < y < b`."""
    sym = sp.Symbol(name, real=True)
    parts = list(cond.args) if isinstance(cond, sp.And) else [cond]
    lo = (-math.inf, True)   # (bound, inclusive)
    hi = (math.inf, True)
    eqs = []
    for c in parts:
        if type(c) not in _REL:
            raise ComputeError(f"a condition on the predicted `{name}` compares it with numbers "
                               f"(as in {name} > 5, or 2 <= {name} <= 8)")
        op = _REL[type(c)]
        if c.lhs == sym and c.rhs.is_number:
            x = float(c.rhs)
        elif c.rhs == sym and c.lhs.is_number:
            x, op = float(c.lhs), _FLIP[op]
        else:
            raise ComputeError(f"a condition on the predicted `{name}` compares it with numbers "
                               f"(as in {name} > 5, or 2 <= {name} <= 8)")
        if op in ("==", "!="):
            eqs.append((op, x))
        elif op in (">", ">="):
            lo = max(lo, (x, op == ">="), key=lambda t: (t[0], not t[1]))
        else:
            hi = min(hi, (x, op == "<="), key=lambda t: (t[0], t[1]))
    if eqs:
        if len(parts) != 1:
            raise ComputeError("`==` and `!=` on a predicted observation stand alone")
        return pv.prob(*eqs[0])
    p_hi = 1.0 if hi[0] == math.inf else pv.prob("<=" if hi[1] else "<", hi[0])
    p_lo = 0.0 if lo[0] == -math.inf else pv.prob("<" if lo[1] else "<=", lo[0])
    return max(p_hi - p_lo, 0.0)


# ---------------------------------------------------------------------------
# the joint of two parameters

def joint(s: State, a: str, b: str, *, budget_seconds: float) -> Outcome:
    """The 2-D posterior marginal of parameters `a` and `b` (a `Joint`); one that
    would not fit in memory is refused with the figure before anything is
    computed or allocated."""
    pa, pb = s.model.param(a), s.model.param(b)
    framing.refuse(s, "a joint of two parameters")
    sa, sb = s.spec(a), s.spec(b)
    if sa is not None and sb is not None:
        plan.check_memory([axis_count(pa, sa), axis_count(pb, sb)], pair=(a, b))
    got = fresh(s, budget_seconds=budget_seconds)
    post, notes = got.result.posterior, got.result.notes
    i, j = post.grid.index(a), post.grid.index(b)
    if (i, j) in post.pairs or (j, i) in post.pairs:
        mass = post.pair(a, b)
        return Outcome(got.state, Joint(mass / mass.sum(), post, notes))
    na, nb = post.grid.axes[i].n, post.grid.axes[j].n
    plan.check_memory([na, nb], pair=(a, b))
    if post.logp is None and post.seconds > runs.CHEAP_SECONDS:
        raise ComputeError(
            f"the joint of `{a}` and `{b}` was not kept by the pass over "
            f"{plan.format_count(post.grid.size)} points, and another pass would take "
            f"about {plan.format_duration(post.seconds)}: use fewer points")
    mass = np.zeros(na * nb)
    for idx, _theta, ws in walk(post):
        mass += np.bincount(idx[i] * nb + idx[j], weights=ws[0], minlength=na * nb)
    mass = mass.reshape(na, nb)
    return Outcome(got.state, Joint(mass / mass.sum(), post, notes))
