"""Stepwise refinement: refine and zoom.

Both change the state (the posterior and its grid); each also hands back the
final values it reached (log evidence, and each parameter's mean, sd and 95%
interval) as the checks a saved session writes after it, asked through the
same questions `check` uses, so that a replay tells at once whether the
refinement still lands where it did.
"""

from __future__ import annotations

from engine.errors import QuadratError
from engine.plan import format_count

from .. import render as R
from ..layout import Table
from ..registry import NOTHING, Slot, command
from ..replies import Reply, Shown
from ..words import Line, ShellError, number
from .common import notes, with_progress

REFINE_USAGE = "refine [NAME] [until TOL]"
ZOOM_USAGE = "zoom [MASS] [force]"


def final_checks(app) -> tuple[Shown, ...]:
    """The check lines of the posterior now in the state: the log evidence (when
    defined), and the mean, sd and central 95% interval of every parameter."""
    from .questions import ask_evidence, ask_interval, ask_mean, ask_sd

    ws = app.ws
    asks = []
    post = ws.posterior_now
    if post is not None and post.log_evidence is not None:
        asks.append((ask_evidence, "evidence"))
    for name in ws.model.param_names:
        asks += [(ask_mean, f"mean {name}"), (ask_sd, f"sd {name}"),
                 (ask_interval, f"interval {name} 0.95")]
    out = []
    for ask, text in asks:
        try:
            shown = ask(app, Line.of(text)).shown
        except QuadratError:
            continue   # a value this posterior cannot give (a one-point axis) has no check
        if shown is not None:
            out.append(shown)
    return tuple(out)


def _change(v) -> str:
    return "-" if v is None else R.num(v, 2)


def refine_table(steps, width: int) -> list:
    """The table of what moved, one row a step: in one table when it fits the
    width, else a table of the steps and one per parameter."""
    if not steps:
        return []
    names = []
    for k in steps[0].values:
        if k.startswith("mean "):
            names.append(k[5:])
    ev_key = "log evidence" if "log evidence" in steps[0].values else "log mass"
    head = ["step", "points", "evaluated", "seconds", ev_key]
    tail = ["largest change", "moved"]

    def base(s):
        return [str(s.step), format_count(s.points), format_count(s.evaluated),
                R.num(s.seconds, 2), R.num(s.values.get(ev_key))]

    def ends(s):
        return [_change(s.largest), s.moved or "-"]

    def per(s, n):
        return [R.num(s.values.get(f"{k} {n}")) for k in ("mean", "sd", "lo95", "hi95")]

    wide_head = head + [f"{k} {n}" for n in names for k in ("mean", "sd", "lo95", "hi95")] + tail
    wide_rows = [base(s) + [c for n in names for c in per(s, n)] + ends(s) for s in steps]
    lines = R.table(wide_head, wide_rows, align="r" * (len(wide_head) - 1) + "l")
    if max(len(x) for x in lines) <= width:
        return lines
    out = [Table.of(head + tail, [base(s) + ends(s) for s in steps],
                    align="r" * (len(head) + 1) + "l")]
    for n in names:
        out.append(f"`{n}`:")
        out.append(Table.of(["step", "mean", "sd", "lo95", "hi95"],
                            [[str(s.step)] + per(s, n) for s in steps], align="rrrrr",
                            indent=2))
    return out


def parse_refine(line: Line, params) -> tuple[str | None, float | None]:
    """``refine [NAME] [until TOL]``: the axis (or None) and the tolerance (or None)."""
    w = line.words[1:]
    axis = until = None
    i = 0
    if i < len(w) and w[i].text != "until":
        if w[i].text not in params:
            raise ShellError(f"no parameter `{w[i].text}`", w[i].column)
        axis = w[i].text
        i += 1
    if i < len(w):
        if w[i].text != "until":
            raise ShellError(f"unexpected `{w[i].text}`; usage: {REFINE_USAGE}", w[i].column)
        if i + 1 >= len(w):
            raise ShellError("`until` needs a tolerance, as in `refine until 1e-6`",
                             w[i].end + 1)
        until = number(w[i + 1], "tolerance")
        if not until > 0:
            raise ShellError(f"the tolerance must be positive; got `{w[i + 1].text}`",
                             w[i + 1].column)
        if i + 2 < len(w):
            raise ShellError(f"unexpected `{w[i + 2].text}`; usage: {REFINE_USAGE}",
                             w[i + 2].column)
    return axis, until


