"""The demo sessions in sessions/: each replays end to end in a subprocess with all
of its checks holding; together they cover a bounded, a positive and a discrete
parameter and a 2-D plot; each says in its first comment that its data are
invented, and those touching health or safety print the caution."""

from __future__ import annotations

import math
import os
import re
import subprocess
import sys
from pathlib import Path

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st

ROOT = Path(__file__).resolve().parent.parent
SESSIONS = sorted((ROOT / "sessions").glob("*.qd"))
CAUTION = ("These results are statistical estimates: review them under local rules and "
           "licensed practice before anyone acts on them.")


def replay(path: Path) -> subprocess.CompletedProcess:
    env = dict(os.environ, NO_COLOR="1", COLUMNS="100")
    return subprocess.run([sys.executable, "-m", "shell.main", str(path.relative_to(ROOT))],
                          cwd=ROOT, capture_output=True, text=True, timeout=300, env=env)


@pytest.fixture(scope="module")
def runs():
    return {p.name: replay(p) for p in SESSIONS}


def test_there_are_at_least_three_sessions():
    assert len(SESSIONS) >= 3


@pytest.mark.parametrize("path", SESSIONS, ids=lambda p: p.name)
def test_session_replays_with_every_check_holding(path, runs):
    proc = runs[path.name]
    assert proc.returncode == 0, proc.stderr
    assert proc.stderr == ""
    held = re.search(r"replayed `.*`: all (\d+) checks held\n$", proc.stdout)
    assert held is not None and int(held.group(1)) >= 5
    assert int(held.group(1)) == path.read_text().count("\ncheck ")


@pytest.mark.parametrize("path", SESSIONS, ids=lambda p: p.name)
def test_session_says_its_data_are_invented(path):
    first = path.read_text().splitlines()[0]
    assert first.startswith("#") and "invented" in first.lower()


def test_sessions_cover_bounded_positive_discrete_and_a_joint_plot():
    text = "\n".join(p.read_text() for p in SESSIONS)
    assert re.search(r"^param \w+ (unit|in )", text, re.M)
    assert re.search(r"^param \w+ positive", text, re.M)
    assert re.search(r"^param \w+ (int|set) ", text, re.M)
    assert re.search(r"^plot \w+ \w+\s*$", text, re.M)


@pytest.mark.parametrize("name", ["prevalence.qd", "pump_failures.qd"])
def test_health_and_safety_sessions_print_the_caution(name, runs):
    assert CAUTION in runs[name].stdout
    assert CAUTION in (ROOT / "sessions" / name).read_text()


def test_the_joint_plot_fits_the_width(runs):
    out = runs["population.qd"].stdout
    from shell.plots import RAMP
    # the legend names every character of the ramp, and the picture below it uses the
    # densest one as well
    legend, _, picture = out.partition("credible regions")
    legend_line = picture.splitlines()[0]
    assert all(ch in legend_line for ch in RAMP[1:])
    assert picture.count(RAMP[-1]) >= 3
    assert max(len(line) for line in out.splitlines()) <= 100


def _growth_reference():
    """Log evidence, mean of `s` and the coefficients' means for sessions/growth.qd: given
    s the coefficients integrate out in closed form (y ~ N(X m0, X S0 X' + s^2 I), the
    normal-normal conjugacy, common practice; scipy.stats.multivariate_normal), then s
    by 1-D quadrature (scipy.integrate.simpson) under its half-normal(3) prior."""
    from scipy import integrate
    text = (ROOT / "sessions" / "growth.qd").read_text()

    def col(name):
        line = re.search(rf"^data {name} = (.*)$", text, re.M).group(1)
        return np.array([float(v) for v in line.split(",")])

    t, p, c, h, y = (col(n) for n in ("temp", "press", "cat", "hours", "growth"))
    X = np.column_stack([np.ones_like(t), t - 170, p - 4, c - 1.25, h - 2.5])
    m0, sd0 = np.array([12, 0, 0, 0, 0.0]), np.array([5, 1, 2, 4, 2.0])
    ss = np.linspace(0.4, 2.0, 801)     # the posterior of s is negligible outside
    lm = np.array([st.multivariate_normal(X @ m0, X @ np.diag(sd0 ** 2) @ X.T
                                          + s * s * np.eye(len(y))).logpdf(y) for s in ss])
    lm += st.halfnorm(scale=3).logpdf(ss)
    w = np.exp(lm - lm.max())
    z = integrate.simpson(w, x=ss)
    w /= z

    def cond_mean(s):
        prec = np.diag(1 / sd0 ** 2) + X.T @ X / s ** 2
        return np.linalg.solve(prec, m0 / sd0 ** 2 + X.T @ y / s ** 2)

    means = integrate.simpson(w[:, None] * np.array([cond_mean(s) for s in ss]), x=ss, axis=0)
    return math.log(z) + lm.max(), integrate.simpson(w * ss, x=ss), means


def test_growth_session_past_the_grid_agrees_with_the_closed_form(runs):
    log_z, mean_s, means = _growth_reference()
    out = runs["growth.qd"].stdout
    assert "rule: sparse" in out
    ev, ev_err = re.search(r"^log evidence = (\S+)  \(± (\S+)\)", out, re.M).groups()
    assert abs(float(ev) - log_z) <= float(ev_err)
    for name, ref in zip(("b0", "bt", "bp", "bc", "bh", "s"), list(means) + [mean_s]):
        m, err = re.search(rf"^{name}\s+(\S+)\s+± (\S+)\s", out, re.M).groups()
        # within the stated error, or the shown rounding of a value printed to 6 digits
        assert abs(float(m) - ref) <= float(err) + 5e-6 * abs(ref), (name, m, ref, err)


def test_defects_session_agrees_with_the_gamma_poisson_closed_form(runs):
    # counts y_i ~ poisson(rate), rate ~ gamma(2, rate 1): posterior gamma(2 + S, 1 + n);
    # evidence = 1^2 / G(2) * G(2 + S) / (1 + n)^(2 + S) / prod y_i! (gamma-Poisson
    # conjugacy, common practice), evaluated with scipy
    y = np.loadtxt(ROOT / "sessions" / "defects.csv", delimiter=",", skiprows=1)[:, 1]
    S, n = y.sum(), len(y)
    post = st.gamma(2 + S, scale=1 / (1 + n))
    log_z = (sc.gammaln(2 + S) - sc.gammaln(2) - (2 + S) * math.log(1 + n)
             - sc.gammaln(y + 1).sum())
    out = runs["defects.qd"].stdout
    # the summary row: mean ± error, sd, median, "LO to HI"
    row = re.search(r"^rate\s+(\S+)\s+± \S+\s+(\S+)\s+(\S+)\s+(\S+) to (\S+)$", out,
                    re.M).groups()
    mean, sd, median, lo, hi = (float(x) for x in row)
    got = [mean, sd, lo, median, hi]
    ref = [post.mean(), post.std(), post.ppf(0.025), post.ppf(0.5), post.ppf(0.975)]
    for g, r in zip(got, ref):
        assert g == pytest.approx(r, rel=3e-6)
    ev = float(re.search(r"^log evidence = (\S+)", out, re.M).group(1))
    assert ev == pytest.approx(log_z, abs=1e-4)
    p = float(re.search(r"^P\(rate < 2\) = (\S+)", out, re.M).group(1))
    assert p == pytest.approx(post.cdf(2), abs=1e-6)
