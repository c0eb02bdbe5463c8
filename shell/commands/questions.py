"""Questions of the posterior, and `check`.

Each question that yields numbers has an `ask` function (answer, the lines to
print, and what a saved check line states) that `check` shares with the
question's own handler, so both read the line the same way.
"""

from __future__ import annotations

import math

from engine.results import Answer, Levels, NoMoment

from .. import render as R
from ..layout import Table
from ..registry import COMMANDS, NOTHING, Slot, command
from ..replies import Asked, Reply, Shown
from ..words import (Line, ShellError, Word, formula_at, fraction, is_fraction, lone_equals,
                     number)
from .common import notes


def _formula(line: Line, what: str):
    seg = line.rest(1)
    if not seg.text:
        raise ShellError(f"`{line.name}` needs {what}", line.end_column())
    return seg


def _values(a: Answer) -> str:
    if isinstance(a.detail, NoMoment):
        return f"none ({a.detail.reason.split(':')[0]})"
    if a.unresolved:
        return ", ".join(R.num(v, 2) for v in a.values) + "  (not resolved)"
    vals = ", ".join(R.to_error(v, e) for v, e in zip(a.values, a.errors))
    errs = [e for e in a.errors if e is not None]
    if not errs:
        return vals
    return f"{vals}  ({', '.join(R.err(e) for e in a.errors if e is not None)})"


def side_by_side(label: str, now: str, whatif: str) -> tuple[Table, ...]:
    """Inside a what-if layer: the answer as things are and as they would be (one
    under the other when the line would not fit the screen)."""
    return (Table.of(["", "now", "what if"], [[label, now, whatif]]),)


def answer_lines(label: str, a: Answer, values=_values) -> tuple[str, ...]:
    """``LABEL = VALUES``, or the "now" and "what if" columns inside a layer."""
    if a.now is not None:
        return side_by_side(label, values(a.now), values(a))
    return (f"{label} = {values(a)}",)


def checkable(line: Line, values, tol: float) -> Shown | None:
    """What a saved check line states, or None when a value is not a finite
    number (a predictive whose mean does not exist): no check line can state it."""
    if not all(math.isfinite(v) for v in values):
        return None
    return Shown(line.text, tuple(values), tol)


def no_moment_line(d: NoMoment) -> str:
    """``no mean (tails too heavy: ...); median ..., 95% central interval ...``."""
    text = f"no {d.kind} ({d.reason})"
    if d.median is not None:
        errs = [e.error for e in (d.lo, d.hi) if e.error is not None]
        e = max(errs) if errs else None
        text += (f"; median {R.with_error(d.median.value, d.median.error)}, 95% central "
                 f"interval {R.to_error(d.lo.value, e)} .. {R.to_error(d.hi.value, e)}")
        if e is not None:
            text += f"  ({R.err(e)})"
    return text


def _asked(line: Line, a: Answer, shown_text: str, **tol) -> Asked:
    if isinstance(a.detail, NoMoment) and a.now is None:
        return Asked(a, (f"{shown_text}: {no_moment_line(a.detail)}",), None)
    lines = answer_lines(shown_text, a)
    if a.kind in ("mean", "sd") and not all(math.isfinite(v) for v in a.values):
        lines += (f"note: the {a.kind} does not exist here (the tails are too heavy)",)
    return Asked(a, lines, checkable(line, a.values, R.check_tol(a.values, a.errors, **tol)))


def answer_notes(app, a) -> None:
    """The notes of an answer; inside a what-if layer also those of "now" that differ."""
    notes(app, a.notes)
    now = getattr(a, "now", None)
    if now is not None:
        notes(app, [f"now: {n}" for n in now.notes if n not in a.notes])


def show(app, asked: Asked) -> Reply:
    answer_notes(app, asked.answer)
    app.printer.lines(asked.lines)
    if getattr(asked.answer, "now", None) is not None:
        rows_differ(app)
    return Reply(shown=(asked.shown,) if asked.shown is not None else ())


