"""Data arriving, through the shell: data append (typed and from a CSV file), the
what-if layer (prompt, toolbar, side-by-side answers, nothing changed after it),
predict, samplesize, keep and compare, undo around layers, and save then replay of
a session that uses all of them with refine.

References, named beside each check: conjugate updating (beta-binomial,
normal-normal with known sd) as common practice, evaluated with scipy.stats and
scipy.special; the predictive of a binomial under a beta posterior is
scipy.stats.betabinom; the sample-size criterion is the average length criterion
of Joseph, Wolfson and du Berger (1995), which for a normal mean with known sd
depends on n alone, so its answer has a closed form.
"""

from __future__ import annotations

import io
import math
import re

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st

from shell.app import App
from shell.printer import Printer

from test_shell_commands import MODEL, POST, Shell, shown, value  # noqa: F401 (the harness)


@pytest.fixture
def sh(tmp_path):
    return Shell(tmp_path)


@pytest.fixture
def model(sh):
    assert sh(*MODEL, "grid p 0.001 0.999 201", "compute") == "ok"
    sh.take()
    return sh


def numbers(text: str) -> list[float]:
    return [float(x) for x in re.findall(r"-?\d+(?:\.\d+)?(?:e-?\d+)?", text)]


def predicted(out: str, head: str) -> list[float]:
    """Mean, sd and interval ends of the `predict` line starting with `head`."""
    line = next(x for x in out.splitlines() if x.startswith(head))
    m = re.search(r" = mean (\S+), sd (\S+), 95% interval (\S+) \.\. (\S+)$", line)
    return [float(x) for x in m.groups()]


# ---------------------------------------------------------------------------
# data append

def test_append_typed_updates_from_the_new_rows_to_the_batch_answer(model):
    assert model("data append k = 7, 6") == "ok"
    out = model.take()[0]
    assert out == ("appended 2 values to `k` (5 rows now)\n"
                   "note: posterior updated from the new rows alone\n")
    model("mean p", "sd p")
    out = model.take()[0]
    # beta(2 + 22, 3 + 28) after 22 successes in 50 trials (conjugacy): scipy.stats.beta
    ref = st.beta(24, 31)
    assert value(out, "mean p")[0] == shown(ref.mean())
    assert value(out, "sd p")[0] == shown(ref.std())


def test_append_bad(model):
    assert model.error("data append z = 1") == (
        "error: column 13: no data column `z` to append to; `data z = ...` gives a new one")
    assert model.error("data append k = 1, x") == "error: data `k` value 2: `x` is not a number"
    assert model.error("data append k 1") == (
        "error: column 14: expected `=` after `k`; usage: data append NAME = v1, v2, ...  or  "
        "data append FILE.csv [as PREFIX]")
    assert model.app.ws.state.data.get("k").rows == 3   # nothing was half-appended


def test_append_a_csv_file_to_the_table_loaded_with_its_header(sh, tmp_path):
    (tmp_path / "first.csv").write_text("n,y\n10,3\n10,2\n")
    (tmp_path / "more.csv").write_text("n,y\n10,4\n20,9\n")
    sh("param p unit", "prior p ~ beta(2, 3)", "data load first.csv",
       "likelihood y ~ binomial(n, p)", "grid p 0.001 0.999 201", "compute")
    sh.take()
    assert sh("data append more.csv") == "ok"
    out = sh.take()[0]
    assert out.startswith("appended 2 rows from `more.csv` to table `first`\n")
    sh("mean p")
    # beta(2 + 18, 3 + 32): 18 successes in 50 trials (conjugacy), scipy.stats.beta
    assert value(sh.take()[0], "mean p")[0] == shown(st.beta(20, 35).mean())
    sh("save s.qd")
    text = (tmp_path / "s.qd").read_text()
    assert re.search(r"^# data first\.csv sha256 [0-9a-f]{64}$", text, re.M)
    assert re.search(r"^# data more\.csv sha256 [0-9a-f]{64}$", text, re.M)
    (tmp_path / "other.csv").write_text("a,b\n1,2\n")
    assert sh.error("data append other.csv") == (
        "error: no loaded table has the columns of `other.csv` (a, b); load it first with "
        "`data load`")


