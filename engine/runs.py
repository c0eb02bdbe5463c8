"""Running the numerics on a state: cost and budget, compute, refine, zoom,
appends, `grid auto`, and the warnings a posterior earns.

Each operation takes a `State` and returns an `Outcome`: the state holding the
new posterior (current under its own basis) and the report. Nothing is
committed here, so a Ctrl-C or an error part way leaves the caller's state as
it was. The time budget is the caller's: every entry point takes it.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Callable

import numpy as np

from . import frameappend, framerun, framing, plan
from .data import DataSet
from .edits import data_notes
from .errors import ComputeError, GridError, QuadratError
from .grid import Grid
from .model import Compiled, compile_model
from .posterior import Posterior, compute as compute_posterior, zeros
from .refine import (AxisSpec, auto_grid, axis_count, build_grid, refine as refine_posterior,
                     refined_grid, widen_specs, zoom_specs)
from .sparse import SPARSE_MAX_DIMS
from .results import Change, ComputeReport, CostReport, CostStep, Fresh, GridAuto, RefineReport
from .state import Outcome, State

#: A question recomputes a stale posterior by itself when that is predicted to
#: take less than this many seconds.
CHEAP_SECONDS = 2.0
#: Default budget: `compute` refuses longer jobs unless forced.
BUDGET_SECONDS = 600.0
#: Posterior mass at an axis end above which `compute` warns.
EDGE_WARN = 1e-6
#: The edge mass `grid auto` aims for; an append that pushes past ten times this
#: re-sizes the grid.
EDGE_MASS_AUTO = 1e-9
#: Fewer nodes than this across one posterior sd is called too coarse.
MIN_POINTS_PER_SD = 5.0
#: How many times `zoom` widens a grid that came out too tight.
ZOOM_WIDENINGS = 8

Progress = Callable[[int, int], None] | None


@dataclass(frozen=True)
class Sizing:
    """The grid a compute would use: the user's axes, `grid auto` for the rest."""

    grid: Grid
    notes: tuple[str, ...]
    auto: tuple[AxisSpec, ...]      # the specs `grid auto` found, if it ran
    stale: tuple[str, ...] = ()     # axes sized for an earlier model or data, sized again


# ---------------------------------------------------------------------------
# sizing and cost

def declared_counts(s: State, compiled: Compiled) -> list[int] | None:
    """Points of every axis, where the user gave them all (a `grid`, or `points N`
    declared with the parameter; a discrete parameter's values); None otherwise."""
    out = []
    for p in compiled.params:
        spec = s.spec(p.name)
        if spec is not None:
            out.append(axis_count(p, spec))
        elif p.discrete:
            out.append(len(p.values))
        elif p.points:
            out.append(int(p.points))
        else:
            return None
    return out


def check_count(s: State, compiled: Compiled) -> None:
    """Refuse a grid of the user's axes (or declared points) with more points than
    can be counted, before its axes are built or `grid auto` is run."""
    counts = declared_counts(s, compiled)
    if counts is None:
        return
    points = math.prod(counts)
    if points >= 2**62:
        raise ComputeError(f"this grid has {plan.format_count(points)} points: more than "
                           "quadrat can count; use fewer points or fewer parameters")


def sizing(s: State, compiled: Compiled) -> Sizing:
    """The grid to compute on: the user's axes, and `grid auto` for the rest and for
    the axes quadrat sized for a model or data set that has changed since."""
    notes = []
    stale = s.stale_specs
    have = {x.name for x in s.specs if x.name not in stale}
    missing = [p.name for p in compiled.params if p.name not in have]
    specs = [x for x in s.specs if x.name not in stale]
    auto_used: tuple[AxisSpec, ...] = ()
    if stale:
        what = " and ".join(w for w, changed in (
            ("model", s.sized.content[0] != s.model.revision),
            ("data", s.sized.content[1] != s.data.revision)) if changed)
        notes.append(f"the {what} changed since {s.sized.by} sized the grid of "
                     + ", ".join(f"`{m}`" for m in stale) + ": sized again")
    if missing:
        ag = auto_grid(compiled)
        auto_used = ag.specs
        specs += [x for x in ag.specs if x.name in missing]
        notes.append("grid auto for " + ", ".join(f"`{m}`" for m in missing))
        # heavy tails are told by the posterior's own warnings
        told = [m for m in ag.message.split("; ") if m and "has heavy tails" not in m]
        if told:
            notes.append("; ".join(told))
    return Sizing(build_grid(compiled.params, specs, rule=s.rule), tuple(notes), auto_used,
                  stale)


