"""What-if edits of existing rows (`data edit COL row N = VALUE`, `data drop COL row N`),
the side-by-side answers naming the rows that differ, and the question forms of issue
13: percentages, several quantile levels, `;` at the prompt, and the near misses.

The data are the pump test rig of `sessions/pumps.csv` (invented, a demonstration of
our own). References: a model built from the edited table written to a CSV file, and
scipy.integrate.dblquad of the Weibull posterior with right-censoring (the censored
rows contribute the survival function, common practice), with scipy.stats densities.
"""

from __future__ import annotations

import csv
import io
import math
import os
import re

import numpy as np
import pytest
import scipy.integrate as si
import scipy.stats as st
from prompt_toolkit.history import InMemoryHistory
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput

from shell.app import App
from shell.printer import Printer
from shell.repl import Repl

PUMPS = os.path.join(os.path.dirname(os.path.dirname(os.path.abspath(__file__))),
                     "sessions", "pumps.csv")

MODEL = ["param shape positive", "param scale positive", "prior shape ~ gamma(2, 1)",
         "prior scale ~ lognormal(7.5, 1)"]
LIKELIHOOD = ["likelihood hours ~ weibull(shape, scale) censored running",
              "grid shape 0.2 8 161", "grid scale 400 20000 201"]


def pumps():
    with open(PUMPS, newline="") as fh:
        return [dict((k, float(v)) for k, v in r.items()) for r in csv.DictReader(fh)]


class Shell:
    def __init__(self, tmp_path):
        self.out, self.err = io.StringIO(), io.StringIO()
        self.app = App(Printer(self.out, self.err, width=100, color=False),
                       log_file=str(tmp_path / "errors.log"))
        self.app.ws.base_dir = str(tmp_path)

    def __call__(self, *lines):
        for line in lines:
            status = self.app.run(line)
            assert status not in ("error", "cancelled"), (line, self.err.getvalue())
        return self.take()

    def take(self) -> str:
        text = self.out.getvalue()
        self.out.seek(0)
        self.out.truncate()
        return text

    def error(self, line) -> str:
        self.err.seek(0)
        self.err.truncate()
        assert self.app.run(line) == "error", line
        return self.err.getvalue().strip()


def write_pumps(path, rows):
    with open(path, "w", newline="") as fh:
        w = csv.writer(fh)
        w.writerow(["pump", "hours", "running"])
        for r in rows:
            w.writerow([f"{r['pump']:g}", f"{r['hours']:g}", f"{r['running']:g}"])


def reference_prob_shape_above_1(rows) -> float:
    """P(shape > 1) under the Weibull model with right-censoring, by
    scipy.integrate.dblquad over shape in (0, 12) and u = log(scale) in (log 200,
    log 60000) (the Jacobian scale du). The Weibull log density log(k/l) + (k - 1)
    log(t/l) - (t/l)^k and log survival -(t/l)^k, the gamma(2, 1) and lognormal(7.5, 1)
    log densities are the textbook ones (checked here against scipy.stats at a point);
    the integrand is scaled by its value near the mode to stay in range."""
    t = np.array([r["hours"] for r in rows])
    cens = np.array([r["running"] for r in rows]) == 1
    tf, tc = t[~cens], t[cens]

    def logpost(k, u):
        lam = math.exp(u)
        z = tf / lam
        return (math.log(k) - k                                   # gamma(2, 1), less log 1
                - u - 0.5 * math.log(2 * math.pi) - 0.5 * (u - 7.5) ** 2   # lognormal
                + float(np.sum(math.log(k) - u + (k - 1) * np.log(z) - z ** k))
                - float(np.sum((tc / lam) ** k))
                + u)                                              # d scale = scale du

    k0, l0 = 2.0, 1900.0
    want = (st.gamma(2).logpdf(k0) + st.lognorm(s=1, scale=math.exp(7.5)).logpdf(l0)
            + st.weibull_min(c=k0, scale=l0).logpdf(tf).sum()
            + st.weibull_min(c=k0, scale=l0).logsf(tc).sum() + math.log(l0))
    assert logpost(k0, math.log(l0)) == pytest.approx(want, abs=1e-9)
    top = want

    def f(u, k):
        return math.exp(logpost(k, u) - top)

    lo, hi = math.log(200.0), math.log(60000.0)
    opts = dict(epsabs=0, epsrel=1e-9)
    above, _ = si.dblquad(f, 1.0, 12.0, lo, hi, **opts)
    below, _ = si.dblquad(f, 1e-3, 1.0, lo, hi, **opts)
    return above / (above + below)


