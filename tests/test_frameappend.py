"""`data append` on a rule in the frame (engine/frameappend.py): the new rows' terms
at the same nodes, or a new frame when the old one no longer fits.

References:
- tests/reference_regression.py: the regression with an unknown sd, coefficients
  integrated in closed form given the sd and the sd by scipy.integrate.quad_vec,
  on all the rows (the first ones and the appended ones);
- the conjugate normal linear model with known sd (common practice, written from
  memory; tests/test_framerun.py), its evidence by scipy.stats.multivariate_normal.
Data are invented (seeded) test inputs.
"""

from __future__ import annotations

import csv

import numpy as np

from engine.workspace import Workspace
from reference_regression import exact_reference, invented_case
from test_framemarg import _s_quantile
from test_framerun import SD, TAU, _known_sd_case, _known_sd_reference


def _write(path, X, y):
    with open(path, "w", newline="") as f:
        w = csv.writer(f)
        w.writerow([f"x{j}" for j in range(1, X.shape[1])] + ["y"])
        for i in range(len(y)):
            w.writerow([repr(float(v)) for v in X[i, 1:]] + [repr(float(y[i]))])


def _workspace(tmp_path, X, y, *, first: int, sd=None, tau=TAU, scale=None) -> Workspace:
    _write(tmp_path / "first.csv", X[:first], y[:first])
    _write(tmp_path / "more.csv", X[first:], y[first:])
    ws = Workspace()
    ws.base_dir = str(tmp_path)
    ws.data_load("first.csv")
    k = X.shape[1]
    for j in range(k):
        ws.param(f"b{j}", "real")
        ws.prior(f"b{j}", f"normal(0, {tau!r})")
    mu = " + ".join(["b0"] + [f"b{j} * x{j}" for j in range(1, k)])
    if sd is None:
        ws.param("s", "positive")
        ws.prior("s", f"half_normal({scale!r})")
    ws.likelihood("y", f"normal({mu}, {'s' if sd is None else repr(sd)})")
    return ws


def test_a_small_batch_updates_the_regression_at_the_same_nodes(tmp_path):
    # 4 coefficients and an unknown sd (5 parameters, the rule `compute` picks): 195
    # rows, then 5 more; the answers against the exact reference on all 200 rows
    case = invented_case(4)
    ws = _workspace(tmp_path, case.X, case.y, first=195, tau=case.tau, scale=case.scale)
    ws.compute()
    before = ws.posterior_now
    ch = ws.data_append_file("more.csv")
    assert any("updated from the new rows alone at the same 8,734 nodes" in n
               for n in ch.notes), ch.notes
    post = ws.posterior_now
    assert post.fits[0].nodes is before.fits[0].nodes     # the very same nodes
    assert ws.status().posterior == "current"
    ref = exact_reference(case)
    ev = ws.evidence().detail
    assert abs(ev.value - ref.log_evidence) <= 1e-4 * abs(ref.log_evidence)
    assert abs(ev.value - ref.log_evidence) <= 2 * ev.error
    for j, name in enumerate(case.names):
        m, s = ws.mean(name).detail, ws.sd(name).detail
        assert abs(m.value - ref.mean[j]) <= 1e-3 * ref.sd[j], name
        assert abs(s.value - ref.sd[j]) <= 1e-3 * ref.sd[j], name
        assert abs(m.value - ref.mean[j]) <= 2 * m.error, name
        assert abs(s.value - ref.sd[j]) <= 2 * s.error, name
    # questions that need the marginals are answered on the updated posterior
    # (the median of s by scipy.integrate.cumulative_trapezoid, tests/test_framemarg.py)
    q = ws.quantile("s", 0.5).detail
    assert abs(q.value - _s_quantile(case, 0.5)) <= 1e-3 * ref.sd[-1]


def test_a_batch_that_moves_the_posterior_re_frames_and_says_so(tmp_path):
    # known sd, 3 coefficients: 40 rows, then 20 whose responses sit 3 higher (so the
    # intercept moves by many posterior sds); the conjugate closed form on all 60 rows
    X, y = _known_sd_case(rows=60)
    y = y.copy()
    y[40:] += 3.0
    ws = _workspace(tmp_path, X, y, first=40, sd=SD)
    ws.rule("sparse", None)
    ws.compute()
    ch = ws.data_append_file("more.csv")
    assert any(n.startswith("re-framed: the posterior moved") and "`b0`" in n
               for n in ch.notes), ch.notes
    ev, m, sd = _known_sd_reference(X, y)
    assert abs(ws.evidence().detail.value - ev) <= 1e-10 * abs(ev)
    for j in range(3):
        assert abs(ws.mean(f"b{j}").detail.value - m[j]) <= 1e-9 * sd[j]
        assert abs(ws.sd(f"b{j}").detail.value - sd[j]) <= 1e-9 * sd[j]


def test_a_batch_past_the_old_nodes_accuracy_is_computed_again(tmp_path):
    # known sd: 57 rows then 3; at the old nodes of a low sparse level the errors pass the
    # targets, so the posterior is computed again (and matches the closed form on 60 rows)
    X, y = _known_sd_case(rows=60)
    ws = _workspace(tmp_path, X, y, first=57, sd=SD)
    ws.rule("sparse", None)
    ws.compute()
    ch = ws.data_append_file("more.csv")
    assert any(n.startswith("re-framed: at the old nodes the error of the") for n in ch.notes), \
        ch.notes
    ev, m, sd = _known_sd_reference(X, y)
    assert abs(ws.evidence().detail.value - ev) <= 1e-10 * abs(ev)
    assert np.allclose([ws.mean(f"b{j}").detail.value for j in range(3)], m, rtol=0,
                       atol=1e-9 * sd.min())