def rows_differ(app) -> None:
    """Under a side-by-side answer: which rows of the data the what-if side changed."""
    diff = app.ws.whatif_rows()
    if diff:
        app.printer.line("what if differs in: " + "; ".join(diff))
    else:
        app.printer.line("what if: the data are the same as now")


def _handler(ask):
    def handle(app, line: Line):
        return show(app, ask(app, line))
    return handle


def _FORMULA(words, text) -> Slot:
    return Slot.formula(predicted=True)


# ---------------------------------------------------------------------------
# prob, mean, sd, quantile

def ask_prob(app, line: Line) -> Asked:
    seg = _formula(line, "a condition, as in `prob p > 0.5`")
    a = formula_at(seg, app.ws.prob, seg.text)
    return _asked(line, a, f"P({seg.text})", floor=1e-14)


def ask_mean(app, line: Line) -> Asked:
    seg = _formula(line, "an expression, as in `mean p`")
    a = formula_at(seg, app.ws.mean, seg.text)
    return _asked(line, a, line.text, scale=getattr(a.detail, "scale", None))


def ask_sd(app, line: Line) -> Asked:
    seg = _formula(line, "an expression, as in `sd p`")
    a = formula_at(seg, app.ws.sd, seg.text)
    return _asked(line, a, line.text, scale=getattr(a.detail, "scale", None))


#: What may end an expression: a word ending in one of these leaves the next word
#: to the expression (`quantile x + 1 0.5` is the 0.5 quantile of x + 1).
_OPEN = "+-*/^(,<>=~"


def quantile_levels(line: Line) -> tuple[int, list[Word]]:
    """``quantile EXPR Q [Q ...]``: where the levels start (a word index) and their
    words: the trailing words that read as levels, less any an operator before them
    claims for the expression."""
    w = line.words
    k = len(w)
    while k > 2 and is_fraction(w[k - 1].text):
        k -= 1
    while k < len(w) and w[k - 1].text[-1] in _OPEN:
        k += 1
    return k, list(w[k:])


def ask_quantile(app, line: Line) -> Asked:
    w = line.words
    if len(w) < 3:
        raise ShellError("`quantile` needs an expression and a level, as in `quantile p 0.9` "
                         "or `quantile p 5% 95%`", line.end_column())
    k, words = quantile_levels(line)
    if not words:
        raise ShellError(f"`quantile` needs a level after the expression, as in `quantile "
                         f"{line.rest(1).text} 0.9`; got `{w[-1].text}`", w[-1].column)
    qs = [fraction(x, "quantile level") for x in words]
    seg = line.part(w[1].start, w[k].start).rest(0)
    answers = [formula_at(seg, app.ws.quantile, seg.text, q) for q in qs]
    if len(answers) == 1:
        return _asked(line, answers[0], line.text)
    a = _levels_answer(answers, qs)
    label = f"quantiles of {seg.text} at " + ", ".join(x.text for x in words)
    return _asked(line, a, label)


def _levels_answer(answers: list[Answer], qs: list[float]) -> Answer:
    """Several quantiles of one expression as one answer (and its "now" side)."""
    first = answers[0]
    notes = tuple(dict.fromkeys(n for a in answers for n in a.notes))
    now = None
    if all(a.now is not None for a in answers):
        now = _levels_answer([a.now for a in answers], qs)
    detail = Levels(tuple(qs), tuple(a.values[0] for a in answers),
                    tuple(a.errors[0] for a in answers))
    return Answer("quantile", first.label, detail, notes, now)


def question(name: str, usage: str, help: str, ask, complete=_FORMULA,
             group: str = "question") -> None:
    """Register a question command from its `ask` function."""
    command(name, usage=usage, kind="question", group=group, complete=complete,
            ask=ask, help=help)(_handler(ask))


