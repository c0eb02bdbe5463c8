"""Every number honest: HPD regions at domain edges, of several pieces and of
discrete parameters; moments that do not exist.

References: scipy.stats (beta, t, cauchy: quantiles and moments); fine-grid
references computed here with numpy where no closed form exists (named beside
each check). The data are small invented numbers used only as test input.
"""

from __future__ import annotations

import math
import os

import numpy as np
import pytest
import scipy.stats as st

from test_shell_commands import Shell, value  # noqa: F401 (the shared harness)


@pytest.fixture
def sh(tmp_path):
    return Shell(tmp_path)


def run(sh, *lines: str) -> str:
    sh.take()
    for line in lines:
        status = sh.app.run(line)
        assert status not in ("error",), (line, sh.take())
    out, err = sh.take()
    assert "internal error" not in out + err, out + err
    return out + err


# ---------------------------------------------------------------------------
# HPD regions

def test_hpd_with_the_density_peaking_at_zero_is_one_sided(sh):
    # the line: a flat prior and 0 of 20 gives the posterior beta(1, 21)
    # (beta-binomial conjugacy, common practice); its density falls from p = 0, so
    # the 95% HPD is [0, q_0.95] (scipy.stats.beta.ppf)
    out = run(sh, "param p unit", "prior p ~ beta(1, 1)", "data y = 0", "data n = 20",
              "likelihood y ~ binomial(n, p)", "compute", "interval p 0.95 hpd")
    lo, hi = value(out, "interval p 0.95 hpd")
    assert lo == 0
    assert "e-316" not in out and "starts at the lower edge of the domain of `p`" in out
    assert hi == pytest.approx(st.beta(1, 21).ppf(0.95), rel=1e-6)
    r = sh.app.ws.interval("p", 0.95, "hpd").detail
    assert r.lo == 0.0 and r.hi == pytest.approx(st.beta(1, 21).ppf(0.95), rel=1e-7)


@pytest.mark.parametrize("a, b", [(1, 20), (0.5, 5)])
def test_hpd_of_a_prior_with_its_mode_at_zero(sh, a, b):
    # beta(1, 20) falls from 0; beta(0.5, 5) is unbounded at 0: HPD [0, q_level]
    # (scipy.stats.beta.ppf)
    run(sh, "param p unit", f"prior p ~ beta({a}, {b})", "compute")
    for level in (0.5, 0.95):
        r = sh.app.ws.interval("p", level, "hpd").detail
        assert r.lo == 0.0
        assert r.hi == pytest.approx(st.beta(a, b).ppf(level), rel=1e-6)
        assert r.pieces == ((r.lo, r.hi),)


def test_hpd_with_the_mode_at_the_upper_edge(sh):
    # beta(8, 1) rises to p = 1: HPD [q_0.10, 1] at level 0.9 (scipy.stats.beta.ppf)
    run(sh, "param p unit", "prior p ~ beta(8, 1)", "compute")
    r = sh.app.ws.interval("p", 0.9, "hpd").detail
    assert r.hi == 1.0
    assert r.lo == pytest.approx(st.beta(8, 1).ppf(0.1), rel=1e-6)


def _fine_hpd(x: np.ndarray, dens: np.ndarray, level: float) -> list[tuple[float, float]]:
    """The HPD region of a density tabulated on a fine uniform mesh `x`: the
    highest cells until `level` of the mass (common practice), as runs."""
    w = dens / dens.sum()
    order = np.argsort(-w)
    k = int(np.searchsorted(np.cumsum(w[order]), level)) + 1
    keep = np.zeros(len(x), bool)
    keep[order[:k]] = True
    edges = np.flatnonzero(np.diff(keep.astype(int)))
    starts = ([0] if keep[0] else []) + [e + 1 for e in edges if not keep[e]]
    ends = [e for e in edges if keep[e]] + ([len(x) - 1] if keep[-1] else [])
    return [(x[s], x[e]) for s, e in zip(starts, ends)]


