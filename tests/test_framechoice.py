"""Which rule `compute` uses when none is set, what `cost` lists, and `refine` on a rule
in the frame, through the shell.

References: the nested Smolyak point counts on the Genz-Keister rules (Genz & Keister
1996 rules; counts by the nested Smolyak formula, Gerstner & Griebel 1998), and
tests/reference_regression.py (the normal regression with an unknown sd: coefficients
integrated in closed form given the sd, the sd by scipy.integrate.quad_vec). Data are
invented (seeded) test inputs.
"""

from __future__ import annotations

import io
import re

import pytest

from reference_regression import exact_reference, invented_case
from shell.app import App
from shell.printer import Printer
from test_framerun import _regression_session


class _Sh:
    def __init__(self, tmp_path):
        self.out, self.err = io.StringIO(), io.StringIO()
        self.app = App(Printer(self.out, self.err, width=160, color=False),
                       log_file=str(tmp_path / "errors.log"))

    def __call__(self, *lines, ok=True):
        for line in lines:
            status = self.app.run(line)
            assert (status == "ok") == ok, (line, self.err.getvalue())
        text = self.out.getvalue() + self.err.getvalue()
        for f in (self.out, self.err):
            f.seek(0)
            f.truncate()
        return text


def _params(sh, d, points=None):
    for i in range(d):
        sh(f"param a{i} real" + (f" points {points}" if points else ""),
           f"prior a{i} ~ normal(0, 1)")


@pytest.mark.parametrize("d,counts", [(2, [1, 5, 21, 65, 173]), (4, [1, 9, 57, 273, 1097]),
                                      (6, [1, 13, 109, 689, 3605]),
                                      (8, [1, 17, 177, 1377, 8785])])
def test_cost_prints_the_sparse_point_counts(tmp_path, d, counts):
    # Genz & Keister 1996 rules, nested Smolyak counts (Gerstner & Griebel 1998)
    sh = _Sh(tmp_path)
    _params(sh, d, points=5)
    out = sh("cost")
    for L, n in enumerate(counts):
        row = re.search(rf"^\s+sparse level {L}\s+([\d,]+)\s", out, re.M)
        assert row is not None, (L, out)
        assert int(row.group(1).replace(",", "")) == n


def test_declared_points_are_costed_and_refused_with_the_figure(tmp_path):
    # 20 parameters at 10 points each: 10^20 points (not sent to `grid auto`)
    sh = _Sh(tmp_path)
    _params(sh, 20, points=10)
    out = sh("cost")
    assert "points 10^20" in out
    assert "10^20 points are more than `compute` will take" in out
    assert "hermite 1         3,486,784,401" in out        # 3^20 + 1^20 nodes
    out = sh("compute", ok=False)
    assert "this grid has 10^20 points: more than quadrat can count" in out


def test_compute_with_no_rule_picks_sparse_past_three_parameters_and_says_why(tmp_path):
    # 6 parameters, near normal: sparse meets 1e-4 of the log evidence
    # (tests/reference_regression.py)
    case = invented_case(5)
    ref = exact_reference(case)
    sh = _regression_session(tmp_path, case)
    out = sh("compute")
    assert "note: rule: sparse, chosen for 6 continuous parameters (past the 3 a tensor grid " \
           "handles cheaply); a moderate skew along `s`" in out
    ev = sh.app.ws.evidence().detail
    assert abs(ev.value - ref.log_evidence) <= 1e-4 * abs(ref.log_evidence)
    assert sh.app.ws.posterior_now.evaluated <= 100_000


def test_refine_raises_the_level_and_shows_what_moved(tmp_path):
    # the regression with 4 coefficients and an unknown sd (tests/reference_regression.py):
    # from sparse level 2 upward the log evidence moves toward the exact value
    case = invented_case(4)
    ref = exact_reference(case)
    sh = _regression_session(tmp_path, case)
    sh("rule sparse level 2", "compute")
    first = sh.app.ws.evidence().detail
    out = sh("refine until 1e-5")
    assert re.search(r"^\s+0\s+\d", out, re.M) and re.search(r"^\s+1\s+\d", out, re.M)
    assert "settled: the largest change was" in out
    assert sh.app.ws.rule_name.startswith("sparse level ")
    last = sh.app.ws.evidence().detail
    assert abs(last.value - ref.log_evidence) < abs(first.value - ref.log_evidence)
    assert abs(last.value - ref.log_evidence) <= 1e-4 * abs(ref.log_evidence)


def test_a_flagged_posterior_in_few_dimensions_goes_to_the_tensor_grid(tmp_path):
    # 3 coefficients and an sd on 12 invented rows: the sd's upper tail is far heavier
    # than a normal's in the frame (a fact of the model: the density of log s falls as
    # exp(-(n - k) log s) at large s), so the choice is the tensor grid, with the figure
    sh = _Sh(tmp_path)
    sh("data x = 0.1, -0.5, 1.2, 0.3, -1.1, 0.8, 0.0, -0.3, 1.5, -0.7, 0.4, 0.9",
       "data z = 1.0, 0.2, -0.4, 0.6, 0.1, -1.2, 0.5, 0.7, -0.2, 0.3, -0.8, 1.1",
       "data y = 1.3, 0.2, 2.1, 1.4, -0.1, 1.0, 1.1, 0.9, 2.4, 0.3, 0.8, 2.2")
    _params(sh, 3)
    sh("param s positive", "prior s ~ half_normal(2)",
       "likelihood y ~ normal(a0 + a1 * x + a2 * z, s)")
    out = sh("compute")
    assert re.search(r"note: rule: tensor grid, because frame axis \d \(mostly `s`\) has a heavy "
                     r"upper tail: the log-density departs from the normal's by [-+][\d.]+ at "
                     r"z = -4 and \+[\d.]+ at z = \+4", out), out