question("prob", "prob CONDITION", ask=ask_prob, help="""
    The posterior probability of a condition on the parameters and lets, as in `prob p <
    0.01` or `prob a > b and b > 0`; `==` and `!=` suit discrete parameters. Conditions use
    `< <= > >= == !=` and `and or not`; a number may be written as a percentage (`prob
    prev > 5%`).""")
question("mean", "mean EXPR", ask=ask_mean, help="""
    The posterior mean of any expression of the parameters and lets, as in `mean p` or
    `mean exp(mu + sigma^2 / 2)`.""")
question("sd", "sd EXPR", ask=ask_sd, help="""
    The posterior standard deviation of any expression of the parameters and lets.""")
question("quantile", "quantile EXPR Q [Q ...]", ask=ask_quantile, help="""
    The Q-quantile (0 < Q < 1, or a percentage as `5%`) of any expression of the
    parameters and lets under the posterior, as in `quantile 1 / rate 0.9`; several
    levels give several quantiles at once (`quantile rate 5% 95%`).""")


# ---------------------------------------------------------------------------
# interval, mode, evidence

INTERVAL_USAGE = "interval EXPR [LEVEL] [hpd|central]"


def _is_level(t: str) -> bool:
    try:
        v = float(t[:-1]) / 100 if t.endswith("%") else float(t)
    except ValueError:
        return False
    return math.isfinite(v)


def ask_interval(app, line: Line) -> Asked:
    w = line.words
    if len(w) < 2:
        raise ShellError(f"`interval` needs a parameter, a let or an expression: "
                         f"{INTERVAL_USAGE}", line.end_column())
    level, kind = 0.95, "central"
    # the options are the trailing words: a kind, a level (in either order)
    end = len(w)
    seen_level = seen_kind = False
    while end > 2:
        x = w[end - 1]
        if x.text in ("hpd", "central") and not seen_kind:
            kind, seen_kind = x.text, True
        elif not seen_level and _is_level(x.text):
            level, seen_level = fraction(x, "level"), True
        else:
            break
        end -= 1
    if end == 2:
        name = w[1].text
        if name in app.ws.model.param_names or name in predicted_names(app.ws):
            a = app.ws.interval(name, level, kind)
            return _asked(line, a, line.text, scale=abs(a.detail.hi - a.detail.lo))
    seg = line.part(w[1].start, w[end - 1].end).rest(0)
    a = formula_at(seg, app.ws.interval, seg.text, level, kind)
    return _asked(line, a, line.text, scale=abs(a.detail.hi - a.detail.lo))


def predicted_names(ws) -> tuple[str, ...]:
    """The names `predict` gave new observations."""
    return tuple(p.name for p in ws.predictions)


def _complete_interval(words, text):
    if len(words) == 1:
        return Slot.formula(predicted=True)
    return Slot(words=("0.9", "0.95", "0.99", "hpd", "central"))


def ask_mode(app, line: Line) -> Asked:
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `mode` takes nothing", w[1].column)
    a = app.ws.mode()
    m = a.detail
    floor = 1e-5 * max(m.spreads, default=0.0)
    tol = R.check_tol(a.values, a.errors, floor=floor)
    if a.now is not None:
        lines = side_by_side("mode " + ", ".join(m.values),
                             ", ".join(R.num(v) for v in a.now.values),
                             ", ".join(R.num(v) for v in a.values))
        return Asked(a, lines, Shown(line.text, a.values, tol))
    text = "mode " + ", ".join(f"{n} = {R.num(v)}" for n, v in m.values.items())
    return Asked(a, (text + (f"  ({m.message})" if m.message else ""),),
                 Shown(line.text, a.values, tol))


def ask_evidence(app, line: Line) -> Asked:
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `evidence` takes nothing", w[1].column)
    a = app.ws.evidence()
    if not math.isfinite(a.detail.value) and a.now is None:
        return Asked(a, (), None)      # not defined: the answer's note says why
    return _asked(line, a, "log evidence")