def check_cost(compiled: Compiled, grid: Grid, *, budget_seconds: float,
               force: bool = False) -> plan.Cost:
    """Refuse a grid that would not fit in memory, or (unless forced) would break
    the time budget, before anything is allocated."""
    c = plan.estimate(compiled, grid)
    if c.points >= 2**62:
        raise ComputeError(f"this grid has {plan.format_count(c.points)} points: more than "
                           "quadrat can count; use fewer points or fewer parameters")
    if not c.fits:
        raise ComputeError(
            f"this grid ({plan.format_count(c.points)} points) needs about "
            f"{plan.format_bytes(c.memory)} of memory; quadrat may use "
            f"{plan.format_bytes(c.machine_memory)} here: use fewer points or `zoom`")
    if not force and c.seconds > budget_seconds:
        raise ComputeError(
            f"this grid has {plan.format_count(c.points)} points and would take about "
            f"{plan.format_duration(c.seconds)} (budget {plan.format_duration(budget_seconds)}): "
            "use fewer points, `zoom`, or another rule; `compute force` runs it anyway")
    return c


#: Declared points beyond this are costed from the counts alone (no `grid auto`).
DECLARED_LIMIT = 10**12


def cost(s: State, *, budget_seconds: float) -> CostReport:
    compiled = s.compiled()
    counts = declared_counts(s, compiled)
    spp = framerun.seconds_per_evaluation(compiled) if compiled.params else None
    rules = framing.rule_rows(s, seconds_per_evaluation=spp)
    choice = _choice_text(s)
    if counts is not None and math.prod(counts) > DECLARED_LIMIT:
        c = plan.estimate_counts(compiled, counts)
        c = replace(c, seconds=c.points * (spp or c.seconds_per_point),
                    seconds_per_point=spp or c.seconds_per_point)
        lines = tuple(f"{p.name}: {n} points" for p, n in zip(compiled.params, counts))
        d = sum(1 for p in compiled.params if not p.discrete)
        return CostReport(c, lines, s.rule, False, budget_seconds, (),
                          _advice_text(c, d, budget_seconds) + "; "
                          + ("`rule sparse` or `rule hermite` integrate them in the frame "
                             "around the mode" if d <= SPARSE_MAX_DIMS else
                             "`rule hermite 1` (the Laplace approximation) is the only rule in "
                             "the frame of that size"),
                          rules, choice)
    size = sizing(s, compiled)
    grid = size.grid
    c = plan.estimate(compiled, grid, precise=True)
    ahead = []
    g = grid
    if not all(a.discrete for a in grid.axes) and c.points < 10**12:
        for k in range(1, 4):
            g2 = refined_grid(g, None)
            share = 1.0 - g.size / g2.size if g.size <= plan.STORE_LIMIT else 1.0
            mem = plan.memory_for(g2.size, [a.n for a in g2.axes], levels=g2.levels)
            ahead.append(CostStep(k, g2.size, mem, c.seconds_per_point * g2.size * share))
            g = g2
    return CostReport(c, tuple(a.describe() for a in grid.axes), s.rule, bool(size.auto),
                      budget_seconds, tuple(ahead), advice(c, grid, budget_seconds), rules,
                      choice)


