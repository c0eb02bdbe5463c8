"""Looking and exporting: show, plot, export."""

from __future__ import annotations

import datetime
import os

import numpy as np

from engine import export as E
from engine.errors import QuadratError
from engine.files import atomic_write
from engine.framing import is_node
from engine.model import ReducedTerm

from .. import __version__
from .. import render as R
from ..layout import Table
from ..registry import NOTHING, Slot, command
from ..script import may_write, wrote
from ..words import Line, ShellError, path_word
from .common import notes

# ---------------------------------------------------------------------------
# show


def _complete_show(words, text):
    return Slot(words=("model", "data", "grid")) if len(words) == 1 else NOTHING


@command("show", usage="show model | data | grid", group="view", complete=_complete_show,
         help="""`show model` lists the parameters, priors, likelihoods and lets as declared,
         then what compiling them says: truncated priors and the mass cut, improper priors,
         and which sums over rows were reduced to sufficient statistics. `show data` lists
         the columns and the files read, with their SHA-256. `show grid` gives the axes set,
         the rule, and the grid of the posterior if there is one.""")
def show(app, line: Line):
    w = line.words
    if len(w) != 2 or w[1].text not in ("model", "data", "grid"):
        col = w[2].column if len(w) > 2 else (w[1].column if len(w) > 1 else line.end_column())
        raise ShellError("usage: show model | data | grid", col)
    app.printer.page({"model": model_lines, "data": data_lines, "grid": grid_lines}[
        w[1].text](app.ws))


def model_lines(ws) -> list[str]:
    m = ws.model
    if not m.params and not m.likelihoods and not m.lets:
        return ["no model yet: declare a parameter with `param NAME ...`"]
    out = ["parameters"]
    named = {pr.target: pr for pr in m.priors if pr.target is not None}
    width = max((len(p.name) for p in m.params), default=0)
    for p in m.params:
        out.append(f"  {p.name.ljust(width)}  {p.describe()}")
    out.append("priors")
    for p in m.params:
        pr = named.get(p.name)
        if pr is not None:
            out.append(f"  {p.name} ~ {pr.text}")
        elif p.bounded or p.discrete:
            out.append(f"  {p.name}: none given, so uniform on its domain")
        else:
            out.append(f"  {p.name}: none given, so flat on an unbounded domain (improper)")
    for pr in m.priors:
        if pr.target is None:
            out.append(f"  log {pr.text}  (a free term)")
    if m.likelihoods:
        out.append("likelihoods")
        for lk in m.likelihoods:
            if lk.column is None:
                out.append(f"  log {lk.text}  (a free term)")
            else:
                cens = f" censored {lk.censor}" if lk.censor else ""
                out.append(f"  {lk.column} ~ {lk.text}{cens}")
    if m.lets:
        out.append("lets")
        for lt in m.lets:
            out.append(f"  {lt.name} = {lt.text}")
    if not m.params:
        return out
    try:
        c = ws.compiled()
    except QuadratError as exc:
        out.append(f"as compiled: does not compile yet: {exc}")
        return out
    out.append("as compiled")
    for part in c.likelihood:
        reduced = any(isinstance(t, ReducedTerm) for t in part.terms)
        how = "sums reduced to sufficient statistics" if reduced else "summed row by row"
        rows = f"{part.rows} row{'s' if part.rows != 1 else ''}" if part.rows else "no rows"
        out.append(f"  likelihood `{part.key}`: {rows}, {how}")
    for n in c.notes:
        out.append(f"  {n}")
    for n in c.improper:
        out.append(f"  improper: {n}; the evidence is not defined")
    if c.proper:
        out.append("  the prior is proper: the evidence is defined")
    return out


def _short(values: np.ndarray, k: int = 6) -> str:
    vals = [R.num(v) for v in values[:k]]
    return ", ".join(vals) + (", ..." if len(values) > k else "")


def data_lines(ws) -> list[str]:
    d = ws.data
    if not d.columns:
        return ["no data yet: `data NAME = v1, v2, ...` or `data load FILE.csv`"]
    rows = []
    for c in d.columns:
        v = c.values
        rows.append([c.name, str(c.rows), c.table or "typed", R.num(float(v.min())),
                     R.num(float(v.max())), R.num(float(v.mean())), _short(v)])
    out = [Table.of(["column", "rows", "from", "min", "max", "mean", "values"], rows,
                    align="lrlrrrl")]
    if d.files:
        out.append("files")
        for f in d.files:
            out.append(f"  {f.path}  {f.rows} rows  sha256 {f.sha256}")
    return out


