"""Declarations: pure functions from a state to the next one.

Each function takes a `State` and what the command gave, checks it, and returns
an `Outcome` holding the new state and the `Change` to report; it raises a
`QuadratError` (and changes nothing) on bad input. Nothing here computes a
posterior: a let that the density does not read keeps the posterior current,
every other change leaves it out of date.
"""

from __future__ import annotations

import os
from dataclasses import replace

import sympy as sp

from . import families as fam
from .data import Column, DataSet, FileRecord, Table, parse_number, read_csv, typed_column
from .errors import DataError, FormulaError, GridError, ModelError, QuadratError
from .expr import check_name, parse, parse_call
from .grid import make_axis
from .model import Let, Likelihood, Model, Prior, compile_model, expand_lets, make_param
from .predict import FutureRows
from .refine import AxisSpec
from .results import Change, Kept
from .framerun import FRAME_RULES, rule_choice
from .rules import RULES
from .state import Outcome, Prediction, State


# ---------------------------------------------------------------------------
# checks shared by the declarations

def checked_name(name: str, what: str) -> None:
    """Refuse a name no formula could use, as a model error."""
    try:
        check_name(name, what)
    except FormulaError as exc:
        raise ModelError(str(exc)) from None


def family_call(text: str, names) -> tuple[fam.Family, tuple]:
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


def _names(s: State) -> dict[str, sp.Symbol]:
    return s.model.symbols(s.data)


def _no_data(s: State, exprs, what: str) -> None:
    cols = set(s.data.names)
    for e in exprs:
        used = {x.name for x in expand_lets(e, s.model).free_symbols} & cols
        if used:
            raise ModelError(f"{what} uses data column `{sorted(used)[0]}`; priors take "
                             "parameters and numbers only")


def _check_compiles(model: Model, data: DataSet) -> None:
    """Compile now so that errors in the model show at once (a model with no
    parameters yet is fine)."""
    if model.params:
        compile_model(model, data)


def data_notes(model: Model, data: DataSet) -> tuple[str, ...]:
    """After a data change: what the likelihoods now say about the data, as
    notes (the data command itself stands; questions will say it again)."""
    if not model.params or not model.likelihoods:
        return ()
    try:
        compile_model(model, data)
    except QuadratError as exc:
        return (str(exc),)
    return ()


def _verb(replaced: bool, new: str = "set") -> str:
    return "replaced" if replaced else new


# ---------------------------------------------------------------------------
# the model

def param(s: State, name: str, kind: str, *, lo: float | None = None, hi: float | None = None,
          values=None, points: int | None = None) -> Outcome:
    p = make_param(name, kind, lo=lo, hi=hi, values=values, points=points)
    model, replaced = s.model.with_param(p, s.data)
    specs, notes = s.specs, ()
    if replaced and s.spec(name) is not None:
        specs = tuple(x for x in specs if x.name != name)
        notes = (f"the grid of `{name}` was dropped; set it again or use `grid auto`",)
    return Outcome(replace(s, model=model, specs=specs),
                   Change(f"parameter `{name}` {_verb(replaced, 'declared')}: {p.describe()}",
                          notes))


def prior(s: State, name: str, text: str) -> Outcome:
    s.model.param(name)
    f, args = family_call(text, _names(s))
    _no_data(s, args, f"prior of `{name}`")
    model, replaced = s.model.with_prior(Prior(name, f.name, args, None, text.strip()))
    compile_model(replace(model, likelihoods=()), DataSet())
    return Outcome(replace(s, model=model),
                   Change(f"prior of `{name}` {_verb(replaced)}: {name} ~ {text.strip()}"))


def prior_log(s: State, text: str) -> Outcome:
    e = parse(text, _names(s))
    _no_data(s, (e,), "`prior log`")
    model, _ = s.model.with_prior(Prior(None, None, (), e, text.strip()))
    compile_model(replace(model, likelihoods=()), DataSet())
    return Outcome(replace(s, model=model), Change(f"prior term added: log {text.strip()}"))


