"""Every command of the shell: its main use, and one bad use with its exact error line.

Numbers are checked against references outside quadrat, named beside each check:
scipy.stats distributions, and conjugate closed forms (common practice, each
written out where it is used). The running example is a beta-binomial model: prior
beta(2, 3), three rows of 10 trials with 3, 2 and 4 successes, so the posterior is
beta(2 + 9, 3 + 21) = beta(11, 24) (beta-binomial conjugacy, common practice).
"""

from __future__ import annotations

import csv
import io
import json
import math
import os

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st

from shell.app import App
from shell.printer import Printer
from shell.words import Quit

POST = st.beta(11, 24)  # the posterior of the running example (see the module docstring)
MODEL = ["param p unit", "prior p ~ beta(2, 3)", "data k = 3, 2, 4",
         "likelihood k ~ binomial(10, p)"]


class Shell:
    """An App writing to strings, with helpers to run lines and read the output."""

    def __init__(self, tmp_path, width: int = 80):
        self.out, self.err = io.StringIO(), io.StringIO()
        self.log = tmp_path / "errors.log"
        self.app = App(Printer(self.out, self.err, width=width, color=False),
                       log_file=str(self.log))
        self.app.ws.base_dir = str(tmp_path)

    def __call__(self, *lines: str) -> str:
        status = "blank"
        for line in lines:
            status = self.app.run(line)
        return status

    def take(self) -> tuple[str, str]:
        out, err = self.out.getvalue(), self.err.getvalue()
        for s in (self.out, self.err):
            s.seek(0)
            s.truncate()
        return out, err

    def error(self, line: str) -> str:
        """Run a line that must fail; return its one error line."""
        self.take()
        assert self.app.run(line) == "error", line
        out, err = self.take()
        lines = err.strip().splitlines()
        assert len(lines) == 1, err
        return lines[0]


@pytest.fixture
def sh(tmp_path):
    return Shell(tmp_path)


@pytest.fixture
def model(sh):
    assert sh(*MODEL) == "ok"
    sh.take()
    return sh


def shown(ref: float):
    """`ref` as the shell shows it: to about six significant digits."""
    return pytest.approx(ref, abs=0.51 * 10.0 ** (math.floor(math.log10(abs(ref))) - 5))


def value(out: str, prefix: str) -> list[float]:
    """The numbers shown after `prefix ... =` on the line that starts with it."""
    for line in out.splitlines():
        if line.startswith(prefix):
            rhs = line.split(" = ", 1)[1].split("  (")[0]
            return [float(x) for x in rhs.split(",")]
    raise AssertionError(f"no line starting {prefix!r} in:\n{out}")


# ---------------------------------------------------------------------------
# declaring the model

def test_param_declares_and_replaces(sh):
    assert sh("param q in 0 5 points 41") == "ok"
    assert sh.take()[0] == "parameter `q` declared: in 0 5 points 41\n"
    sh("param q positive")
    assert sh.take()[0] == "parameter `q` replaced: positive\n"
    sh("param n int 1 9", "param s set 0.5 1 2")
    assert sh.app.ws.state.model.param("n").values == tuple(float(v) for v in range(1, 10))
    assert sh.app.ws.state.model.param("s").values == (0.5, 1.0, 2.0)


def test_param_bad(sh):
    assert sh.error("param p between 0 1") == (
        "error: column 9: unknown domain `between`; use real, positive, unit, in LO HI, "
        "int LO HI or set V1 V2 ...")
    assert sh.error("param q int 0 x") == "error: column 15: HI `x` is not a number"


def test_prior_sets_and_replaces(sh):
    sh("param p unit")
    sh.take()
    sh("prior p ~ beta(1, 1)")
    assert sh.take()[0] == "prior of `p` set: p ~ beta(1, 1)\n"
    sh("prior p ~ beta(2, 3)")
    assert sh.take()[0] == "prior of `p` replaced: p ~ beta(2, 3)\n"
    sh("prior log -p")
    assert sh.take()[0] == "prior term added: log -p\n"


def test_prior_bad_column_points_into_the_line(sh):
    sh("param p unit")
    # column 19 is where `sigm` starts in the line as typed
    assert sh.error("prior p ~ beta(1, sigm)") == "error: column 19: unknown name `sigm`"
    assert sh.error("prior p beta(1, 1)") == (
        "error: column 8: expected `~` after `p`; usage: prior NAME ~ FAMILY(args)  or  "
        "prior log EXPR")


