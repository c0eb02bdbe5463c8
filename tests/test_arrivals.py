"""Data arriving in batches: appends, what-if, prediction, sample size, model
comparison and censored rows (engine level).

References: scipy.stats (betabinom, gamma, weibull_min, norm) and scipy.special for
closed forms; conjugate updating formulas are common practice; the sample-size
criterion is the average length criterion of Joseph, Wolfson and du Berger (1995),
which for a normal mean with known sd reduces to a width that depends on n alone.
"""

import math

import numpy as np
import pytest
import scipy.special as sc
import scipy.stats as st

from engine.errors import ComputeError, DataError, ModelError
from engine.workspace import Workspace


def bernoulli_ws(values):
    w = Workspace()
    w.param("p", "unit")
    w.prior("p", "beta(2, 3)")
    w.data_typed("k", [str(v) for v in values])
    w.likelihood("k", "bernoulli(p)")
    w.grid("p", 0.001, 0.999, 201)
    return w


def test_sequential_equals_batch_updating():
    first, second = [1, 0, 1, 1], [0, 0, 1, 0, 1, 1, 1]
    w = bernoulli_ws(first)
    w.compute()
    ch = w.data_append("k", [str(v) for v in second])
    assert "updated from the new rows alone" in " ".join(ch.notes)
    batch = bernoulli_ws(first + second)
    batch.compute()
    a, b = w.state.posterior, batch.state.posterior
    assert np.max(np.abs(a.marginals["p"].mass - b.marginals["p"].mass)) < 1e-12
    assert a.log_evidence.value == pytest.approx(b.log_evidence.value, abs=1e-12)
    assert a.param_mean("p").value == pytest.approx(b.param_mean("p").value, abs=1e-12)
    # and both are the conjugate answer: beta(2 + 7, 3 + 4) (common practice)
    assert a.param_mean("p").value == pytest.approx(st.beta(9, 7).mean(), abs=1e-9)


def test_append_that_moves_the_mass_resizes_the_grid():
    w = Workspace()
    w.param("mu", "real")
    w.prior("mu", "normal(0, 10)")
    w.data_typed("y", ["0.1", "-0.2", "0.3"])
    w.likelihood("y", "normal(mu, 1)")
    w.compute()
    ch = w.data_append("y", ["9.8", "10.1", "10.3", "9.9", "10.2"] * 4)
    assert any("grid re-sized" in n for n in ch.notes)
    # normal-normal conjugate posterior (common practice)
    y = np.array([0.1, -0.2, 0.3] + [9.8, 10.1, 10.3, 9.9, 10.2] * 4)
    prec = 1 / 100 + len(y)
    assert w.mean("mu").values[0] == pytest.approx(y.sum() / prec, abs=1e-8)


def test_columns_of_unequal_length_are_named_until_they_agree():
    w = Workspace()
    w.param("a", "real")
    w.param("b", "real")
    w.prior("a", "normal(0, 5)")
    w.prior("b", "normal(0, 5)")
    w.data_typed("x", ["1", "2", "3"])
    w.data_typed("y", ["1.1", "2.3", "2.9"])
    w.likelihood("y", "normal(a + b*x, 0.5)")
    w.compute()
    ch = w.data_append("x", ["4"])
    assert any("`x` 4 rows, `y` 3 rows" in n for n in ch.notes)
    with pytest.raises(DataError, match=r"`x` 4 rows, `y` 3 rows"):
        w.mean("b")
    w.data_append("y", ["4.2"])
    assert w.mean("b").values[0] == pytest.approx(1.0, abs=0.2)