def _choice_text(s: State) -> str:
    """What `compute` would use, when not the tensor grid."""
    if s.frame_rule is not None:
        return f"rule {s.frame_rule.describe()} (set)"
    if s.choice is not None or framing.grid_by_default(s):
        return ""
    return (f"the rule `compute` picks from the posterior's shape for "
            f"{framing.continuous(s)} continuous parameters: sparse near normal; where skew, "
            f"tails or a boundary call for it, the tensor grid up to "
            f"{framing.TROUBLE_GRID_DIMS} parameters and rotated past that")


def advice(c: plan.Cost, grid: Grid, budget_seconds: float) -> str:
    """Which way to go when a tensor grid is too big for the budget."""
    if c.fits and c.seconds <= budget_seconds:
        return ""
    return _advice_text(c, sum(1 for a in grid.axes if not a.discrete), budget_seconds)


def _advice_text(c: plan.Cost, d: int, budget_seconds: float) -> str:
    per = max(2, int((budget_seconds / max(c.seconds_per_point, 1e-12)) ** (1 / max(d, 1))))
    text = (f"{plan.format_count(c.points)} points is beyond the budget: a tensor grid "
            f"grows as N^d, and within {plan.format_duration(budget_seconds)} it allows about "
            f"{per} points per axis for {d} continuous parameters")
    if d > 6:
        text += "; with this many parameters a tensor grid is the wrong tool"
    else:
        text += "; use fewer points, `grid auto` or `zoom` to tighten the bounds"
    return text


# ---------------------------------------------------------------------------
# computing

def compute(s: State, *, budget_seconds: float, progress: Progress = None,
            force: bool = False) -> Outcome:
    """The posterior on the state's grid or frame rule: an Outcome with a
    `ComputeReport`."""
    chosen = framing.choose(s)
    if chosen.choice.in_frame:
        return framing.compute(s, chosen, budget_seconds=budget_seconds, progress=progress)
    compiled = s.compiled()
    check_count(s, compiled)
    out = _compute_on(s, compiled, sizing(s, compiled), budget_seconds=budget_seconds,
                      progress=progress, force=force)
    if chosen.why:
        out = Outcome(out.state, replace(out.result, notes=(chosen.why,) + out.result.notes))
    return out


def _compute_on(s: State, compiled: Compiled, size: Sizing, *, budget_seconds: float,
                progress: Progress, force: bool) -> Outcome:
    grid = size.grid
    check_cost(compiled, grid, budget_seconds=budget_seconds, force=force)
    post = compute_posterior(compiled, grid, progress=progress)
    notes = size.notes
    notes = notes + zero_notes(post)
    notes = notes + tuple(compiled.improper)
    if size.stale:
        # the stale axes are left to `grid auto`, as axes never set are
        s = replace(s, specs=tuple(x for x in s.specs if x.name not in size.stale), sized=None)
    return Outcome(s.with_posterior(post, steps=()),
                   ComputeReport(grid.size, post.seconds, post.log_evidence, notes,
                                 warnings(post), post.diagnostics.unresolved))


def zero_notes(post: Posterior) -> tuple[str, ...]:
    """What the points of zero density are: a support or constraint cutting through
    the mass, or a density that underflowed where it is negligible."""
    z = zeros(post)
    where = f"{z.count:,} of {post.grid.size:,} grid points"
    return {"none": (),
            "cut": (f"the posterior is zero at {where} (outside a support or constraint)",),
            "underflow": (f"the log-density is -inf at {where}, all where the posterior is "
                          "negligible (it underflows in double precision there); no answer "
                          "is affected",),
            "unknown": (f"the posterior is zero at {where} (outside a support or constraint, "
                        "or underflowing where it is negligible)",)}[z.kind]