def test_likelihood_with_censoring_matches_gamma_closed_form(sh):
    # exponential times with a gamma(2, 100) prior on the rate: the posterior is
    # gamma(2 + failures, 100 + total time), censored rows adding time only
    # (gamma-exponential conjugacy with right censoring, common practice)
    sh("param r positive", "prior r ~ gamma(2, 100)", "data t = 120, 340, 95, 410, 220",
       "data c = 0, 0, 1, 0, 1")
    sh.take()
    assert sh("likelihood t ~ exponential(r) censored c") == "ok"
    assert sh.take()[0] == "likelihood of `t` set: t ~ exponential(r) censored c\n"
    sh("mean r")
    ref = st.gamma(2 + 3, scale=1 / (100 + 1185))  # scipy.stats.gamma
    assert value(sh.take()[0], "mean r")[0] == pytest.approx(ref.mean(), rel=1e-6)


def test_two_likelihoods_on_columns_of_different_lengths(model):
    # k: 3 rows of 10 trials; m: 1 row of 20 trials with 7 successes. Posterior
    # beta(2 + 9 + 7, 3 + 21 + 13) (beta-binomial conjugacy, common practice)
    model("data m = 7", "likelihood m ~ binomial(20, p)", "mean p")
    assert value(model.take()[0], "mean p")[0] == shown(st.beta(18, 37).mean())


def test_likelihood_bad(sh):
    sh("param p unit", "data k = 1, 2")
    assert sh.error("likelihood y ~ normal(0, 1)") == (
        "error: no data column `y`; give it with `data y = ...` or `data load FILE.csv`")
    assert sh.error("likelihood k ~ binomial(10, p q)") == (
        "error: column 29: cannot read the formula here")


def test_let_and_its_mean(model):
    assert model("let odds = p / (1 - p)") == "ok"
    assert model.take()[0] == "let `odds` set: odds = p / (1 - p)\n"
    model("mean odds")
    # E[p / (1 - p)] under beta(a, b) is a / (b - 1) (beta-function identity, common practice)
    assert value(model.take()[0], "mean odds")[0] == pytest.approx(11 / 23, rel=1e-6)
    model("let odds = p")
    assert model.take()[0] == "let `odds` replaced: odds = p\n"


def test_let_bad(model):
    assert model.error("let x = p +* 2") == "error: column 12: cannot read the formula here"
    assert model.error("let p = 2") == "error: `p` is already a parameter"


def test_data_typed_and_loaded(sh, tmp_path):
    sh("data k = 3, 2, 4")
    assert sh.take()[0] == "data `k` set: 3 values\n"
    sh("data k = 3 2 4 5")
    assert sh.take()[0] == "data `k` replaced: 4 values\n"
    (tmp_path / "d.csv").write_text("x,y\n1,2\n3,4\n5,6\n")
    sh("data load d.csv")
    assert sh.take()[0] == "loaded 3 rows from `d.csv`: `x`, `y`\n"
    sh("data load d.csv as b")
    assert sh.take()[0] == "loaded 3 rows from `d.csv`: `b_x`, `b_y`\n"
    assert list(sh.app.ws.state.data.values("b_y")) == [2.0, 4.0, 6.0]


def test_data_bad(sh, tmp_path):
    assert sh.error("data k = 1, two, 3") == "error: data `k` value 2: `two` is not a number"
    # a relative path is read from the session's folder, and the message says where
    assert sh.error("data load nothere.csv") == (
        f"error: file `nothere.csv` does not exist in folder `{tmp_path}`")


# ---------------------------------------------------------------------------
# grids and computing

def test_grid_set_replace_and_auto(model):
    model("grid p 0.01 0.99 101")
    assert model.take()[0] == "grid set: p: 0.01 .. 0.99, 101 points, logit scale, trapezoid\n"
    model("grid p 0.01 0.99 51 linear")
    assert model.take()[0] == "grid replaced: p: 0.01 .. 0.99, 51 points, linear scale, trapezoid\n"
    model("grid auto")
    assert model.take()[0].startswith("grid auto: p: ")


