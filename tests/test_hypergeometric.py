"""The hypergeometric family: a population size N as a whole-number parameter.

The counts are invented for this test (a scenario of our own): 30 animals of a pond
were marked; on three later nights 25, 40 and 20 animals were caught, of which 7, 9
and 5 carried a mark. Each night's catch is taken as a draw without replacement
from the N animals, so the marked count is hypergeometric(N, 30, n).

Reference: the posterior of N summed here over every whole N by exact integer
arithmetic (math.comb), with the flat prior on the declared range; and, for the
family's pmf and survival function, scipy.stats.hypergeom (whose arguments (M, n, N)
are our (N, K, n), in that order).
"""

from __future__ import annotations

import math

import numpy as np
import pytest
import scipy.stats as st
import sympy as sp

from engine import families as fam
from engine.errors import ModelError
from engine.workspace import Workspace

K = 30
CATCH = [25, 40, 20]     # invented
MARKED = [7, 9, 5]       # invented
LO, HI = 30, 1500


def _brute_force():
    logs = []
    for N in range(LO, HI + 1):
        total = 0.0
        ok = True
        for n, x in zip(CATCH, MARKED):
            num = math.comb(K, x) * math.comb(N - K, n - x)
            if num == 0:
                ok = False
                break
            total += math.log(num) - math.log(math.comb(N, n))
        logs.append(total if ok else -math.inf)
    logs = np.array(logs)
    Ns = np.arange(LO, HI + 1)
    top = logs.max()
    w = np.exp(logs - top)
    Z = w.sum()
    p = w / Z
    mean = float(np.sum(Ns * p))
    sd = float(np.sqrt(np.sum((Ns - mean) ** 2 * p)))
    cdf = np.cumsum(p)
    quant = {q: int(Ns[np.searchsorted(cdf, q)]) for q in (0.025, 0.5, 0.975)}
    return dict(log_z=float(top + math.log(Z) - math.log(HI - LO + 1)), mean=mean, sd=sd,
                quant=quant, p300=float(p[Ns > 300].sum()))


@pytest.fixture(scope="module")
def ws():
    w = Workspace()
    w.param("N", "int", lo=LO, hi=HI)
    w.data_typed("K", [str(K)] * 3)
    w.data_typed("n", [str(v) for v in CATCH])
    w.data_typed("x", [str(v) for v in MARKED])
    w.likelihood("x", "hypergeometric(N, K, n)")
    w.compute()
    return w


def test_population_size_posterior_matches_the_exact_sum(ws):
    ref = _brute_force()
    assert ws.evidence().values[0] == pytest.approx(ref["log_z"], abs=1e-10)
    row = {r.name: r for r in ws.summary().rows}["N"]
    assert row.mean.value == pytest.approx(ref["mean"], rel=1e-11)
    assert row.sd.value == pytest.approx(ref["sd"], rel=1e-10)
    assert row.q025.value == ref["quant"][0.025]
    assert row.q50.value == ref["quant"][0.5]
    assert row.q975.value == ref["quant"][0.975]
    assert ws.prob("N > 300").values[0] == pytest.approx(ref["p300"], abs=1e-12)


def test_sizes_too_small_for_the_catch_have_no_mass(ws):
    # a night of 40 caught with 9 marked needs N >= 40 + 30 - 9 = 61 animals
    assert ws.prob("N < 61").values[0] == 0.0


def _compiled(survival=False):
    f = fam.FAMILIES["hypergeometric"]
    x, N, Kk, n = sp.symbols("x N K n", real=True)
    t = (f.logsf if survival else f.logpdf)(x, N, Kk, n)
    fn = sp.lambdify([x, N, Kk, n], t.expr, modules=[fam.S.NAMESPACE, "scipy", "numpy"])
    conds = [sp.lambdify([x, N, Kk, n], c, modules="numpy") for c in t.conds]

    def call(xs, *args):
        xs = np.asarray(xs, float)
        with np.errstate(all="ignore"):
            out = np.broadcast_to(np.asarray(fn(xs, *args), float), xs.shape).copy()
            for c in conds:
                out[~np.broadcast_to(np.asarray(c(xs, *args), bool), xs.shape)] = -np.inf
        return out
    return call


@pytest.mark.parametrize("N, Kk, n", [(20, 7, 5), (200, 150, 120), (5000, 40, 2500),
                                      (60, 0, 10), (60, 60, 10), (37, 12, 37)])
def test_pmf_and_survival_against_scipy(N, Kk, n):
    # scipy.stats.hypergeom(M, n, N): M items, n successes among them, N drawn
    ref = st.hypergeom(N, Kk, n)
    xs = np.arange(-2, min(n, Kk) + 3, dtype=float)
    got = _compiled()(xs, float(N), float(Kk), float(n))
    want = ref.logpmf(xs)
    fin = np.isfinite(want)
    assert np.array_equal(np.isneginf(got), ~fin)
    # scipy's own log-pmf (lgamma differences) is good to about 1e-11 at N = 5000
    # (ours is checked against mpmath in test_extremes.py)
    assert np.allclose(got[fin], want[fin], rtol=1e-10, atol=1e-10)
    lo = max(0, n - (N - Kk))
    pts = xs[xs >= lo]
    gs = _compiled(True)(pts, float(N), float(Kk), float(n))
    ws_ = ref.logsf(pts)
    fin = np.isfinite(ws_)
    assert np.array_equal(np.isneginf(gs), ~fin)
    assert np.allclose(gs[fin], ws_[fin], rtol=1e-10, atol=1e-10)


def test_constraints_are_refused_with_their_rule():
    x = sp.Symbol("x", real=True)
    with pytest.raises(ModelError, match=r"`hypergeometric` needs .*0 <= n <= N.*"
                                         r"here N = 10, K = 4, n = 11"):
        fam.density("hypergeometric", x, (sp.Integer(10), sp.Integer(4), sp.Integer(11)))
    with pytest.raises(ModelError, match=r"here N = 10.5, K = 4, n = 3"):
        fam.density("hypergeometric", x, (sp.Float(10.5), sp.Integer(4), sp.Integer(3)))


def test_help_names_the_parameterisation():
    f = fam.FAMILIES["hypergeometric"]
    assert f.usage() == "hypergeometric(N, K, n)"
    assert "without replacement" in f.help and f.logsf is not None