def fresh(s: State, *, budget_seconds: float) -> Outcome:
    """The current posterior (a `Fresh`): the state's own, or computed first when
    that is cheap; refused with the figure when it is not."""
    if s.current:
        return Outcome(s, Fresh(s.posterior))
    chosen = framing.frame_path(s)
    if chosen is not None:
        return framing.fresh(s, chosen, budget_seconds=budget_seconds)
    what = "no posterior yet" if s.posterior is None else stale_reason(s)
    compiled = s.compiled()
    check_count(s, compiled)
    size = sizing(s, compiled)
    c = plan.estimate(compiled, size.grid)
    if c.seconds > CHEAP_SECONDS or not c.fits:
        raise ComputeError(f"{what} (about {plan.format_duration(c.seconds)} to compute): use "
                           "`compute`")
    out = _compute_on(s, compiled, size, budget_seconds=budget_seconds, progress=None,
                      force=False)
    rep = out.result
    again = "computed first" if s.posterior is None else "recomputed on the whole grid"
    return Outcome(out.state, Fresh(out.state.posterior,
                                    (f"{what}: {again} ({rep.points:,} points)",)
                                    + rep.notes + rep.warnings))


def stale_reason(s: State) -> str:
    """Why the state's posterior is out of date, in words: what changed since it was
    computed."""
    old, new = s.basis, s.own_basis
    if old is None:
        return "the posterior is out of date"
    changed = []
    if old.model != new.model:
        changed.append("the model")
    if old.data != new.data:
        changed.append("the data")
    if old.specs != new.specs:
        changed.append("the grid")
    if old.rule != new.rule or old.choice != new.choice:
        changed.append("the rule")
    if not changed:
        return "the posterior is out of date"
    what = changed[0] if len(changed) == 1 else ", ".join(changed[:-1]) + " and " + changed[-1]
    return f"{what} changed since the posterior was computed"


def computed(s: State, *, budget_seconds: float, progress: Progress = None) -> Outcome:
    """The current posterior (a `Fresh`), computed first whatever it takes (within
    the budget) when the state has none that is current."""
    if s.current:
        return Outcome(s, Fresh(s.posterior))
    out = compute(s, budget_seconds=budget_seconds, progress=progress)
    rep = out.result
    return Outcome(out.state, Fresh(out.state.posterior,
                                    (f"computed first ({rep.points:,} points)",) + rep.notes))


def warnings(post: Posterior) -> tuple[str, ...]:
    """A posterior the grid does not resolve, mass at the edges of the grid, and axes
    too coarse for the posterior's spread."""
    out = []
    if post.diagnostics.unresolved:
        out.append(f"the grid does not resolve the posterior: {post.diagnostics.unresolved}; "
                   "no answer on this grid is converged: use `grid auto`, or `zoom` to "
                   "bring the bounds in around the mass")
    for name, (lo_m, hi_m) in post.diagnostics.edge_mass.items():
        ax = post.grid.axis(name)
        p = post.compiled.model.param(name)
        k = post.tails(name).exponent()
        if k is not None and max(lo_m, hi_m) > EDGE_WARN:
            out.append(f"`{name}` has heavy tails (density falling as |{name}|^-{k:.2g}): "
                       f"{lo_m:.2g} and {hi_m:.2g} of the mass lie at or beyond the ends "
                       f"{ax.lo:.6g} and {ax.hi:.6g}; every error estimate includes it")
            continue
        if lo_m > EDGE_WARN and not (ax.scale == "linear" and ax.lo <= p.lo):
            out.append(f"mass at the lower edge of `{name}` ({lo_m:.2g} at {ax.lo:.6g}): "
                       "widen the grid or use `grid auto`")
        if hi_m > EDGE_WARN and not (ax.scale == "linear" and ax.hi >= p.hi):
            out.append(f"mass at the upper edge of `{name}` ({hi_m:.2g} at {ax.hi:.6g}): "
                       "widen the grid or use `grid auto`")
    for a in post.grid.axes:
        if a.discrete or a.n < 2 or post.diagnostics.unresolved:
            continue
        m = post.marginals[a.name]
        h = float(np.median(a.spacing()))
        if m.sd > 0 and h > 0 and m.sd / h < MIN_POINTS_PER_SD and not _settled(post, a.name):
            out.append(f"the grid of `{a.name}` is too coarse for its spread: "
                       f"{m.sd / h:.2g} points across one sd (want at least "
                       f"{MIN_POINTS_PER_SD:g}); use more points or `zoom`")
    return tuple(out)


