"""Grids, rules, cost and compute."""

from __future__ import annotations

from engine.framerun import FRAME_RULES
from engine.grid import SCALES
from engine.plan import format_count
from engine.rules import RULE_HELP, RULES

from .. import render as R
from ..layout import Table
from ..registry import NOTHING, Slot, command
from ..words import Line, ShellError, number, whole
from .common import notes, say, with_progress

#: `compute` refuses grids of this many points even when forced (the engine's
#: limit in `runs.check_cost`: point indices must fit in 64 bits).
COUNT_LIMIT = 2**62

GRID_USAGE = "grid NAME LO HI [N] [linear|log|logit]  or  grid auto"


def _complete_grid(words, text):
    if len(words) == 1:
        return Slot(params=True, words=("auto",))
    if len(words) in (4, 5) and words[1] != "auto":
        return Slot(words=SCALES)
    return NOTHING


@command("grid", usage=GRID_USAGE, kind="change", group="grid", complete=_complete_grid,
         help="""Sets the grid axis of a parameter: from LO to HI (the parameter's own
         units) with N points, on a linear, log or logit scale (by default log for positive
         and logit for bounded parameters whose grid stays inside the domain). A discrete
         parameter's axis is every value from LO to HI. `grid auto` finds the posterior's
         mass from the mode and curvature and sets every axis. Axes not set are found by
         `grid auto` when computing. A second `grid` for the same parameter replaces it.""")
def grid(app, line: Line):
    w = line.words
    if len(w) >= 2 and w[1].text == "auto":
        if len(w) > 2:
            raise ShellError(f"unexpected `{w[2].text}` after `grid auto`", w[2].column)
        say(app, app.ws.grid_auto().change)
        return
    if len(w) < 4:
        raise ShellError(f"`grid` needs more: {GRID_USAGE}", line.end_column())
    name = w[1].text
    lo, hi = number(w[2], "LO"), number(w[3], "HI")
    n = scale = None
    for x in w[4:]:
        if x.text in SCALES:
            if scale is not None:
                raise ShellError(f"two scales: `{scale}` and `{x.text}`", x.column)
            scale = x.text
        elif n is None and scale is None:
            n = whole(x, "N", low=1)
        else:
            raise ShellError(f"unexpected `{x.text}`; usage: {GRID_USAGE}", x.column)
    say(app, app.ws.grid(name, lo, hi, n, scale))


RULE_USAGE = ("rule grid  or  rule hermite [K]  or  rule sparse [level L]  or  "
              "rule rotated [step H]  or  rule " + " / ".join(RULES))
#: The word before each frame rule's setting (hermite's K comes bare).
SETTING_WORDS = {"sparse": "level", "rotated": "step"}
ALL_RULES = ("grid",) + tuple(FRAME_RULES) + tuple(RULES)


def _complete_rule(words, text):
    if len(words) == 1:
        return Slot(words=ALL_RULES)
    if len(words) == 2 and words[1] in SETTING_WORDS:
        return Slot(words=(SETTING_WORDS[words[1]],))
    return NOTHING


@command("rule", usage=RULE_USAGE, kind="change", group="grid", complete=_complete_rule,
         help="""Sets how `compute` integrates the posterior. `rule grid` is the tensor grid
         (every axis from `grid` or `grid auto`) with its 1-D rule; naming a 1-D rule sets
         it and the tensor grid: """ +
         " ".join(f"`{k}`: {v}." for k, v in RULE_HELP.items()) + """ Rules in the
         standardised frame around the posterior's mode (for 4 to 8 continuous parameters,
         where a tensor grid's N^d points are out of reach): `hermite [K]`, the Gauss-Hermite
         product rule with K points an axis checked against K + 2 (K = 1 is the Laplace
         approximation); `sparse [level L]`, the Smolyak sparse grid on nested Genz-Keister
         rules, checked against level L - 1, in a frame re-centred on a first pass's mean
         and covariance; `rotated [step H]`, a trapezoid lattice in the frame with step H
         (in posterior sds) explored outward from the mode until the mass left out is
         negligible, checked against step 2H: the robust choice for skewed posteriors.
         Without a setting, K or L is raised until the estimated errors of the evidence,
         means and sds meet their targets (1e-4 of the log evidence, 1e-3 of each sd) or
         the next step would pass 100,000 evaluations. Discrete parameters are summed
         exactly, with one frame for each combination of their values.""")
def rule(app, line: Line):
    w = line.words
    if len(w) < 2:
        raise ShellError(f"`rule` needs a rule: {RULE_USAGE}", line.end_column())
    name = w[1].text
    if name not in ALL_RULES:
        raise ShellError(f"unknown rule `{name}`; known: {', '.join(ALL_RULES)}", w[1].column)
    rest = w[2:]
    setting = None
    if name in FRAME_RULES and rest:
        word = SETTING_WORDS.get(name)
        if word is not None:
            if rest[0].text != word:
                raise ShellError(f"`rule {name}` takes `{word}` before its setting: rule "
                                 f"{name} [{word} {FRAME_RULES[name][0].upper()}]",
                                 rest[0].column)
            if len(rest) < 2:
                raise ShellError(f"`{word}` needs a value", line.end_column())
            rest = rest[1:]
        x = rest[0]
        setting = (number(x, "H") if name == "rotated"
                   else whole(x, "K", low=1) if name == "hermite" else whole(x, "L", low=0))
        rest = rest[1:]
    if rest:
        raise ShellError(f"unexpected `{rest[0].text}`; usage: {RULE_USAGE}", rest[0].column)
    say(app, app.ws.rule(name, setting))