def test_grid_bad(model):
    assert model.error("grid p 0.1 0.9 11 cubic") == (
        "error: column 19: unexpected `cubic`; usage: grid NAME LO HI [N] [linear|log|logit]  "
        "or  grid auto")
    assert model.error("grid p 0 2") == (
        "error: grid `p`: [0, 2] reaches outside the domain of `p` (unit (0 to 1))")


def test_rule(model):
    model("rule simpson")
    assert model.take()[0] == "rule set: simpson\n"
    assert model.app.ws.state.rule == "simpson"
    assert model.error("rule simple") == (
        "error: column 6: unknown rule `simple`; known: grid, hermite, sparse, rotated, trapezoid, "
        "midpoint, simpson, gauss")


def test_cost_points_and_memory(model):
    model("grid p 0.01 0.99 201", "cost")
    out = model.take()[0]
    assert "points 201\n" in out
    assert out.count("memory about ") == 1
    assert model.error("cost now") == "error: column 6: unexpected `now`"


def test_compute(model):
    model("grid p 0.01 0.99 201")
    model.take()
    assert model("compute") == "ok"
    out = model.take()[0]
    assert out.startswith("computed 201 points in ")
    assert model.app.ws.status().posterior == "current"
    assert model.error("compute later") == (
        "error: column 9: unexpected `later`; usage: compute [force]")


# ---------------------------------------------------------------------------
# questions

def test_summary_matches_scipy(model):
    model("summary")
    out = model.take()[0]
    head, row = [line for line in out.splitlines() if line.startswith(("parameter", "p "))]
    # our own layout: the mean with its numerical error, sd, median, and the interval
    # written as one with its level
    assert head.split() == ["parameter", "mean", "±", "error", "sd", "median", "95%",
                            "credible", "interval"]
    cells = row.split()
    assert cells[2] == "±" and cells[-2] == "to"
    mean, sd, q2, q1, q3 = (float(cells[i]) for i in (1, 4, 5, 6, 8))
    # scipy.stats.beta(11, 24): the posterior, to the 6 digits shown
    assert mean == shown(POST.mean())
    assert sd == shown(POST.std())
    for got, q in ((q1, 0.025), (q2, 0.5), (q3, 0.975)):
        assert got == shown(POST.ppf(q))
    assert model.error("summary now") == "error: column 9: unexpected `now`: `summary` takes nothing"


def test_interval_central_and_hpd(model):
    model("interval p")
    lo, hi = value(model.take()[0], "interval p")
    assert lo == shown(POST.ppf(0.025)) and hi == shown(POST.ppf(0.975))
    model("interval p 0.9 hpd")
    lo, hi = value(model.take()[0], "interval p 0.9 hpd")
    # an HPD interval holds the level's mass with equal density at both ends (common
    # practice), checked with scipy.stats.beta
    assert POST.cdf(hi) - POST.cdf(lo) == pytest.approx(0.9, abs=1e-5)
    assert POST.pdf(lo) == pytest.approx(POST.pdf(hi), rel=1e-4)
    assert model.error("interval p 1.5") == (
        "error: column 12: level must be between 0 and 1 (or 0% and 100%); got `1.5`")


def test_prob_mean_sd_quantile(model):
    model("prob p > 0.5", "mean p", "sd p", "quantile p 0.9")
    out = model.take()[0]
    assert value(out, "P(p > 0.5)")[0] == pytest.approx(POST.sf(0.5), rel=1e-5)  # scipy
    assert value(out, "mean p")[0] == shown(POST.mean())
    assert value(out, "sd p")[0] == shown(POST.std())
    assert value(out, "quantile p 0.9")[0] == shown(POST.ppf(0.9))


def test_prob_bad(model):
    assert model.error("prob q > 1") == "error: column 6: unknown name `q`"


def test_mean_bad(model):
    assert model.error("mean sigm") == "error: column 6: unknown name `sigm`"


def test_sd_bad(model):
    assert model.error("sd p +") == "error: column 4: cannot read the formula here"


def test_quantile_bad(model):
    assert model.error("quantile p 1.5") == (
        "error: column 12: quantile level must be between 0 and 1 (or 0% and 100%); got "
        "`1.5`")