#: An sd whose estimated error is below this share of itself is settled: a grid
#: spaced unevenly in the parameter's units (log and logit scales) may then have
#: few nodes per sd in the middle and still be right.
SETTLED = 1e-6


def _settled(post: Posterior, name: str) -> bool:
    """Whether the mean and sd of `name` are already known to `SETTLED` of the sd."""
    sd = post.param_sd(name)
    mean = post.param_mean(name)
    if sd.error is None or mean.error is None or not sd.value > 0:
        return False
    return max(sd.error, mean.error) <= SETTLED * sd.value


def grid_auto(s: State) -> Outcome:
    """Every axis from the posterior's modes and curvature: a `GridAuto`."""
    compiled = s.compiled()
    ag = auto_grid(compiled)
    notes = []
    if len(ag.modes) > 1:
        notes.append(f"{len(ag.modes)} separated modes: " + "; ".join(
            ", ".join(f"{k} = {v:.4g}" for k, v in m.items()) for m in ag.modes))
    if ag.message:
        notes.append(ag.message)
    grid = build_grid(compiled.params, ag.specs, rule=s.rule)
    lines = "; ".join(a.describe() for a in grid.axes)
    s = replace(s, specs=ag.specs)
    return Outcome(replace(s, sized=s.sized_by("`grid auto`")),
                   GridAuto(Change(f"grid auto: {lines} ({grid.size:,} points)", tuple(notes)),
                            ag))


# ---------------------------------------------------------------------------
# refining and zooming

def _specs_of(post: Posterior) -> tuple[AxisSpec, ...]:
    return tuple(AxisSpec(a.name, a.lo, a.hi, None if a.discrete else a.n,
                          None if a.discrete else a.scale) for a in post.grid.axes)


def refine(s: State, axis: str | None = None, until: float | None = None, *,
           budget_seconds: float, progress: Progress = None) -> Outcome:
    """Refine step by step (computing first if needed): a `RefineReport`; the
    state takes the final posterior and its grid."""
    if axis is not None:
        s.model.param(axis)
    if until is not None and not (until > 0 and math.isfinite(until)):
        raise GridError(f"`until` needs a positive tolerance; got {until:g}")
    chosen = framing.frame_path(s)
    if chosen is not None:
        if axis is not None:
            raise GridError(f"a rule in the frame is refined as a whole, not along `{axis}`: "
                            "use `refine` or `refine until TOL`")
        return framing.refine(s, chosen, until, budget_seconds=budget_seconds)
    first = computed(s, budget_seconds=budget_seconds, progress=progress)
    s = first.state
    res = refine_posterior(s.compiled(), first.result.posterior, axis=axis, until=until,
                           budget_seconds=budget_seconds, progress=progress)
    new = res.posterior
    steps = (s.steps if s.steps else res.steps[:1]) + res.steps[1:]
    s = replace(s, specs=_specs_of(new))
    return Outcome(s.with_posterior(new, sized=s.sized_by("`refine`"), steps=steps),
                   RefineReport(res.steps, res.converged, res.message, first.result.notes,
                                warnings(new)))


