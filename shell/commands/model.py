"""Declaring the model: param, prior, likelihood, let."""

from __future__ import annotations

import re

from engine.model import KINDS

from ..registry import NOTHING, Slot, command
from ..words import Line, ShellError, Segment, Word, formula_at, number, whole
from .common import say

_DOMAINS = ("real", "positive", "unit", "in", "int", "set")
_TILDE = re.compile(r"^(?P<name>[^\s~=]+)\s*~\s*(?P<rest>.*)$", re.S)
_EQUALS = re.compile(r"^(?P<name>[^\s~=]+)\s*=(?!=)\s*(?P<rest>.*)$", re.S)


def split_at(line: Line, index: int, pattern: re.Pattern, sign: str, usage: str
             ) -> tuple[Word, Segment]:
    """``NAME ~ TEXT`` or ``NAME = TEXT`` from word `index` on: the name and the
    text after the sign, each with its place in the line."""
    seg = line.rest(index)
    if not seg.text:
        raise ShellError(f"`{line.name}` needs more: {usage}", line.end_column())
    m = pattern.match(seg.text)
    if m is None:
        first = seg.text.split()[0]
        raise ShellError(f"expected `{sign}` after `{first.split(sign)[0]}`; usage: {usage}",
                         seg.start + len(first) + 1)
    name = Word(m.group("name"), seg.start)
    rest = Segment(m.group("rest").rstrip(), seg.start + m.start("rest"))
    if not rest.text:
        raise ShellError(f"nothing after `{sign}`; usage: {usage}", rest.column)
    return name, rest


# ---------------------------------------------------------------------------
# param

PARAM_USAGE = "param NAME real | positive | unit | in LO HI | int LO HI | set V1 V2 ... [points N]"


def _complete_param(words, text):
    if len(words) == 1:
        return Slot(params=True)
    if len(words) == 2:
        return Slot(words=_DOMAINS)
    if words[2] in ("real", "positive", "unit") and len(words) == 3:
        return Slot(words=("points",))
    return NOTHING


@command("param", usage=PARAM_USAGE, kind="change", group="model", complete=_complete_param,
         help="""Declares a parameter and its domain: `real` (the whole line), `positive`
         (above 0), `unit` (0 to 1), `in LO HI`, `int LO HI` (whole numbers, summed
         exactly) or `set V1 V2 ...` (listed values). `points N` sets how many grid points
         its axis gets. A bounded parameter with no prior is uniform on its domain.
         Declaring the same name again replaces it.""")
def param(app, line: Line):
    w = line.words
    if len(w) < 3:
        raise ShellError(f"`param` needs a name and a domain: {PARAM_USAGE}", line.end_column())
    name, kind = w[1], w[2]
    args = list(w[3:])
    points = None
    if len(args) >= 2 and args[-2].text == "points":
        points = whole(args[-1], "points", low=1)
        args = args[:-2]
    elif args and args[-1].text == "points":
        raise ShellError("`points` needs a number", args[-1].end + 1)
    k = kind.text
    lo = hi = None
    values = None
    if k in ("real", "positive", "unit"):
        if args:
            raise ShellError(f"unexpected `{args[0].text}` after `{k}`", args[0].column)
    elif k in ("in", "int"):
        if len(args) < 2:
            raise ShellError(f"`{k}` needs LO and HI, as in `param {name.text} {k} 0 10`",
                             (args[-1].end if args else kind.end) + 1)
        if len(args) > 2:
            raise ShellError(f"unexpected `{args[2].text}` after `{k} LO HI`", args[2].column)
        lo, hi = number(args[0], "LO"), number(args[1], "HI")
        k = "interval" if k == "in" else k
    elif k == "set":
        if not args:
            raise ShellError("`set` needs at least one value", kind.end + 1)
        values = [number(a, "value") for a in args]
    else:
        raise ShellError(f"unknown domain `{k}`; use real, positive, unit, in LO HI, int LO HI "
                         "or set V1 V2 ...", kind.column)
    assert k in KINDS
    say(app, app.ws.param(name.text, k, lo=lo, hi=hi, values=values, points=points))