def test_columns_of_different_lengths_are_named_until_they_agree(sh):
    sh("param a real", "param b real", "prior a ~ normal(0, 5)", "prior b ~ normal(0, 5)",
       "data x = 1, 2, 3", "data y = 1.1, 2.3, 2.9", "likelihood y ~ normal(a + b*x, 0.5)",
       "grid a -3 3 41", "grid b -1 3 41", "compute")
    sh.take()
    sh("data append x = 4")
    assert "note: likelihood `y`: its columns differ in length (`x` 4 rows, `y` 3 rows)" in \
        sh.take()[0]
    assert sh.error("mean b") == (
        "error: likelihood `y`: its columns differ in length (`x` 4 rows, `y` 3 rows)")
    assert sh("data append y = 4.2", "mean b") == "ok"


def test_an_append_that_moves_the_mass_resizes_the_grid_and_says_so(sh):
    sh("param mu real", "prior mu ~ normal(0, 10)", "data y = 0.1, -0.2, 0.3",
       "likelihood y ~ normal(mu, 1)", "compute")
    sh.take()
    sh("data append y = " + ", ".join(["9.8", "10.1", "10.3", "9.9", "10.2"] * 4))
    out = sh.take()[0]
    assert re.search(r"^note: the mass moved toward an edge of the grid \(\S+\); grid re-sized: "
                     r"mu: ", out, re.M)
    sh("mean mu")
    # normal-normal conjugacy (common practice): mean = sum(y) / (1/10^2 + n)
    y = np.array([0.1, -0.2, 0.3] + [9.8, 10.1, 10.3, 9.9, 10.2] * 4)
    assert value(sh.take()[0], "mean mu")[0] == shown(y.sum() / (0.01 + len(y)))


# ---------------------------------------------------------------------------
# whatif

QUESTIONS = ["summary", "mean p", "sd p", "interval p 0.9 hpd", "prob p > 0.4",
             "quantile p 0.8", "mode", "evidence", "predict y ~ binomial(10, p)", "prob y > 5",
             "interval y"]


def test_whatif_leaves_every_number_unchanged(model):
    model(*QUESTIONS)
    before = model.take()[0].splitlines()
    assert model("whatif") == "ok"
    model("data append k = 10, 10, 9", "mean p", "summary")
    model.take()
    assert model("whatif end") == "ok"
    assert model.take()[0] == "what-if dropped: everything is as it was before `whatif`\n"
    model(*QUESTIONS)
    assert model.take()[0].splitlines() == before
    assert model.app.ws.state.data.get("k").rows == 3


def test_whatif_answers_now_and_what_if_side_by_side(model):
    model("whatif", "data append k = 10, 10, 9")
    model.take()
    model("mean p")
    header, row, differ = model.take()[0].splitlines()
    assert header.split() == ["now", "what", "if"]
    assert differ == "what if differs in: 3 rows appended (`k`)"
    now, whatif = numbers(row.split("mean p", 1)[1])[::2][:2]
    # now beta(11, 24); what if beta(11 + 29, 24 + 1) (conjugacy): scipy.stats.beta
    assert now == shown(POST.mean())
    assert whatif == shown(st.beta(40, 25).mean())
    # a check inside the layer compares the what-if value
    assert model(f"check mean p = {st.beta(40, 25).mean():.6f}") == "checked"
    assert model(f"check mean p = {POST.mean():.6f}") == "failed"
    model("summary")
    out = model.take()[0]
    assert re.search(r"^p\s+now[:\s]", out, re.M) and re.search(r"^p\s+what if[:\s]", out, re.M)


