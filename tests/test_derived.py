"""Lets and expressions asked what a parameter is asked: quantiles, central
intervals, densities, summaries, exports and check lines.

References: the odds p / (1 - p) of p ~ beta(a, b) has the beta prime
distribution with the same shape parameters (a standard change of variables;
scipy.stats.betaprime gives it). The bioassay model is the one of Gelman et al.,
Bayesian Data Analysis, 3rd ed., sec. 3.7 (data of Racine et al. 1986): a
logistic dose-response with a flat prior on the box the book plots; its LD50
-a/b is checked against a fine-grid reference computed here with numpy alone.
"""

from __future__ import annotations

import functools
import math

import numpy as np
import pytest
import scipy.stats as st

from engine.errors import ComputeError
from engine.workspace import Workspace

# ---------------------------------------------------------------------------
# the odds of a beta posterior

A0, B0, Y, N = 3, 5, 7, 20          # prior beta(3, 5); 7 of 20: posterior beta(10, 18)


def _odds_ws() -> Workspace:
    ws = Workspace()
    ws.param("p", "unit")
    ws.prior("p", f"beta({A0}, {B0})")
    ws.data_typed("y", [str(Y)])
    ws.data_typed("n", [str(N)])
    ws.likelihood("y", "binomial(n, p)")
    ws.let("odds", "p / (1 - p)")
    ws.grid("p", 1e-6, 1 - 1e-6, 401)
    ws.compute()
    return ws


@pytest.fixture(scope="module")
def odds_ws():
    return _odds_ws()


REF = st.betaprime(A0 + Y, B0 + N - Y)   # scipy.stats.betaprime


@pytest.mark.parametrize("text", ["odds", "p / (1 - p)"])
def test_quantiles_and_interval_of_the_odds_are_beta_prime(odds_ws, text):
    for q in (0.05, 0.5, 0.95):
        a = odds_ws.quantile(text, q)
        assert a.values[0] == pytest.approx(REF.ppf(q), rel=1e-6)
    iv = odds_ws.interval(text, 0.9)
    assert iv.detail.lo == pytest.approx(REF.ppf(0.05), rel=1e-6)
    assert iv.detail.hi == pytest.approx(REF.ppf(0.95), rel=1e-6)
    assert iv.detail.lo_error is not None and iv.detail.lo_error < 1e-6


def test_density_of_the_odds_is_beta_prime(odds_ws):
    c = odds_ws.density("odds").detail
    ref = REF.pdf(c.x)
    assert np.max(np.abs(c.density - ref)) < 1e-6 * np.max(ref)
    assert c.interval == pytest.approx((REF.ppf(0.025), REF.ppf(0.975)), rel=1e-6)


def test_summary_has_a_row_for_the_let(odds_ws):
    s = odds_ws.summary()
    row = next(r for r in s.rows if r.name == "odds")
    assert row.let
    assert row.mean.value == pytest.approx(REF.mean(), rel=1e-6)
    assert row.sd.value == pytest.approx(REF.std(), rel=1e-6)
    assert row.q50.value == pytest.approx(REF.median(), rel=1e-6)


# ---------------------------------------------------------------------------
# the bioassay's LD50, with the node b = 0 on the grid

DOSE = np.array([-0.86, -0.30, -0.05, 0.73])
ANIMALS = np.array([5, 5, 5, 5])
DEATHS = np.array([0, 1, 3, 5])
A_BOX, B_BOX = (-5.0, 10.0), (-10.0, 40.0)    # the box of the book's contour plot


def _loglik(a, b):
    eta = a[..., None] + b[..., None] * DOSE
    return np.sum(DEATHS * -np.logaddexp(0, -eta) + (ANIMALS - DEATHS) * -np.logaddexp(0, eta),
                  axis=-1)


