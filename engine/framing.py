"""Rules in the frame, on a state: which rule `compute` uses, compute, fresh,
refine, the rules' rows of `cost`, and which questions such a posterior answers.

Each operation takes a `State` and returns an `Outcome` (the state holding the
new `NodePosterior`, current under its own basis, and the report), as
engine/runs.py does for the tensor grid; nothing is committed here.

The choice when no rule is set: the tensor grid up to `GRID_DIMS` continuous
parameters (cheap, and its nested levels check it), or when the user sized every
axis with `grid`; past that, the frame at the mode is measured along its axes
(engine/frame.py's `check_frame`) and the shape decides: `sparse` for a posterior
near normal (re-centred on a first pass's moments, which absorbs a moderate
skew), `rotated` where polynomial rules would be misled (a strong skew, a heavy
tail, a density cut off near the mode, a Hessian that is not positive definite),
when its lattice fits `ROTATED_BUDGET`; otherwise a warning with the figure, or a
refusal where no rule can be trusted.
"""

from __future__ import annotations

import math
import time
from dataclasses import dataclass, replace

from . import framerun
from .errors import ComputeError, GridError, QuadratError
from .framerun import NodePosterior, Probe, RuleChoice, Targets, compute as compute_frame
from .plan import format_count, format_duration, machine_memory
from .refine import RefineStep, relative_changes
from .results import ComputeReport, Fresh, RefineReport, RuleRow
from .rule_cost import rule_cost
from .sparse import SPARSE_MAX_DIMS, sparse_points
from .state import Outcome, State

#: Log-density evaluations a polynomial rule may spend, mode search included, when
#: its setting is not given (the rule is raised while the next step fits).
EVALUATION_BUDGET = 100_000
#: Largest lattice the rotated rule may explore.
ROTATED_BUDGET = 1_000_000
#: Up to this many continuous parameters `compute` uses the tensor grid by itself.
GRID_DIMS = 3
#: An asymmetry at z = +-2 beyond this (nats) is more than re-centring absorbs:
#: our choice (the regressions of tests/reference_regression.py show 0.13 on the
#: sd's log scale, where a re-centred sparse rule meets 1e-4; a log-scale gamma
#: with shape 4 shows 0.67, where it needs its highest levels).
STRONG_SKEW = 0.5
#: Up to this many continuous parameters a posterior that the frame's checks flag
#: goes to the tensor grid (4.3 million points at 5 parameters, 21 an axis).
TROUBLE_GRID_DIMS = 5
#: Steps the rotated rule may take when chosen by `compute`, finest first.
ROTATED_STEPS = (0.5, 0.75, 1.0)
#: What a posterior on a rule in the frame answers.
ANSWERED = ("evidence", "mean, sd, quantiles and intervals of a parameter",
            "mean and sd of lets and expressions",
            "prob of comparisons of one parameter with numbers", "summary", "plot of a "
            "parameter", "compare and keep")
#: `cost` lists settings of at most this many points.
ROW_LIMIT = 10_000_000
#: Most steps `refine until` takes on a frame rule.
MAX_STEPS = 8


# ---------------------------------------------------------------------------
# the choice

@dataclass(frozen=True)
class Chosen:
    """The rule a compute uses, and why (empty when the user set it)."""

    choice: RuleChoice
    why: str = ""
    warnings: tuple[str, ...] = ()
    probe: Probe | None = None        # the mode search already done, for the rule to reuse


def continuous(s: State) -> int:
    return sum(1 for p in s.model.params if not p.discrete)


def grid_by_default(s: State) -> bool:
    """Whether, with no rule set, `compute` stays on the tensor grid: few continuous
    parameters, or every axis sized by the user (`grid`, or `points N` declared)."""
    d = continuous(s)
    sized = all(s.spec(p.name) is not None or p.points for p in s.model.params
                if not p.discrete)
    return d <= GRID_DIMS or sized