def test_hpd_of_a_bimodal_posterior_is_a_union(sh):
    # a flat prior on [-10, 10] and two Cauchy observations far apart: two modes.
    # Reference: the same density on 4 million points with numpy and
    # scipy.stats.cauchy, its HPD region read off the ranked points
    out = run(sh, "param m in -10 10", "data y = -3, 3", "likelihood y ~ cauchy(m, 0.5)",
              "compute", "interval m 0.5 hpd")
    assert "2 pieces" in out
    x = np.linspace(-10, 10, 4_000_001)
    dens = st.cauchy(-3, 0.5).pdf(x) * st.cauchy(3, 0.5).pdf(x)
    ref = _fine_hpd(x, dens, 0.5)
    assert len(ref) == 2
    r = sh.app.ws.interval("m", 0.5, "hpd").detail
    assert len(r.pieces) == 2
    for (a, b), (ra, rb) in zip(r.pieces, ref):
        assert a == pytest.approx(ra, abs=2e-5) and b == pytest.approx(rb, abs=2e-5)
    assert (r.lo, r.hi) == (r.pieces[0][0], r.pieces[-1][1])


def test_hpd_of_a_discrete_parameter_in_two_runs(sh):
    # two bumps of a pmf on 0..30: the most probable values until 0.8 of the mass
    # (the HPD set of a pmf, common practice), computed here with numpy
    out = run(sh, "param k int 0 30",
              "prior log log(exp(-(k - 5)^2 / 4) + exp(-(k - 22)^2 / 4))", "compute",
              "interval k 0.8 hpd")
    ks = np.arange(31)
    w = np.exp(-(ks - 5) ** 2 / 4) + np.exp(-(ks - 22) ** 2 / 4)
    w /= w.sum()
    order = np.argsort(-w, kind="stable")
    chosen = set(ks[order[:int(np.searchsorted(np.cumsum(w[order]), 0.8)) + 1]].tolist())
    r = sh.app.ws.interval("k", 0.8, "hpd").detail
    got = {k for a, b in r.pieces for k in range(int(a), int(b) + 1)}
    assert got == chosen
    assert len(r.pieces) == 2 and "2 pieces" in out


# ---------------------------------------------------------------------------
# moments that do not exist

def test_cauchy_prior_has_no_mean_and_no_sd(sh):
    # a Cauchy has neither (scipy.stats.cauchy.mean() is nan); its quantiles are
    # scipy.stats.cauchy.ppf; a proper prior alone has log evidence 0
    out = run(sh, "param m real", "prior m ~ cauchy(0, 1)", "compute", "mean m", "sd m",
              "summary")
    assert math.isnan(st.cauchy.mean())
    assert "mean m: no mean (tails too heavy" in out
    assert "sd m: no sd (tails too heavy" in out
    assert "improper" not in out
    ws = sh.app.ws
    lo, hi = ws.interval("m", 0.95).detail.checked
    ref = st.cauchy.ppf(0.975)
    a = ws.interval("m", 0.95).detail
    assert abs(hi - ref) <= max(a.hi_error, 1e-9) and abs(lo + ref) <= max(a.lo_error, 1e-9)
    assert "`m` has no mean and no sd (tails too heavy)" in out
    ev = ws.evidence().detail
    assert abs(ev.value) <= ev.error


def test_student_t_two_has_a_mean_and_no_sd(sh):
    # t with 2 degrees of freedom: mean 0, infinite variance (scipy.stats.t moments)
    assert st.t(2).mean() == 0 and math.isinf(st.t(2).var())
    out = run(sh, "param m real", "prior m ~ student_t(2, 0, 1)", "compute", "mean m",
              "sd m")
    a = sh.app.ws.mean("m").detail
    assert abs(a.value) <= a.error < 1e-2
    assert "sd m: no sd (tails too heavy" in out
    assert "improper" not in out