def sides(text: str) -> tuple[float, float]:
    """The "now" and "what if" values of a side-by-side probability (wide form)."""
    line = next(x for x in text.splitlines() if x.startswith("P("))
    now, whatif = re.findall(r"(-?[\d.]+(?:e-?\d+)?)  \(±", line)
    return float(now), float(whatif)


def test_edits_inside_whatif_match_a_model_of_the_edited_table(tmp_path):
    rows = pumps()
    sh = Shell(tmp_path)
    sh(*MODEL, f"data load {PUMPS}", *LIKELIHOOD, "compute")
    before = sh("prob shape > 1", "summary")
    # pump 12 was still running: what if it had failed at its hours; and pump 3's
    # failure time was misread
    running = [i for i, r in enumerate(rows) if r["running"] == 1][0] + 1
    sh("whatif")
    out = sh(f"data edit running row {running} = 0", "data edit hours row 3 = 1500")
    assert f"changed `running` row {running}: 1 -> 0" in out
    assert f"changed `hours` row 3: {rows[2]['hours']:g} -> 1500" in out
    side = sh("prob shape > 1")
    # the side-by-side answer says which rows differ
    assert (f"what if differs in: `hours` row 3: {rows[2]['hours']:g} -> 1500; `running` row "
            f"{running}: 1 -> 0") in side
    now_p, whatif_p = sides(side)
    whatif_summary = sh("summary")

    edited = [dict(r) for r in rows]
    edited[running - 1]["running"] = 0
    edited[2]["hours"] = 1500
    write_pumps(tmp_path / "edited.csv", edited)
    direct = Shell(tmp_path)
    direct(*MODEL, "data load edited.csv", *LIKELIHOOD, "compute")
    p_direct = float(direct("prob shape > 1").split("=")[1].split()[0])
    # the same numbers as the model built from the edited table, to the digits shown
    assert whatif_p == p_direct
    direct_summary = direct("summary").splitlines()
    for name in ("shape", "scale"):
        got = next(x for x in whatif_summary.splitlines() if x.split()[:3] == [name, "what", "if"])
        want = next(x for x in direct_summary if x.split()[:1] == [name])
        assert got.split()[3:] == want.split()[1:]
    # and the right numbers: scipy.integrate.dblquad of the edited posterior
    assert p_direct == pytest.approx(reference_prob_shape_above_1(edited), abs=2e-6)
    assert now_p == pytest.approx(reference_prob_shape_above_1(rows), abs=2e-6)

    # `whatif end` restores everything: the data, and the answers as they were
    sh("whatif end")
    assert np.array_equal(sh.app.ws.data.values("hours"), [r["hours"] for r in rows])
    assert np.array_equal(sh.app.ws.data.values("running"), [r["running"] for r in rows])
    assert sh("prob shape > 1", "summary") == before


def test_drop_takes_a_row_out_of_its_table(tmp_path):
    rows = pumps()
    sh = Shell(tmp_path)
    sh(*MODEL, f"data load {PUMPS}", *LIKELIHOOD, "compute", "whatif")
    out = sh("data drop hours row 5")
    assert out.startswith(f"dropped row 5 of `pump`, `hours`, `running` ({len(rows) - 1} rows")
    assert list(sh.app.ws.data.values("pump")) == [r["pump"] for i, r in enumerate(rows) if i != 4]
    side = sh("mean shape")
    assert "what if differs in: row 5 dropped (`pump`, `hours`, `running`)" in side
    sh("data append pump = 99", "data append hours = 2000", "data append running = 1")
    side = sh("mean shape")
    assert "row 5 dropped (`pump`, `hours`, `running`); 1 row appended (`pump`, `hours`, " \
           "`running`)" in side
    sh("whatif end")
    assert sh.app.ws.data.get("hours").rows == len(rows)


def test_edit_outside_whatif_is_a_change_that_undo_takes_back(tmp_path):
    sh = Shell(tmp_path)
    sh("data k = 3, 2, 4")
    sh("data edit k row 2 = 5")
    assert list(sh.app.ws.data.values("k")) == [3, 5, 4]
    sh("undo")
    assert list(sh.app.ws.data.values("k")) == [3, 2, 4]


