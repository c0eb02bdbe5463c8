"""Refinement through the shell: refine, zoom, cost with its steps ahead, compute's
refusal and `compute force`, `plot refine`, and Ctrl-C during refine and zoom.

The running example is the beta-binomial model of test_shell_commands: prior
beta(2, 3), rows of 10 trials with 3, 2 and 4 successes, so the posterior is
beta(11, 24) and the log evidence is sum log C(10, k_i) + log B(11, 24) - log B(2, 3)
(beta-binomial conjugacy, common practice); the references are evaluated with
scipy.stats.beta and scipy.special.
"""

from __future__ import annotations

import math
import re

import pytest
import scipy.special as sc

from shell.printer import Printer

from test_shell_commands import MODEL, POST, Shell, shown  # noqa: F401  (the shared harness)

LOG_Z = (sum(math.log(sc.comb(10, k)) for k in (3, 2, 4)) + sc.betaln(11, 24)
         - sc.betaln(2, 3))


@pytest.fixture
def sh(tmp_path):
    return Shell(tmp_path)


@pytest.fixture
def model(sh):
    assert sh(*MODEL) == "ok"
    sh.take()
    return sh


def rows_of(out: str, header_start: str) -> list[list[str]]:
    """The rows of the table whose header line starts with `header_start` (words)."""
    lines = out.splitlines()
    for i, line in enumerate(lines):
        want = header_start.split()
        if line.split()[:len(want)] == want:
            rows = []
            for x in lines[i + 1:]:
                if not x.strip() or not x.strip()[0].isdigit():
                    break
                rows.append(x.split())
            return rows
    raise AssertionError(f"no table starting {header_start!r} in:\n{out}")


# ---------------------------------------------------------------------------
# refine

def test_refine_computes_first_and_takes_one_nested_step(model):
    model("grid p 0.01 0.99 21")
    model.take()
    assert model("refine") == "ok"
    out = model.take()[0]
    assert out.startswith("note: computed first (21 points)\n")
    steps = rows_of(out, "step  points  evaluated")
    # the trapezoid doubles 21 -> 41 nodes, and only the 20 new ones are evaluated
    assert [r[:3] for r in steps] == [["0", "21", "21"], ["1", "41", "20"]]
    assert "one step: the largest change was " in out
    assert model.app.ws.state.posterior.grid.size == 41


def test_refine_until_converges_to_the_closed_form(model):
    model("grid p 0.01 0.99 21")
    # 21 nodes already reach about 3e-8 (their nested estimate): 1e-9 takes a step
    assert model("refine until 1e-9") == "ok"
    out = model.take()[0]
    assert re.search(r"^(converged: every value moved by less than 1e-09 at step \d+|"
                     r"already within 1e-09: .*; no finer pass)$", out, re.M)
    assert len(rows_of(out, "step  points  evaluated")) >= 2
    last = rows_of(out, "step      mean")[-1]
    mean, sd, lo, hi = (float(x) for x in last[1:])
    # scipy.stats.beta(11, 24): the posterior of the running example
    assert mean == shown(POST.mean()) and sd == shown(POST.std())
    assert lo == shown(POST.ppf(0.025)) and hi == shown(POST.ppf(0.975))
    ev = float(rows_of(out, "step  points  evaluated")[-1][4])
    assert ev == pytest.approx(LOG_Z, abs=1e-5)   # the beta-binomial evidence (see top)
    # each step reused the nodes before it: points 21, 41, 81, ... evaluated 21, 20, 40, ...
    steps = rows_of(out, "step  points  evaluated")
    for a, b in zip(steps, steps[1:]):
        assert int(b[1].replace(",", "")) == 2 * int(a[1].replace(",", "")) - 1
        assert int(b[2].replace(",", "")) == int(b[1].replace(",", "")) - \
            int(a[1].replace(",", ""))


def test_refine_one_axis_doubles_only_that_axis(sh):
    sh("param p unit", "param q unit", "data k = 3, 2, 4", "likelihood k ~ binomial(10, p*q)",
       "grid p 0.01 0.99 11", "grid q 0.01 0.99 11", "compute")
    sh.take()
    assert sh("refine q") == "ok"
    grid = sh.app.ws.state.posterior.grid
    assert (grid.axis("p").n, grid.axis("q").n) == (11, 21)
    assert [r[1] for r in rows_of(sh.take()[0], "step  points")] == ["121", "231"]