def test_student_t_three_has_both(sh):
    # t with 3 degrees of freedom: mean 0 and sd sqrt(3) (scipy.stats.t moments); the
    # stated error covers the truth
    out = run(sh, "param m real", "prior m ~ student_t(3, 0, 1)", "compute", "mean m",
              "sd m")
    assert "no mean" not in out and "no sd" not in out
    ws = sh.app.ws
    m, s = ws.mean("m").detail, ws.sd("m").detail
    assert abs(m.value - st.t(3).mean()) <= m.error
    assert abs(s.value - st.t(3).std()) <= s.error < 1e-2


def test_light_tails_on_a_short_grid_are_not_called_heavy(sh):
    # a normal cut at 2.5 sd decays faster than any power: its moments exist (the
    # edge-mass warning tells of the cut)
    out = run(sh, "param m real", "prior m ~ normal(0, 1)", "grid m -2.5 2.5 101", "compute",
              "mean m", "sd m")
    assert "no mean" not in out and "no sd" not in out
    assert "mass at the lower edge" in out


# ---------------------------------------------------------------------------
# posteriors the grid does not resolve

NARROW = ["param m real", "data y = 0.123456", "likelihood y ~ normal(m, 1e-4)"]


def test_a_posterior_narrower_than_the_spacing_is_reported_not_summarised(sh):
    # the line: a flat prior and one normal observation with sd 1e-4 give the
    # posterior normal(0.123456, 1e-4) (conjugacy, common practice); on 101 points over
    # [-1, 1] it sits in one node
    out = run(sh, *NARROW, "grid m -1 1 101", "compute", "mean m", "sd m")
    assert "does not resolve the posterior" in out
    assert "100% of the mass of `m` sits in 1 grid node" in out
    assert "sd of 0.0001" in out and "spacing of 0.02" in out
    assert "`grid auto`" in out and "`zoom`" in out
    for line in out.splitlines():
        if line.startswith(("mean m", "sd m")):
            assert line.endswith("(not resolved)") and "±" not in line, line
    # the remedy gives the truth
    run(sh, "grid auto", "compute")
    mean, sd = sh.app.ws.mean("m").detail, sh.app.ws.sd("m").detail
    assert not sh.app.ws.mean("m").unresolved
    # (to rounding: the stated error, 2e-16, is below the 1.5e-15 measured here)
    assert abs(mean.value - 0.123456) <= max(mean.error, 1e-13 * 0.123456)
    assert sd.value == pytest.approx(1e-4, rel=1e-7)


def test_an_unresolved_posterior_is_never_exact(sh):
    # the second line: prior normal(0.123456, 1e-6) on 11 points. The log
    # evidence is the normal density of y under normal(0.123456, sqrt(1e-8 + 1e-12))
    # (marginal of a normal-normal model, common practice; scipy.stats.norm)
    out = run(sh, "param m real", "prior m ~ normal(0.123456, 1e-6)", "data y = 0.123456",
              "likelihood y ~ normal(m, 1e-4)", "grid m -1 1 11", "compute", "mean m",
              "evidence", "summary")
    assert "exact" not in out
    assert "log evidence = -2.9e9  (not resolved)" in out
    assert "mean m = 0.2  (not resolved)" in out
    run(sh, "grid auto", "compute")
    ev = sh.app.ws.evidence().detail
    ref = st.norm(0.123456, math.sqrt(1e-8 + 1e-12)).logpdf(0.123456)
    # (the nodes' own rounding, 1e-17 against an sd of 1e-6, moves it by about 1e-10;
    # the stated error leaves that out)
    assert abs(ev.value - ref) <= max(ev.error, 1e-9)