@pytest.mark.parametrize("line,message", [
    ("data edit k row 4 = 1", "error: data edit `k` row 4: `k` has 3 rows; row 4 is not one "
                              "of them"),
    ("data edit kk row 1 = 1", "error: column 11: no data column `kk`"),
    ("data edit k 2 = 1", "error: column 13: expected `row N` after `k`; usage: data edit COL "
                          "row N = VALUE"),
    ("data edit k row 0 = 1", "error: column 17: row must be at least 1; got `0`"),
    ("data edit k row 2", "error: column 18: expected `= VALUE` after the row; usage: data "
                          "edit COL row N = VALUE"),
    ("data edit k row 2 = x", "error: data edit `k` row 2: `x` is not a number"),
    ("data drop k row 2 = 1", "error: column 19: `data drop` takes no value; usage: data drop "
                              "COL row N"),
])
def test_edit_errors_name_the_problem_and_change_nothing(tmp_path, line, message):
    sh = Shell(tmp_path)
    sh("data k = 3, 2, 4")
    assert sh.error(line) == message
    assert list(sh.app.ws.data.values("k")) == [3, 2, 4]


# ---------------------------------------------------------------------------
# questions: percentages, several levels, `;` at the prompt, near misses

BETA = ["param p unit", "prior p ~ beta(2, 3)", "data k = 3, 2, 4",
        "likelihood k ~ binomial(10, p)"]
POST = st.beta(11, 24)   # beta-binomial conjugacy (common practice)


def test_percentages_where_a_probability_or_level_is_expected(tmp_path):
    sh = Shell(tmp_path)
    sh(*BETA)
    got = sh("prob p > 25%").splitlines()[-1]
    assert got.startswith("P(p > 25%) = ")
    assert float(got.split("=")[1].split()[0]) == pytest.approx(POST.sf(0.25), abs=1e-6)
    iv = sh("interval p 90%").split("=")[1].split(",")
    assert float(iv[0]) == pytest.approx(POST.ppf(0.05), abs=1e-6)
    assert float(iv[1].split()[0]) == pytest.approx(POST.ppf(0.95), abs=1e-6)
    q = sh("quantile p 5%").split("=")[1].split()[0]
    assert float(q) == pytest.approx(POST.ppf(0.05), abs=1e-6)


def test_several_quantile_levels_at_once(tmp_path):
    sh = Shell(tmp_path)
    sh(*BETA)
    got = sh("quantile p 0.05 0.95").splitlines()[-1]
    assert got.startswith("quantiles of p at 0.05, 0.95 = ")
    vals = [float(v) for v in got.split("=")[1].split("(")[0].split(",")]
    assert vals == pytest.approx([POST.ppf(0.05), POST.ppf(0.95)], abs=1e-6)
    # an expression ending in a number keeps it: the 0.5 quantile of p + 1
    got = sh("quantile p + 1 0.5")
    assert float(got.split("=")[1].split()[0]) == pytest.approx(1 + POST.ppf(0.5), abs=1e-5)
    # check reads the same line
    assert sh.app.run(f"check quantile p 5% 95% = {vals[0]:.6g}, {vals[1]:.6g}") == "checked"


@pytest.mark.parametrize("line,message", [
    ("quantile p 95", "error: column 12: quantile level must be between 0 and 1; for 95 "
                      "percent write `95%` or `0.95`"),
    ("interval p 95", "error: column 12: level must be between 0 and 1; for 95 percent write "
                      "`95%` or `0.95`"),
    ("quantile p 150%", "error: column 12: quantile level must be between 0% and 100%; got "
                        "`150%`"),
    ("quantile p x", "error: column 12: `quantile` needs a level after the expression, as "
                     "in `quantile p x 0.9`; got `x`"),
])
def test_near_misses_get_a_clear_line(tmp_path, line, message):
    sh = Shell(tmp_path)
    sh(*BETA)
    assert sh.error(line) == message


def test_semicolons_at_the_prompt_as_in_batch():
    out = io.StringIO()
    app = App(Printer(out, width=80, color=False))
    with create_pipe_input() as inp:
        repl = Repl(app, input=inp, output=DummyOutput(), history=InMemoryHistory())
        inp.send_text("; ".join(BETA) + "; mean p; sd p\r" + "mean q; sd p\r" + "quit\r")
        repl.run()
    text = out.getvalue()
    mean = float(text.split("mean p = ")[1].split()[0])
    assert mean == pytest.approx(POST.mean(), abs=1e-6)
    assert "sd p = " in text
    # each command is its own entry of the session (as `save` keeps them)
    assert [e.text for e in app.log][:4] == BETA
    # the first error stops the line, and says where
    assert "command 1 of 2: error: column 6: unknown name `q`" in text
    assert "the 1 command after it on the line did not run" in text
    assert text.count("sd p = ") == 1