def likelihood(s: State, column: str, text: str, censor: str | None = None) -> Outcome:
    if column not in s.data:
        raise ModelError(f"no data column `{column}`; give it with `data {column} = ...` "
                         "or `data load FILE.csv`")
    if censor is not None and censor not in s.data:
        raise ModelError(f"no data column `{censor}` for the censoring flags")
    f, args = family_call(text, _names(s))
    if censor is not None and f.logsf is None:
        raise ModelError(f"`{f.name}` has no survival function; it cannot take censored rows")
    lk = Likelihood(column, f.name, args, censor, None, text.strip())
    model, replaced = s.model.with_likelihood(lk)
    _check_compiles(model, s.data)
    cens = f" censored {censor}" if censor else ""
    return Outcome(replace(s, model=model),
                   Change(f"likelihood of `{column}` {_verb(replaced)}: "
                          f"{column} ~ {text.strip()}{cens}"))


def likelihood_log(s: State, text: str) -> Outcome:
    e = parse(text, _names(s))
    model, _ = s.model.with_likelihood(Likelihood(None, None, (), None, e, text.strip()))
    _check_compiles(model, s.data)
    return Outcome(replace(s, model=model),
                   Change(f"likelihood term added: log {text.strip()}"))


def let(s: State, name: str, text: str) -> Outcome:
    checked_name(name, "let name")
    names = _names(s)
    names.pop(name, None)
    e = parse(text, names)
    model, replaced = s.model.with_let(Let(name, e, text.strip()), s.data)
    new = replace(s, model=model)
    if not density_reads(s.model, name):
        # a derived quantity the priors and likelihoods do not use leaves the
        # posterior as it is: it stays current, under the new model
        new = _keep_posterior(s, new)
    return Outcome(new, Change(f"let `{name}` {_verb(replaced)}: {name} = {text.strip()}"))


def _keep_posterior(old: State, new: State) -> State:
    """`new` (whose density is the same as `old`'s) with `old`'s posterior, still
    current, its compiled form carrying the new model."""
    post = old.posterior
    if post is None or not old.current:
        return new
    compiled = replace(post.compiled, model=new.model)
    if old.memo.get(old.content) is not None:
        new.remember(compiled)
    if old.sized is not None and old.sized.content == old.content:
        # the same density: the axes sized for it still fit
        new = replace(new, sized=replace(old.sized, content=new.content))
    return new.with_posterior(replace(post, compiled=compiled))


def density_reads(model: Model, name: str) -> bool:
    """Whether the priors or likelihoods of `model` read let `name` (directly or
    through other lets)."""
    sym = sp.Symbol(name, real=True)
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


# ---------------------------------------------------------------------------
# data

def data_typed(s: State, name: str, texts: list[str]) -> Outcome:
    checked_name(name, "column name")
    other = s.model.taken(name)
    if other is not None:
        raise ModelError(f"`{name}` is already a {other}")
    col = Column(name, typed_column(name, texts))
    data, replaced = s.data.with_column(col)
    return Outcome(replace(s, data=data),
                   Change(f"data `{name}` {_verb(replaced)}: {col.rows} value"
                          f"{'s' if col.rows != 1 else ''}", data_notes(s.model, data)))


def data_load(s: State, path: str, full: str, prefix: str | None = None) -> Outcome:
    """The columns of the CSV file at `full` (typed as `path`)."""
    table = read_csv(full, shown=path)
    pre = (prefix + "_") if prefix else ""
    if prefix:
        checked_name(prefix, "prefix")
    for h in table.header:
        other = s.model.taken(pre + h)
        if other is not None:
            raise ModelError(f"column `{pre + h}` of `{os.path.basename(path)}` is already "
                             f"a {other}; load it with `as PREFIX`")
    tname = prefix or os.path.splitext(os.path.basename(path))[0]
    rec = FileRecord(path, table.sha256, table.rows, tuple(pre + h for h in table.header))
    data = s.data.load_table(Table(tname, pre, table.header), table.columns, rec)
    cols = ", ".join(f"`{pre + h}`" for h in table.header)
    return Outcome(replace(s, data=data),
                   Change(f"loaded {table.rows} row{'s' if table.rows != 1 else ''} from "
                          f"`{os.path.basename(path)}`: {cols}", data_notes(s.model, data)))