def test_a_grid_coarse_on_the_logit_scale_is_unresolved_and_a_fine_one_is_not(sh):
    # beta(11, 24) (beta-binomial conjugacy) on 11 logit-scale points: about 0.4 nodes
    # per sd on the axis's scale; on 41 points the answers agree with scipy.stats.beta
    base = ["param p unit", "prior p ~ beta(2, 3)", "data k = 3, 2, 4",
            "likelihood k ~ binomial(10, p)"]
    out = run(sh, *base, "grid p 0.01 0.99 11", "compute", "mean p")
    assert "does not resolve" in out and "mean p = 0.3  (not resolved)" in out
    out = run(sh, "grid p 0.001 0.999 81", "compute", "mean p")
    assert "does not resolve" not in out and "not resolved" not in out
    a = sh.app.ws.mean("p").detail
    assert abs(a.value - st.beta(11, 24).mean()) <= a.error


# ---------------------------------------------------------------------------
# numbers to the precision their error supports

def test_numbers_are_shown_to_the_digit_their_error_supports():
    from shell import render as R
    assert R.to_error(12.6929, 0.028) == "12.69"
    assert R.to_error(0.132946, 6e-9) == "0.132946"
    assert R.to_error(-7.85483e-14, 8e-14) == "0"      # the prior-only evidence
    assert R.to_error(0.3, 0.0) == "0.3"                 # an exact sum keeps its digits
    assert R.with_error(-7.85483e-14, 8e-14) == "0  (± 8e-14)"
    with R.showing(12):
        assert R.to_error(4 / 13, 1e-15) == "0.307692307692"
        assert R.to_error(4 / 13, 1e-9) == "0.307692308"


def test_prior_only_log_evidence_is_zero_everywhere(sh):
    # a proper prior alone integrates to 1: log evidence 0 (common practice)
    from shell.toolbar import toolbar_text
    out = run(sh, "param m real", "prior m ~ normal(0, 1)", "compute", "evidence", "summary")
    for line in out.splitlines():
        if "log evidence" in line:
            assert "evidence 0  (±" in line or "evidence = 0  (±" in line, line
    assert "log evidence 0 |" in toolbar_text(sh.app.ws.status(), 200) + " |"


def test_a_summary_of_discrete_parameters_only_says_exact_sums(sh):
    out = run(sh, "param k int 0 5", "prior log -k", "compute", "summary")
    assert "exact sums" in out and " act" not in out


def test_digits_setting_and_full_precision_exports(sh, tmp_path):
    # beta(11, 24): mean 11/35, mode 10/33 (beta mode (a-1)/(a+b-2), common practice)
    import json
    run(sh, "param p unit", "prior p ~ beta(2, 3)", "data k = 3, 2, 4",
        "likelihood k ~ binomial(10, p)", "compute")
    out = run(sh, "digits 10", "mean p", "mode")
    assert "numbers are shown with 10 significant digits" in out
    assert "mean p = 0.3142857143" in out
    assert "mode p = 0.303030303" in out
    assert sh.error("digits 0") == ("error: column 8: digits must be a whole number from 1 to "
                                    "17; got `0`")
    run(sh, "export all.json", "save s.qd")
    doc = json.load(open(tmp_path / "all.json"))
    assert doc["mode"]["values"]["p"] == pytest.approx(10 / 33, rel=1e-13)
    assert doc["parameters"]["p"]["mean"]["value"] == pytest.approx(11 / 35, rel=1e-12)
    assert doc["parameters"]["p"]["mean"]["value"] != round(11 / 35, 6)
    assert "digits 10" in open(tmp_path / "s.qd").read()


def test_evidence_under_an_improper_prior_is_a_note_with_status_0(tmp_path):
    # a flat prior on the real line: the evidence is not defined (DESIGN: priors)
    import subprocess
    import sys
    r = subprocess.run([sys.executable, "-m", "shell.main", "-c",
                        "param m real; data y = 1, 2; likelihood y ~ normal(m, 1); compute; "
                        "evidence"], capture_output=True, text=True, timeout=120)
    assert r.returncode == 0, r.stderr
    assert "note: the evidence is not defined under an improper prior" in r.stdout + r.stderr
    assert "error" not in r.stdout + r.stderr