@command("budget", usage="budget [SECONDS]", kind="note", group="grid",
         help="""Shows or sets the time budget: `compute`, `refine` and `zoom` refuse a job
         predicted to take longer (unless `compute force`). The default is 600 seconds (10
         minutes); `quadrat --budget SECONDS` sets it from the start. Saved sessions keep it,
         so a replay meets the same limit.""")
def budget(app, line: Line):
    w = line.words
    if len(w) > 2:
        raise ShellError(f"unexpected `{w[2].text}`", w[2].column)
    if len(w) == 2:
        seconds = number(w[1], "SECONDS")
        if not seconds > 0:
            raise ShellError(f"the budget must be a positive number of seconds; got "
                             f"{w[1].text}", w[1].column)
        app.ws.budget_seconds = seconds
    app.printer.line(f"time budget: {R.duration(app.ws.budget_seconds)}")


@command("cost", usage="cost", group="grid",
         help="""Says what a `compute` would take: the rule and the grid (axes not set come
         from `grid auto`), the number of points (10^20 for twenty axes of 10 points), the
         memory against the machine's, and the time, from a short measured run of this
         model's density on this machine; then what the next refinement steps would take.
         When the job is over the time budget or the memory, it says so and suggests a
         cheaper way.""")
def cost(app, line: Line):
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`", w[1].column)
    rep = app.ws.cost()
    p = app.printer
    p.line(f"rule   {rep.rule}")
    for g in rep.grid:
        p.line("grid   " + g)
    c = rep.cost
    p.line(f"points {format_count(c.points)}")
    p.line(f"memory about {R.bytes_text(c.memory)} (this machine has "
           f"{R.bytes_text(c.machine_memory)})")
    p.line(f"time   about {R.duration(c.seconds)} ({R.num(c.seconds_per_point, 2)} s a point, "
           f"measured here)")
    if rep.ahead:
        p.line("refinement steps ahead, each doubling the resolution of every continuous axis "
               "(reusing the points already evaluated):")
        p.lines([Table.of(["step", "points", "memory", "time"],
                          [[str(a.step), format_count(a.points), R.bytes_text(a.memory),
                            R.duration(a.seconds)] for a in rep.ahead], indent=2)])
    if rep.auto:
        p.note("axes not set come from `grid auto`")
    if rep.rules:
        p.line("rules in the frame around the mode (the mode search adds a few thousand "
               "evaluations; hermite K runs K and K + 2, sparse level L runs L, L - 1 and a "
               "first pass for its frame):")
        p.lines(R.table(["rule", "points", "memory", "time", "accuracy"],
                        [[("* " if r.chosen else "") + r.rule,
                          ("" if r.exact_count else "~") + format_count(r.points),
                          R.bytes_text(r.memory) if r.fits else R.bytes_text(r.memory) + " (too much)",
                          "-" if r.seconds is None else R.duration(r.seconds), r.accuracy]
                         for r in rep.rules], align="lrrrl", indent=2))
    if rep.choice:
        p.line(f"compute uses {rep.choice}")
    if c.points >= COUNT_LIMIT:
        p.warning(f"{format_count(c.points)} points are more than `compute` will take, even "
                  "forced: use fewer points or fewer parameters")
    elif not c.fits:
        p.warning("this does not fit in memory: use fewer points")
    elif c.seconds > rep.budget_seconds:
        p.warning(f"over the budget of {R.duration(rep.budget_seconds)}: `compute force` runs "
                  "it anyway")
    if rep.advice:
        p.note(rep.advice)


@command("compute", usage="compute [force]", kind="change", group="grid",
         complete=lambda words, text: Slot(words=("force",)) if len(words) == 1 else NOTHING,
         help="""Evaluates the posterior on the grid (axes not set come from `grid auto`),
         with a progress bar when it takes more than a second. A job predicted to take
         longer than the budget (10 minutes) is refused, with its cost and a cheaper way
         (fewer points, `zoom`, another rule), unless `force` is given; a job that needs
         more memory than the machine has is always refused. Ctrl-C cancels it and leaves
         everything as it was.""")
def compute(app, line: Line):
    w = line.words
    force = False
    if len(w) > 1:
        if w[1].text != "force" or len(w) > 2:
            bad = w[1] if w[1].text != "force" else w[2]
            raise ShellError(f"unexpected `{bad.text}`; usage: compute [force]", bad.column)
        force = True
    rep = with_progress(app, app.ws.compute, force=force)
    ev = ("; log evidence " + R.with_error(rep.log_evidence.value, rep.log_evidence.error,
                                           unresolved=bool(rep.unresolved))
          if rep.log_evidence is not None else "")
    app.printer.line(f"computed {R.count(rep.points)} points in {R.duration(rep.seconds)}{ev}")
    notes(app, rep.notes)
    for x in rep.warnings:
        app.printer.warning(x)