def test_whatif_answers_side_by_side_and_changes_nothing():
    w = bernoulli_ws([1, 0, 1])
    w.compute()
    before = (w.mean("p").values, w.interval("p").values, w.prob("p > 0.5").values,
              w.state.data.get("k").rows)
    post_before = w.state.posterior
    w.whatif_begin()
    assert w.status().whatif
    w.data_append("k", ["1"] * 20)
    ans = w.mean("p")
    # now: beta(2+2, 3+1); what-if: beta(2+22, 3+1) (conjugate updating, common practice)
    assert ans.now.values[0] == pytest.approx(st.beta(4, 4).mean(), abs=1e-9)
    assert ans.values[0] == pytest.approx(st.beta(24, 4).mean(), abs=1e-9)
    w.whatif_end()
    assert not w.status().whatif
    after = (w.mean("p").values, w.interval("p").values, w.prob("p > 0.5").values,
             w.state.data.get("k").rows)
    assert after == before
    assert w.state.posterior is post_before


def test_predictive_of_binomial_is_beta_binomial():
    # p ~ beta(2+5, 3+4) after 5 of 9; a new binomial(10, p) is
    # beta-binomial(10, 7, 7): scipy.stats.betabinom
    w = bernoulli_ws([1, 1, 0, 1, 0, 1, 0, 1, 0])
    w.compute()
    ans = w.predict("y", "binomial(10, p)")
    ref = st.betabinom(10, 7, 7)
    pv = ans.detail.predictive
    pm = np.array([pv.pmf(v) for v in range(11)])
    assert np.max(np.abs(pm - ref.pmf(np.arange(11)))) < 1e-9
    assert ans.values[0] == pytest.approx(ref.mean(), abs=1e-9)
    assert ans.values[1] == pytest.approx(ref.std(), abs=1e-9)
    assert w.prob("y >= 7").values[0] == pytest.approx(ref.sf(6), abs=1e-9)
    assert w.prob("y == 3").values[0] == pytest.approx(ref.pmf(3), abs=1e-9)
    assert w.prob("2 <= y <= 4").values[0] == pytest.approx(ref.cdf(4) - ref.cdf(1), abs=1e-9)
    assert w.quantile("y", 0.5).values[0] == ref.median()


def test_predict_refuses_data_columns_in_its_arguments():
    w = bernoulli_ws([1, 0])
    with pytest.raises(ModelError, match="unknown name `k`|`k` is a data column"):
        w.predict("y", "binomial(k, p)")


def test_bayes_factor_of_conjugate_binomial_models():
    # evidence of k of n under p ~ beta(a, b): C(n,k) B(a+k, b+n-k) / B(a, b)
    # (beta-binomial marginal likelihood, common practice; scipy.special.betaln)
    def logz(a, b, k=7, n=20):
        return math.log(sc.comb(n, k)) + sc.betaln(a + k, b + n - k) - sc.betaln(a, b)

    w = Workspace()
    w.param("p", "unit")
    w.prior("p", "beta(1, 1)")
    w.data_typed("k", ["7"])
    w.data_typed("n", ["20"])
    w.likelihood("k", "binomial(n, p)")
    w.keep("flat")
    w.prior("p", "beta(5, 5)")
    w.keep("centred")
    c = w.compare("flat", "centred")
    assert c.log_bf.value == pytest.approx(logz(1, 1) - logz(5, 5), abs=1e-8)
    assert c.log_bf.error is not None and c.log_bf.error < 1e-8
    assert c.bayes_factor == pytest.approx(math.exp(logz(1, 1) - logz(5, 5)), rel=1e-7)


def test_compare_refuses_improper_and_different_data():
    w = Workspace()
    w.param("mu", "real")
    w.data_typed("y", ["1", "2"])
    w.likelihood("y", "normal(mu, 1)")
    w.keep("flat")
    w.prior("mu", "normal(0, 1)")
    w.keep("proper")
    with pytest.raises(ComputeError, match="`flat` has no evidence"):
        w.compare("flat", "proper")
    w.data_append("y", ["3"])
    w.keep("more")
    with pytest.raises(ComputeError, match="different data"):
        w.compare("proper", "more")