question("interval", INTERVAL_USAGE, ask=ask_interval, complete=_complete_interval, help="""
    A credible interval of a parameter, a let or any expression of them (`interval ld50`,
    `interval a / b 0.9`): central (equal tails, the default) or hpd (highest density; a
    region of several pieces is listed in a note), at LEVEL (default 0.95; 90% also
    reads). For a name given to `predict`, the central interval of the new
    observation.""")
question("mode", "mode", ask=ask_mode, complete=lambda words, text: NOTHING, help="""
    The joint posterior mode: the best grid point, polished by an optimiser over the
    continuous parameters (in the parameters' own units).""")
question("evidence", "evidence", ask=ask_evidence, complete=lambda words, text: NOTHING,
         help="""The log evidence (marginal likelihood) of the model, with its estimated error.
    It is defined only when every prior is proper.""")


# ---------------------------------------------------------------------------
# digits

@command("digits", usage="digits [N]", kind="note", group="question",
         complete=lambda words, text: Slot(words=("6", "10", "15")) if len(words) == 1
         else NOTHING,
         help=f"""Shows or sets how many significant digits numbers are shown with (1 to
         {R.MAX_DIGITS}; 6 at the start). A number with an estimated error is never shown
         past the digit its error supports, whatever the setting. Exports always hold every
         digit. Saved sessions keep the setting.""")
def digits(app, line: Line):
    w = line.words
    if len(w) > 2:
        raise ShellError(f"unexpected `{w[2].text}`; usage: digits [N]", w[2].column)
    if len(w) == 2:
        n = number(w[1], "N")
        if n != int(n) or not 1 <= n <= R.MAX_DIGITS:
            raise ShellError(f"digits must be a whole number from 1 to {R.MAX_DIGITS}; got "
                             f"`{w[1].text}`", w[1].column)
        app.digits = int(n)
    app.printer.line(f"numbers are shown with {app.digits} significant digits")


# ---------------------------------------------------------------------------
# summary

def _complete_none(words, text):
    return NOTHING


@command("summary", usage="summary", kind="question", group="question",
         complete=_complete_none,
         help="""A table of every parameter: its posterior mean with the mean's estimated
         numerical error, its sd, its median and its 95% central credible interval (from
         the 2.5% to the 97.5% quantile), then the log evidence and the largest estimated
         error of any number in the table.""")
def summary(app, line: Line):
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `summary` takes nothing", w[1].column)
    s = app.ws.summary()
    answer_notes(app, s)
    if s.now is not None:
        return _summary_side_by_side(app, s)
    rows, errs, absent = [], [], []
    for r in s.rows:
        ests = (r.mean, r.sd, r.q025, r.q50, r.q975)
        rows.append([r.name + (" (let)" if r.let else "")] + summary_cells(r, s.unresolved))
        errs.extend(e.error for e in ests if e.error is not None)
        gone = [w for w, e in (("mean", r.mean), ("sd", r.sd)) if e.method == "absent"]
        if gone:
            absent.append(f"`{r.name}` has no {' and no '.join(gone)} (tails too heavy)")
    p = app.printer
    p.lines([Table.of(SUMMARY_HEAD, rows, align="lrlrrl", compact=True)])
    for text in absent:
        p.line("- " + text)
    ev = s.log_evidence
    if ev is not None:
        p.line("log evidence = " + R.with_error(ev.value, ev.error,
                                                unresolved=bool(s.unresolved)))
    else:
        p.line("log evidence: not defined (the prior is improper)")
    tail = (f"{R.count(s.points)} nodes of rule `{s.rule}`" if s.rule
            else f"{R.count(s.points)} grid points")
    if s.unresolved:
        tail += "; not resolved: " + s.unresolved + " (use `grid auto` or `zoom`)"
    elif errs and max(errs) > 0:
        tail += f"; largest estimated error {R.err(max(errs))[2:]}"
    elif errs:
        tail += "; exact sums"
    p.line(tail)
    return Reply(shown=tuple(_summary_shown(s)))


