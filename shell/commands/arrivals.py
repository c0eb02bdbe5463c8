"""Data arriving: the what-if layer, predictions, sample size, keeping and
comparing models. (`data append` lives with the other data commands.)

`predict`, `samplesize` and `compare` are questions: each has an `ask` function
that `check` shares, and its numbers become a saved check line. `keep` changes
the state. `whatif` and `whatif end` are kept in a saved session as typed, so a
replay goes through the same layer and its checks compare the what-if values.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

from engine.results import Answer, SampleSizeOptions

from .. import render as R
from ..layout import Table
from ..registry import NOTHING, Slot, command
from ..replies import Asked, Reply, Shown
from ..words import Line, Segment, ShellError, Word, formula_at, fraction, number, whole
from .common import say, with_progress
from .model import _TILDE, split_at
from .questions import answer_lines, checkable, question

# ---------------------------------------------------------------------------
# whatif

WHATIF_USAGE = "whatif  or  whatif end"


@command("whatif", usage=WHATIF_USAGE, kind="note", group="arrival",
         complete=lambda words, text: Slot(words=("end",)) if len(words) == 1 else NOTHING,
         help="""Opens a hypothetical layer: the prompt and the toolbar show it, the data
         commands that follow (`data append` above all) are hypothetical, and every
         question answers side by side, "now" and "what if"; a `check` inside the layer
         compares the what-if value. `whatif end` drops the layer: the model, data, grid
         and posterior are exactly as before `whatif`, and every number is as it was
         (names given to `predict` inside the layer stay). `undo` inside the layer undoes
         the hypothetical changes only. A saved session keeps the layer as typed.""")
def whatif(app, line: Line):
    w = line.words
    ws = app.ws
    if len(w) == 1:
        say(app, ws.whatif_begin())
        return None
    if w[1].text != "end":
        raise ShellError(f"unexpected `{w[1].text}`; usage: {WHATIF_USAGE}", w[1].column)
    if len(w) > 2:
        raise ShellError(f"unexpected `{w[2].text}`; usage: {WHATIF_USAGE}", w[2].column)
    if not ws.in_whatif:
        raise ShellError("not in a what-if layer; `whatif` opens one", w[1].column)
    say(app, ws.whatif_end())
    return None


# ---------------------------------------------------------------------------
# predict

PREDICT_USAGE = "predict COL ~ FAMILY(args)"
#: The most values of a discrete predictive listed in its table.
PMF_ROWS = 25


def _pmf_rows(pv) -> list[list[str]]:
    """The values of a discrete predictive that carry its mass: its central 99.9%,
    if that is at most `PMF_ROWS` values."""
    lo, hi = pv.quantile(0.0005), pv.quantile(0.9995)
    if not (math.isfinite(lo) and math.isfinite(hi)) or hi - lo + 1 > PMF_ROWS:
        return []
    rows = []
    for v in range(int(lo), int(hi) + 1):
        rows.append([R.num(v), R.num(pv.pmf(v), 4), R.num(pv.cdf(v), 4)])
    return rows


def _pred_values(a: Answer) -> str:
    d = a.detail
    mean, sd, lo, hi = d.mean, d.sd, d.lo, d.hi
    iv = f"95% interval {R.num(lo)} .. {R.num(hi)}"
    if not math.isfinite(mean):
        return f"no mean or sd (its tails are too heavy), {iv}"
    if not math.isfinite(sd):
        return f"mean {R.num(mean)}, no sd (its tails are too heavy), {iv}"
    return f"mean {R.num(mean)}, sd {R.num(sd)}, {iv}"


def ask_predict(app, line: Line) -> Asked:
    name, rest = split_at(line, 1, _TILDE, "~", PREDICT_USAGE)
    a = formula_at(rest, app.ws.predict, name.text, rest.text)
    pv = a.detail.predictive
    label = f"new {name.text} ~ {rest.text}"
    lines = list(answer_lines(label, a, _pred_values))
    if a.now is None and pv.discrete:
        rows = _pmf_rows(pv)
        if rows:
            lines.append(Table.of([name.text, "pmf", "cdf"], rows, align="rrr", indent=2))
    kind = "pmf" if pv.discrete else "density"
    lines.append(f"`prob {name.text} > ...`, `mean {name.text}`, `quantile {name.text} Q` and "
                 f"`interval {name.text}` ask about it; `plot {name.text}` draws its {kind}")
    sd = a.detail.sd
    tol = R.check_tol(a.values, a.errors, scale=sd if math.isfinite(sd) else None)
    return Asked(a, tuple(lines), checkable(line, a.values, tol))


def _complete_predict(words, text):
    if len(words) == 1:
        return Slot(columns=True)
    if "~" not in text:
        return Slot(words=("~",))
    if "(" not in text.split("~", 1)[1]:
        return Slot(families=True)
    return Slot.formula()


question("predict", PREDICT_USAGE, ask=ask_predict, complete=_complete_predict, group="arrival",
         help="""
    The posterior predictive distribution of one new observation named COL, from the
    family given, whose arguments may use the parameters and lets (and numbers for what
    a new row would hold), as in `predict y ~ binomial(20, p)`: its mean, sd and central
    95% interval, and for a discrete family its pmf. Afterwards `prob COL > 5`, `mean
    COL`, `sd COL`, `quantile COL Q` and `interval COL [LEVEL]` ask about the new
    observation, and `plot COL` draws its pmf or density. Exact sums over the grid, no
    sampling.""")


# ---------------------------------------------------------------------------
# samplesize

SAMPLESIZE_USAGE = ("samplesize NAME width W [level L] [max N] [sims N] [seed S] [hpd] "
                    "[using COL ~ FAMILY(args)]")
_SS_WORDS = ("width", "level", "max", "sims", "seed", "using", "hpd", "central")


def _level(word: Word) -> float:
    return fraction(word, "level")


@dataclass(frozen=True)
class SampleSizeLine:
    """A `samplesize` line read: the parameter, the width, the search options (the
    engine's defaults where not given), and where the `using` formula starts."""

    name: str
    width: float
    options: SampleSizeOptions
    using_at: Segment | None = None


def parse_samplesize(line: Line, params) -> SampleSizeLine:
    """The options of a `samplesize` line, each checked where it stands."""
    w = line.words
    if len(w) < 2:
        raise ShellError(f"`samplesize` needs a parameter: {SAMPLESIZE_USAGE}",
                         line.end_column())
    if w[1].text not in params:
        raise ShellError(f"no parameter `{w[1].text}`", w[1].column)
    given: dict = {}
    width = using_at = None
    i = 2
    while i < len(w):
        x = w[i]
        key = x.text
        if key == "using":
            given["using"], using_at = _using(line, x)
            break
        if key in ("hpd", "central"):
            if "kind" in given:
                raise ShellError(f"two kinds of interval: `{given['kind']}` and `{key}`",
                                 x.column)
            given["kind"] = key
            i += 1
            continue
        if key not in _SS_WORDS:
            raise ShellError(f"unexpected `{key}`; usage: {SAMPLESIZE_USAGE}", x.column)
        field = _SS_FIELDS.get(key, key)
        if field in given or (key == "width" and width is not None):
            raise ShellError(f"`{key}` given twice", x.column)
        if i + 1 >= len(w):
            raise ShellError(f"`{key}` needs a number", x.end + 1)
        value = _ss_value(key, w[i + 1])
        if key == "width":
            width = value
        else:
            given[field] = value
        i += 2
    if width is None:
        raise ShellError(f"`samplesize` needs `width W`: {SAMPLESIZE_USAGE}", line.end_column())
    return SampleSizeLine(w[1].text, width, SampleSizeOptions(**given), using_at)


#: Words of a `samplesize` line that name a differently spelled option.
_SS_FIELDS = {"max": "max_n"}


def _ss_value(key: str, v: Word):
    """The number after option word `key`, checked."""
    if key == "width":
        width = number(v, "width")
        if not width > 0:
            raise ShellError(f"width must be positive; got `{v.text}`", v.column)
        return width
    if key == "level":
        return _level(v)
    if key == "max":
        return whole(v, "max", low=1)
    if key == "sims":
        return whole(v, "sims", low=2)
    return whole(v, "seed", low=0)


def _using(line: Line, x: Word) -> tuple[str, Segment]:
    """``using COL ~ FAMILY(args)``: the text, and where the formula starts."""
    seg = line.after(x.end)
    if not seg.text:
        raise ShellError("`using` needs COL ~ FAMILY(args)", x.end + 1)
    tilde = seg.text.find("~")
    if tilde < 0:
        raise ShellError("`using` needs COL ~ FAMILY(args)", seg.column)
    return seg.text, Segment(seg.text[tilde + 1:], seg.start + tilde + 1)


def ask_samplesize(app, line: Line) -> Asked:
    ws = app.ws
    o = parse_samplesize(line, ws.model.param_names)
    if o.using_at is not None:
        a = formula_at(o.using_at, with_progress, app, ws.samplesize, o.name, o.width,
                       o.options)
    else:
        a = with_progress(app, ws.samplesize, o.name, o.width, o.options)
    d = a.detail
    res, n = d.search, d.n
    lines = []
    if res.steps:
        lines.append(Table.of(["further n", "expected width", "Monte Carlo error"],
                              [[R.count(s.n), R.num(s.width, 4), R.num(s.mc_error, 2)]
                               for s in res.steps], align="rrr"))
    what = f"{d.level:g} {d.kind} interval of `{o.name}`"
    if n is None:
        lines.append(f"{line.text}: {res.message}")
        lines.append(f"{line.text} = none, {R.num(d.width, 4)} at {R.count(res.steps[-1].n)}"
                     if res.steps else f"{line.text} = none")
    elif n == 0:
        lines.append(f"{line.text} = 0, {R.num(d.width)}")
        lines.append(res.message)
    else:
        lines.append(f"{line.text} = {n}, {R.num(d.width)}")
        lines.append(f"after {R.count(n)} further observation{'s' if n != 1 else ''} the "
                     f"expected width of the {what} is {R.num(d.width, 4)} (Monte Carlo "
                     f"error {R.num(d.mc_error, 2)}; {res.sims} simulations, seed {res.seed})")
        if res.message:
            lines.append(f"note: {res.message}")
    if res.unit:
        lines.append(f"note: {res.unit}")
    # n is exact for the seed; the width is a deterministic function of it
    # not reached: the check states n as -1 (none) and the width where the search
    # stopped; the tolerance 0.5 holds n exactly (the width is fixed by the seed)
    tol = R.check_tol(a.values, (None, None)) if n is not None else 0.5
    if res.stopped:
        # where the budget stops the search depends on the machine's speed: no check
        lines.append("note: a search stopped by the time budget is not saved with a check")
        return Asked(a, tuple(lines), None)
    return Asked(a, tuple(lines), Shown(line.text, a.values, tol))


def _complete_samplesize(words, text):
    if len(words) == 1:
        return Slot(params=True)
    if "using" in words[2:]:
        after = text.split(" using ", 1)[-1]
        if "~" not in after:
            return Slot(columns=True, words=("~",))
        if "(" not in after.split("~", 1)[1]:
            return Slot(families=True)
        return Slot.formula()
    if words[-1] in ("width", "level", "max", "sims", "seed"):
        return NOTHING
    return Slot(words=tuple(x for x in _SS_WORDS if x not in words))


question("samplesize", SAMPLESIZE_USAGE, ask=ask_samplesize, complete=_complete_samplesize,
         group="arrival", help="""How many further observations make the expected width of the LEVEL
    (default 0.95) interval of NAME fall to W or below: the average length criterion of
    Joseph, Wolfson and du Berger (1995). Each of `sims` simulations (default 200) draws
    a parameter value from the current posterior and future rows from the model's own
    likelihood at it, updates the posterior on the grid and measures the interval; the
    widths are averaged. The same draws serve every n tried, and `seed` (default 1)
    makes the answer repeat exactly. It prints each n tried with its expected width and
    Monte Carlo error, then the smallest n that reaches W (searched up to `max`, default
    10000). When the future rows are ambiguous (a likelihood that reads other columns, or
    several likelihood terms), name them with `using COL ~ FAMILY(args)`. `hpd` measures
    highest-density intervals instead of central ones. One further observation is one
    row of that likelihood (a row of `k ~ binomial(100, p)` is a batch of 100 trials);
    the answer says so. When the expected width levels off above W (the uncertainty of
    other parameters the new rows inform only together with NAME dominates), it says that
    W cannot be reached, and which parameters, instead of searching on. More `sims N`
    lower the Monte Carlo error at the cost of time. A progress bar shows the simulations
    done; a step that would end past the time budget (`budget`) is not started, and the
    answer keeps the steps so far. Inside a what-if layer it answers for the what-if
    state.""")


# ---------------------------------------------------------------------------
# keep and compare

def list_keeps(app) -> Reply:
    """`keep` alone: the kept models, one line each (nothing changes)."""
    keeps = app.ws.keeps
    if not keeps:
        app.printer.line("no kept models; `keep NAME` keeps the current one")
        return Reply(logged=False)
    app.printer.line(f"{len(keeps)} kept model{'s' if len(keeps) != 1 else ''}:")
    for k in keeps:
        ev = k.log_evidence
        evidence = ("no log evidence (improper prior on " + ", ".join(k.improper) + ")"
                    if ev is None else f"log evidence {R.with_error(ev.value, ev.error)}")
        app.printer.line(f"  {k.name}: {evidence} on {R.count(k.points)} points; data "
                         f"{k.data_rows}")
    return Reply(logged=False)


@command("keep", usage="keep [NAME]", kind="change", group="arrival",
         complete=lambda words, text: Slot(kept=True) if len(words) == 1 else NOTHING,
         help="""Keeps the current model under NAME for `compare`: its log evidence (with
         its estimated error), the data it was fitted to, and cautions on priors much
         wider than the posterior. Computes the posterior first if it is out of date and
         cheap. Keeping a name again replaces it. `keep` alone lists the kept models.""")
def keep(app, line: Line):
    w = line.words
    if len(w) < 2:
        return list_keeps(app)
    if len(w) > 2:
        raise ShellError(f"unexpected `{w[2].text}`; usage: keep NAME", w[2].column)
    say(app, app.ws.keep(w[1].text))
    if app.ws.in_whatif:
        app.printer.note("kept inside the what-if layer: `whatif end` drops it")


def ask_compare(app, line: Line) -> Asked:
    w = line.words
    if len(w) < 3:
        raise ShellError("`compare` needs two kept models: compare NAME NAME",
                         line.end_column())
    if len(w) > 3:
        raise ShellError(f"unexpected `{w[3].text}`; usage: compare NAME NAME", w[3].column)
    kept = {k.name for k in app.ws.keeps}
    for x in w[1:3]:
        if x.text not in kept:
            raise ShellError(f"no kept model `{x.text}`; keep one with `keep NAME`", x.column)
    if w[1].text == w[2].text:
        raise ShellError("compare needs two different kept models", w[2].column)
    c = app.ws.compare(w[1].text, w[2].text)
    est = c.log_bf
    a = c.answer
    lines = [f"log Bayes factor of `{c.first.name}` over `{c.second.name}` = "
             f"{R.with_error(est.value, est.error)}",
             bayes_factor_line(c.first.name, c.second.name, est.value, est.error)]
    for k in (c.first, c.second):
        ev = k.log_evidence
        lines.append(f"  {k.name}: log evidence {R.with_error(ev.value, ev.error)} on "
                     f"{R.count(k.points)} points; data {k.data_rows}")
    lines += [f"caution: {n}" for n in c.notes]
    return Asked(a, tuple(lines), Shown(line.text, a.values, R.check_tol(a.values, a.errors)))


def bayes_factor_line(first: str, second: str, log_bf: float, error: float | None) -> str:
    """``B = 2.9 in favour of `a` over `b```: the factor of the favoured model, above
    1, to the digit the error of its log supports; neither is favoured when the log
    is not told from 0."""
    if log_bf == 0 or (error is not None and abs(log_bf) < 2 * error):
        return (f"B = 1: neither `{first}` nor `{second}` is favoured (the log Bayes factor "
                "is within its error of 0)")
    win, lose = (first, second) if log_bf > 0 else (second, first)
    size = abs(log_bf)
    b = math.exp(size) if size < 709 else math.inf
    shown = R.to_error(b, b * error if error is not None else None) if math.isfinite(b) \
        else "above 1e307"
    return f"B = {shown} in favour of `{win}` over `{lose}`"


question("compare", "compare NAME NAME", ask=ask_compare, group="arrival",
         complete=lambda words, text: Slot(kept=True) if len(words) in (1, 2) else NOTHING,
         help="""Compares two models kept with `keep` on the same data: the log Bayes factor
    of the first over the second (the difference of their log evidences) with its
    estimated error, and the Bayes factor. It refuses models fitted to different data or
    with an improper prior (no evidence), and cautions when a prior is much wider than
    its posterior or heavy-tailed: the Bayes factor then depends on the prior's width.""")