def test_whatif_shows_in_the_prompt_and_the_toolbar(model):
    from prompt_toolkit.history import InMemoryHistory
    from prompt_toolkit.output import DummyOutput

    from shell.repl import Repl

    repl = Repl(model.app, input=None, output=DummyOutput(), history=InMemoryHistory())
    assert repl.session.message() == "quadrat> "
    assert not repl.toolbar().endswith("what-if")
    model("whatif")
    assert repl.session.message() == "quadrat (what-if)> "
    assert repl.toolbar().endswith("| what-if")
    model("whatif end")
    assert repl.session.message() == "quadrat> "


def test_whatif_bad(model):
    assert model.error("whatif end") == (
        "error: column 8: not in a what-if layer; `whatif` opens one")
    assert model.error("whatif now") == (
        "error: column 8: unexpected `now`; usage: whatif  or  whatif end")
    model("whatif")
    assert model.error("whatif") == "error: already in a what-if layer; `whatif end` first"


def test_undo_inside_a_layer_undoes_only_its_own_changes(model):
    before = model.app.ws.state
    model("whatif", "data append k = 10")
    model.take()
    assert model("undo") == "ok"
    assert model.app.ws.state.data.get("k").rows == 3 and model.app.ws.in_whatif
    assert model.error("undo") == (
        "error: nothing to undo inside this what-if layer; `whatif end` drops it")
    model("data append k = 10, 9", "whatif end")
    assert model.app.ws.state is before
    # after the layer, undo passes over it to the last real change (compute)
    model.take()
    assert model("undo") == "ok"
    assert model.take()[0].startswith("undone: `compute`")
    assert [e.text for e in model.app.log] == MODEL + ["grid p 0.001 0.999 201"]


def test_ctrl_c_in_a_replay_that_opened_a_layer_drops_the_layer(model, tmp_path, monkeypatch):
    from shell.registry import COMMANDS

    (tmp_path / "w.qd").write_text("whatif\ndata append k = 10\nmean p\n")
    before = model.app.ws.state
    real = COMMANDS["mean"]

    def interrupted(app, line):
        raise KeyboardInterrupt

    monkeypatch.setitem(COMMANDS, "mean", real.__class__("mean", real.usage, real.help,
                                                         interrupted, real.kind))
    assert model("replay w.qd merge") == "cancelled"
    assert not model.app.ws.in_whatif and model.app.ws.state is before


# ---------------------------------------------------------------------------
# predict

def test_predict_a_binomial_is_the_beta_binomial(model):
    assert model("predict y ~ binomial(10, p)") == "ok"
    out = model.take()[0]
    ref = st.betabinom(10, 11, 24)   # scipy.stats: binomial(10, p) with p ~ beta(11, 24)
    mean, sd, lo, hi = predicted(out, "new y ~ binomial(10, p) = ")
    assert mean == shown(ref.mean()) and sd == shown(ref.std())
    assert (lo, hi) == (ref.ppf(0.025), ref.ppf(0.975))
    pmf = {int(r.split()[0]): float(r.split()[1]) for r in out.splitlines()
           if re.match(r"^\s+\d+\s+\S+\s+\S+$", r)}
    for k, v in pmf.items():
        assert v == pytest.approx(ref.pmf(k), rel=6e-4), k   # four digits shown
    model("prob y > 5", "mean y", "interval y 0.9")
    out = model.take()[0]
    assert value(out, "P(y > 5)")[0] == pytest.approx(ref.sf(5), rel=1e-5)
    assert value(out, "mean y")[0] == shown(ref.mean())
    assert value(out, "interval y 0.9") == [ref.ppf(0.05), ref.ppf(0.95)]