def _cell(e, unresolved: str = "") -> str:
    """A summary cell: the value to the digit its error supports, or `-` for a
    moment that does not exist (or a let's number that could not be given)."""
    if e.method == "absent" or not math.isfinite(e.value):
        return "-"
    return R.num(e.value, 2) if unresolved else R.to_error(e.value, e.error)


#: The summary's columns: the interval is written as one, with its level.
SUMMARY_HEAD = ["parameter", "mean", "± error", "sd", "median", "95% credible interval"]


def summary_cells(r, unresolved: str = "") -> list[str]:
    """One parameter's summary: mean, the mean's numerical error, sd, median and
    the central 95% interval as ``LO to HI``."""
    err = R.err(r.mean.error) if (r.mean.method != "absent" and r.mean.error is not None
                                  and math.isfinite(r.mean.value)) else ""
    # in the stacked form the error follows the mean: "mean 0.3143 ± 5e-5"
    u = unresolved
    return [_cell(r.mean, u), err, _cell(r.sd, u), _cell(r.q50, u),
            f"{_cell(r.q025, u)} to {_cell(r.q975, u)}"]


def _summary_shown(s) -> list[Shown]:
    """The check lines of a summary: every number it showed (a let's that could not
    be given, none)."""
    shown = []
    for r in s.rows:
        sd = r.sd.value
        spread = sd if math.isfinite(sd) else abs(r.q975.value - r.q025.value)
        if r.mean.method != "absent" and math.isfinite(r.mean.value):
            shown.append(Shown(f"mean {r.name}", (r.mean.value,),
                               R.check_tol([r.mean.value], [r.mean.error], scale=spread)))
        if r.sd.method != "absent" and math.isfinite(sd):
            shown.append(Shown(f"sd {r.name}", (sd,),
                               R.check_tol([sd], [r.sd.error], scale=spread)))
        for q, e in (("0.025", r.q025), ("0.5", r.q50), ("0.975", r.q975)):
            if math.isfinite(e.value):
                shown.append(Shown(f"quantile {r.name} {q}", (e.value,),
                                   R.check_tol([e.value], [e.error], scale=spread)))
    if s.log_evidence is not None:
        ev = s.log_evidence
        shown.append(Shown("evidence", (ev.value,), R.check_tol([ev.value], [ev.error])))
    return shown


def _summary_side_by_side(app, s) -> Reply:
    """The summary inside a what-if layer: each parameter's row now and what if;
    the check lines state the what-if values."""
    now = {r.name: r for r in s.now.rows}
    rows = []
    for r in s.rows:
        for which, x in (("now", now.get(r.name)), ("what if", r)):
            if x is None:
                continue
            rows.append([r.name, which] + summary_cells(x))
    p = app.printer
    p.lines([Table.of(SUMMARY_HEAD[:1] + [""] + SUMMARY_HEAD[1:], rows, align="llrlrrl",
                      lead=2, compact=True)])

    def ev(x):
        return R.num(x.log_evidence.value) if x.log_evidence is not None else "not defined"

    p.line(f"log evidence: now {ev(s.now)}, what if {ev(s)}")
    p.line(f"grid points: now {R.count(s.now.points)}, what if {R.count(s.points)}")
    rows_differ(app)
    return Reply(shown=tuple(_summary_shown(s)))


# ---------------------------------------------------------------------------
# check

CHECK_USAGE = "check QUESTION = VALUE[, VALUE] [tol T]"


def _complete_check(words, text):
    if len(words) == 1:
        return Slot(words=tuple(n for n, c in COMMANDS.items() if c.ask is not None))
    if lone_equals(text):
        return Slot(words=("tol",))
    return Slot.formula()