def test_mode_is_the_beta_mode(model):
    model("mode")
    out = model.take()[0]
    # the mode of beta(a, b) is (a - 1) / (a + b - 2) (common practice)
    got = float(out.split("mode p = ")[1].split()[0])
    assert got == pytest.approx(10 / 33, rel=1e-5)
    assert model.error("mode now") == "error: column 6: unexpected `now`: `mode` takes nothing"


def test_evidence_is_the_beta_binomial_closed_form(model):
    model("evidence")
    got = value(model.take()[0], "log evidence")[0]
    # Z = prod C(10, k_i) * B(2 + 9, 3 + 21) / B(2, 3) (beta-binomial evidence, common
    # practice), evaluated with scipy.special
    ref = sum(math.log(sc.comb(10, k)) for k in (3, 2, 4)) + sc.betaln(11, 24) - sc.betaln(2, 3)
    assert got == pytest.approx(ref, abs=2e-5)
    assert model.error("evidence now") == (
        "error: column 10: unexpected `now`: `evidence` takes nothing")


def test_question_after_a_change_recomputes_when_cheap(model):
    model("compute", "prior p ~ beta(1, 1)")
    assert model.app.ws.status().posterior == "out of date"
    model.take()
    model("mean p")
    out = model.take()[0]
    # the note says what changed and what is recomputed
    assert "note: the model changed since the posterior was computed: recomputed on the " \
           "whole grid (" in out
    # posterior beta(1 + 9, 1 + 21) (conjugacy, common practice): scipy.stats.beta
    assert value(out, "mean p")[0] == shown(st.beta(10, 22).mean())


def test_question_after_a_change_says_out_of_date_when_costly(model, monkeypatch):
    import engine.runs as W

    model("compute", "prior p ~ beta(1, 1)")
    monkeypatch.setattr(W, "CHEAP_SECONDS", -1.0)
    line = model.error("mean p")
    assert line.startswith("error: the model changed since the posterior was computed (about ")
    assert line.endswith("to compute): use `compute`")


def test_check_passes_fails_and_reads_the_last_lone_equals(model):
    mean = POST.mean()  # scipy.stats.beta
    assert model(f"check mean p = {mean:.4f} tol 1e-4") == "checked"
    assert "check ok: mean p = 0.314286 (checked 0.3143, tol 0.0001)\n" in model.take()[0]
    # without tol the precision of the value as written is the tolerance
    assert model("check mean p = 0.31") == "checked"
    assert model("check mean p = 0.3") == "checked"          # within 0.05
    assert model("check mean p = 0.32") == "failed"          # off by 0.0057 > 0.005
    err = model.take()[1]
    assert err == ("check failed: mean p = 0.314286, expected 0.32 (off by 0.0057; tol "
                   "0.005)\n")
    lo, hi = POST.ppf(0.025), POST.ppf(0.975)
    assert model(f"check interval p 0.95 central = {lo:.5f}, {hi:.5f} tol 1e-4") == "checked"
    assert model(f"check prob p > 0.5 = {POST.sf(0.5):.6f} tol 1e-5") == "checked"


def test_check_of_a_discrete_equality(sh):
    # N unknown, p = 0.3 known, uniform prior on 5..30: P(N == 12 | y) by a direct sum
    # with scipy.stats.binom (the reference)
    sh("param N int 5 30", "data y = 4, 6", "likelihood y ~ binomial(N, 0.3)")
    ns = np.arange(5, 31)
    w = st.binom.pmf(4, ns, 0.3) * st.binom.pmf(6, ns, 0.3)
    ref = w[ns == 12][0] / w.sum()
    assert sh(f"check prob N == 12 = {ref:.6f} tol 1e-6") == "checked"
    sh.take()
    assert sh("check prob N == 12 = 0.5 tol 1e-3") == "failed"


def test_check_bad(model):
    assert model.error("check summary = 1") == (
        "error: column 7: `summary` is not a question with numbers to check; use one of prob, "
        "mean, sd, quantile, interval, mode, evidence, predict, samplesize, compare")
    assert model.error("check mean p = 1, 2") == (
        "error: column 15: `mean` gives 1 number; the check has 2")


# ---------------------------------------------------------------------------
# looking and exporting

