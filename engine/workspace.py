"""The state that commands act on, and the operations on it.

A `Workspace` holds one immutable `State` (model, data, grid, rule, posterior,
keeps) and a stack of earlier states for `undo`. Every operation either returns
a result and replaces the state whole, or raises a `QuadratError` and leaves the
state exactly as it was: nothing is half-changed. The workspace never prints;
the shell renders what it returns.
"""

from __future__ import annotations

import math
import os
from dataclasses import dataclass, field, replace
from typing import Callable

import numpy as np
import sympy as sp

from . import families as fam
from . import plan, questions
from .data import DataSet, FileRecord, Table, read_csv, typed_column
from .errors import ComputeError, FormulaError, GridError, ModelError, QuadratError
from .expr import check_name, parse, parse_call
from .grid import Grid, make_axis
from .model import Compiled, Let, Likelihood, Model, Prior, compile_model, make_param
from .posterior import Estimate, Interval, Posterior, compute as compute_posterior
from .refine import (AutoGrid, AxisSpec, RefineStep, auto_grid, axis_count,
                     build_grid,
                     refine as refine_posterior, refined_grid, widen_specs, zoom_specs)
from .rules import RULES

#: A question recomputes a stale posterior by itself when that is predicted to
#: take less than this many seconds.
CHEAP_SECONDS = 2.0
#: Default budget: `compute` refuses longer jobs unless forced.
BUDGET_SECONDS = 600.0
UNDO_DEPTH = 200
#: Posterior mass at an axis end above which `compute` warns.
EDGE_WARN = 1e-6
#: The edge mass `grid auto` aims for; an append that pushes past ten times this
#: re-sizes the grid.
EDGE_MASS_AUTO = 1e-9
#: Fewer nodes than this across one posterior sd is called too coarse.
MIN_POINTS_PER_SD = 5.0


# ---------------------------------------------------------------------------
# results

@dataclass(frozen=True)
class Change:
    """What a state-changing command did: one message and any notes."""

    message: str
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Answer:
    """The answer to a question.

    Attributes
    ----------
    kind : str
        ``prob``, ``mean``, ``sd``, ``quantile``, ``interval``, ``evidence``,
        ``mode``.
    label : str
        What was asked, in words (for a table row).
    values : tuple of float
        The numbers `check` compares, in order.
    errors : tuple of float or None
        Their estimated absolute errors.
    notes : tuple of str
    detail : object
        The engine's own result (Interval, Mode, ...), for rendering.
    """

    kind: str
    label: str
    values: tuple[float, ...]
    errors: tuple[float | None, ...]
    notes: tuple[str, ...] = ()
    detail: object = None
    now: "Answer | None" = None   # inside a what-if layer: the same question, as things are


@dataclass(frozen=True)
class SummaryRow:
    name: str
    mean: Estimate
    sd: Estimate
    q025: Estimate
    q50: Estimate
    q975: Estimate


@dataclass(frozen=True)
class Summary:
    rows: tuple[SummaryRow, ...]
    log_evidence: Estimate | None
    points: int
    notes: tuple[str, ...] = ()
    now: "Summary | None" = None


@dataclass(frozen=True)
class Kept:
    """A model kept for comparison: its evidence and what it was fitted to."""

    name: str
    log_evidence: Estimate | None
    improper: tuple[str, ...]
    data_key: str
    data_rows: str
    model_lines: tuple[str, ...]
    cautions: tuple[str, ...]
    points: int


@dataclass(frozen=True)
class Comparison:
    """Two kept models: log Bayes factor (first over second) and its error."""

    first: Kept
    second: Kept
    log_bf: Estimate
    notes: tuple[str, ...]

    @property
    def bayes_factor(self) -> float:
        v = self.log_bf.value
        return math.exp(v) if v < 709 else math.inf


@dataclass(frozen=True)
class Prediction:
    """A predicted new observation ``NAME ~ FAMILY(args)``."""

    name: str
    family: str
    args: tuple
    text: str

@dataclass(frozen=True)
class ComputeReport:
    """What `compute` did."""

    points: int
    seconds: float
    log_evidence: Estimate | None
    notes: tuple[str, ...]
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class CostStep:
    """A refinement step ahead: its points, memory and predicted seconds."""

    step: int
    points: int
    memory: int
    seconds: float


@dataclass(frozen=True)
class CostReport:
    cost: plan.Cost
    grid: tuple[str, ...]      # one line per axis
    rule: str
    auto: bool                 # whether some axes would come from grid auto
    budget_seconds: float
    ahead: tuple[CostStep, ...] = ()
    advice: str = ""


@dataclass(frozen=True)
class RefineReport:
    """What `refine` did: the table of steps and why it stopped."""

    steps: tuple[RefineStep, ...]
    converged: bool
    message: str
    notes: tuple[str, ...]
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class Status:
    """What the toolbar shows: a pure summary of the state."""

    params: tuple[str, ...]
    points: int | None
    posterior: str            # "absent", "current", "out of date"
    log_evidence: float | None
    whatif: bool


# ---------------------------------------------------------------------------
# state

@dataclass(frozen=True)
class State:
    model: Model = field(default_factory=Model)
    data: DataSet = field(default_factory=DataSet)
    specs: tuple[AxisSpec, ...] = ()      # grids the user set
    auto: tuple[AxisSpec, ...] = ()       # grids `grid auto` found, for the basis below
    auto_basis: tuple = ()
    rule: str = "trapezoid"
    posterior: Posterior | None = None
    basis: tuple = ()                     # (model, data, grid specs, rule) of the posterior
    keeps: tuple = ()                     # Kept, by name
    steps: tuple = ()                     # refinement steps of the current posterior
    predictions: tuple = ()               # Prediction, by name

    def spec(self, name: str) -> AxisSpec | None:
        for s in self.specs:
            if s.name == name:
                return s
        return None


def _basis(s: State) -> tuple:
    return (id(s.model), id(s.data), s.specs, s.rule)