def choose(s: State) -> Chosen:
    """The rule `compute` uses on `s`.

    Raises
    ------
    ComputeError
        No rule can be trusted on this posterior (the reason, with its figure).
    """
    if s.choice is not None:
        return Chosen(s.choice)
    if grid_by_default(s):
        return Chosen(RuleChoice("grid"))
    d = continuous(s)
    try:
        pr = framerun.probe(s.compiled())
    except QuadratError as exc:
        return Chosen(RuleChoice("grid"), f"rule: tensor grid ({d} continuous parameters, but "
                      f"no frame could be built around a mode: {exc})")
    return replace(_by_shape(pr, d), probe=pr)


def _by_shape(pr: Probe, d: int) -> Chosen:
    ck = pr.check
    strong = [a for a in ck.axes if a.skewed and abs(a.asymmetry) > STRONG_SKEW]
    trouble = ""
    if not pr.frame.health.positive_definite:
        trouble = pr.frame.health.message
    elif ck.cliffs:
        trouble = next(m for m in ck.messages if "is zero within" in m)
    elif ck.heavy:
        trouble = next(m for m in ck.messages if "heavy" in m)
    elif strong:
        a = max(strong, key=lambda x: abs(x.asymmetry))
        trouble = (f"frame axis {a.axis} (mostly `{a.name}`) is strongly skewed (asymmetry "
                   f"{a.asymmetry:+.2g} nats at z = +-2, beyond {STRONG_SKEW:g})")
    if not trouble:
        skew = [a for a in ck.axes if a.skewed]
        shape = ("the frame's checks pass" if not skew else
                 f"a moderate skew along `{max(skew, key=lambda x: abs(x.asymmetry)).name}` "
                 "(re-centred on a first pass's moments)")
        return Chosen(RuleChoice("sparse"), f"rule: sparse, chosen for {d} continuous parameters "
                      f"(past the {GRID_DIMS} a tensor grid handles cheaply); {shape}")
    if d <= TROUBLE_GRID_DIMS:
        return Chosen(RuleChoice("grid"), f"rule: tensor grid, because {trouble}, which misleads "
                      f"rules built around a normal; {d} continuous parameters are still within "
                      "a tensor grid's reach")
    step = next((h for h in ROTATED_STEPS
                 if rule_cost("rotated", d, step=h).points <= ROTATED_BUDGET), None)
    if step is not None:
        return Chosen(RuleChoice("rotated", step),
                      f"rule: rotated step {step:g}, chosen for {d} continuous parameters "
                      f"because {trouble}")
    if not pr.frame.health.positive_definite:
        raise ComputeError(f"no rule can be trusted here: {trouble}; the rotated lattice is too "
                           f"large in {d} dimensions: give every axis with `grid`, or set "
                           "`rule sparse` to run it anyway")
    return Chosen(RuleChoice("sparse"), f"rule: sparse, chosen for {d} continuous parameters; "
                  "the rotated lattice is too large here",
                  (f"{trouble}: the sparse rule's error estimate may miss it; check the answers "
                   "with `refine`",))


def frame_path(s: State) -> Chosen | None:
    """The frame rule a question or `refine` on `s` goes through (None: the grid):
    the current posterior's, or the one `compute` would choose."""
    if s.current:
        return Chosen(s.posterior.choice) if is_node(s.posterior) else None
    ch = choose(s)
    return ch if ch.choice.in_frame else None


# ---------------------------------------------------------------------------
# computing

def _budget(choice: RuleChoice) -> Targets:
    return Targets(budget=ROTATED_BUDGET if choice.name == "rotated" else EVALUATION_BUDGET)


def compute(s: State, chosen: Chosen, *, budget_seconds: float, progress=None) -> Outcome:
    """The posterior on the frame rule `chosen`: an Outcome with a `ComputeReport`."""
    choice = chosen.choice
    post = compute_frame(s.compiled(), choice, targets=_budget(choice), probe=chosen.probe)
    return Outcome(s.with_posterior(post, steps=()), _report(post, chosen))