def test_show_model_data_grid(model):
    model("show model")
    out = model.take()[0]
    assert "  p ~ beta(2, 3)\n" in out
    assert "  k ~ binomial(10, p)\n" in out
    assert "likelihood `k`: 3 rows, sums reduced to sufficient statistics" in out
    model("show data")
    assert "k          3  typed    2    4     3  3, 2, 4" in model.take()[0]
    model("grid p 0.01 0.99 101", "show grid")
    out = model.take()[0]
    assert "rule trapezoid\n" in out and "  p: 0.01 .. 0.99, 101 points\n" in out
    assert model.error("show stuff") == "error: column 6: usage: show model | data | grid"


def test_plot_fits_the_width(tmp_path):
    sh = Shell(tmp_path, width=60)
    sh(*MODEL, "param q in 0 1", "likelihood k ~ binomial(10, p*q)")
    sh.take()
    assert sh("plot p") == "ok"
    lines = sh.take()[0].splitlines()
    assert len(lines) > 5 and max(len(x) for x in lines) <= 60
    assert sh("plot p q") == "ok"
    lines = sh.take()[0].splitlines()
    assert len(lines) > 5 and max(len(x) for x in lines) <= 60
    assert sh.error("plot p p") == "error: column 8: a joint plot needs two different parameters"


def test_export_csv_json_and_summary(model, tmp_path):
    model("grid p 0.0005 0.95 201")
    assert model("export m.csv") == "ok"
    assert "wrote marginals to `m.csv` (201 rows, " in model.take()[0]
    rows = list(csv.DictReader(open(tmp_path / "m.csv")))
    assert set(rows[0]) == {"parameter", "value", "density", "mass"}
    mass = sum(float(r["mass"]) for r in rows)
    assert mass == pytest.approx(1.0, abs=1e-12)
    model("export all.json")
    doc = json.loads((tmp_path / "all.json").read_text())
    # scipy.stats.beta(11, 24)
    assert doc["parameters"]["p"]["mean"]["value"] == pytest.approx(POST.mean(), rel=1e-6)
    model("export summary s.csv")
    (row,) = list(csv.DictReader(open(tmp_path / "s.csv")))
    assert float(row["q97.5"]) == pytest.approx(POST.ppf(0.975), rel=1e-6)
    assert model.error("export out.txt") == (
        "error: column 8: `out.txt`: export writes .csv or .json files")


def test_export_keeps_a_file_it_did_not_write(model, tmp_path):
    (tmp_path / "mine.csv").write_text("precious\n")
    assert model.error("export mine.csv") == (
        "error: column 8: `mine.csv` exists and this session did not write "
        "it; add `force` to overwrite it")
    assert (tmp_path / "mine.csv").read_text() == "precious\n"
    assert model("export mine.csv force") == "ok"
    assert (tmp_path / "mine.csv").read_text().startswith("parameter,value,density,mass")


# ---------------------------------------------------------------------------
# sessions and housekeeping

def test_save_writes_header_commands_and_checks(model, tmp_path):
    (tmp_path / "d.csv").write_text("n,y\n10,3\n10,2\n")  # 2 rows beside k's 3
    model("data load d.csv", "mean p", "show model", "plot p", "save s.qd")
    assert model.take()[0].endswith("saved `s.qd`: 6 commands, 1 check, 1 data file\n")
    lines = (tmp_path / "s.qd").read_text().splitlines()
    assert lines[0].startswith("# quadrat session, saved by quadrat ")
    digest = __import__("hashlib").sha256((tmp_path / "d.csv").read_bytes()).hexdigest()
    assert lines[1] == f"# data d.csv sha256 {digest}"
    body = [x for x in lines if x and not x.startswith("#")]
    assert body[:6] == MODEL + ["data load d.csv", "mean p"]
    assert body[6].startswith("check mean p = 0.314286 tol ")
    assert len(body) == 7  # show and plot are not kept
    assert [f for f in os.listdir(tmp_path) if f.endswith(".tmp")] == []