@command("check", usage=CHECK_USAGE, kind="check", group="question", complete=_complete_check,
         help="""Asks a question that yields numbers (prob, mean, sd, quantile, interval,
         evidence, mode, predict, compare, samplesize) and compares its answer with VALUE
         (the value follows the last lone `=`), as in `check prob p > 0.5 = 0.013 tol 1e-4`
         or `check interval p 0.95 = 0.10, 0.52`. `tol` is absolute; without it, the
         precision the value is written to is the tolerance. Inside a what-if layer it
         compares the what-if value. A check that fails is reported with both values and
         makes a batch run end with status 1. `save` writes one after every question, and
         after `refine` and `zoom` for the values they reached.""")
def check(app, line: Line):
    w = line.words
    if len(w) < 2:
        raise ShellError(f"`check` needs a question: {CHECK_USAGE}", line.end_column())
    eqs = [line.start + i for i in lone_equals(line.text)]
    if not eqs:
        raise ShellError(f"`check` needs `= VALUE` after the question: {CHECK_USAGE}",
                         line.end_column())
    eq = eqs[-1]
    qline = line.part(w[1].start, eq)
    if qline.blank:
        raise ShellError("`check` needs a question before `=`", eq + 1)
    cmd = COMMANDS.get(qline.name)
    if cmd is None or cmd.ask is None:
        asks = ", ".join(n for n, c in COMMANDS.items() if c.ask is not None)
        raise ShellError(f"`{qline.name}` is not a question with numbers to check; use one "
                         f"of {asks}", qline.start + 1)
    expected, texts, tol = _expected(line, eq)
    asked = cmd.ask(app, qline)
    got = asked.answer.values
    if len(got) != len(expected):
        raise ShellError(f"`{qline.name}` gives {len(got)} number"
                         f"{'s' if len(got) != 1 else ''}; the check has {len(expected)}",
                         eq + 2)
    if tol is None:
        tol = max(R.typed_precision(t) for t in texts)
    notes(app, asked.answer.notes)
    off = max(abs(g - e) for g, e in zip(got, expected))
    ok = all(math.isfinite(g) and abs(g - e) <= tol * (1 + 1e-9) for g, e in zip(got, expected))
    gtext = ", ".join(R.num(g) for g in got)
    etext = ", ".join(texts)
    label = qline.text
    if ok:
        app.printer.line(f"check ok: {label} = {gtext} (checked {etext}, tol {R.num(tol, 2)})",
                         "ok")
        return Reply(check_of=qline.text)
    where = app.current_where
    prefix = f"{where}: " if where else ""
    if app.replaying:
        msg = f"check moved: {label} was {etext}, now {gtext} (by {R.num(off, 2)}; tol " \
              f"{R.num(tol, 2)})"
    else:
        msg = f"check failed: {label} = {gtext}, expected {etext} (off by {R.num(off, 2)}; " \
              f"tol {R.num(tol, 2)})"
    app.printer.error(prefix + msg)
    return Reply(status="failed", check_of=qline.text)


def _expected(line: Line, eq: int) -> tuple[list[float], list[str], float | None]:
    """The values after `=`, and `tol T` if given."""
    after = line.after(eq + 1)
    if not after.text:
        raise ShellError("no value after `=`", eq + 2)
    sub = line.part(after.start, line.end)
    words = list(sub.words)
    tol = None
    for k, x in enumerate(words):
        if x.text == "tol":
            if k + 1 >= len(words):
                raise ShellError("`tol` needs a number", x.end + 1)
            if k + 2 < len(words):
                raise ShellError(f"unexpected `{words[k + 2].text}` after the tolerance",
                                 words[k + 2].column)
            tol = number(words[k + 1], "tol")
            if tol < 0:
                raise ShellError("tol must not be negative", words[k + 1].column)
            words = words[:k]
            break
    if not words:
        raise ShellError("no value after `=`", eq + 2)
    values, texts = [], []
    for x in words:
        pos = x.start
        for piece in x.text.split(","):
            if piece:
                wd = Word(piece, pos)
                values.append(number(wd, "value"))
                texts.append(piece)
            pos += len(piece) + 1
    if not values:
        raise ShellError("no value after `=`", eq + 2)
    return values, texts, tol