def _report(post: NodePosterior, chosen: Chosen) -> ComputeReport:
    notes = ((chosen.why,) if chosen.why else ()) + (
        f"rule {post.label}: {format_count(post.points)} evaluations, "
        f"{format_count(post.mode_evaluations)} more for the mode and the frame",)
    notes += tuple(post.compiled.improper)
    return ComputeReport(post.points + post.mode_evaluations, post.seconds, post.log_evidence,
                         notes, chosen.warnings + post.problems)


def fresh(s: State, chosen: Chosen, *, budget_seconds: float) -> Outcome:
    """The current node posterior (a `Fresh`), computed first when there is none:
    a frame rule's evaluations are bounded by its budget."""
    if s.current:
        return Outcome(s, Fresh(s.posterior))
    what = "no posterior yet" if s.posterior is None else "the posterior is out of date"
    out = compute(s, chosen, budget_seconds=budget_seconds)
    rep = out.result
    return Outcome(out.state, Fresh(out.state.posterior,
                                    (f"{what}: computed first",) + rep.notes + rep.warnings))


# ---------------------------------------------------------------------------
# refining

def _next(choice: RuleChoice, setting: float, d: int) -> RuleChoice | None:
    """The next finer setting, or None past the rule's last one."""
    if choice.name == "hermite":
        return RuleChoice("hermite", setting + 2) if setting + 2 <= 40 else None
    if choice.name == "sparse":
        L = int(setting)
        if L >= 8 or sparse_points(d, L + 1) == sparse_points(d, L):
            return None
        return RuleChoice("sparse", L + 1)
    return RuleChoice("rotated", setting / 2) if setting / 2 >= 0.05 else None


def _tracked(post: NodePosterior) -> dict[str, float]:
    out = {"log evidence" if post.log_evidence is not None else "log mass":
           (post.log_evidence or post.log_mass).value}
    for n in post.names:
        out[f"mean {n}"] = post.means[n].value
        out[f"sd {n}"] = post.sds[n].value
    return out


def _changes(old: dict[str, float], new: dict[str, float], post: NodePosterior
             ) -> dict[str, float]:
    """As `refine.changes`, with the sds of the node posterior."""
    return relative_changes(old, new, lambda name: post.sds[name].value)


def _step(k: int, post: NodePosterior, before: dict[str, float] | None) -> RefineStep:
    vals = _tracked(post)
    ch = _changes(before, vals, post) if before is not None else {}
    moved = max(ch, key=ch.get) if ch else ""
    return RefineStep(k, post.points, post.points, post.seconds, vals, ch,
                      ch[moved] if ch else None, moved)


def refine(s: State, chosen: Chosen, until: float | None, *, budget_seconds: float
           ) -> Outcome:
    """Raise the rule's K, level or resolution step by step: a `RefineReport`; the
    state takes the final posterior with the rule set to its final setting."""
    first = fresh(s, chosen, budget_seconds=budget_seconds)
    s, post = first.state, first.result.posterior
    d = sum(1 for p in post.compiled.params if not p.discrete)
    steps = [_step(0, post, None)]
    message, converged = "", False
    t0 = time.perf_counter()
    while True:
        setting = max(f.setting for f in post.fits)
        nxt = _next(post.choice, setting, d)
        if nxt is None:
            message = f"rule `{post.choice.name}` is at its finest setting ({post.label})"
            break
        spent = time.perf_counter() - t0
        if spent + 4 * max(post.seconds, 1e-3) > budget_seconds:
            message = (f"the next step would pass the time budget of "
                       f"{format_duration(budget_seconds)}")
            break
        try:
            new = compute_frame(post.compiled, nxt, targets=_budget(nxt),
                                probe=framerun.probes_of(post))
        except GridError as exc:      # a node set past the largest a rule may build
            message = f"stopped: {exc}"
            break
        steps.append(_step(len(steps), new, steps[-1].values))
        post = new
        largest = steps[-1].largest
        if until is None:
            break
        if largest is not None and largest < until:
            converged = True
            message = (f"settled: the largest change was {largest:.2g} (< {until:g}) at "
                       f"{post.label}")
            break
        if len(steps) > MAX_STEPS:
            message = f"did not settle to {until:g} within {MAX_STEPS} steps"
            break
    new_state = s.with_posterior(post, choice=post.choice, steps=tuple(steps))
    notes = tuple(first.result.notes)
    if s.choice != post.choice:
        notes += (f"rule set: {post.choice.describe()}",)
    return Outcome(new_state, RefineReport(tuple(steps), converged, message, notes,
                                           post.problems))