def _reference_cdf(k: int = 1):
    """P(-a/b <= x) under the flat prior on the box, by nested trapezoid sums on a
    fine grid (spacing 0.01 / k): the a-integral cut at a = -b x on each b line (the
    density linear across the cut cell), the b-integral split at b = 0 where the
    set jumps. Its error is of second order in the spacing."""
    a = np.linspace(*A_BOX, 1500 * k + 1)
    ha = a[1] - a[0]
    b_neg, b_pos = np.linspace(B_BOX[0], 0.0, 250 * k + 1), np.linspace(0.0, B_BOX[1],
                                                                        1000 * k + 1)
    lines = {}
    for key, bs in (("neg", b_neg), ("pos", b_pos)):
        f = np.concatenate([np.exp(_loglik(a[None, :], bs[i:i + 200, None]) + 6.0)
                            for i in range(0, len(bs), 200)])
        cum = np.concatenate([np.zeros((len(bs), 1)),
                              np.cumsum((f[:, 1:] + f[:, :-1]) * ha / 2, axis=1)], axis=1)
        lines[key] = (bs, f, cum)
    total = sum(np.trapezoid(c[:, -1], bs) for bs, f, c in lines.values())

    def below(bs, f, cum, cut):
        """Integral of each line from a's lower end up to cut (one per line)."""
        t = np.clip((cut - a[0]) / ha, 0, len(a) - 1)
        i = np.minimum(t.astype(int), len(a) - 2)
        r = t - i
        rows = np.arange(len(bs))
        fi, fj = f[rows, i], f[rows, i + 1]
        # trapezoid on the partial cell, the density linear across it
        return cum[rows, i] + ha * (r * fi + 0.5 * r * r * (fj - fi))

    def cdf(x):
        bs, f, cum = lines["pos"]
        # b > 0: -a/b <= x  <=>  a >= -b x   (at b = 0+: a >= 0)
        pos = cum[:, -1] - below(bs, f, cum, -bs * x)
        bs_n, f_n, cum_n = lines["neg"]
        # b < 0: -a/b <= x  <=>  a <= -b x   (at b = 0-: a <= 0)
        neg = below(bs_n, f_n, cum_n, -bs_n * x)
        return (np.trapezoid(pos, bs) + np.trapezoid(neg, bs_n)) / total

    return cdf


def _bioassay_ws() -> Workspace:
    ws = Workspace()
    ws.param("a", "interval", lo=A_BOX[0], hi=A_BOX[1])
    ws.param("b", "interval", lo=B_BOX[0], hi=B_BOX[1])
    ws.data_typed("x", [str(v) for v in DOSE])
    ws.data_typed("n", [str(v) for v in ANIMALS])
    ws.data_typed("y", [str(v) for v in DEATHS])
    ws.likelihood("y", "binomial(n, inv_logit(a + b * x))")
    ws.let("ld50", "-a / b")
    ws.grid("a", *A_BOX, 241)
    ws.grid("b", *B_BOX, 401)          # spacing 0.125: the node b = 0 is on the grid
    ws.compute()
    return ws


@pytest.fixture(scope="module")
def bioassay():
    return _bioassay_ws()


def test_the_bioassay_grid_has_the_node_b_0(bioassay):
    assert 0.0 in bioassay.posterior_now.grid.axis("b").values


def test_ld50_quantiles_agree_with_a_fine_grid_reference(bioassay):
    from scipy.optimize import brentq
    coarse, fine = _reference_cdf(1), _reference_cdf(2)
    for q in (0.05, 0.25, 0.5, 0.75, 0.95):
        r1 = brentq(lambda x: coarse(x) - q, -1.5, 1.5, xtol=1e-13)
        r2 = brentq(lambda x: fine(x) - q, -1.5, 1.5, xtol=1e-13)
        ref = (4 * r2 - r1) / 3      # Richardson: the reference's error is O(h^2)
        got = bioassay.quantile("ld50", q)
        est, err = got.values[0], got.errors[0]
        assert abs(est - ref) <= max(err, 2e-6), (q, est, ref, err)
        assert err < 1e-3