def grid_lines(ws) -> list[str]:
    out = [f"rule {ws.rule_name}"]
    if ws.frame_rule is not None:
        out.append("  (in the frame around the posterior's mode: the axes below are used by "
                   "`rule grid`)")
    for n in ws.model.param_names:
        spec = ws.spec(n)
        if spec is None:
            out.append(f"  {n}: not set (found by `grid auto` when computing)")
        else:
            pts = f", {spec.n} points" if spec.n else ""
            sc = f", {spec.scale} scale" if spec.scale else ""
            out.append(f"  {n}: {R.num(spec.lo)} .. {R.num(spec.hi)}{pts}{sc}")
    post = ws.posterior_now
    if post is not None and is_node(post):
        st = ws.status().posterior
        out.append(f"the posterior ({st}) was computed on rule {post.label}, "
                   f"{R.count(post.points)} evaluations")
    elif post is not None:
        st = ws.status().posterior
        out.append(f"the posterior ({st}) was computed on {R.count(post.grid.size)} points:")
        for a in post.grid.axes:
            out.append("  " + a.describe())
    return out


# ---------------------------------------------------------------------------
# plot

def _complete_plot(words, text):
    if len(words) == 1:
        return Slot(params=True, predicted=True, lets=True, words=("refine",))
    return Slot(params=True) if len(words) == 2 and words[1] != "refine" else NOTHING


PLOT_USAGE = ("plot EXPR [to FILE.txt [force]]  or  plot NAME NAME2 [to FILE.txt [force]]"
              "  or  plot refine [to FILE.txt [force]]")


class _Picture:
    """Where a picture goes: the screen (the printer itself), or a text file, drawn
    without colour at its natural size."""

    def __init__(self, printer):
        self.printer = printer
        self.width = printer.width
        self.color = False
        self.text = ""

    def room(self, natural: int, **_) -> int:
        return natural

    def block(self, text: str) -> None:
        self.text += text + "\n"

    def lines(self, items) -> None:
        from ..layout import Table
        for t in items:
            self.text += "\n".join(t.fit(self.width) if isinstance(t, Table) else [t]) + "\n"

    def note(self, text: str) -> None:
        self.printer.note(text)


def _destination(app, line: Line):
    """``... to FILE.txt [force]`` at the end of a plot line: the words before it, and
    the file (as typed, and the checked place to write it) or None."""
    w = list(line.words)
    k = next((i for i, x in enumerate(w) if x.text == "to" and i >= 2), None)
    if k is None:
        return w, None
    rest = w[k + 1:]
    force = bool(rest) and rest[-1].text == "force" and len(rest) == 2
    if force:
        rest = rest[:-1]
    if len(rest) != 1:
        if not rest:
            raise ShellError("`to` needs a file name, as in `plot p to p_plot.txt`",
                             line.end_column())
        raise ShellError(f"unexpected `{rest[1].text}`; usage: {PLOT_USAGE}", rest[1].column)
    path = path_word(rest[0])
    if os.path.splitext(path)[1].lower() != ".txt":
        raise ShellError(f"`{path}`: a plot is written to a .txt file", rest[0].column)
    target = may_write(app, app.ws.resolve(path), path, force=force, word=rest[0])
    return w[:k], (path, target)


def _written(app, dest, pic: "_Picture") -> None:
    path, target = dest
    n = atomic_write(target.path, pic.text, shown=path)
    via = wrote(app, target)
    rows = pic.text.count("\n")
    app.printer.line(f"wrote the picture to `{path}` ({rows} lines, {R.bytes_text(n)}){via}")


@command("plot", usage=PLOT_USAGE, group="view", complete=_complete_plot,
         help="""Draws the posterior marginal of a parameter in the terminal, with its central
         95% interval marked (a discrete parameter as bars), or the posterior density of a
         let or any expression of the parameters (`plot ld50`, `plot a / b`); with two
         parameters, their joint
         posterior as a density picture. A name given to `predict` draws the predictive
         pmf or density of the new observation. `plot refine` draws how the refinement
         steps of the current posterior converged: the largest relative change at each
         step and the change of the log evidence, on a log scale when they span decades.
         The picture fits the terminal's width.""")