# ---------------------------------------------------------------------------
# prior

PRIOR_USAGE = "prior NAME ~ FAMILY(args)  or  prior log EXPR"


def _complete_tilde(first: Slot):
    def complete(words, text):
        if len(words) == 1:
            return first
        if words[1] == "log":
            return Slot.formula(columns=first.columns)
        if "~" not in text:
            return Slot(words=("~",))
        after = text.split("~", 1)[1]
        if "(" not in after:
            return Slot(families=True)
        if after.rstrip().endswith(")") and after.count("(") == after.count(")"):
            return Slot(words=("censored",)) if first.columns else NOTHING
        return Slot.formula(columns=first.columns)
    return complete


@command("prior", usage=PRIOR_USAGE, kind="change", group="model",
         complete=_complete_tilde(Slot(params=True, words=("log",))),
         help="""Sets the prior of a parameter to a named distribution (`help FAMILY` gives its
         arguments); the arguments may use other parameters, which makes a conditional
         prior. On a bounded domain the prior is truncated and renormalised. `prior log
         EXPR` adds a free term to the log prior instead. A second prior for the same
         parameter replaces the first.""")
def prior(app, line: Line):
    w = line.words
    if len(w) >= 2 and w[1].text == "log":
        seg = line.rest(2)
        if not seg.text:
            raise ShellError("`prior log` needs an expression", line.end_column())
        if seg.text.startswith("~"):
            raise ShellError("`log` is a function, not a parameter name", w[1].column)
        say(app, formula_at(seg, app.ws.prior_log, seg.text))
        return
    name, rest = split_at(line, 1, _TILDE, "~", PRIOR_USAGE)
    say(app, formula_at(rest, app.ws.prior, name.text, rest.text))


# ---------------------------------------------------------------------------
# likelihood

LIKELIHOOD_USAGE = "likelihood COL ~ FAMILY(args) [censored FLAGCOL]  or  likelihood log EXPR"
_CENSORED = re.compile(r"\)\s+censored\s+(?P<flag>\S+)\s*$")


@command("likelihood", usage=LIKELIHOOD_USAGE, kind="change", group="model",
         complete=_complete_tilde(Slot(columns=True, words=("log",))),
         help="""Says how a data column arises: one term per row, summed over the rows. The
         distribution's arguments may use parameters, lets and other columns of the same
         length. `censored FLAGCOL` marks right-censored rows (flag 1: the value is a lower
         bound). `likelihood log EXPR` adds a free term instead. A second likelihood for the
         same column replaces the first.""")
def likelihood(app, line: Line):
    w = line.words
    if len(w) >= 2 and w[1].text == "log":
        seg = line.rest(2)
        if not seg.text:
            raise ShellError("`likelihood log` needs an expression", line.end_column())
        say(app, formula_at(seg, app.ws.likelihood_log, seg.text))
        return
    col, rest = split_at(line, 1, _TILDE, "~", LIKELIHOOD_USAGE)
    text, censor = rest.text, None
    m = _CENSORED.search(text)
    if m is not None:
        censor = m.group("flag")
        text = text[:m.start() + 1]
    elif re.search(r"\bcensored\s*$", text):
        raise ShellError("`censored` needs the name of the column of flags",
                         rest.start + len(text) + 1)
    say(app, formula_at(rest, app.ws.likelihood, col.text, text, censor))


# ---------------------------------------------------------------------------
# let

LET_USAGE = "let NAME = EXPR"


def _complete_let(words, text):
    if len(words) == 1:
        return Slot(lets=True)
    if "=" not in text:
        return Slot(words=("=",))
    return Slot.formula()


@command("let", usage=LET_USAGE, kind="change", group="model", complete=_complete_let,
         help="""Names a derived quantity of the parameters (and other lets), to use in
         formulas and questions, as in `let odds = p / (1 - p)`. A second `let` of the same
         name replaces the first.""")
def let(app, line: Line):
    name, rest = split_at(line, 1, _EQUALS, "=", LET_USAGE)
    say(app, formula_at(rest, app.ws.let, name.text, rest.text))