def _complete_refine(words, text):
    if len(words) == 1:
        return Slot(params=True, words=("until",))
    if words[-1] == "until":
        return Slot(words=("1e-3", "1e-4", "1e-6"))
    if len(words) == 2 and words[1] != "until":
        return Slot(words=("until",))
    return NOTHING


@command("refine", usage=REFINE_USAGE, kind="change", group="grid", complete=_complete_refine,
         help="""Refines the posterior step by step (computing it first if there is none): each
         step doubles the resolution of every continuous axis, or of NAME's axis only, and
         reuses the density already evaluated wherever the finer grid holds the old nodes.
         It prints a table of what moved: for each step the points, how many were newly
         evaluated, the seconds it took, the log evidence, each parameter's mean, sd and the ends of
         its central 95% interval, and the largest relative change. Without `until` it takes
         one step; `until TOL` repeats until every one of those values moves by less than
         TOL (relative to the value's size or the parameter's sd; the log evidence by its
         absolute change), or says why it stopped: the next step would break the time
         budget or the memory, or it did not settle within 12 steps. `plot refine` draws
         the convergence. Ctrl-C cancels and leaves the posterior as it was. A saved session
         writes checks of the final values after it.""")
def refine(app, line: Line):
    ws = app.ws
    axis, until = parse_refine(line, ws.model.param_names)
    rep = with_progress(app, ws.refine, axis, until)
    p = app.printer
    notes(app, rep.notes)
    p.lines(refine_table(rep.steps, p.width))
    last = rep.steps[-1]
    if until is None:
        if last.largest is not None:
            p.line(f"one step: the largest change was {R.num(last.largest, 2)} "
                   f"(`{last.moved}`); `refine until TOL` goes on until the values settle")
    elif rep.converged:
        p.line(rep.message)
    else:
        p.warning(rep.message)
    for x in rep.warnings:
        p.warning(x)
    return Reply(shown=final_checks(app))




def parse_zoom(line: Line) -> tuple[float, bool]:
    """``zoom [MASS] [force]``: the mass kept (default 1 - 1e-9) and whether forced."""
    w = list(line.words[1:])
    force = bool(w) and w[-1].text == "force"
    if force:
        w = w[:-1]
    mass = 1 - 1e-9
    if w:
        mass = number(w[0], "mass")
        if not 0 < mass < 1:
            raise ShellError(f"the mass must be between 0 and 1, as in `zoom 0.999999`; got "
                             f"`{w[0].text}`", w[0].column)
        if len(w) > 1:
            raise ShellError(f"unexpected `{w[1].text}`; usage: {ZOOM_USAGE}", w[1].column)
    return mass, force


@command("zoom", usage=ZOOM_USAGE, kind="change", group="grid",
         complete=lambda words, text: Slot(words=("0.999999", "force")) if len(words) == 1
         else Slot(words=("force",)) if len(words) == 2 and words[1] != "force" else NOTHING,
         help="""Shrinks every continuous axis to the central region holding MASS of its
         marginal (default 1 - 1e-9, so that the tails left out are below what the answers
         show) and computes again with the same number of points, so the points sit where
         the posterior is (computing first if there is no posterior). Like `compute`, it
         refuses a job over the time budget unless `force` is given. Ctrl-C cancels and
         leaves the posterior as it was. A saved session writes checks of the values it
         reached after it.""")
def zoom(app, line: Line):
    mass, force = parse_zoom(line)
    rep = with_progress(app, app.ws.zoom, mass, force=force)
    ev = ("; log evidence " + R.with_error(rep.log_evidence.value, rep.log_evidence.error,
                                           unresolved=bool(rep.unresolved))
          if rep.log_evidence is not None else "")
    # the engine's last note says where the axes went; any before it (a compute
    # done first) came before the zoom
    notes(app, rep.notes[:-1])
    app.printer.line(f"zoomed: computed {R.count(rep.points)} points in "
                     f"{R.duration(rep.seconds)}{ev}")
    notes(app, rep.notes[-1:])
    for x in rep.warnings:
        app.printer.warning(x)
    return Reply(shown=final_checks(app))