def plot(app, line: Line):
    from .. import plots  # drawn by its own module

    w, dest = _destination(app, line)
    if len(w) < 2:
        raise ShellError(f"`plot` needs a parameter: {PLOT_USAGE}", line.end_column())
    params = app.ws.model.param_names
    pic = _Picture(app.printer) if dest is not None else app.printer
    derived_plot = (len(w) == 2 and w[1].text not in params) or (
        len(w) > 2 and not all(x.text in params for x in w[1:]))
    if derived_plot and not (w[1].text == "refine" and "refine" not in params):
        predicted = {p.name for p in app.ws.predictions}
        if not (len(w) == 2 and w[1].text in predicted):
            plot_derived(app, line, w, pic)
            return _written(app, dest, pic) if dest is not None else None
    if len(w) > 3:
        raise ShellError(f"unexpected `{w[3].text}`; usage: {PLOT_USAGE}", w[3].column)
    if w[1].text == "refine" and "refine" not in params:
        if len(w) > 2:
            raise ShellError(f"unexpected `{w[2].text}`: `plot refine` takes nothing",
                             w[2].column)
        plot_refine(app, pic)
        return _written(app, dest, pic) if dest is not None else None
    predicted = {p.name for p in app.ws.predictions}
    if len(w) == 2 and w[1].text not in params and w[1].text in predicted:
        plot_predicted(app, w[1].text, pic)
        return _written(app, dest, pic) if dest is not None else None
    for x in w[1:]:
        if x.text not in params:
            raise ShellError(f"no parameter `{x.text}`", x.column)
    if len(w) == 3 and w[1].text == w[2].text:
        raise ShellError("a joint plot needs two different parameters", w[2].column)
    if len(w) == 3:
        # refused before anything is computed when the joint would not fit in memory
        got = app.ws.joint(w[1].text, w[2].text)
        mass = got.mass
    else:
        got = app.ws.posterior()
    post = got.posterior
    notes(app, got.notes)
    beside = None
    if app.ws.in_whatif and len(w) == 2:
        now = app.ws.posterior_beside()
        notes(app, [f"now: {n}" for n in now.notes])
        m_now = now.posterior.marginal(w[1].text)
        if not m_now.discrete:
            k_now = crop(m_now.mass)
            beside = (m_now.values[k_now], m_now.density()[k_now])
    if app.ws.in_whatif and beside is None:
        app.printer.note("drawn for the what-if state")
    p = pic
    try:
        if len(w) == 2:
            m = post.marginal(w[1].text)
            iv = None
            if not m.discrete and len(m.values) > 2:
                iv = tuple(m.central(0.95))
            k = crop(m.mass)
            text = plots.marginal(m.values[k], m.density()[k], name=m.name, width=p.width,
                                  height=p.room(20), discrete=m.discrete, interval=iv,
                                  color=p.color, beside=beside)
        else:
            a, b = w[1].text, w[2].text
            i, j = crop(mass.sum(axis=1)), crop(mass.sum(axis=0))
            text = plots.joint(post.grid.axis(a).values[i], post.grid.axis(b).values[j],
                               mass[i, j], xname=a, yname=b, width=p.width,
                               height=p.room(24), color=p.color)
    except ValueError as exc:
        raise ShellError(f"cannot draw it: {exc}") from None
    p.block(text)
    if dest is not None:
        _written(app, dest, pic)


#: Changes below this are drawn at it (a log axis has no room for 0).
TINY_CHANGE = 1e-16


def plot_refine(app, p) -> None:
    """The convergence of the refinement steps of the current posterior."""
    from .. import plots

    ws = app.ws
    steps = [s for s in ws.steps if s.step > 0 and s.largest is not None]
    if not steps:
        raise ShellError("no refinement steps to draw: `refine` or `refine until TOL` first")
    if ws.status().posterior == "out of date":
        p.note("these steps refined the posterior from before the last change")
    x = np.arange(1, len(steps) + 1, dtype=float)
    series = {"largest change": [max(s.largest, TINY_CHANGE) for s in steps]}
    ev = [s.changes.get("log evidence", s.changes.get("log mass")) for s in steps]
    if all(v is not None and np.isfinite(v) for v in ev):
        series["log evidence change"] = [max(v, TINY_CHANGE) for v in ev]
    try:
        text = plots.convergence(x, series, width=p.width,
                                 height=p.room(16, keep=4 + len(steps)), color=p.color,
                                 xname="refinement step")
    except ValueError as exc:
        raise ShellError(f"cannot draw it: {exc}") from None
    p.block(text)
    p.lines([Table.of(["step", "points", "largest change", "moved"],
                      [[str(i), R.count(s.points), R.num(s.largest, 2), s.moved]
                       for i, s in enumerate(steps, 1)], align="rrrl")])


def plot_derived(app, line: Line, words, p) -> None:
    """The posterior density of a let or an expression, with its central 95% interval."""
    from .. import plots
    from ..words import formula_at

    seg = line.part(words[1].start, words[-1].end).rest(0)
    a = formula_at(seg, app.ws.density, seg.text)
    notes(app, a.notes)
    c = a.detail
    if app.ws.in_whatif:
        p.note("drawn for the what-if state")
    try:
        text = plots.marginal(c.x, c.density, name=seg.text, width=p.width,
                              height=p.room(20), discrete=False, interval=c.interval,
                              color=p.color)
    except ValueError as exc:
        raise ShellError(f"cannot draw it: {exc}") from None
    p.block(text)


