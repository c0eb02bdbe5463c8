"""What decides whether a posterior is current, undo, and what-if layers.

A posterior is current when it was computed from the state's own model, data,
grids and rule. Models and data sets carry revision numbers for this, issued
once per new object and never again: unlike ``id()``, which is reused once an
object is freed, a revision cannot make a stale posterior read as current.
"""

from dataclasses import replace

import numpy as np
import pytest

from engine.data import Column, DataSet
from engine.errors import QuadratError
from engine.model import Model, make_param
from engine.state import UNDO_DEPTH, History
from engine.workspace import Workspace


def test_every_new_model_and_data_set_has_a_revision_never_issued_before():
    m = Model()
    m2, _ = m.with_param(make_param("p", "unit"))
    m3 = replace(m2)
    d = DataSet()
    d2, _ = d.with_column(Column("y", np.zeros(2)))
    revs = [m.revision, m2.revision, m3.revision, d.revision, d2.revision]
    assert len(set(revs)) == len(revs)
    # the revision is not part of what a model is: equal content compares equal
    assert m3 == m2 and hash(m3) == hash(m2)
    seen = set(revs)
    for _ in range(500):
        # objects freed at once: their memory (and id) is reused, their revision is not
        r = DataSet().revision
        assert r not in seen
        seen.add(r)


# ---------------------------------------------------------------------------
# History

def test_history_goes_back_one_state_or_to_any_state_it_holds():
    h = History(depth=3)
    first = h.current
    states = [replace(first, rule=r) for r in ("simpson", "midpoint", "gauss", "trapezoid")]
    for s in states:
        h.push(s)
    # held at most `depth` states before the current one: the oldest went
    assert len(h) == 3 and not h.reachable(first) and h.reachable(states[0])
    assert h.pop() is states[2] and h.current is states[2]
    h.restore(states[0])
    assert h.current is states[0] and len(h) == 0
    # a state it no longer holds simply becomes current, the rest untouched
    h.push(states[1])
    h.restore(first)
    assert h.current is first and h.earlier == (states[0],)


def _normal_workspace():
    w = Workspace()
    w.param("mu", "real")
    w.prior("mu", "normal(0, 10)")
    w.data_typed("y", ["1.0", "2.0"])
    w.likelihood("y", "normal(mu, 1)")
    w.grid("mu", -5, 8, 41)
    return w


def test_undo_makes_the_posterior_before_a_change_current_again():
    w = _normal_workspace()
    w.compute()
    post = w.posterior_now
    w.data_typed("y", ["1.5", "2.0"])
    assert w.status().posterior == "out of date"
    assert w.undo().message.startswith("undone")
    assert w.status().posterior == "current" and w.posterior_now is post
    for _ in range(len(w.history)):
        w.undo()
    with pytest.raises(QuadratError, match="nothing to undo"):
        w.undo()
    assert w.model.params == ()


def test_a_stale_posterior_never_reads_as_current_after_many_changes():
    # more changes than the history holds: the states (and their data) that fall
    # off are freed, and new data sets are made in their place
    w = _normal_workspace()
    w.compute()
    for i in range(UNDO_DEPTH + 60):
        w.data_typed("y", [str(1.0 + i * 1e-3), "2.0"])
        assert w.status().posterior == "out of date", i


def test_a_question_that_computes_commits_one_state_and_undo_takes_it_back():
    w = _normal_workspace()
    before, depth = w.state, len(w.history)
    # normal-normal conjugate posterior mean, sum(y) / (n + 1/100) (common practice)
    assert w.mean("mu").values[0] == pytest.approx(3.0 / (2 + 1 / 100), abs=1e-9)
    assert w.posterior_now is not None and len(w.history) == depth + 1
    w.undo()
    assert w.state is before and w.posterior_now is None


def test_a_whatif_layer_gives_back_the_state_and_the_history_as_they_were():
    w = _normal_workspace()
    w.compute()
    before, depth = w.state, len(w.history)
    w.whatif_begin()
    w.data_append("y", ["9.0"])
    w.data_append("y", ["9.5"])
    ans = w.mean("mu")
    # now: y = 1, 2; what if: y = 1, 2, 9, 9.5 (normal-normal conjugate, common practice)
    assert ans.now.values[0] == pytest.approx(3.0 / (2 + 1 / 100), abs=1e-9)
    assert ans.values[0] == pytest.approx(21.5 / (4 + 1 / 100), abs=1e-9)
    w.whatif_end()
    assert w.state is before and len(w.history) == depth