def test_bayes_factor_is_stated_above_one_for_the_favoured_model():
    # B = exp(|log B|) names the favoured model first (common practice)
    from shell.commands.arrivals import bayes_factor_line
    line = bayes_factor_line("probit", "logistic", math.log(1 / 2.9), 1e-6)
    assert line == "B = 2.9 in favour of `logistic` over `probit`"
    assert bayes_factor_line("a", "b", math.log(0.344715), 1e-9) == \
        "B = 2.90095 in favour of `b` over `a`"  # 1 / 0.344715
    assert bayes_factor_line("a", "b", 1e-7, 1e-6).startswith("B = 1: neither `a` nor `b`")


def test_zero_density_points_are_told_apart(sh):
    # a support that cuts through the mass (m must exceed the largest observation),
    # and a density that underflows only where the posterior is negligible
    out = run(sh, "param m positive", "data y = 1.2, 0.5, 2.2", "likelihood y ~ uniform(0, m)",
              "grid m 0.1 10 201", "compute")
    assert "the posterior is zero at 135 of 201 grid points (outside a support or " \
           "constraint)" in out
    # the density falls as m^-3 beyond 2.2 (three uniform rows, flat prior): the mean
    # exists and the sd does not (the integral of m^2 m^-3 diverges; common practice)
    out = run(sh, "mean m", "sd m")
    assert "no mean" not in out and "sd m: no sd (tails too heavy" in out
    out = run(sh, "reset", "param a real", "prior a ~ normal(0, 1)",
              "likelihood log log(inv_logit(a + 3))", "grid a -2000 10 4001", "compute")
    assert "outside a support" not in out
    assert "all where the posterior is negligible (it underflows in double precision there)" \
        in out


def test_too_coarse_is_not_said_of_a_settled_grid(sh):
    # a positive parameter on a wide log-scale grid: 0.075 nodes per sd at the middle
    # node (in its own units), yet the sd is settled to 2e-8; the sd of gamma(3, 1)
    # is sqrt(3) (scipy.stats.gamma)
    out = run(sh, "param s positive", "prior s ~ gamma(3, 1)", "grid s 1e-4 1e8 121",
              "compute", "sd s")
    assert "too coarse" not in out
    a = sh.app.ws.sd("s").detail
    assert abs(a.value - st.gamma(3).std()) <= a.error < 1e-6
    # a linear grid that really is too coarse still earns the warning
    out = run(sh, "param m real", "prior m ~ normal(0, 1)", "grid m -8 8 17", "compute")
    assert "too coarse for its spread" in out


# ---------------------------------------------------------------------------
# samplesize

def test_samplesize_says_a_levelled_width_cannot_be_reached(sh):
    # invented numbers: prevalence with an imperfect test whose sensitivity and
    # specificity are known only from small validation studies; batches of 100 people.
    # More batches pin the positive rate, not the prevalence: the width of the
    # prevalence's interval levels off (the test's uncertainty dominates)
    out = run(sh, "param prev unit", "param se unit", "param sp unit",
              "prior se ~ beta(45, 5)", "prior sp ~ beta(95, 5)",
              "data k = 12, 9", "likelihood k ~ binomial(100, prev * se + (1 - prev) * (1 - sp))",
              "grid prev 0.0005 0.4 41", "grid se 0.6 0.99 21", "grid sp 0.85 0.999 21",
              "compute", "samplesize prev width 0.01 sims 20 max 4096", "save ss.qd")
    assert "cannot be reached: the expected width levels off near" in out
    assert ("inform `prev` only together with `se`, `sp`, so the uncertainty of `se`, `sp`"
            in out)
    assert "one further observation is one row of `k` ~ binomial(100" in out
    text = open(os.path.join(sh.app.ws.base_dir, "ss.qd")).read()
    assert "check samplesize prev width 0.01 sims 20 max 4096 = -1, " in text


# ---------------------------------------------------------------------------
# kinks: a density with abs() (the laplace family) has a point mass in its second
# derivative, which the curvature at a point must not trip over