def test_ld50_interval_and_plot_work_where_the_let_is_infinite_on_a_node(bioassay):
    iv = bioassay.interval("ld50", 0.9)
    q05, q95 = bioassay.quantile("ld50", 0.05), bioassay.quantile("ld50", 0.95)
    assert (iv.detail.lo, iv.detail.hi) == pytest.approx((q05.values[0], q95.values[0]), rel=1e-12)
    c = bioassay.density("ld50").detail
    # the density integrates to the mass between the curve's ends (1e-4 .. 1 - 1e-4)
    assert np.trapezoid(c.density, c.x) == pytest.approx(1 - 2e-4, abs=2e-4)


def test_the_mean_of_ld50_does_not_exist_and_says_so(bioassay):
    # -a/b grows as 1/b near b = 0 where the posterior is not zero: no mean
    with pytest.raises(ComputeError, match=r"`ld50` has no mean or sd: it grows faster"):
        bioassay.mean("ld50")


@functools.lru_cache(maxsize=None)
def _log_b_ws(text: str) -> Workspace:
    # b on its log scale reaches 1e-3, where exp(-a/b) overflows at a < 0, on a posterior
    # mass below 1e-50 (a gamma(20, 2) prior on b)
    ws = Workspace()
    ws.param("a", "interval", lo=A_BOX[0], hi=A_BOX[1])
    ws.param("b", "positive")
    ws.prior("b", "gamma(20, 2)")
    ws.data_typed("x", [str(v) for v in DOSE])
    ws.data_typed("n", [str(v) for v in ANIMALS])
    ws.data_typed("y", [str(v) for v in DEATHS])
    ws.likelihood("y", "binomial(n, inv_logit(a + b * x))")
    ws.let("ed50", text)
    ws.grid("a", *A_BOX, 161)
    ws.grid("b", 1e-3, 60, 201)
    ws.compute()
    return ws


@functools.lru_cache(maxsize=None)
def _fine_posterior():
    """The same posterior on a fine grid with numpy (gamma(20, 2) up to a constant)."""
    a = np.linspace(*A_BOX, 1201)
    b = np.linspace(0.3, 60, 2401)   # below 0.3 the prior is under 1e-20 of its peak
    lp = _loglik(a[:, None], b[None, :]) + 19 * np.log(b)[None, :] - 2 * b[None, :]
    return a, b, np.exp(lp - lp.max())


def test_overflow_where_the_posterior_is_negligible_is_not_an_error_for_quantiles():
    ws = _log_b_ws("exp(-a / b)")
    q = ws.quantile("ed50", 0.5)
    assert any("infinite on posterior mass" in n for n in q.notes)
    # a strictly increasing map of the median of -a/b, within both stated errors
    q2 = ws.quantile("-a / b", 0.5)
    assert abs(q.values[0] - math.exp(q2.values[0])) <= (
        q.errors[0] + math.exp(q2.values[0]) * q2.errors[0])
    assert q.errors[0] < 1e-5
    # and that median against the fine grid: P(-a/b <= m) = 1/2
    a, b, w = _fine_posterior()
    m = math.log(q.values[0])
    inside = np.where(-a[:, None] / b[None, :] <= m, w, 0.0)
    p = np.trapezoid(np.trapezoid(inside, b, axis=1), a) / np.trapezoid(
        np.trapezoid(w, b, axis=1), a)
    assert p == pytest.approx(0.5, abs=2e-3)   # the indicator's cut: first order here


def test_an_overflow_beside_positive_density_leaves_no_mean_and_says_why():
    # exp(5 / b) outgrows every power of b as b -> 0: the mean of exp(-a/b) is infinite
    ws = _log_b_ws("exp(-a / b)")
    with pytest.raises(ComputeError, match=r"`ed50` has no mean or sd here: it is infinite"):
        ws.mean("ed50")