def test_save_bad_and_refuses_a_file_it_did_not_write(model, tmp_path):
    assert model.error("save out.txt") == "error: column 6: `out.txt`: session files end in .qd"
    (tmp_path / "notes.qd").write_text("# my own notes\n")
    assert model.error("save notes.qd") == (
        "error: column 6: `notes.qd` exists and was not written by `save`; `save notes.qd "
        "force` overwrites it")
    assert (tmp_path / "notes.qd").read_text() == "# my own notes\n"
    assert model("save notes.qd force") == "ok"
    assert model("save notes.qd") == "ok"  # now it is a file save wrote


def test_replay_runs_a_saved_session(model, tmp_path):
    model("interval p", "save s.qd")
    sh2 = Shell(tmp_path)
    assert sh2("replay s.qd") == "ok"
    out = sh2.take()[0]
    assert "check ok: interval p = " in out
    assert out.endswith("replayed `s.qd`: all 1 checks held\n")
    assert [e.text for e in sh2.app.log] == MODEL + ["interval p"]
    assert sh2.error("replay nothere.qd") == (
        f"error: file `nothere.qd` does not exist in folder `{tmp_path}`")


def test_history_lists_what_save_keeps(model):
    model("show model", "mean p", "history")
    out = model.take()[0].splitlines()
    assert out[-5:] == [f"{i}  {t}" for i, t in enumerate(MODEL + ["mean p"], 1)]
    assert model.error("history now") == (
        "error: column 9: unexpected `now`: `history` takes nothing")


def test_undo_goes_back_before_the_last_change(model):
    model("compute", "prior p ~ beta(1, 1)", "mean p")
    before = model.app.ws.state.model
    model.take()
    assert model("undo") == "ok"
    assert model.take()[0] == ("undone: `prior p ~ beta(1, 1)` (and the 1 question asked after "
                               "it); the state is as it was before it\n")
    assert model.app.ws.state.model is not before
    assert model.app.ws.state.model.priors[0].text == "beta(2, 3)"
    assert model.app.ws.status().posterior == "current"
    assert [e.text for e in model.app.log] == MODEL + ["compute"]
    assert model.error("undo now") == "error: column 6: unexpected `now`: `undo` takes nothing"


def test_undo_with_nothing_to_undo(sh):
    assert sh.error("undo") == "error: nothing to undo"


def test_reset_and_undo_it(model):
    model("reset")
    assert model.app.ws.state.model.params == ()
    model("undo")
    assert model.app.ws.state.model.param_names == ("p",)
    assert model.error("reset now") == "error: column 7: unexpected `now`: `reset` takes nothing"


def test_note_prints_and_is_kept(sh):
    sh("note Invented data: for a demonstration only")
    assert sh.take()[0] == "Invented data: for a demonstration only\n"
    assert sh.app.log[-1].text == "note Invented data: for a demonstration only"
    assert sh.error("note") == "error: column 5: `note` needs some text"


def test_help_lists_every_command_and_explains_one(sh):
    from shell.registry import COMMANDS

    sh("help")
    out = sh.take()[0]
    # the overview names every command, by group, on one screen of 80 x 24
    assert len(out.splitlines()) <= 22
    for c in COMMANDS.values():
        assert f" {c.name} " in out.replace("\n", " ") + " "
    sh("help all")
    out = sh.take()[0]
    for c in COMMANDS.values():
        assert "  " + c.usage + "\n" in out
    sh("help questions")
    out = sh.take()[0]
    assert out.startswith("questions\n  prob CONDITION\n") and "save FILE" not in out
    sh("help interval")
    out = sh.take()[0].splitlines()
    assert out[0] == COMMANDS["interval"].usage
    assert "credible interval" in " ".join(out)
    sh("help beta")
    assert sh.take()[0].startswith("beta(a, b)\n")
    assert sh.error("help nothing") == (
        "error: column 6: no help on `nothing`; `help` lists the commands")


def test_quit_raises_quit_and_bad_quit(sh):
    with pytest.raises(Quit):
        sh("quit")
    assert sh.error("quit now") == "error: column 6: unexpected `now`: `quit` takes nothing"


def test_unknown_command(sh):
    assert sh.error("frobnicate") == (
        "error: column 1: unknown command `frobnicate`; `help` lists the commands")
    assert sh("# only a comment") == "blank" and sh("   ") == "blank"


# ---------------------------------------------------------------------------
# Ctrl-C and unexpected errors