def _laplace_normal_reference(ys):
    """log evidence and posterior mean of m for m ~ laplace(0, 1), y_i ~ normal(m, 1),
    by scipy.integrate.quad on each side of the kink (an independent reference)."""
    from scipy import integrate

    def f(m):
        return 0.5 * math.exp(-abs(m)) * np.prod(st.norm.pdf(ys, m, 1))

    parts = [(-np.inf, 0), (0, np.inf)]
    z = sum(integrate.quad(f, a, b, epsabs=0, epsrel=1e-12)[0] for a, b in parts)
    m1 = sum(integrate.quad(lambda m: m * f(m), a, b, epsabs=0, epsrel=1e-12)[0]
             for a, b in parts)
    return math.log(z), m1 / z


def test_a_laplace_prior_with_grid_auto_agrees_with_quadrature(sh):
    ys = [0.3, 0.5]
    out = run(sh, "param m real", "prior m ~ laplace(0, 1)", "data y = 0.3, 0.5",
              "likelihood y ~ normal(m, 1)", "grid auto", "compute", "mean m", "evidence")
    logz, mean = _laplace_normal_reference(ys)
    for prefix, truth in (("mean m", mean), ("log evidence", logz)):
        got = value(out, prefix)[0]
        err = float(out.split(prefix + " = ")[1].split("(± ")[1].split(")")[0])
        # within the stated error, or within the shown rounding where that is larger
        assert abs(got - truth) <= err + 1e-4, (prefix, got, truth, err)


# ---------------------------------------------------------------------------
# HPD intervals of derived quantities


def _hpd_reference(dist, level, guess):
    """The HPD interval of a unimodal scipy distribution: the ends of equal density
    holding `level` (scipy.optimize.fsolve on scipy.stats' logpdf and cdf)."""
    from scipy import optimize

    def eqs(v):
        lo, hi = v
        return [dist.logpdf(lo) - dist.logpdf(hi), dist.cdf(hi) - dist.cdf(lo) - level]

    return optimize.fsolve(eqs, guess, xtol=1e-12)


def _ends(out: str, prefix: str):
    line = next(ln for ln in out.splitlines() if ln.startswith(prefix))
    rhs = line.split(" = ", 1)[1]
    vals = [float(x) for x in rhs.split("  (")[0].split(",")]
    errs = rhs.split("  (", 1)[1].rstrip(")").split(", ")
    return vals, [0.0 if e == "exact" else float(e.replace("± ", "")) for e in errs]


def test_hpd_of_the_odds_of_a_beta_posterior_is_the_beta_prime_one(sh):
    # p | y ~ beta(5, 17) (beta-binomial conjugacy, common practice), so the odds
    # p / (1 - p) is beta prime(5, 17) (scipy.stats.betaprime)
    out = run(sh, "digits 10", "param p unit", "prior p ~ beta(1, 1)", "data y = 4",
              "data n = 20", "likelihood y ~ binomial(n, p)", "compute",
              "let odds = p / (1 - p)", "interval odds 0.95 hpd")
    ref = _hpd_reference(st.betaprime(5, 17), 0.95, [0.05, 0.6])
    vals, errs = _ends(out, "interval odds 0.95 hpd")
    for v, e, r in zip(vals, errs, ref):
        assert abs(v - r) <= max(e, 1e-9), (v, r, e)
        assert abs(v - r) < 1e-6
    # and it is not the central interval, which is longer
    central = st.betaprime(5, 17).ppf([0.025, 0.975])
    assert vals[1] - vals[0] < central[1] - central[0] - 0.01