def test_wide_prior_caution():
    w = Workspace()
    w.param("mu", "real")
    w.prior("mu", "normal(0, 1000)")
    w.data_typed("y", ["1.0", "1.2", "0.9", "1.1"])
    w.likelihood("y", "normal(mu, 0.1)")
    w.keep("wide")
    w.prior("mu", "normal(0, 2)")
    w.keep("narrow")
    c = w.compare("wide", "narrow")
    assert any("times wider than its posterior" in n for n in c.notes)


def test_right_censored_exponential_with_gamma_prior():
    # rate ~ gamma(a, b); exponential lifetimes, right-censored where flag = 1:
    # posterior gamma(a + failures, b + total time on test) (common practice)
    t = [5.0, 12.0, 3.0, 20.0, 8.0, 15.0, 20.0, 20.0, 1.5]
    f = [0, 0, 0, 1, 0, 0, 1, 1, 0]
    w = Workspace()
    w.param("rate", "positive")
    w.prior("rate", "gamma(2, 10)")
    w.data_typed("t", [str(v) for v in t])
    w.data_typed("c", [str(v) for v in f])
    w.likelihood("t", "exponential(rate)", "c")
    ref = st.gamma(2 + f.count(0), scale=1 / (10 + sum(t)))
    assert w.mean("rate").values[0] == pytest.approx(ref.mean(), rel=1e-9)
    assert w.sd("rate").values[0] == pytest.approx(ref.std(), rel=1e-7)
    assert w.quantile("rate", 0.975).values[0] == pytest.approx(ref.ppf(0.975), rel=1e-7)


def test_censored_weibull_matches_scipy_logsf():
    # the censored rows contribute log S(t) = scipy.stats.weibull_min.logsf
    t = np.array([3.1, 7.4, 2.2, 9.0, 9.0, 5.5])
    f = np.array([0, 0, 0, 1, 1, 0])
    w = Workspace()
    w.param("k", "positive")
    w.param("lam", "positive")
    w.data_typed("t", [str(v) for v in t])
    w.data_typed("c", [str(v) for v in f])
    w.likelihood("t", "weibull(k, lam)", "c")
    c = w.compiled()
    rng = np.random.default_rng(5)
    k = rng.uniform(0.5, 3, 50)
    lam = rng.uniform(2, 12, 50)
    got = c.log_likelihood([k, lam])
    ref = np.array([st.weibull_min(a, scale=b).logpdf(t[f == 0]).sum()
                    + st.weibull_min(a, scale=b).logsf(t[f == 1]).sum() for a, b in zip(k, lam)])
    assert np.max(np.abs(got - ref)) < 1e-9


def test_samplesize_normal_mean_known_sd_matches_closed_form():
    # mu ~ normal(0, 10), y ~ normal(mu, 2), 4 rows so far. After n more rows the
    # posterior sd is 1/sqrt(1/tau^2 + n/4) with tau the current posterior sd, and the
    # 95% central width 2 * 1.96 * that sd depends on n alone (common practice);
    # scipy.stats.norm.ppf gives the 1.96.
    w = Workspace()
    w.param("mu", "real")
    w.prior("mu", "normal(0, 10)")
    w.data_typed("y", ["1.2", "0.4", "2.2", "1.7"])
    w.likelihood("y", "normal(mu, 2)")
    res = w.samplesize("mu", 1.0, sims=50).detail
    z = st.norm.ppf(0.975)
    tau2 = 1 / (1 / 100 + 4 / 4)
    want = next(n for n in range(1, 10_000) if 2 * z / math.sqrt(1 / tau2 + n / 4) <= 1.0)
    assert abs(res.n - want) <= max(1, 3 * res.mc_error)
    assert res.mc_error < 1e-6
    assert res.width <= 1.0


def test_samplesize_needs_using_when_ambiguous():
    w = Workspace()
    w.param("p", "unit")
    w.data_typed("k", ["3"])
    w.data_typed("n", ["10"])
    w.likelihood("k", "binomial(n, p)")
    with pytest.raises(ModelError, match="using COL ~ FAMILY"):
        w.samplesize("p", 0.1)
    res = w.samplesize("p", 0.2, using="k ~ bernoulli(p)", sims=40).detail
    assert res.n is not None and res.n > 0
    assert res.width <= 0.2


