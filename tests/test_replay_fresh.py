"""`replay` runs a file in a fresh workspace unless told to merge, and says which;
`reset` says what it drops; `keep` alone lists the kept models.

The one number checked, the posterior mean 11/35 of p after beta(2, 3) and 9 successes
in 30 trials, is beta-binomial conjugacy (common practice).
"""

from __future__ import annotations

import io

import pytest

from shell.app import App
from shell.printer import Printer

FILE = """# invented: a two-parameter session in a file
param p unit
prior p ~ beta(2, 3)
data k = 3, 2, 4
likelihood k ~ binomial(10, p)
grid p 0.001 0.999 201
mean p
"""


@pytest.fixture
def sh(tmp_path):
    (tmp_path / "f.qd").write_text(FILE)
    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=100, color=False), log_file=str(tmp_path / "e.log"))
    app.ws.base_dir = str(tmp_path)

    def run(*lines):
        for s in (out, err):
            s.seek(0)
            s.truncate()
        status = [app.run(x) for x in lines]
        return status[-1], out.getvalue(), err.getvalue()
    run.app = app
    return run


def test_replay_sets_the_session_aside_and_undo_brings_it_back(sh):
    sh("param m real", "param s positive", "prior m ~ normal(0, 1)", "prior s ~ gamma(2, 1)",
       "keep first")
    status, out, err = sh("replay f.qd")
    assert status == "ok", err
    assert "note: replaying `f.qd` in a fresh workspace; `replay f.qd merge` would add it" in out
    assert "reset: dropped 2 parameters (`m`, `s`), 2 priors, the posterior, 1 kept model " \
           "(`first`) (`undo` brings them back)" in out
    # only the file's parameter: the old ones do not multiply the grid
    assert [p.name for p in sh.app.ws.model.params] == ["p"]
    assert "mean p = 0.314286" in out
    assert [e.text for e in sh.app.log][5:7] == ["reset", "param p unit"]
    sh("undo", "undo", "undo", "undo", "undo")   # the file's five changes
    status, out, _ = sh("undo")                  # the reset
    assert [p.name for p in sh.app.ws.model.params] == ["m", "s"]
    assert [k.name for k in sh.app.ws.keeps] == ["first"]


def test_replay_merge_adds_to_the_session(sh):
    sh("param m real", "prior m ~ normal(0, 1)")
    status, out, err = sh("replay f.qd merge")
    assert status == "ok", err
    assert "note: replaying `f.qd` on top of the current session (merge)" in out
    assert [p.name for p in sh.app.ws.model.params] == ["m", "p"]


def test_an_empty_session_replays_without_a_reset(sh):
    status, out, _ = sh("replay f.qd")
    assert status == "ok" and "fresh workspace" not in out and "reset:" not in out
    assert [e.text for e in sh.app.log][0] == "param p unit"


def test_reset_says_what_it_drops(sh):
    status, out, _ = sh("reset")
    assert out == "reset: nothing to drop, the session was empty\n"
    sh("param p unit", "data k = 1, 2", "let q = p / 2")
    status, out, _ = sh("reset")
    assert out == ("reset: dropped 1 parameter (`p`), 1 let, 1 data column (`undo` brings "
                   "them back)\n")


def test_keep_alone_lists_the_kept_models_and_changes_nothing(sh):
    status, out, _ = sh("keep")
    assert status == "ok" and out == "no kept models; `keep NAME` keeps the current one\n"
    sh("replay f.qd", "keep one", "prior p ~ beta(1, 1)", "keep flat")
    log = [e.text for e in sh.app.log]
    status, out, _ = sh("keep")
    lines = out.splitlines()
    assert lines[0] == "2 kept models:"
    assert lines[1].startswith("  one: log evidence ") and lines[2].startswith("  flat: ")
    assert "on 201 points; data " in lines[1]
    assert [e.text for e in sh.app.log] == log        # not logged: `undo` passes it by