def plot_predicted(app, name: str, p) -> None:
    """The predictive pmf or density of a new observation named by `predict`."""
    from .. import plots

    a = app.ws.mean(name)
    notes(app, a.notes)
    pv = a.detail.predictive
    values, dens = np.asarray(pv.values, float), np.asarray(pv.density, float)
    iv = None
    if not pv.discrete:
        iv = (pv.quantile(0.025), pv.quantile(0.975))
    k = crop(dens)
    try:
        text = plots.marginal(values[k], dens[k], name=f"new {name}", width=p.width,
                              height=p.room(20, keep=4 if a.now is not None else 3),
                              discrete=pv.discrete, interval=iv, color=p.color)
    except ValueError as exc:
        raise ShellError(f"cannot draw it: {exc}") from None
    if a.now is not None:
        p.note("drawn for the what-if state")
    p.block(text)


def crop(mass: np.ndarray, tail: float = 1e-4) -> slice:
    """The nodes that matter to a picture: from where the mass below reaches
    `tail` to where the mass above falls under it, one node of margin each
    side. A grid reaching far into the tails would otherwise squeeze the
    posterior into a few columns."""
    total = float(np.sum(mass))
    if not total > 0 or mass.size < 3:
        return slice(None)
    c = np.cumsum(mass) / total
    lo = int(np.searchsorted(c, tail))
    hi = int(np.searchsorted(c, 1 - tail)) + 1
    lo, hi = max(lo - 1, 0), min(hi + 1, mass.size)
    if hi - lo < 3:
        return slice(None)
    return slice(lo, hi)


# ---------------------------------------------------------------------------
# export

EXPORT_USAGE = "export FILE.csv | FILE.json [force]  or  export summary FILE.csv [force]"


def _complete_export(words, text):
    if len(words) == 1:
        return Slot(words=("summary",), files=(".csv", ".json"))
    if len(words) == 2 and words[1] == "summary":
        return Slot(files=(".csv",))
    return Slot(words=("force",))


@command("export", usage=EXPORT_USAGE, group="view", complete=_complete_export,
         help="""Writes the posterior to a file. `FILE.csv` gets every marginal as one long
         table (parameter, value, density, mass); `export summary FILE.csv` the summary table
         with estimated errors; `FILE.json` both, with the log evidence and the grid. An
         existing file that this session did not write is kept unless `force` is given; the
         write is atomic.""")
def export(app, line: Line):
    w = list(line.words[1:])
    force = bool(w) and w[-1].text == "force"
    if force:
        w = w[:-1]
    what = "marginals"
    if w and w[0].text == "summary":
        what, w = "summary", w[1:]
    if len(w) != 1:
        if not w:
            raise ShellError(f"`export` needs a file name: {EXPORT_USAGE}", line.end_column())
        raise ShellError(f"unexpected `{w[1].text}`; usage: {EXPORT_USAGE}", w[1].column)
    word = w[0]
    path = path_word(word)
    ext = os.path.splitext(path)[1].lower()
    if ext not in E.FORMATS:
        raise ShellError(f"`{path}`: export writes .csv or .json files", word.column)
    if what == "summary" and ext != ".csv":
        raise ShellError("`export summary` writes a .csv file; JSON holds the summary anyway",
                         word.column)
    target = may_write(app, app.ws.resolve(path), path, force=force, word=word)
    summary = app.ws.summary()
    notes(app, summary.notes)
    post = app.ws.posterior_now
    meta = {"quadrat": __version__,
            "exported": datetime.datetime.now(datetime.timezone.utc).isoformat(timespec="seconds"),
            "model": session_model_text(app.ws)}
    mode = app.ws.mode().detail if ext == ".json" else None    # a `Point`
    rep = E.export(target.path, post, summary, what=what, meta=meta, mode=mode)
    via = wrote(app, target)
    kind = {"marginals": "marginals", "summary": "summary", "all": "summary and marginals"}
    unit = "parameters" if rep.what == "all" else "rows"
    app.printer.line(f"wrote {kind[rep.what]} to `{path}` ({rep.rows} {unit}, "
                     f"{R.bytes_text(rep.bytes)}){via}")


def session_model_text(ws) -> list[str]:
    """The model's declarations, one line each (for the JSON export)."""
    m = ws.model
    out = [f"param {p.name}: {p.describe()}" for p in m.params]
    for pr in m.priors:
        out.append(f"prior {pr.target} ~ {pr.text}" if pr.target else f"prior log {pr.text}")
    for lk in m.likelihoods:
        if lk.column is None:
            out.append(f"likelihood log {lk.text}")
        else:
            out.append(f"likelihood {lk.column} ~ {lk.text}" +
                       (f" censored {lk.censor}" if lk.censor else ""))
    for lt in m.lets:
        out.append(f"let {lt.name} = {lt.text}")
    return out