def test_predict_a_normal_is_normal_with_both_variances(sh):
    # mu ~ normal(0, 10), y_i ~ normal(mu, 1): the posterior is normal(S / (0.01 + n),
    # 1 / sqrt(0.01 + n)), and a new observation is normal with variance 1 + 1 / (0.01 + n)
    # (normal-normal conjugacy, common practice); scipy.stats.norm
    y = [0.3, -0.5, 1.2, 0.4]
    sh("param mu real", "prior mu ~ normal(0, 10)", "data y = " + ", ".join(map(str, y)),
       "likelihood y ~ normal(mu, 1)", "grid mu -3 4 201")
    sh.take()
    assert sh("predict z ~ normal(mu, 1)") == "ok"
    prec = 0.01 + len(y)
    ref = st.norm(sum(y) / prec, math.sqrt(1 + 1 / prec))
    mean, sd, lo, hi = predicted(sh.take()[0], "new z ~ normal(mu, 1) = ")
    assert mean == shown(ref.mean()) and sd == shown(ref.std())
    assert lo == shown(ref.ppf(0.025)) and hi == shown(ref.ppf(0.975))
    sh("prob z > 1")
    assert value(sh.take()[0], "P(z > 1)")[0] == pytest.approx(ref.sf(1), abs=2e-6)
    assert sh("plot z") == "ok"
    assert "new z" in sh.take()[0]


def test_predict_bad(model):
    assert model.error("predict y binomial(10, p)") == (
        "error: column 10: expected `~` after `y`; usage: predict COL ~ FAMILY(args)")
    assert model.error("predict y ~ binomial(10, q)") == "error: column 26: unknown name `q`"
    assert model.error("predict p ~ normal(0, 1)") == "error: `p` is already a parameter"


# ---------------------------------------------------------------------------
# samplesize

def test_samplesize_of_a_normal_mean_has_its_closed_form(sh):
    # with known sd 1 and prior sd 10, the posterior after n0 + n rows has sd
    # 1 / sqrt(0.01 + n0 + n) whatever the data, so the expected 95% width is
    # 2 z / sqrt(0.01 + n0 + n) (average length criterion, Joseph, Wolfson and du Berger
    # 1995; normal conjugacy, common practice); z from scipy.stats.norm
    y = [0.3, -0.5, 1.2, 0.4]
    sh("param mu real", "prior mu ~ normal(0, 10)", "data y = " + ", ".join(map(str, y)),
       "likelihood y ~ normal(mu, 1)", "compute")
    sh.take()
    assert sh("samplesize mu width 0.5 sims 4") == "ok"
    out = sh.take()[0]
    z = st.norm.ppf(0.975)
    n_ref = math.ceil((2 * z / 0.5) ** 2 - 0.01 - len(y))
    n, width = value(out, "samplesize mu width 0.5 sims 4")[:2]
    assert n == n_ref
    assert width == pytest.approx(2 * z / math.sqrt(0.01 + len(y) + n_ref), rel=2e-3)
    rows = [r.split() for r in out.splitlines() if re.match(r"^\s+[\d,]+\s+\S+\s+\S+$", r)]
    tried = [int(r[0].replace(",", "")) for r in rows]
    assert n_ref in tried and n_ref - 1 in tried and tried == sorted(tried)
    before_n = next(float(r[1]) for r in rows if int(r[0].replace(",", "")) == n_ref - 1)
    assert before_n > 0.5


def test_samplesize_using_names_the_future_rows(model):
    model("samplesize p width 0.15 sims 10")
    plain = value(model.take()[0], "samplesize p width 0.15 sims 10")
    model("samplesize p width 0.15 sims 10 using k ~ binomial(10, p)")
    named = value(model.take()[0], "samplesize p width 0.15 sims 10 using")
    assert named == plain   # the same future rows, named: the same answer for the same seed
    assert plain[1] <= 0.15
    # rows of 20 trials carry about twice the information of rows of 10 (the binomial's
    # Fisher information n / (p (1 - p)), common practice): about half as many are needed
    model("samplesize p width 0.15 sims 10 using k ~ binomial(20, p)")
    twenty = value(model.take()[0], "samplesize p width 0.15 sims 10 using")
    assert abs(twenty[0] - plain[0] / 2) <= 2