# ---------------------------------------------------------------------------
# cost

def rule_rows(s: State, *, seconds_per_evaluation: float | None) -> tuple[RuleRow, ...]:
    """Each rule in the frame at its usual settings: points, memory, predicted
    seconds (from `seconds_per_evaluation`, measured; None: not timed), accuracy."""
    d = continuous(s)
    if d == 0:
        return ()
    set_ = s.frame_rule
    rows = []
    settings = [("hermite", {"K": k}) for k in (1, 3, 5)]
    if d <= SPARSE_MAX_DIMS:
        settings += [("sparse", {"L": L}) for L in range(7)
                     if sparse_points(d, L) <= ROW_LIMIT]
    settings += [("rotated", {"step": h}) for h in (1.0, 0.5)]
    for name, kw in settings:
        try:
            c = rule_cost(name, d, **kw)
        except GridError:
            continue
        setting = next(iter(kw.values()))
        label = RuleChoice(name, float(setting)).describe()
        secs = None if seconds_per_evaluation is None else c.points * seconds_per_evaluation
        mine = set_ is not None and set_.name == name and set_.setting == setting
        rows.append(RuleRow(label, c.points, c.exact_count, c.memory, secs, _accuracy(c),
                            c.memory < 0.5 * machine_memory(), mine))
    return tuple(rows)


def _accuracy(c) -> str:
    """The accuracy class in a few words."""
    if c.rule == "hermite":
        top = int(dict(c.settings)["compare"])
        return (f"exact to degree {c.exact_degree}; evidence error ~ n^-{math.ceil(top / 3)} "
                "for n rows")
    if c.rule == "sparse":
        return (f"exact to degree {c.exact_degree}" if dict(c.settings)["L"] else
                "Laplace; no check level")
    return "geometric in 1/H^2; robust to skew (points estimated)"


# ---------------------------------------------------------------------------
# which questions a node posterior answers

def active(s: State) -> RuleChoice | None:
    """The rule in the frame a question would be answered on: the one set, the one
    of the current posterior, or the one `compute` would pick (None: the grid)."""
    if s.frame_rule is not None:
        return s.frame_rule
    if s.choice is not None:
        return None
    if s.current:
        return s.posterior.choice if is_node(s.posterior) else None
    return None if grid_by_default(s) else RuleChoice("sparse")


def refuse(s: State, what: str, *, why: str = "") -> None:
    """Refuse a question the frame rule of `s` does not answer (yet, or for the
    reason `why`), naming the rule that does.

    Raises
    ------
    ComputeError
    """
    choice = active(s)
    if choice is None:
        return
    where = (f"rule `{choice.name}`" if s.choice is not None or s.current else
             f"the rule in the frame `compute` picks for {continuous(s)} continuous parameters")
    if why:
        raise ComputeError(f"{what} is not answered on {where}: {why}; `rule grid` answers it")
    raise ComputeError(f"{what} is not answered on {where} yet (it answers "
                       f"{', '.join(ANSWERED)}): `rule grid` answers it")


def is_node(post) -> bool:
    """Whether `post` is a posterior on a rule in the frame."""
    return isinstance(post, NodePosterior)


def points_of(post) -> int:
    """The points a posterior was computed on (grid points, or the rule's evaluations)."""
    return post.points if is_node(post) else post.grid.size