def _row(s: State, name: str, row: int, what: str) -> int:
    """Row `row` (1-based, as counted in the column and its file) of column `name`,
    checked; returned 0-based."""
    col = s.data.get(name)
    if not 1 <= row <= col.rows:
        raise DataError(f"{what}: `{name}` has {col.rows} row{'s' if col.rows != 1 else ''}; "
                        f"row {row} is not one of them")
    return row - 1


def data_edit(s: State, name: str, row: int, text: str) -> Outcome:
    """The value of column `name` in row `row` (1-based) changed to `text`."""
    what = f"data edit `{name}` row {row}"
    i = _row(s, name, row, what)
    value = parse_number(text, what)
    old = float(s.data.values(name)[i])
    data = s.data.with_value(name, i, value)
    return Outcome(replace(s, data=data),
                   Change(f"changed `{name}` row {row}: {old:g} -> {value:g}", data_notes(s.model, data)))


def data_drop(s: State, name: str, row: int) -> Outcome:
    """Row `row` (1-based) taken out of the table holding column `name`."""
    i = _row(s, name, row, f"data drop `{name}` row {row}")
    group = s.data.row_group(name)
    data = s.data.without_row(name, i)
    left = data.get(name).rows
    cols = ", ".join(f"`{c}`" for c in group)
    return Outcome(replace(s, data=data),
                   Change(f"dropped row {row} of {cols} ({left} row{'s' if left != 1 else ''} "
                          "now)", data_notes(s.model, data)))


def appended_values(s: State, name: str, texts: list[str]) -> tuple[DataSet, str]:
    """The data with `texts` at the end of column `name`, and what that did."""
    col = s.data.get(name)
    vals = typed_column(name, texts)
    return s.data.append(name, vals), (f"appended {len(vals)} value"
                                       f"{'s' if len(vals) != 1 else ''} to `{name}` "
                                       f"({col.rows + len(vals)} rows now)")


def appended_file(s: State, path: str, full: str, prefix: str | None = None
                  ) -> tuple[DataSet, str]:
    """The data with the rows of the CSV file at `full` at the end of the table
    loaded with the same header, and what that did."""
    table = read_csv(full, shown=path)
    t = s.data.table_for_header(table.header, (prefix + "_") if prefix else None)
    if t is None:
        raise ModelError(f"no loaded table has the columns of `{os.path.basename(path)}` "
                         f"({', '.join(table.header)}); load it first with `data load`")
    rec = FileRecord(path, table.sha256, table.rows, tuple(t.prefix + h for h in table.header),
                     "append")
    return s.data.append_table(t, table.columns, rec), (
        f"appended {table.rows} row{'s' if table.rows != 1 else ''} from "
        f"`{os.path.basename(path)}` to table `{t.name}`")


# ---------------------------------------------------------------------------
# grids and rules

def grid(s: State, name: str, lo: float, hi: float, n: int | None = None,
         scale: str | None = None) -> Outcome:
    p = s.model.param(name)
    if p.discrete and n is not None:
        raise GridError(f"`{name}` is discrete: its grid is every value from LO to HI, "
                        "so it takes no number of points")
    ax = make_axis(p, lo, hi, n, rule=s.rule, scale=scale)
    spec = AxisSpec(name, float(lo), float(hi), n, scale)
    replaced = s.spec(name) is not None
    specs = tuple(x for x in s.specs if x.name != name) + (spec,)
    sized = s.sized
    if sized is not None:
        sized = replace(sized, names=sized.names - {name})
    return Outcome(replace(s, specs=specs, sized=sized),
                   Change(f"grid {_verb(replaced)}: {ax.describe()}"))