class Workspace:
    """The session's state and the operations on it.

    Parameters
    ----------
    budget_seconds : float, keyword-only
        `compute` refuses a job predicted to take longer, unless forced.
    base_dir : str, keyword-only
        Relative data-file paths are read from here (default: the current folder).
    """

    def __init__(self, *, budget_seconds: float = BUDGET_SECONDS, base_dir: str | None = None):
        self.state = State()
        self.undo_stack: list[State] = []
        self.budget_seconds = budget_seconds
        self.base_dir = base_dir
        self._compiled_cache: tuple | None = None
        self._whatif: tuple[State, list[State]] | None = None

    # -- bookkeeping ---------------------------------------------------------
    def _commit(self, new: State) -> None:
        self.undo_stack.append(self.state)
        if len(self.undo_stack) > UNDO_DEPTH:
            del self.undo_stack[0]
        self.state = new

    def _names(self) -> dict[str, sp.Symbol]:
        return self.state.model.symbols(self.state.data)

    def status(self) -> Status:
        s = self.state
        post = s.posterior
        if post is None:
            st = "absent"
        elif s.basis == _basis(s):
            st = "current"
        else:
            st = "out of date"
        ev = post.log_evidence.value if post is not None and post.log_evidence else None
        return Status(s.model.param_names, post.grid.size if post else None, st, ev,
                      self._whatif is not None)

    # -- declarations ----------------------------------------------------------
    def param(self, name: str, kind: str, *, lo: float | None = None, hi: float | None = None,
              values=None, points: int | None = None) -> Change:
        p = make_param(name, kind, lo=lo, hi=hi, values=values, points=points)
        s = self.state
        model, replaced = s.model.with_param(p, s.data)
        specs = s.specs
        notes = []
        if replaced:
            old = s.spec(name)
            if old is not None:
                specs = tuple(x for x in specs if x.name != name)
                notes.append(f"the grid of `{name}` was dropped; set it again or use `grid auto`")
        self._commit(replace(s, model=model, specs=specs))
        verb = "replaced" if replaced else "declared"
        return Change(f"parameter `{name}` {verb}: {p.describe()}", tuple(notes))

    def prior(self, name: str, text: str) -> Change:
        s = self.state
        s.model.param(name)
        f, args = _family_call(text, self._names())
        fname = f.name
        self._no_data(args, f"prior of `{name}`")
        pr = Prior(name, fname, args, None, text.strip())
        model, replaced = s.model.with_prior(pr)
        compile_model(replace(model, likelihoods=()), DataSet())
        self._commit(replace(s, model=model))
        return Change(f"prior of `{name}` {'replaced' if replaced else 'set'}: "
                      f"{name} ~ {text.strip()}")

    def prior_log(self, text: str) -> Change:
        s = self.state
        e = parse(text, self._names())
        self._no_data((e,), "`prior log`")
        model, _ = s.model.with_prior(Prior(None, None, (), e, text.strip()))
        compile_model(replace(model, likelihoods=()), DataSet())
        self._commit(replace(s, model=model))
        return Change(f"prior term added: log {text.strip()}")

    def _no_data(self, exprs, what: str) -> None:
        cols = set(self.state.data.names)
        for e in exprs:
            from .model import expand_lets
            used = {x.name for x in expand_lets(e, self.state.model).free_symbols} & cols
            if used:
                raise ModelError(f"{what} uses data column `{sorted(used)[0]}`; priors take "
                                 "parameters and numbers only")

    def likelihood(self, column: str, text: str, censor: str | None = None) -> Change:
        s = self.state
        if column not in s.data:
            raise ModelError(f"no data column `{column}`; give it with `data {column} = ...` "
                             "or `data load FILE.csv`")
        if censor is not None and censor not in s.data:
            raise ModelError(f"no data column `{censor}` for the censoring flags")
        f, args = _family_call(text, self._names())
        fname = f.name
        if censor is not None and f.logsf is None:
            raise ModelError(f"`{fname}` has no survival function; it cannot take censored rows")
        lk = Likelihood(column, fname, args, censor, None, text.strip())
        model, replaced = s.model.with_likelihood(lk)
        notes = self._try_compile(model, s.data)
        self._commit(replace(s, model=model))
        cens = f" censored {censor}" if censor else ""
        return Change(f"likelihood of `{column}` {'replaced' if replaced else 'set'}: "
                      f"{column} ~ {text.strip()}{cens}", notes)

    def likelihood_log(self, text: str) -> Change:
        s = self.state
        e = parse(text, self._names())
        lk = Likelihood(None, None, (), None, e, text.strip())
        model, _ = s.model.with_likelihood(lk)
        notes = self._try_compile(model, s.data)
        self._commit(replace(s, model=model))
        return Change(f"likelihood term added: log {text.strip()}", notes)

    def _try_compile(self, model: Model, data: DataSet) -> tuple[str, ...]:
        """Compile now so that errors in the model show at once (a model with no
        parameters yet is fine)."""
        if not model.params:
            return ()
        compile_model(model, data)
        return ()

    def _data_notes(self, model: Model, data: DataSet) -> tuple[str, ...]:
        """After a data change: what the likelihoods now say about the data, as
        notes (the data command itself stands; questions will say it again)."""
        if not model.params or not model.likelihoods:
            return ()
        try:
            compile_model(model, data)
        except QuadratError as exc:
            return (str(exc),)
        return ()

    def let(self, name: str, text: str) -> Change:
        s = self.state
        try:
            check_name(name, "let name")
        except FormulaError as exc:
            raise ModelError(str(exc)) from None
        names = self._names()
        names.pop(name, None)
        e = parse(text, names)
        model, replaced = s.model.with_let(Let(name, e, text.strip()), s.data)
        new = replace(s, model=model)
        if not _density_reads(s.model, name):
            # a derived quantity the priors and likelihoods do not use leaves the
            # posterior as it is: it stays current, under the new model
            new = self._keep_posterior(s, new)
        self._commit(new)
        return Change(f"let `{name}` {'replaced' if replaced else 'set'}: {name} = {text.strip()}")

    def _keep_posterior(self, old: State, new: State) -> State:
        """`new` (whose density is the same as `old`'s) with `old`'s posterior, still
        current, its compiled form carrying the new model."""
        post = old.posterior
        if post is None or old.basis != _basis(old):
            return new
        compiled = replace(post.compiled, model=new.model)
        new = replace(new, posterior=replace(post, compiled=compiled))
        if self._compiled_cache is not None and self._compiled_cache[0] == (id(old.model),
                                                                            id(old.data)):
            self._compiled_cache = ((id(new.model), id(new.data)), compiled, new.model,
                                    new.data)
        return replace(new, basis=_basis(new))

    # -- data -----------------------------------------------------------------
    def data_typed(self, name: str, texts: list[str]) -> Change:
        s = self.state
        try:
            check_name(name, "column name")
        except FormulaError as exc:
            raise ModelError(str(exc)) from None
        other = s.model.taken(name)
        if other is not None:
            raise ModelError(f"`{name}` is already a {other}")
        from .data import Column
        col = Column(name, typed_column(name, texts))
        data, replaced = s.data.with_column(col)
        notes = self._data_notes(s.model, data)
        self._commit(replace(s, data=data))
        return Change(f"data `{name}` {'replaced' if replaced else 'set'}: {col.rows} value"
                      f"{'s' if col.rows != 1 else ''}", notes)

    def resolve(self, path: str) -> str:
        if os.path.isabs(path) or not self.base_dir:
            return path
        return os.path.join(self.base_dir, path)

    def data_load(self, path: str, prefix: str | None = None) -> Change:
        s = self.state
        full = self.resolve(path)
        table = read_csv(full)
        pre = (prefix + "_") if prefix else ""
        if prefix:
            try:
                check_name(prefix, "prefix")
            except FormulaError as exc:
                raise ModelError(str(exc)) from None
        for h in table.header:
            other = s.model.taken(pre + h)
            if other is not None:
                raise ModelError(f"column `{pre + h}` of `{os.path.basename(path)}` is already "
                                 f"a {other}; load it with `as PREFIX`")
        tname = prefix or os.path.splitext(os.path.basename(path))[0]
        rec = FileRecord(path, table.sha256, table.rows, tuple(pre + h for h in table.header))
        data = s.data.load_table(Table(tname, pre, table.header), table.columns, rec)
        notes = self._data_notes(s.model, data)
        self._commit(replace(s, data=data))
        cols = ", ".join(f"`{pre + h}`" for h in table.header)
        return Change(f"loaded {table.rows} row{'s' if table.rows != 1 else ''} from "
                      f"`{os.path.basename(path)}`: {cols}", notes)

    # -- grids ------------------------------------------------------------------
    def grid(self, name: str, lo: float, hi: float, n: int | None = None,
             scale: str | None = None) -> Change:
        s = self.state
        p = s.model.param(name)
        if p.discrete and n is not None:
            raise GridError(f"`{name}` is discrete: its grid is every value from LO to HI, "
                            "so it takes no number of points")
        ax = make_axis(p, lo, hi, n, rule=s.rule, scale=scale)
        spec = AxisSpec(name, float(lo), float(hi), n, scale)
        replaced = s.spec(name) is not None
        specs = tuple(x for x in s.specs if x.name != name) + (spec,)
        self._commit(replace(s, specs=specs))
        return Change(f"grid {'replaced' if replaced else 'set'}: {ax.describe()}")

    def grid_auto(self) -> tuple[Change, AutoGrid]:
        s = self.state
        compiled = self.compiled()
        ag = auto_grid(compiled)
        notes = []
        if len(ag.modes) > 1:
            notes.append(f"{len(ag.modes)} separated modes: " + "; ".join(
                ", ".join(f"{k} = {v:.4g}" for k, v in m.items()) for m in ag.modes))
        if ag.message:
            notes.append(ag.message)
        self._commit(replace(s, specs=ag.specs, auto=ag.specs, auto_basis=(id(s.model), id(s.data))))
        grid = build_grid(compiled.params, ag.specs, rule=s.rule)
        lines = "; ".join(a.describe() for a in grid.axes)
        return Change(f"grid auto: {lines} ({grid.size:,} points)", tuple(notes)), ag

    def rule(self, name: str) -> Change:
        if name not in RULES:
            raise GridError(f"unknown rule `{name}`; known: {', '.join(RULES)}")
        self._commit(replace(self.state, rule=name))
        return Change(f"rule set: {name}")

    # -- compiling and computing -----------------------------------------------------
    def compiled(self) -> Compiled:
        s = self.state
        key = (id(s.model), id(s.data))
        if self._compiled_cache is not None and self._compiled_cache[0] == key:
            return self._compiled_cache[1]
        c = compile_model(s.model, s.data)
        self._compiled_cache = (key, c, s.model, s.data)  # keep the objects alive
        return c

    def _check_count(self, s: State, compiled: Compiled) -> None:
        """Refuse a grid of the user's axes with more points than can be counted,
        before its axes are built (axes of millions of nodes take memory)."""
        by = {x.name: x for x in s.specs}
        if not all(p.name in by for p in compiled.params):
            return
        points = math.prod(axis_count(p, by[p.name]) for p in compiled.params)
        if points >= 2**62:
            raise ComputeError(f"this grid has {plan.format_count(points)} points: more than "
                               "quadrat can count; use fewer points or fewer parameters")

    def _grid_for(self, s: State, compiled: Compiled) -> tuple[Grid, tuple[str, ...], tuple]:
        """The grid to compute on: the user's axes, and `grid auto` for the rest."""
        notes = []
        have = {x.name for x in s.specs}
        missing = [p.name for p in compiled.params if p.name not in have]
        specs = list(s.specs)
        auto_used = ()
        if missing:
            ag = auto_grid(compiled)
            auto_used = ag.specs
            for x in ag.specs:
                if x.name in missing:
                    specs.append(x)
            notes.append("grid auto for " + ", ".join(f"`{m}`" for m in missing))
            if ag.message:
                notes.append(ag.message)
        grid = build_grid(compiled.params, specs, rule=s.rule)
        return grid, tuple(notes), auto_used

    def cost(self) -> CostReport:
        s = self.state
        compiled = self.compiled()
        grid, notes, auto_used = self._grid_for(s, compiled)
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
        return CostReport(c, tuple(a.describe() for a in grid.axes), s.rule, bool(auto_used),
                          self.budget_seconds, tuple(ahead), self._advice(c, grid))

    def _advice(self, c: plan.Cost, grid: Grid) -> str:
        """Which way to go when a tensor grid is too big for the budget."""
        if c.fits and c.seconds <= self.budget_seconds:
            return ""
        d = sum(1 for a in grid.axes if not a.discrete)
        per = max(2, int((self.budget_seconds / max(c.seconds_per_point, 1e-12)) ** (1 / max(d, 1))))
        text = (f"{plan.format_count(c.points)} points is beyond the budget: a tensor grid "
                f"grows as N^d, and within {_duration(self.budget_seconds)} it allows about "
                f"{per} points per axis for {d} continuous parameters")
        if d > 6:
            text += "; with this many parameters a tensor grid is the wrong tool"
        else:
            text += "; use fewer points, `grid auto` or `zoom` to tighten the bounds"
        return text

    def compute(self, *, progress: Callable[[int, int], None] | None = None,
                force: bool = False) -> ComputeReport:
        """Evaluate the posterior. The state changes only when it succeeds."""
        s = self.state
        compiled = self.compiled()
        self._check_count(s, compiled)
        grid, notes, _ = self._grid_for(s, compiled)
        self._check_cost(compiled, grid, force=force)
        post = compute_posterior(compiled, grid, progress=progress)
        warnings = self._warnings(post)
        if post.diagnostics.zero_points:
            notes = notes + (f"the posterior is zero at {post.diagnostics.zero_points:,} of "
                             f"{grid.size:,} grid points (outside a support or constraint)",)
        notes = notes + tuple(compiled.improper)
        self._commit(replace(s, posterior=post, basis=_basis(s), steps=()))
        return ComputeReport(grid.size, post.seconds, post.log_evidence, notes, warnings)

    def _check_cost(self, compiled: Compiled, grid: Grid, *, force: bool = False) -> plan.Cost:
        """Refuse a grid that would not fit in memory, or (unless forced) would break
        the time budget, before anything is allocated."""
        c = plan.estimate(compiled, grid)
        if c.points >= 2**62:
            raise ComputeError(f"this grid has {plan.format_count(c.points)} points: more than "
                               "quadrat can count; use fewer points or fewer parameters")
        if not c.fits:
            raise ComputeError(
                f"this grid ({plan.format_count(c.points)} points) needs about "
                f"{_bytes(c.memory)} of memory; quadrat may use {_bytes(c.machine_memory)} here: "
                "use fewer points or `zoom`")
        if not force and c.seconds > self.budget_seconds:
            raise ComputeError(
                f"this grid has {plan.format_count(c.points)} points and would take about "
                f"{_duration(c.seconds)} (budget {_duration(self.budget_seconds)}): use fewer "
                "points, `zoom`, or another rule; `compute force` runs it anyway")
        return c

    # -- refinement ------------------------------------------------------------------
    def _fresh_posterior(self, progress=None) -> tuple[Posterior, tuple[str, ...]]:
        s = self.state
        if s.posterior is not None and s.basis == _basis(s):
            return s.posterior, ()
        rep = self.compute(progress=progress)
        return self.state.posterior, (f"computed first ({rep.points:,} points)",) + rep.notes

    def refine(self, axis: str | None = None, until: float | None = None, *,
               progress=None) -> RefineReport:
        """Refine step by step (computing first if needed); the state takes the
        final posterior and its grid."""
        if axis is not None:
            self.state.model.param(axis)
        if until is not None and not (until > 0 and math.isfinite(until)):
            raise GridError(f"`until` needs a positive tolerance; got {until:g}")
        post, notes = self._fresh_posterior(progress)
        res = refine_posterior(self.compiled(), post, axis=axis, until=until,
                               budget_seconds=self.budget_seconds, progress=progress)
        s = self.state
        new = res.posterior
        specs = tuple(AxisSpec(a.name, a.lo, a.hi, None if a.discrete else a.n,
                               None if a.discrete else a.scale) for a in new.grid.axes)
        steps = s.steps if s.steps else res.steps[:1]
        steps = steps + res.steps[1:]
        ns = replace(s, specs=specs, posterior=new, steps=steps)
        self._commit(replace(ns, basis=_basis(ns)))
        return RefineReport(res.steps, res.converged, res.message, notes, self._warnings(new))

    def zoom(self, mass: float = 1 - 1e-9, *, progress=None, force: bool = False
             ) -> ComputeReport:
        """Shrink every axis to the region holding `mass` and compute again with the
        same number of points."""
        post, notes = self._fresh_posterior(progress)
        specs = zoom_specs(post, mass)
        s = self.state
        compiled = self.compiled()
        widened: list[str] = []
        for attempt in range(8):
            grid = build_grid(compiled.params, specs, rule=s.rule)
            self._check_cost(compiled, grid, force=force)
            new = compute_posterior(compiled, grid, progress=progress)
            # the region read off a coarse grid can be too tight: widen any end that
            # now holds mass and compute again
            wider, moved = widen_specs(new, specs, edge_mass=10 * EDGE_MASS_AUTO)
            if not moved or attempt == 7:
                break
            specs = wider
            widened.extend(moved)
        if widened:
            notes = notes + ("the zoomed grid held mass at its edge; widened at the "
                             + ", ".join(sorted(set(widened))),)
        ns = replace(s, specs=specs, posterior=new, steps=())
        self._commit(replace(ns, basis=_basis(ns)))
        lines = "; ".join(a.describe() for a in grid.axes)
        return ComputeReport(grid.size, new.seconds, new.log_evidence,
                             notes + (f"zoomed to {mass:.10g} of the mass: {lines}",),
                             self._warnings(new))

    def _warnings(self, post: Posterior) -> tuple[str, ...]:
        out = []
        for name, (lo_m, hi_m) in post.diagnostics.edge_mass.items():
            ax = post.grid.axis(name)
            p = post.compiled.model.param(name)
            if lo_m > EDGE_WARN and not (ax.scale == "linear" and ax.lo <= p.lo):
                out.append(f"mass at the lower edge of `{name}` ({lo_m:.2g} at {ax.lo:.6g}): "
                           "widen the grid or use `grid auto`")
            if hi_m > EDGE_WARN and not (ax.scale == "linear" and ax.hi >= p.hi):
                out.append(f"mass at the upper edge of `{name}` ({hi_m:.2g} at {ax.hi:.6g}): "
                           "widen the grid or use `grid auto`")
        for a in post.grid.axes:
            if a.discrete or a.n < 2:
                continue
            m = post.marginals[a.name]
            h = float(np.median(a.spacing()))
            if m.sd > 0 and h > 0 and m.sd / h < MIN_POINTS_PER_SD:
                out.append(f"the grid of `{a.name}` is too coarse for its spread: "
                           f"{m.sd / h:.2g} points across one sd (want at least "
                           f"{MIN_POINTS_PER_SD:g}); use more points or `zoom`")
        return tuple(out)

    def posterior(self) -> tuple[Posterior, tuple[str, ...]]:
        """The current posterior; recomputed first when stale and cheap."""
        s = self.state
        if s.posterior is not None and s.basis == _basis(s):
            return s.posterior, ()
        what = "no posterior yet" if s.posterior is None else "the posterior is out of date"
        compiled = self.compiled()
        self._check_count(s, compiled)
        grid, notes, _ = self._grid_for(s, compiled)
        c = plan.estimate(compiled, grid)
        if c.seconds > CHEAP_SECONDS or not c.fits:
            raise ComputeError(f"{what} (about {_duration(c.seconds)} to compute): use `compute`")
        rep = self.compute()
        return self.state.posterior, (f"{what}: computed first ({rep.points:,} points)",) + \
            rep.notes + rep.warnings

    def joint(self, a: str, b: str) -> tuple[np.ndarray, Posterior, tuple[str, ...]]:
        """The 2-D posterior marginal of parameters `a` and `b`: node masses, shape
        ``(n_a, n_b)``, summing to 1; the posterior is computed first when stale
        and cheap. One that would not fit in memory is refused with the figure
        before anything is computed or allocated."""
        s = self.state
        pa, pb = s.model.param(a), s.model.param(b)
        sa, sb = s.spec(a), s.spec(b)
        if sa is not None and sb is not None:
            plan.check_memory([axis_count(pa, sa), axis_count(pb, sb)], pair=(a, b))
        post, notes = self.posterior()
        i, j = post.grid.index(a), post.grid.index(b)
        if (i, j) in post.pairs or (j, i) in post.pairs:
            mass = post.pair(a, b)
            return mass / mass.sum(), post, notes
        na, nb = post.grid.axes[i].n, post.grid.axes[j].n
        plan.check_memory([na, nb], pair=(a, b))
        if post.logp is None and post.seconds > CHEAP_SECONDS:
            raise ComputeError(
                f"the joint of `{a}` and `{b}` was not kept by the pass over "
                f"{plan.format_count(post.grid.size)} points, and another pass would take "
                f"about {_duration(post.seconds)}: use fewer points")
        mass = np.zeros(na * nb)
        for idx, _theta, ws in questions.walk(post):
            mass += np.bincount(idx[i] * nb + idx[j], weights=ws[0], minlength=na * nb)
        mass = mass.reshape(na, nb)
        return mass / mass.sum(), post, notes

    # -- questions ------------------------------------------------------------------
    def _summary(self) -> Summary:
        post, notes = self.posterior()
        rows = []
        for name in post.names:
            rows.append(SummaryRow(name, post.param_mean(name), post.param_sd(name),
                                   post.quantile(name, 0.025), post.quantile(name, 0.5),
                                   post.quantile(name, 0.975)))
        return Summary(tuple(rows), post.log_evidence, post.grid.size, notes)

    def _interval(self, name: str, level: float = 0.95, kind: str = "central") -> Answer:
        post, notes = self.posterior()
        self.state.model.param(name)
        iv: Interval = post.interval(name, level, kind)
        if len(iv.pieces) > 1:
            notes = notes + (f"the {kind} region has {len(iv.pieces)} pieces: " + ", ".join(
                f"[{a:.6g}, {b:.6g}]" for a, b in iv.pieces),)
        return Answer("interval", f"{level:g} {kind} interval of {name}",
                      (iv.lo.value, iv.hi.value), (iv.lo.error, iv.hi.error), notes, iv)

    def _mode(self) -> Answer:
        post, notes = self.posterior()
        m = questions.mode(post)
        if not m.converged:
            notes = notes + (m.message,)
        names = tuple(m.values)
        return Answer("mode", "joint mode " + ", ".join(names),
                      tuple(m.values[n] for n in names), tuple(None for _ in names), notes, m)

    def _expr(self, text: str, *, condition: bool = False):
        names = {p.name: p.symbol for p in self.state.model.params}
        names.update({l_.name: sp.Symbol(l_.name, real=True) for l_ in self.state.model.lets})
        for pr in self.state.predictions:
            names.setdefault(pr.name, sp.Symbol(pr.name, real=True))
        for c in self.state.data.names:
            if c not in names:
                names[c] = sp.Symbol(c, real=True)
        return parse(text, names, condition=condition)

    def _predicted_in(self, e) -> Prediction | None:
        found = [self._prediction(x.name) for x in e.free_symbols
                 if self._prediction(x.name) is not None]
        if not found:
            return None
        if len(found) > 1 or e.free_symbols != {sp.Symbol(found[0].name, real=True)}:
            raise ComputeError(f"a question about the predicted `{found[0].name}` may use "
                               "only it and numbers")
        return found[0]

    def _prob(self, text: str) -> Answer:
        cond = self._expr(text, condition=True)
        pr = self._predicted_in(cond)
        if pr is not None:
            pv, notes = self._predictive(pr)
            val = _predictive_prob(pv, cond, pr.name)
            return Answer("prob", f"P({text.strip()}) for a new {pr.name}", (val,), (None,),
                          notes, pv)
        post, notes = self.posterior()
        est = questions.probability(post, cond)
        return Answer("prob", f"P({text.strip()})", (est.value,), (est.error,), notes, est)

    def _pred_only(self, e):
        pr = self._predicted_in(e)
        if pr is not None and not isinstance(e, sp.Symbol):
            raise ComputeError(f"ask about the predicted `{pr.name}` itself (mean {pr.name}, "
                               f"sd {pr.name}, quantile {pr.name} Q)")
        return pr

    def _moment(self, kind: str, text: str) -> Answer:
        """`mean` or `sd` of an expression, or of a predicted observation."""
        e = self._expr(text)
        pr = self._pred_only(e)
        if pr is not None:
            pv, notes = self._predictive(pr)
            value = pv.mean if kind == "mean" else pv.sd
            return Answer(kind, f"{kind} of a new {pr.name}", (value,), (None,), notes, pv)
        post, notes = self.posterior()
        mo = questions.moments(post, e)
        est = mo.mean if kind == "mean" else mo.sd
        return Answer(kind, f"{kind} of {text.strip()}", (float(est.value),), (est.error,),
                      notes, mo)

    def _mean(self, text: str) -> Answer:
        return self._moment("mean", text)

    def _sd(self, text: str) -> Answer:
        return self._moment("sd", text)

    def _quantile(self, text: str, q: float) -> Answer:
        e = self._expr(text)
        pr = self._pred_only(e)
        if pr is not None:
            pv, notes = self._predictive(pr)
            return Answer("quantile", f"{q:g} quantile of a new {pr.name}", (pv.quantile(q),),
                          (None,), notes, pv)
        post, notes = self.posterior()
        est = questions.quantile(post, e, q)
        return Answer("quantile", f"{q:g} quantile of {text.strip()}", (est.value,),
                      (est.error,), notes, est)

    def _evidence(self) -> Answer:
        post, notes = self.posterior()
        if post.log_evidence is None:
            why = "; ".join(post.compiled.improper) or "the prior is improper"
            raise ComputeError(f"the evidence is not defined: {why}")
        ev = post.log_evidence
        return Answer("evidence", "log evidence", (ev.value,), (ev.error,), notes, ev)

    # -- questions, with the what-if layer -------------------------------------------
    def _ask(self, method, *args):
        """Answer on the current state; inside a what-if layer also on the state
        from before it ("now"), side by side."""
        ans = method(*args)
        if self._whatif is None:
            return ans
        base, stack = self._whatif
        cur, cur_stack, cache = self.state, self.undo_stack, self._compiled_cache
        notes = ()
        try:
            self.state, self.undo_stack = base, list(stack)
            now = method(*args)
            self._whatif = (self.state, stack)   # keep a recomputation of "now"
        except QuadratError as exc:
            # the question may use names declared inside the layer
            now = None
            notes = (f"no answer as things are: {exc}",)
        finally:
            self.state, self.undo_stack, self._compiled_cache = cur, cur_stack, cache
        return replace(ans, now=now, notes=tuple(ans.notes) + notes)

    def summary(self) -> Summary:
        return self._ask(self._summary)

    def interval(self, name: str, level: float = 0.95, kind: str = "central") -> Answer:
        if self._prediction(name) is not None:
            return self._ask(self._pred_interval, name, level, kind)
        return self._ask(self._interval, name, level, kind)

    def mode(self) -> Answer:
        return self._ask(self._mode)

    def prob(self, text: str) -> Answer:
        return self._ask(self._prob, text)

    def mean(self, text: str) -> Answer:
        return self._ask(self._mean, text)

    def sd(self, text: str) -> Answer:
        return self._ask(self._sd, text)

    def quantile(self, text: str, q: float) -> Answer:
        return self._ask(self._quantile, text, q)

    def evidence(self) -> Answer:
        return self._ask(self._evidence)

    # -- data arriving ----------------------------------------------------------------
    def data_append(self, name: str, texts: list[str], *, progress=None) -> Change:
        """New values at the end of column `name`; the posterior is updated from the
        new rows alone when it is current."""
        s = self.state
        col = s.data.get(name)
        vals = typed_column(name, texts)
        data = s.data.append(name, vals)
        return self._after_append(data, f"appended {len(vals)} value"
                                  f"{'s' if len(vals) != 1 else ''} to `{name}` "
                                  f"({col.rows + len(vals)} rows now)", progress)

    def data_append_file(self, path: str, prefix: str | None = None, *, progress=None) -> Change:
        """The rows of a CSV file at the end of the table loaded with the same header."""
        s = self.state
        table = read_csv(self.resolve(path))
        t = s.data.table_for_header(table.header, (prefix + "_") if prefix else None)
        if t is None:
            raise ModelError(f"no loaded table has the columns of `{os.path.basename(path)}` "
                             f"({', '.join(table.header)}); load it first with `data load`")
        rec = FileRecord(path, table.sha256, table.rows, tuple(t.prefix + h for h in table.header),
                         "append")
        data = s.data.append_table(t, table.columns, rec)
        return self._after_append(data, f"appended {table.rows} row"
                                  f"{'s' if table.rows != 1 else ''} from "
                                  f"`{os.path.basename(path)}` to table `{t.name}`", progress)

    def _after_append(self, data: DataSet, message: str, progress) -> Change:
        s = self.state
        post = s.posterior
        current = post is not None and s.basis == _basis(s)
        if not current or post.logp is None:
            notes = self._data_notes(s.model, data)
            self._commit(replace(s, data=data))
            return Change(message, notes)
        try:
            old = self.compiled()
            old_rows = {part.key: part.rows for part in old.likelihood}
            full = compile_model(s.model, data)
            inc = compile_model(s.model, data, rows_from=old_rows)
        except QuadratError as exc:
            self._commit(replace(s, data=data))
            return Change(message, (f"{exc}; the posterior waits until the columns agree",))
        delta = np.empty(post.grid.size)
        grid = post.grid
        for start, stop in grid.blocks(1 << 20):
            idx = grid.indices(start, stop)
            theta = [a.values[i] for a, i in zip(grid.axes, idx)]
            with np.errstate(all="ignore"):
                delta[start:stop] = inc.log_likelihood(theta)
        with np.errstate(invalid="ignore"):
            logp = post.logp + delta
        logp[np.isneginf(post.logp)] = -np.inf
        new_post = compute_posterior(full, grid, logp=logp, progress=progress)
        notes: list[str] = ["posterior updated from the new rows alone"]
        ns = replace(s, data=data, posterior=new_post, steps=())
        edge = max((max(v) for v in new_post.diagnostics.edge_mass.values()), default=0.0)
        if edge > 10 * EDGE_MASS_AUTO:
            ag = auto_grid(full)
            grid2 = build_grid(full.params, ag.specs, rule=s.rule)
            self._check_cost(full, grid2)
            new_post = compute_posterior(full, grid2, progress=progress)
            lines = "; ".join(a.describe() for a in grid2.axes)
            notes = [f"the mass moved toward an edge of the grid ({edge:.2g}); grid re-sized: "
                     f"{lines}"]
            ns = replace(ns, specs=ag.specs, posterior=new_post)
        ns = replace(ns, basis=_basis(ns))
        self._commit(ns)
        self._compiled_cache = ((id(ns.model), id(ns.data)), full, ns.model, ns.data)
        return Change(message, tuple(notes) + self._warnings(new_post))

    # -- what-if ------------------------------------------------------------------------
    def whatif_begin(self) -> Change:
        if self._whatif is not None:
            raise QuadratError("already in a what-if layer; `whatif end` first")
        self._whatif = (self.state, list(self.undo_stack))
        return Change("what-if: the data commands that follow are hypothetical; questions "
                      "answer now and what-if side by side; `whatif end` drops the layer")

    def whatif_end(self) -> Change:
        if self._whatif is None:
            raise QuadratError("not in a what-if layer")
        self.state, self.undo_stack = self._whatif[0], list(self._whatif[1])
        self._whatif = None
        self._compiled_cache = None
        return Change("what-if dropped: everything is as it was before `whatif`")

    @property
    def in_whatif(self) -> bool:
        return self._whatif is not None

    # -- model comparison ----------------------------------------------------------------
    def keep(self, name: str) -> Change:
        try:
            check_name(name, "keep name")
        except FormulaError as exc:
            raise ModelError(str(exc)) from None
        post, notes = self.posterior()
        s = self.state
        k = Kept(name, post.log_evidence, post.compiled.improper, self._data_key(),
                 self._data_rows(), self._model_lines(), self._wide_priors(post),
                 post.grid.size)
        replaced = any(x.name == name for x in s.keeps)
        keeps = tuple(x for x in s.keeps if x.name != name) + (k,)
        self._commit(replace(s, keeps=keeps))
        ev = (f"log evidence {post.log_evidence.value:.6g}" if post.log_evidence
              else "no evidence (improper prior)")
        return Change(f"model kept as `{name}`{' (replaced)' if replaced else ''}: {ev}",
                      notes)

    def compare(self, a: str, b: str) -> Comparison:
        s = self.state
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

    def _data_key(self) -> str:
        import hashlib
        s = self.state
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

    def _data_rows(self) -> str:
        s = self.state
        parts = [f"`{lk.column}` {s.data.get(lk.column).rows} rows" for lk in s.model.likelihoods
                 if lk.column is not None and lk.column in s.data]
        return ", ".join(parts) or "no data"

    def _model_lines(self) -> tuple[str, ...]:
        m = self.state.model
        out = [f"param {p.name} {p.describe()}" for p in m.params]
        out += [f"prior {pr.target} ~ {pr.text}" if pr.target else f"prior log {pr.text}"
                for pr in m.priors]
        out += [f"likelihood {lk.column} ~ {lk.text}" if lk.column else f"likelihood log {lk.text}"
                for lk in m.likelihoods]
        return tuple(out)

    def _wide_priors(self, post: Posterior) -> tuple[str, ...]:
        """Priors much wider than the posterior: the Bayes factor then depends on
        the prior's width."""
        out = []
        m = self.state.model
        named = {pr.target: pr for pr in m.priors if pr.target}
        for p in m.params:
            if p.discrete:
                continue
            post_sd = post.marginals[p.name].sd
            if not post_sd > 0:
                continue
            pr = named.get(p.name)
            prior_sd = None
            if pr is None and p.bounded:
                prior_sd = (p.hi - p.lo) / math.sqrt(12)
            elif pr is not None and all(not a.free_symbols for a in pr.args):
                try:
                    with np.errstate(all="ignore"):
                        prior_sd = float(fam.get(pr.family).scipy(*[float(a) for a in pr.args]).std())
                except (TypeError, ValueError):
                    prior_sd = None
            if prior_sd is None or not math.isfinite(prior_sd):
                if pr is not None and pr.family in ("cauchy", "half_cauchy", "student_t"):
                    out.append(f"the prior of `{p.name}` has heavy tails: the Bayes factor "
                               "depends on its scale")
                continue
            if prior_sd > 100 * post_sd:
                out.append(f"the prior of `{p.name}` is {prior_sd / post_sd:.0f} times wider than "
                           "its posterior: the Bayes factor depends on the prior's width")
        return tuple(out)

    # -- prediction -----------------------------------------------------------------------
    def _prediction(self, name: str) -> Prediction | None:
        for p in self.state.predictions:
            if p.name == name:
                return p
        return None

    def predict(self, name: str, text: str) -> Answer:
        """The posterior predictive of a new observation ``name ~ FAMILY(args)``; later
        `prob`, `mean`, `sd`, `quantile` and `interval` questions about `name` use it."""
        try:
            check_name(name, "predicted name")
        except FormulaError as exc:
            raise ModelError(str(exc)) from None
        s = self.state
        other = s.model.taken(name)
        if other in ("parameter", "let"):
            raise ModelError(f"`{name}` is already a {other}")
        names = {c: sp.Symbol(c, real=True) for c in s.data.names}
        names.update({p.name: p.symbol for p in s.model.params})
        names.update({l_.name: sp.Symbol(l_.name, real=True) for l_ in s.model.lets})
        fname, args = parse_call(text, names, fam.FAMILIES)
        cols = {x.name for a in args for x in a.free_symbols} & set(s.data.names)
        if cols:
            raise ModelError(f"predict: `{sorted(cols)[0]}` is a data column; give the new "
                             "row's values as numbers")
        f, args = _family_call(text, names)
        pr = Prediction(name, f.name, args, text.strip())
        ans = self._ask(self._pred_answer, pr)
        preds = tuple(p for p in s.predictions if p.name != name) + (pr,)
        new = replace(self.state, predictions=preds)
        self._commit(new)
        if self._whatif is not None:
            base, stack = self._whatif
            bp = tuple(p for p in base.predictions if p.name != name) + (pr,)
            self._whatif = (replace(base, predictions=bp), stack)
        return ans

    def _predictive(self, pr: Prediction):
        from .predict import predictive
        post, notes = self.posterior()
        return predictive(post, pr.name, pr.family, pr.args, self.state.model), notes

    def _pred_answer(self, pr: Prediction) -> Answer:
        pv, notes = self._predictive(pr)
        lo, hi = pv.quantile(0.025), pv.quantile(0.975)
        return Answer("predict", f"new {pr.name} ~ {pr.text}", (pv.mean, pv.sd, lo, hi),
                      (None, None, None, None), notes, pv)

    def _pred_interval(self, name: str, level: float, kind: str) -> Answer:
        if kind != "central":
            raise ComputeError("a predicted observation has central intervals only")
        pv, notes = self._predictive(self._prediction(name))
        a = (1 - level) / 2
        lo, hi = pv.quantile(a), pv.quantile(1 - a)
        return Answer("interval", f"{level:g} central interval of new {name}", (lo, hi),
                      (None, None), notes, pv)

    def samplesize(self, name: str, width: float, *, level: float = 0.95, max_n: int = 10_000,
                   using: str | None = None, sims: int = 200, seed: int = 1,
                   kind: str = "central", progress=None):
        """How many further observations until the expected width of the `level`
        interval of `name` is at most `width` (average length criterion)."""
        from .predict import FutureRows, sample_size
        s = self.state
        s.model.param(name)
        use = None
        if using is not None:
            col, _, rest = using.partition("~")
            col = col.strip()
            if not rest.strip():
                raise ModelError("`using` needs COL ~ FAMILY(args)")
            try:
                check_name(col, "column name")
            except FormulaError as exc:
                raise ModelError(str(exc)) from None
            names = {p.name: p.symbol for p in s.model.params}
            names.update({l_.name: sp.Symbol(l_.name, real=True) for l_ in s.model.lets})
            f, args = _family_call(rest, names)
            use = FutureRows(col, f.name, tuple(args))
        post, notes = self.posterior()
        res = sample_size(post, s.model, name, width, level=level, max_n=max_n, using=use,
                          data=s.data, sims=sims, seed=seed, kind=kind, progress=progress)
        return res, notes

    # -- housekeeping -------------------------------------------------------------
    def undo(self) -> Change:
        if not self.undo_stack:
            raise QuadratError("nothing to undo")
        self.state = self.undo_stack.pop()
        return Change("undone: the state is as it was before the last change")

    def reset(self) -> Change:
        self._commit(State())
        return Change("reset: model, data, grid and posterior cleared (`undo` brings them back)")