def test_refine_bad(model):
    assert model.error("refine q") == "error: column 8: no parameter `q`"
    assert model.error("refine until") == (
        "error: column 13: `until` needs a tolerance, as in `refine until 1e-6`")
    assert model.error("refine p until -1") == (
        "error: column 16: the tolerance must be positive; got `-1`")
    assert model.app.ws.state.posterior is None   # nothing was computed


def test_refine_stops_at_the_budget_and_says_why(model):
    model("grid p 0.01 0.99 21", "compute")
    model.app.ws.budget_seconds = 1e-9
    model.take()
    assert model("refine until 1e-12") == "ok"
    out = model.take()[0]
    assert re.search(r"^warning: stopped: the next step \(41 points\) would take about .* beyond "
                     r"what is left of the budget of 0 s; not run$", out, re.M)


def test_refine_warns_of_mass_at_a_grid_edge_naming_axis_and_side(model):
    # the grid stops at 0.3, below the posterior's median 0.31 (scipy.stats.beta)
    assert POST.cdf(0.3) < 0.5
    model("grid p 0.01 0.3 21")
    model.take()
    model("refine")
    out = model.take()[0]
    assert re.search(r"^warning: mass at the upper edge of `p` \(\S+ at 0\.3\)", out, re.M)


def test_refine_saves_checks_of_the_values_it_reached(model, tmp_path):
    model("grid p 0.01 0.99 21", "refine until 1e-7", "save r.qd")
    text = (tmp_path / "r.qd").read_text()
    body = text.split("refine until 1e-7\n", 1)[1].splitlines()
    assert body[0].startswith("check evidence = ")
    assert [b.split(" = ")[0] for b in body[1:4]] == [
        "check mean p", "check sd p", "check interval p 0.95"]
    mean = float(body[1].split(" = ")[1].split()[0])
    assert mean == shown(POST.mean())   # scipy.stats.beta
    again = Shell(tmp_path)
    assert again("replay r.qd") == "ok"
    assert again.take()[0].endswith("replayed `r.qd`: all 4 checks held\n")


def test_plot_refine_draws_the_convergence(model):
    assert model.error("plot refine") == (
        "error: no refinement steps to draw: `refine` or `refine until TOL` first")
    model("grid p 0.01 0.99 21", "refine until 1e-7")
    model.take()
    assert model("plot refine") == "ok"
    lines = model.take()[0].splitlines()
    assert "largest change" in lines[0] and "log evidence change" in lines[0]
    assert max(len(x) for x in lines) <= 80
    assert any("refinement step" in x for x in lines)
    steps = rows_of("\n".join(lines), "step  points  largest change")
    assert [s[1] for s in steps[:2]] == ["41", "81"]
    assert model.error("plot refine p") == (
        "error: column 13: unexpected `p`: `plot refine` takes nothing")


# ---------------------------------------------------------------------------
# zoom

def test_zoom_keeps_the_points_and_shrinks_to_the_mass(model):
    model("grid p 0.0001 0.9999 201", "compute")
    model.take()
    assert model("zoom") == "ok"
    out = model.take()[0]
    assert out.startswith("zoomed: computed 201 points in ")
    a = model.app.ws.state.posterior.grid.axis("p")
    # the central 1 - 1e-9 of beta(11, 24), from scipy.stats.beta
    assert a.n == 201
    assert a.lo == pytest.approx(POST.ppf(5e-10), rel=1e-3)
    assert a.hi == pytest.approx(POST.isf(5e-10), rel=1e-3)
    model("mean p")
    assert float(model.take()[0].split(" = ")[1].split()[0]) == shown(POST.mean())


def test_zoom_bad(model):
    assert model.error("zoom 1.5") == (
        "error: column 6: the mass must be between 0 and 1, as in `zoom 0.999999`; got `1.5`")
    assert model.error("zoom 0.9 0.8") == (
        "error: column 10: unexpected `0.8`; usage: zoom [MASS] [force]")


# ---------------------------------------------------------------------------
# cost and compute

def normal_axes(sh, d: int, n: int = 10) -> None:
    for i in range(d):
        sh(f"param a{i} real", f"prior a{i} ~ normal(0, 1)", f"grid a{i} -3 3 {n}")
    sh.take()


def test_cost_of_three_axes_of_ten_points_is_1000(sh):
    normal_axes(sh, 3)
    assert sh("cost") == "ok"
    out = sh.take()[0]
    assert "\npoints 1,000\n" in out
    # the steps ahead double every axis's resolution: 19^3, 37^3, 73^3 points (the
    # trapezoid's nested counts 2n - 1)
    ahead = rows_of(out, "step  points  memory")
    assert [r[1] for r in ahead] == ["6,859", "50,653", "389,017"]