@pytest.mark.parametrize("a,b", [("s0", "s2"), ("t0", "t1"), ("c0", "c1"), ("s1", "c0")])
def test_parameter_names_like_internal_placeholders(a, b):
    # compiled code uses internal placeholder names; user names must never collide
    # (reference: scipy.stats.norm.logpdf summed over the rows)
    w = Workspace()
    w.param(a, "real")
    w.param(b, "positive")
    w.data_typed("y", ["1.0", "2.0", "0.5"])
    w.likelihood("y", f"normal({a}, sqrt({b}))")
    c = w.compiled()
    for m, v in [(0.9, 3.0), (0.1, 4.0), (2.0, 0.5)]:
        got = c.log_likelihood([np.array([m]), np.array([v])])[0]
        ref = st.norm(m, math.sqrt(v)).logpdf([1.0, 2.0, 0.5]).sum()
        assert got == pytest.approx(ref, abs=1e-12)


def test_whatif_question_about_a_name_declared_in_the_layer():
    # the "now" side has no such name: the question still answers what-if, and says so
    w = bernoulli_ws([1, 0, 1])
    w.compute()
    w.whatif_begin()
    w.let("odds", "p / (1 - p)")
    ans = w.mean("odds")
    assert ans.now is None
    assert any("no answer as things are" in n for n in ans.notes)
    # p ~ beta(4, 4) here; E[p/(1-p)] = a/(b-1) for a beta(a, b) (common practice)
    assert ans.values[0] == pytest.approx(4 / 3, abs=1e-6)
    assert abs(ans.values[0] - 4 / 3) <= ans.errors[0] + 1e-12
    w.whatif_end()


def test_a_let_keeps_the_posterior_unless_the_density_reads_it():
    # a derived quantity asked about needs no new computation; one the likelihood
    # reads does. E[p/(1-p)] under beta(4, 4) is 4/3 (a/(b-1), common practice)
    w = bernoulli_ws([1, 0, 1])
    w.compute()
    post = w.state.posterior
    w.let("odds", "p / (1 - p)")
    assert w.status().posterior == "current" and w.state.posterior.logp is post.logp
    assert w.mean("odds").values[0] == pytest.approx(4 / 3, abs=1e-6)
    w2 = Workspace()
    w2.param("p", "unit")
    w2.let("q", "p")
    w2.data_typed("k", ["1", "0"])
    w2.likelihood("k", "bernoulli(q)")
    w2.compute()
    w2.let("q", "p * 0.5")
    assert w2.status().posterior == "out of date"


def _normal_mean_workspace() -> Workspace:
    w = Workspace()
    w.param("mu", "real")
    w.prior("mu", "normal(0, 10)")
    w.data_typed("y", ["1.2", "0.4", "2.2", "1.7"])
    w.likelihood("y", "normal(mu, 2)")
    w.compute()
    return w


def test_samplesize_reports_progress_per_simulation_against_a_total():
    w = _normal_mean_workspace()
    calls = []
    res = w.samplesize("mu", 1.0, sims=20, progress=lambda d, t: calls.append((d, t))).detail.search
    assert res.n is not None
    # one report a simulation of every n tried, counting up, never past its total
    assert len(calls) == 20 * len(res.steps)
    assert all(b[0] > a[0] for a, b in zip(calls, calls[1:]))
    assert all(0 <= d < t for d, t in calls)


def test_samplesize_stops_at_the_time_budget_and_keeps_the_steps_so_far():
    w = _normal_mean_workspace()
    w.budget_seconds = 1e-6     # the first step always runs; the next cannot fit
    res = w.samplesize("mu", 0.01, sims=20).detail.search
    assert res.n is None and res.stopped
    assert len(res.steps) == 1 and res.steps[0].n == 1
    assert "past the time budget" in res.message and "budget SECONDS" in res.message