def rule(s: State, name: str, setting: float | None = None) -> Outcome:
    """A 1-D rule of the tensor grid (`trapezoid`, `simpson` ...), `grid` (the tensor
    grid with its rule), or a rule in the frame with its setting."""
    if name in RULES:
        if setting is not None:
            raise GridError(f"rule `{name}` takes no setting: the grid's points come from `grid`")
        return Outcome(replace(s, rule=name, choice=rule_choice("grid")),
                       Change(f"rule set: {name}"))
    if name != "grid" and name not in FRAME_RULES:
        raise GridError(f"unknown rule `{name}`; known: grid, {', '.join(FRAME_RULES)}, "
                        f"{', '.join(RULES)}")
    choice = rule_choice(name, setting)
    what = (f"tensor grid, {s.rule}" if name == "grid" else choice.describe() if
            setting is not None else f"{name} (raised until the errors meet their targets)")
    return Outcome(replace(s, choice=choice), Change(f"rule set: {what}"))


def reset(s: State) -> Outcome:
    """An empty state; the change names everything it drops."""
    return Outcome(State(), Change(reset_text(s)))


def is_empty(s: State) -> bool:
    """Whether `s` holds nothing that `reset` would drop."""
    m = s.model
    return not (m.params or m.priors or m.likelihoods or m.lets or s.data.names or s.specs
                or s.posterior is not None or s.predictions or s.keeps)


def _n(k: int, word: str) -> str:
    return f"{k} {word}{'s' if k != 1 else ''}"


def reset_text(s: State) -> str:
    """What `reset` drops from state `s`, in one line."""
    m = s.model
    parts = []
    if m.params:
        parts.append(_n(len(m.params), "parameter") + " (" +
                     ", ".join(f"`{p.name}`" for p in m.params) + ")")
    if m.priors:
        parts.append(_n(len(m.priors), "prior"))
    if m.likelihoods:
        parts.append(_n(len(m.likelihoods), "likelihood"))
    if m.lets:
        parts.append(_n(len(m.lets), "let"))
    if s.data.names:
        parts.append(_n(len(s.data.names), "data column"))
    if s.specs:
        parts.append(_n(len(s.specs), "grid"))
    if s.posterior is not None:
        parts.append("the posterior")
    if s.predictions:
        parts.append(_n(len(s.predictions), "prediction"))
    if s.keeps:
        parts.append(_n(len(s.keeps), "kept model") + " (" +
                     ", ".join(f"`{k.name}`" for k in s.keeps) + ")")
    if not parts:
        return "reset: nothing to drop, the session was empty"
    return "reset: dropped " + ", ".join(parts) + " (`undo` brings them back)"


# ---------------------------------------------------------------------------
# keeps and predictions

def with_keep(s: State, kept: Kept) -> tuple[State, bool]:
    """The state keeping `kept` (replacing one of the same name), and whether it did."""
    replaced = any(x.name == kept.name for x in s.keeps)
    keeps = tuple(x for x in s.keeps if x.name != kept.name) + (kept,)
    return replace(s, keeps=keeps), replaced


def prediction(s: State, name: str, text: str) -> Prediction:
    """A new observation ``name ~ FAMILY(args)``, checked: its arguments may use the
    parameters and lets, never a data column."""
    checked_name(name, "predicted name")
    other = s.model.taken(name)
    if other in ("parameter", "let"):
        raise ModelError(f"`{name}` is already a {other}")
    names = {c: sp.Symbol(c, real=True) for c in s.data.names}
    names.update(s.model.symbols())
    _, args = parse_call(text, names, fam.FAMILIES)
    cols = {x.name for a in args for x in a.free_symbols} & set(s.data.names)
    if cols:
        raise ModelError(f"predict: `{sorted(cols)[0]}` is a data column; give the new "
                         "row's values as numbers")
    f, args = family_call(text, names)
    return Prediction(name, f.name, args, text.strip())


def with_prediction(s: State, pr: Prediction) -> State:
    """The state with `pr` (replacing one of the same name)."""
    return replace(s, predictions=tuple(p for p in s.predictions if p.name != pr.name) + (pr,))


def future_rows(s: State, using: str) -> FutureRows:
    """``COL ~ FAMILY(args)``: how future rows arise, for `samplesize ... using`."""
    col, _, rest = using.partition("~")
    col = col.strip()
    if not rest.strip():
        raise ModelError("`using` needs COL ~ FAMILY(args)")
    checked_name(col, "column name")
    f, args = family_call(rest, s.model.symbols())
    return FutureRows(col, f.name, tuple(args))