def test_samplesize_bad(sh):
    sh("param a real", "param b real", "prior a ~ normal(0, 5)", "prior b ~ normal(0, 5)",
       "data x = 1, 2, 3", "data y = 1.1, 2.3, 2.9", "likelihood y ~ normal(a + b*x, 0.5)",
       "grid a -3 3 41", "grid b -1 3 41")
    assert sh.error("samplesize b width 0.1 sims 4") == (
        "error: the future rows are ambiguous: the likelihood of `y` reads column `x`; name "
        "them with `using COL ~ FAMILY(args)`")
    assert sh.error("samplesize b") == (
        "error: column 13: `samplesize` needs `width W`: samplesize NAME width W [level L] "
        "[max N] [sims N] [seed S] [hpd] [using COL ~ FAMILY(args)]")
    assert sh.error("samplesize b width 0.1 using y ~ normal(a + c, 1)") == (
        "error: column 45: unknown name `c`")


# ---------------------------------------------------------------------------
# keep and compare

def test_keep_and_compare_give_the_closed_form_bayes_factor(model):
    assert model("keep informed") == "ok"
    assert model.take()[0].startswith("model kept as `informed`: log evidence ")
    model("prior p ~ beta(1, 1)", "keep flat", "compare informed flat")
    out = model.take()[0]
    # log Z = sum log C(10, k_i) + log B(a + 9, b + 21) - log B(a, b) for a beta(a, b)
    # prior (beta-binomial evidence, common practice); the binomial terms cancel
    ref = (sc.betaln(11, 24) - sc.betaln(2, 3)) - (sc.betaln(10, 22) - sc.betaln(1, 1))
    got = value(out, "log Bayes factor of `informed` over `flat`")[0]
    assert got == pytest.approx(ref, abs=2e-6)
    assert f"B = {float(f'{math.exp(got):.6g}'):g} in favour of `informed` over `flat`" in out


def test_compare_cautions_on_a_wide_prior(sh):
    sh("param mu real", "data y = 0.3, -0.5, 1.2, 0.4", "likelihood y ~ normal(mu, 1)",
       "prior mu ~ normal(0, 1000)", "keep wide", "prior mu ~ normal(0, 1)", "keep narrow")
    sh.take()
    sh("compare wide narrow")
    out = sh.take()[0]
    assert re.search(r"^caution: the prior of `mu` is \d+ times wider than its posterior: the "
                     r"Bayes factor depends on the prior's width$", out, re.M)


def test_compare_bad(model):
    model("keep a")
    assert model.error("compare a b") == (
        "error: column 11: no kept model `b`; keep one with `keep NAME`")
    model("param s positive", "prior log -s", "keep improper")
    model.take()
    assert model.error("compare a improper").startswith(
        "error: `improper` has no evidence (")
    assert model("keep") == "ok"   # alone, it lists the kept models
    listed = model.take()[0].splitlines()
    assert listed[0] == "2 kept models:" and listed[1].startswith("  a: log evidence ")
    assert listed[2].startswith("  improper: no log evidence (improper prior on ")


# ---------------------------------------------------------------------------
# save and replay

SESSION = MODEL + [
    # 21 nodes already meet 1e-6 before the appends narrow the posterior: refine further
    "grid p 0.01 0.99 21", "refine until 1e-9", "data append k = 5, 4", "mean p",
    "whatif", "data append k = 9, 9, 10", "interval p", "predict y ~ binomial(10, p)",
    "whatif end", "predict y ~ binomial(10, p)", "prob y > 4",
    "samplesize p width 0.2 sims 8", "keep informed", "prior p ~ beta(1, 1)", "keep flat",
    "compare informed flat", "evidence"]