def test_ctrl_c_during_compute_keeps_the_state_from_before(model):
    class Interrupting(Printer):
        def progress(self):
            def stop(done, total):
                raise KeyboardInterrupt
            stop.close = lambda: None
            return stop

    model.app.printer = Interrupting(model.out, model.err, width=80, color=False)
    model("grid p 0.01 0.99 200001")  # several blocks, so progress is called mid-way
    before, depth = model.app.ws.state, len(model.app.ws.history)
    model.take()
    assert model("compute") == "cancelled"
    assert model.take()[1] == "cancelled: the state is as it was before `compute`\n"
    assert model.app.ws.state is before and len(model.app.ws.history) == depth
    assert model.app.ws.status().posterior == "absent"


def test_ctrl_c_in_a_question_that_recomputed_restores_the_state(model, monkeypatch):
    import engine.questions as Q

    before = model.app.ws.state

    def interrupted(*a, **k):
        raise KeyboardInterrupt

    monkeypatch.setattr(Q, "moments", interrupted)
    assert model("mean p + 1") == "cancelled"
    assert model.app.ws.state is before  # the recompute done first is undone too
    assert model.app.log[-1].text == MODEL[-1]


def test_unexpected_error_is_one_line_and_a_logged_traceback(model, monkeypatch):
    from shell.registry import COMMANDS

    def broken(app, line):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setitem(COMMANDS, "cost", COMMANDS["cost"].__class__(
        "cost", "cost", "help", broken))
    line = model.error("cost")
    assert line == f"internal error: ZeroDivisionError: division by zero (details in {model.log})"
    assert "Traceback" in model.log.read_text()
    assert model("mean p") == "ok"  # the loop goes on


def test_ctrl_c_during_a_replay_leaves_the_state_and_session_as_before(model, tmp_path,
                                                                       monkeypatch):
    from shell.registry import COMMANDS

    (tmp_path / "more.qd").write_text("param q in 0 1\nprior p ~ beta(1, 1)\nlet z = p\n")
    before, log = model.app.ws.state, [e.text for e in model.app.log]
    real = COMMANDS["let"]

    def interrupted(app, line):
        raise KeyboardInterrupt

    monkeypatch.setitem(COMMANDS, "let", real.__class__("let", real.usage, real.help,
                                                        interrupted, real.kind))
    model.take()
    assert model("replay more.qd merge") == "cancelled"   # merge: the file uses `p`
    assert model.take()[1] == "cancelled: the state is as it was before `replay`\n"
    assert model.app.ws.state is before
    assert [e.text for e in model.app.log] == log
    assert model.app.ws.base_dir == str(tmp_path) and model.app.replaying == []


def test_a_save_cut_short_leaves_the_old_file_whole(model, tmp_path, monkeypatch):
    model("mean p", "save s.qd")
    old = (tmp_path / "s.qd").read_text()
    model("sd p")

    def killed(*a, **k):
        raise KeyboardInterrupt  # as if the process died between writing and renaming

    monkeypatch.setattr(os, "replace", killed)
    assert model("save s.qd") == "cancelled"
    assert (tmp_path / "s.qd").read_text() == old
    assert [f for f in os.listdir(tmp_path) if f.endswith(".tmp")] == []


def test_debug_prints_the_traceback(tmp_path, monkeypatch, capsys):
    from shell.registry import COMMANDS

    sh = Shell(tmp_path)
    sh.app.debug = True

    def broken(app, line):
        raise ZeroDivisionError("division by zero")

    monkeypatch.setitem(COMMANDS, "cost", COMMANDS["cost"].__class__(
        "cost", "cost", "help", broken))
    assert sh.error("cost") == "internal error: ZeroDivisionError: division by zero"
    assert "Traceback (most recent call last)" in capsys.readouterr().err
    assert not sh.log.exists()


def test_history_and_error_log_live_in_the_xdg_state_folder(tmp_path, monkeypatch):
    from prompt_toolkit.history import FileHistory

    from shell.repl import default_history

    monkeypatch.setenv("XDG_STATE_HOME", str(tmp_path / "state"))
    h = default_history()
    assert isinstance(h, FileHistory)
    assert h.filename == str(tmp_path / "state" / "quadrat" / "history")
    assert App(Printer(io.StringIO())).log_file == str(tmp_path / "state" / "quadrat" /
                                                        "errors.log")