def test_cost_and_compute_at_twenty_axes_name_ten_to_the_twenty(sh):
    normal_axes(sh, 20)
    sh("cost")
    out = sh.take()[0]
    assert "\npoints 10^20\n" in out
    assert "note: 10^20 points is beyond the budget" in out
    assert sh.error("compute") == ("error: this grid has 10^20 points: more than quadrat can "
                                   "count; use fewer points or fewer parameters")
    assert sh.error("compute force") == sh.error("compute")
    assert sh.app.ws.state.posterior is None


def test_compute_refuses_over_the_budget_and_force_runs_it(model):
    model("grid p 0.01 0.99 201")
    model.app.ws.budget_seconds = 1e-9
    line = model.error("compute")
    assert line.startswith("error: this grid has 201 points and would take about ")
    assert "use fewer points, `zoom`, or another rule; `compute force` runs it anyway" in line
    assert model.app.ws.state.posterior is None
    assert model("compute force") == "ok"
    assert model.take()[0].startswith("computed 201 points in ")


# ---------------------------------------------------------------------------
# Ctrl-C

class Interrupting(Printer):
    """A printer whose progress callback raises KeyboardInterrupt, as Ctrl-C would."""

    def progress(self):
        def stop(done, total):
            raise KeyboardInterrupt
        stop.close = lambda: None
        return stop


@pytest.mark.parametrize("command", ["refine", "refine until 1e-8", "zoom"])
def test_ctrl_c_during_refine_and_zoom_leaves_the_state_as_before(model, command):
    model("grid p 0.01 0.99 21", "compute")
    before, depth = model.app.ws.state, len(model.app.ws.history)
    log = [e.text for e in model.app.log]
    model.app.printer = Interrupting(model.out, model.err, width=80, color=False)
    model.take()
    assert model(command) == "cancelled"
    assert model.take()[1] == f"cancelled: the state is as it was before `{command.split()[0]}`\n"
    assert model.app.ws.state is before and len(model.app.ws.history) == depth
    assert model.app.ws.state.posterior.grid.size == 21
    assert [e.text for e in model.app.log] == log


def test_ctrl_c_during_the_compute_refine_does_first(model):
    model("grid p 0.01 0.99 21")
    before = model.app.ws.state
    model.app.printer = Interrupting(model.out, model.err, width=80, color=False)
    assert model("refine") == "cancelled"
    assert model.app.ws.state is before and model.app.ws.state.posterior is None


# ---------------------------------------------------------------------------
# help and completion

def test_help_of_the_new_commands_is_a_paragraph():
    from shell.registry import COMMANDS, LATER

    assert LATER == ()
    for name in ("refine", "zoom", "cost", "compute", "plot"):
        assert len(COMMANDS[name].help.split()) >= 30, name


def test_completion_of_refine_zoom_and_plot():
    from shell.completer import Names, candidates

    names = Names(params=("mu", "sigma"), predicted=("ynew",))

    def texts(t):
        return [c.text for c in candidates(t, names)]

    assert texts("refine ") == ["until", "mu", "sigma"]
    assert texts("refine mu ") == ["until"]
    assert texts("zoom ") == ["0.999999", "force"]
    assert texts("plot ") == ["refine", "mu", "sigma", "ynew"]
    assert texts("compute ") == ["force"]


def test_budget_command_and_option():
    # a 2,000,001-point grid against a 1 ms budget: refused with the figure; a bad budget
    # is one error line
    from shell.main import main
    import io
    out, err = io.StringIO(), io.StringIO()
    code = main(["-c", "budget 0.001; param a real; prior a ~ normal(0, 1); "
                       "grid a -5 5 2000001; compute"], stdout=out, stderr=err)
    assert code == 2
    assert "time budget: 1 ms" in out.getvalue()
    assert "2,000,001 points" in err.getvalue() and "budget 1 ms" in err.getvalue()
    out, err = io.StringIO(), io.StringIO()
    assert main(["-c", "budget -1"], stdout=out, stderr=err) == 2
    assert "the budget must be a positive number of seconds; got -1" in err.getvalue()
    out, err = io.StringIO(), io.StringIO()
    code = main(["--budget", "0.0001", "-c", "param a real; prior a ~ normal(0, 1); "
                 "grid a -5 5 2000001; compute"], stdout=out, stderr=err)
    assert code == 2 and "2,000,001 points" in err.getvalue()