def test_save_then_replay_reproduces_every_number(sh, tmp_path):
    assert sh(*SESSION) == "ok"
    first = sh.take()[0]
    assert sh("save s.qd") == "ok"
    text = (tmp_path / "s.qd").read_text()
    assert "\nwhatif\n" in text and "\nwhatif end\n" in text
    for q in ("check predict y ~ binomial(10, p) = ", "check samplesize p width 0.2 sims 8 = ",
              "check compare informed flat = ", "check evidence = "):
        assert q in text
    # the check inside the layer states the what-if interval: beta(11 + 37, 24 + 3)
    lo = float(re.search(r"^check interval p = (\S+),", text, re.M).group(1))
    assert lo == shown(st.beta(2 + 9 + 9 + 28, 3 + 21 + 11 + 2).ppf(0.025))
    again = Shell(tmp_path)
    assert again("replay s.qd") == "ok"
    out = again.take()[0]
    checks = text.count("\ncheck ")
    assert out.endswith(f"replayed `s.qd`: all {checks} checks held\n")
    assert not again.app.ws.in_whatif
    # every answer line reads the same (the refine table's seconds aside)
    timed = re.compile(r"^\s*\d+\s+[\d,]+\s+[\d,]+\s+\S+\s")
    for line in first.splitlines():
        if " = " in line and not timed.match(line):
            assert line in out.splitlines(), line


# ---------------------------------------------------------------------------
# help and completion

def test_help_and_completion_of_the_new_commands(model):
    from shell.completer import Names, candidates
    from shell.registry import COMMANDS

    for name in ("whatif", "predict", "samplesize", "keep", "compare"):
        assert COMMANDS[name].group == "arrival" and len(COMMANDS[name].help.split()) >= 30
    assert COMMANDS["data"].usage == ("data [append] NAME = v1, v2, ...  or  "
                                      "data load | append FILE.csv [as PREFIX]  or  "
                                      "data edit COL row N = VALUE  or  data drop COL row N")
    model("keep a", "predict ynew ~ binomial(10, p)")
    names = Names.of(model.app.ws)

    def texts(t):
        return [c.text for c in candidates(t, names)]

    assert texts("data ap") == ["append"]
    assert texts("data append ") == ["k"] + [c for c in texts("data append ") if c != "k"]
    assert texts("data append k ") == ["="]
    assert texts("whatif ") == ["end"]
    assert texts("compare ") == ["a"]
    assert texts("keep ") == ["a"]
    assert texts("predict k ") == ["~"]
    assert texts("predict k ~ bin") == ["binomial"]
    assert texts("samplesize ") == ["p"]
    assert texts("samplesize p ") == ["width", "level", "max", "sims", "seed", "using", "hpd",
                                      "central"]
    assert texts("samplesize p width 0.1 using k ~ po") == ["poisson"]
    assert texts("prob yn") == ["ynew"] and texts("interval yn") == ["ynew"]


def test_the_app_takes_the_new_commands_in_batch(tmp_path):
    out = io.StringIO()
    app = App(Printer(out, out, width=100, color=False), log_file=str(tmp_path / "log"))
    tally = app.run_lines(MODEL + ["whatif", "data append k = 9", "mean p", "whatif end"],
                          lambda i: f"line {i}")
    assert tally.exit_code == 0 and not app.ws.in_whatif


def test_a_predictive_without_a_mean_saves_no_check_it_could_not_replay(sh, tmp_path):
    sh("param mu real", "prior mu ~ normal(0, 10)", "data y = 0.3, -0.5, 1.2, 0.4",
       "likelihood y ~ normal(mu, 1)", "grid mu -3 4 101")
    sh.take()
    sh("predict z ~ cauchy(mu, 1)")
    assert "= no mean or sd (its tails are too heavy), 95% interval " in sh.take()[0]
    sh("interval z", "save c.qd")
    text = (tmp_path / "c.qd").read_text()
    assert "check predict" not in text and "nan" not in text
    assert "\ncheck interval z = " in text
    again = Shell(tmp_path)
    assert again("replay c.qd") == "ok"
    assert again.take()[0].endswith("replayed `c.qd`: all 1 checks held\n")


def test_the_toolbar_never_cuts_off_an_open_layer():
    from engine.results import Status
    from shell.toolbar import toolbar_text

    s = Status(tuple(f"parameter{i}" for i in range(12)), 123456789, "out of date",
               -12345.678, True)
    for width in (40, 60, 80):
        text = toolbar_text(s, width)
        assert len(text) <= width and text.endswith(" | what-if")