def test_the_mean_of_a_let_that_is_finite_everywhere_matches_the_fine_grid():
    ws = _log_b_ws("a / b")
    got = ws.mean("ed50")
    a, b, w = _fine_posterior()
    g = a[:, None] / b[None, :]
    ref = np.trapezoid(np.trapezoid(w * g, b, axis=1), a) / np.trapezoid(
        np.trapezoid(w, b, axis=1), a)
    assert got.values[0] == pytest.approx(ref, rel=1e-5)


# ---------------------------------------------------------------------------
# through the shell: interval, plot, summary, export and the saved check lines

def _shell(tmp_path):
    import io
    from shell.app import App
    from shell.printer import Printer

    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=80, color=False), log_file=str(tmp_path / "e.log"))
    app.ws.base_dir = str(tmp_path)
    lines = ["param p unit", f"prior p ~ beta({A0}, {B0})", f"data y = {Y}", f"data n = {N}",
             "likelihood y ~ binomial(n, p)", "let odds = p / (1 - p)",
             "grid p 0.000001 0.999999 401", "compute"]
    for x in lines:
        assert app.run(x) == "ok", err.getvalue()
    return app, out, err


def test_shell_interval_plot_summary_and_export_of_a_let(tmp_path):
    import csv
    import json
    app, out, err = _shell(tmp_path)
    out.truncate(0)
    out.seek(0)
    assert app.run("interval odds 90%") == "ok", err.getvalue()
    lo, hi = REF.ppf(0.05), REF.ppf(0.95)
    assert f"interval odds 90% = {lo:.6g}, {hi:.6g}" in out.getvalue()
    assert app.run("interval p / (1 - p) 0.9 central") == "ok", err.getvalue()
    assert f"= {lo:.6g}, {hi:.6g}" in out.getvalue()
    assert app.run("plot odds") == "ok", err.getvalue()
    tail = "\n".join(out.getvalue().splitlines()[-25:])
    assert "odds" in tail and f"interval {REF.ppf(0.025):.4g} to {REF.ppf(0.975):.4g}" in tail
    assert app.run("summary") == "ok", err.getvalue()
    row = next(x for x in out.getvalue().splitlines() if x.strip().startswith("odds (let)"))
    assert f"{REF.mean():.6g}" in row and f"{REF.median():.6g}" in row
    assert app.run("export summary s.csv") == "ok", err.getvalue()
    rows = {r["parameter"]: r for r in csv.DictReader(open(tmp_path / "s.csv"))}
    assert float(rows["odds"]["q50"]) == pytest.approx(REF.median(), rel=1e-6)
    assert app.run("export all.json") == "ok", err.getvalue()
    doc = json.load(open(tmp_path / "all.json"))
    assert doc["lets"]["odds"]["q97.5"]["value"] == pytest.approx(REF.ppf(0.975), rel=1e-6)


def test_saved_check_lines_of_a_let_replay(tmp_path):
    app, out, err = _shell(tmp_path)
    assert app.run("interval odds 0.9") == "ok"
    assert app.run("summary") == "ok"
    assert app.run("save s.qd") == "ok", err.getvalue()
    text = (tmp_path / "s.qd").read_text()
    assert "check interval odds 0.9 = " in text
    assert "check quantile odds 0.975 = " in text and "check mean odds = " in text
    app2, out2, err2 = _shell(tmp_path)
    assert app2.run("replay s.qd") == "ok", err2.getvalue()
    assert "all" in out2.getvalue().splitlines()[-1] and "checks held" in out2.getvalue()


def test_shell_interval_of_an_unknown_name_is_one_error_line(tmp_path):
    app, out, err = _shell(tmp_path)
    assert app.run("interval nothere 0.9") == "error"
    (line,) = err.getvalue().strip().splitlines()
    assert "`nothere`" in line and "column 10" in line