def zoom(s: State, mass: float = 1 - 1e-9, *, budget_seconds: float,
         progress: Progress = None, force: bool = False) -> Outcome:
    """Shrink every axis to the region holding `mass` and compute again with the
    same number of points: a `ComputeReport`."""
    if framing.active(s) is not None:
        raise GridError("`zoom` sets the bounds of a tensor grid; a rule in the frame places "
                        "its nodes around the posterior by itself: `rule grid` zooms")
    first = computed(s, budget_seconds=budget_seconds, progress=progress)
    s, notes = first.state, first.result.notes
    specs = zoom_specs(first.result.posterior, mass)
    compiled = s.compiled()
    widened: list[str] = []
    for attempt in range(ZOOM_WIDENINGS):
        grid = build_grid(compiled.params, specs, rule=s.rule)
        check_cost(compiled, grid, budget_seconds=budget_seconds, force=force)
        new = compute_posterior(compiled, grid, progress=progress)
        # the region read off a coarse grid can be too tight: widen any end that
        # now holds mass and compute again
        wider, moved = widen_specs(new, specs, edge_mass=10 * EDGE_MASS_AUTO)
        if not moved or attempt == ZOOM_WIDENINGS - 1:
            break
        specs = wider
        widened.extend(moved)
    if widened:
        notes = notes + ("the zoomed grid held mass at its edge; widened at the "
                         + ", ".join(sorted(set(widened))),)
    lines = "; ".join(a.describe() for a in grid.axes)
    s = replace(s, specs=specs)
    return Outcome(s.with_posterior(new, sized=s.sized_by("`zoom`"), steps=()),
                   ComputeReport(grid.size, new.seconds, new.log_evidence,
                                 notes + (f"zoomed to {mass:.10g} of the mass: {lines}",),
                                 warnings(new), new.diagnostics.unresolved))


# ---------------------------------------------------------------------------
# data arriving

def append(s: State, data: DataSet, message: str, *, budget_seconds: float,
           progress: Progress = None) -> Outcome:
    """The state with `data` (new rows at the end of columns): a current posterior
    that keeps its density is updated from the new rows alone, and re-sized when
    the mass moves toward an edge of its grid. A `Change`."""
    post = s.posterior
    if s.current and framing.is_node(post):
        return frameappend.append(s, data, message, targets=framing._budget(post.choice))
    if not s.current or post.logp is None:
        return Outcome(replace(s, data=data), Change(message, data_notes(s.model, data)))
    try:
        old_rows = {part.key: part.rows for part in s.compiled().likelihood}
        full = compile_model(s.model, data)
        inc = compile_model(s.model, data, rows_from=old_rows)
    except QuadratError as exc:
        return Outcome(replace(s, data=data),
                       Change(message, (f"{exc}; the posterior waits until the columns agree",)))
    new_post = compute_posterior(full, post.grid, logp=_updated_logp(post, inc),
                                 progress=progress)
    ns = replace(s, data=data, steps=())
    notes = ("posterior updated from the new rows alone",)
    specs = s.specs
    edge = max((max(v) for v in new_post.diagnostics.edge_mass.values()), default=0.0)
    if edge > 10 * EDGE_MASS_AUTO:
        ag = auto_grid(full)
        grid2 = build_grid(full.params, ag.specs, rule=s.rule)
        check_cost(full, grid2, budget_seconds=budget_seconds)
        new_post = compute_posterior(full, grid2, progress=progress)
        lines = "; ".join(a.describe() for a in grid2.axes)
        notes = (f"the mass moved toward an edge of the grid ({edge:.2g}); grid re-sized: "
                 f"{lines}",)
        specs = ag.specs
    ns = replace(ns, specs=specs)
    if specs is not s.specs:
        ns = replace(ns, sized=ns.sized_by("an append"))
    elif s.sized is not None and s.sized.content == s.content:
        # the grid was checked against the new rows above: still sized for them
        ns = replace(ns, sized=replace(s.sized, content=ns.content))
    ns = ns.with_posterior(new_post)
    ns.remember(full)
    return Outcome(ns, Change(message, notes + warnings(new_post)))


def _updated_logp(post: Posterior, inc: Compiled) -> np.ndarray:
    """The stored log density of `post` plus the new rows' log-likelihood `inc` at
    every grid point (points where the density was zero stay zero)."""
    grid = post.grid
    delta = np.empty(grid.size)
    for start, stop in grid.blocks(1 << 20):
        idx = grid.indices(start, stop)
        theta = [a.values[i] for a, i in zip(grid.axes, idx)]
        with np.errstate(all="ignore"):
            delta[start:stop] = inc.log_likelihood(theta)
    with np.errstate(invalid="ignore"):
        logp = post.logp + delta
    logp[np.isneginf(post.logp)] = -np.inf
    return logp