def _density_reads(model: Model, name: str) -> bool:
    """Whether the priors or likelihoods of `model` read let `name` (directly or
    through other lets)."""
    sym = sp.Symbol(name, real=True)
    from .model import expand_lets
    exprs = [a for pr in model.priors for a in pr.args] + \
        [pr.log for pr in model.priors if pr.log is not None] + \
        [a for lk in model.likelihoods for a in lk.args] + \
        [lk.log for lk in model.likelihoods if lk.log is not None]
    for e in exprs:
        if e.has(sym):
            return True
        # through another let that reads it
        for l_ in model.lets:
            if e.has(sp.Symbol(l_.name, real=True)) and l_.name != name and \
                    expand_lets(sp.Symbol(l_.name, real=True), model).has(sym):
                return True
    return False


def _family_call(text: str, names) -> tuple[fam.Family, tuple]:
    """``FAMILY(args)`` parsed, with the argument count and constant arguments
    checked against the family."""
    fname, args = parse_call(text, names, fam.FAMILIES)
    f = fam.get(fname)
    if len(args) != len(f.params):
        raise ModelError(f"`{fname}` takes {len(f.params)} argument"
                         f"{'s' if len(f.params) != 1 else ''} ({', '.join(f.params)}), "
                         f"got {len(args)}")
    fam.check_constant_args(f, args)
    return f, args


_REL = {sp.StrictLessThan: "<", sp.LessThan: "<=", sp.StrictGreaterThan: ">",
        sp.GreaterThan: ">=", sp.Equality: "==", sp.Unequality: "!="}
_FLIP = {"<": ">", "<=": ">=", ">": "<", ">=": "<=", "==": "==", "!=": "!="}


def _predictive_prob(pv, cond, name: str) -> float:
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


_bytes = plan.format_bytes
_duration = plan.format_duration
