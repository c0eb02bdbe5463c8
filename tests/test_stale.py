"""A changed model or data set re-sizes the grid quadrat sized for the old ones, and
predictive distributions are made once per prediction and posterior.

Reference: the normal mean with known sd 1 under a normal(0, 10) prior has the
normal posterior with precision 1/100 + n and mean sum(y) / (1/100 + n) (the
conjugate update, a standard result written from memory). The data are invented.
"""

from __future__ import annotations

import math

import pytest

from engine import asking
from engine.workspace import Workspace

NEAR_0 = [0.3, -0.4, 0.9, 0.1, -0.2]
NEAR_50 = [50.3, 49.1, 51.2, 50.7, 49.8, 50.4]


def _closed(y):
    prec = 1 / 100 + len(y)
    return sum(y) / prec, 1 / math.sqrt(prec)


def _ws(y) -> Workspace:
    ws = Workspace()
    ws.param("mu", "real")
    ws.prior("mu", "normal(0, 10)")
    ws.data_typed("y", [str(v) for v in y])
    ws.likelihood("y", "normal(mu, 1)")
    return ws


def test_compute_after_the_data_change_does_not_reuse_the_grid_auto_sized_before():
    ws = _ws(NEAR_0)
    ws.grid_auto()
    ws.data_typed("y", [str(v) for v in NEAR_50])
    rep = ws.compute()
    assert any("the data changed since `grid auto` sized the grid of `mu`: sized again" in n
               for n in rep.notes)
    m, s = _closed(NEAR_50)
    assert ws.mean("mu").values[0] == pytest.approx(m, abs=1e-8)
    assert ws.sd("mu").values[0] == pytest.approx(s, rel=1e-8)
    # sized once: the next compute has nothing to say about it
    assert not any("changed since" in n for n in ws.compute().notes)


def test_refine_after_the_data_change_refines_a_fresh_grid():
    ws = _ws(NEAR_0)
    ws.compute()
    ws.refine()
    ws.data_typed("y", [str(v) for v in NEAR_50])
    rep = ws.refine()
    assert any("the data changed since `refine` sized the grid of `mu`" in n for n in rep.notes)
    m, s = _closed(NEAR_50)
    assert ws.mean("mu").values[0] == pytest.approx(m, abs=1e-8)
    assert ws.sd("mu").values[0] == pytest.approx(s, rel=1e-8)


def test_a_changed_prior_re_sizes_too_but_a_typed_grid_is_the_users():
    ws = _ws(NEAR_0)
    ws.grid_auto()
    ws.prior("mu", "normal(0, 2)")
    rep = ws.compute()
    assert any("the model changed since `grid auto`" in n for n in rep.notes)
    ws.grid("mu", -3, 3, 101)
    ws.data_typed("y", [str(v) for v in NEAR_50[:2]])
    rep = ws.compute()
    assert not any("changed since" in n for n in rep.notes)
    ax = ws.posterior_now.grid.axis("mu")
    assert (ax.lo, ax.hi, ax.n) == (-3, 3, 101)


def test_a_let_the_density_does_not_read_keeps_the_sized_grid():
    ws = _ws(NEAR_0)
    ws.grid_auto()
    ws.compute()
    ws.let("twice", "2 * mu")
    assert ws.status().posterior == "current"
    assert not any("changed since" in n for n in ws.compute().notes)


def test_a_prediction_is_made_once_and_shared_by_its_questions(monkeypatch):
    made = []
    real = asking.predictive

    def counted(*args, **kwargs):
        made.append(args[1])
        return real(*args, **kwargs)

    monkeypatch.setattr(asking, "predictive", counted)
    ws = _ws(NEAR_0)
    ws.compute()
    ws.predict("ynew", "normal(mu, 1)")
    mean, sd = ws.mean("ynew"), ws.sd("ynew")
    q = ws.quantile("ynew", 0.95)
    p = ws.prob("ynew > 1")
    iv = ws.interval("ynew", 0.9)
    assert made == ["ynew"]
    # the predictive of a normal mean is normal with variance 1 + s^2 (conjugate, from memory)
    m, s = _closed(NEAR_0)
    sdp = math.sqrt(1 + s * s)
    assert mean.values[0] == pytest.approx(m, abs=1e-6)
    assert sd.values[0] == pytest.approx(sdp, rel=1e-6)
    assert iv.detail.hi == pytest.approx(q.values[0], rel=1e-9)
    assert 0 < p.values[0] < 1
    # new data: a new posterior, so a new predictive, made once again
    ws.data_typed("y", [str(v) for v in NEAR_0 + [0.5]])
    ws.mean("ynew")
    ws.quantile("ynew", 0.5)
    assert made == ["ynew", "ynew"]