def test_hpd_of_an_odds_whose_density_is_highest_at_zero_starts_there(sh):
    # p | y ~ beta(1, 20): the odds is beta prime(1, 20), density highest at 0, so the
    # HPD interval is [0, q(0.95)] (scipy.stats.betaprime.ppf)
    out = run(sh, "digits 10", "param p unit", "prior p ~ beta(1, 1)", "data y = 0",
              "data n = 19", "likelihood y ~ binomial(n, p)", "compute",
              "interval p / (1 - p) 0.95 hpd")
    vals, errs = _ends(out, "interval p / (1 - p) 0.95 hpd")
    assert vals[0] == 0 and errs[0] == 0.0
    q95 = st.betaprime(1, 20).ppf(0.95)
    assert abs(vals[1] - q95) <= max(errs[1], 1e-9) and abs(vals[1] - q95) < 1e-6
    assert "starts at the lowest value" in out


def test_hpd_of_a_sum_of_two_rates_is_the_gamma_one(sh):
    # a | x ~ gamma(2 + 8, 1 + 3), b | z ~ gamma(3 + 9, 1 + 3) (gamma-Poisson conjugacy,
    # common practice), independent, the same rate: a + b ~ gamma(22, rate 4)
    out = run(sh, "param a positive", "param b positive", "prior a ~ gamma(2, 1)",
              "prior b ~ gamma(3, 1)", "data x = 3, 1, 4", "data z = 2, 2, 5",
              "likelihood x ~ poisson(a)", "likelihood z ~ poisson(b)", "grid auto",
              "compute", "interval a + b 0.9 hpd")
    dist = st.gamma(22, scale=1 / 4)
    ref = _hpd_reference(dist, 0.9, list(dist.ppf([0.05, 0.95])))
    vals, errs = _ends(out, "interval a + b 0.9 hpd")
    for v, e, r in zip(vals, errs, ref):
        assert abs(v - r) <= e + 5e-6 * abs(r), (v, r, e)


def test_hpd_of_a_derived_quantity_with_two_modes_is_refused_in_one_line(sh):
    # a mixture of two separated normals as the prior (no data): the density of 2 * m
    # has two modes, whose HPD region is a union
    sh.take()
    for line in ("param m real", "prior log 0.5 * exp(-(m - 3)^2 / 0.5) + exp(-(m + 3)^2 / 0.5)",
                 "grid m -8 8 801", "compute"):
        sh.app.run(line)
    sh.take()
    sh.app.run("interval 2 * m + m^3 / 100 0.95 hpd")
    out, err = sh.take()
    assert "2 modes" in out + err and "central" in out + err
    assert "internal error" not in out + err


# ---------------------------------------------------------------------------
# predictive answers carry an error, and it covers the truth


@pytest.mark.parametrize("nodes", [15, 31, 121])
def test_predictive_answers_state_errors_that_cover_the_closed_form(sh, nodes):
    # rate ~ gamma(2, 1), y = 3, 1, 4, 2 ~ poisson(rate): rate | y ~ gamma(12, 5), and a
    # new count is negative binomial(12, 5/6) (gamma-Poisson conjugacy, common practice;
    # scipy.stats.nbinom). Coarse hand-set grids make the sums over the grid err.
    out = run(sh, "digits 12", "param rate positive", "prior rate ~ gamma(2, 1)",
              "data y = 3, 1, 4, 2", "likelihood y ~ poisson(rate)",
              f"grid rate 0.2 8 {nodes}", "compute", "predict ynew ~ poisson(rate)",
              "prob ynew > 4", "mean ynew", "sd ynew")
    d = st.nbinom(12, 5 / 6)
    for prefix, truth in (("P(ynew > 4)", d.sf(4)), ("mean ynew", d.mean()),
                          ("sd ynew", d.std())):
        line = next(ln for ln in out.splitlines() if ln.startswith(prefix))
        got = float(line.split(" = ")[1].split("  (")[0])
        err = float(line.split("(± ")[1].rstrip(")"))
        # the grid is cut at 8 (mass beyond: gamma(12, 5).sf(8), about 6e-8): the stated
        # error must hold that too
        assert abs(got - truth) <= err + 1e-9, (prefix, got, truth, err)
        assert err < 0.05
