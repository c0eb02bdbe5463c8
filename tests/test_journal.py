"""The journal: written as the session goes, finished on SIGHUP and SIGTERM, offered at
the next start and restored to the same state and numbers.

The end-to-end tests drive `quadrat` on a pseudo-terminal (Python's pty module), as a
user over SSH would be, and hang it up with SIGHUP (what the kernel sends the shell
when the connection drops) or stop it with SIGTERM, in the middle of a long compute
and of a replay. "Same numbers" is checked by the journal's own check lines (each
answer's numbers at the precision shown) and by asking again after the restore.
"""

from __future__ import annotations

import fcntl
import io
import os
import pty
import re
import select
import signal
import struct
import subprocess
import sys
import termios
import time

import pytest

from shell import journal as J
from shell.app import App
from shell.printer import Printer

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
#: Generous bounds for a loaded machine: waiting this long means something hung.
WAIT = 120

#: A small model (invented numbers) whose questions answer at once; its Cauchy likelihood
#: is summed row by row (it has no sufficient statistics), so a fine grid is slow.
MODEL = ["param a real", "prior a ~ normal(0, 1000)", "data y = 1:400", "param s positive",
         "likelihood y ~ cauchy(a, s)", "prior s ~ gamma(2, 0.01)", "grid a 150 250 41",
         "grid s 50 300 41", "compute", "mean a", "interval s 0.9"]
#: A grid that takes several seconds to compute: the hang-up comes in the middle.
SLOW = ["grid a 150 250 2001", "grid s 50 300 2001", "compute"]
SLOW_SEEN = "s: 50 .. 300, 2001 points"


def app_in(tmp_path, **kw):
    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=100, color=False), log_file=str(tmp_path / "e.log"),
              **kw)
    app.ws.base_dir = str(tmp_path)
    return app, out, err


def journal_of(app, tmp_path, **kw):
    j = J.Journal(str(tmp_path / "journals"), app.printer.warning, **kw)
    app.journal = j
    return j


# ---------------------------------------------------------------------------
# writing

def test_each_command_is_in_the_journal_as_it_happens(tmp_path):
    (tmp_path / "d.csv").write_text("y\n1.2\n0.4\n")
    app, out, err = app_in(tmp_path)
    j = journal_of(app, tmp_path)
    app.run("param a real")
    text = open(j.path).read()
    assert text.startswith(J.HEADER) and text.endswith("\nparam a real\n# now 1 command\n")
    for line in ["prior a ~ normal(0, 10)", "data load d.csv", "likelihood y ~ normal(a, 1)",
                 "grid a -3 5 41", "show model", "mean a", "bogus", "undo"]:
        app.run(line)
    lines = open(j.path).read().splitlines()
    body = [x for x in lines if not x.startswith("# ") and x]
    full = str(tmp_path / "d.csv")
    # a data file by its absolute path, its checksum before it; a question with its
    # check; no `show`, no failed line; the undo as a rewind to 4 entries (of 5)
    assert body[:5] == ["param a real", "prior a ~ normal(0, 10)", f"data load {full}",
                        "likelihood y ~ normal(a, 1)", "grid a -3 5 41"]
    assert body[5] == "mean a" and body[6].startswith("check mean a = ")
    assert len(body) == 7
    assert lines[-2:] == ["# rewind 4", "# now 4 commands"]
    assert re.search(r"^# data \S+d\.csv sha256 [0-9a-f]{64}$", "\n".join(lines), re.M)
    assert os.stat(j.path).st_mode & 0o777 == 0o600
    j.finish()
    assert open(j.path).read().splitlines()[-1].startswith("# ended quit at ")


def test_a_batch_journal_that_ends_as_asked_is_deleted(tmp_path):
    app, _, _ = app_in(tmp_path)
    j = journal_of(app, tmp_path, keep=False)
    app.run("param a real")
    j.finish("quit")
    assert not os.path.exists(j.path)
    j2 = journal_of(app, tmp_path, keep=False)
    app.run("param b real")
    j2.finish("SIGTERM")        # a signal: kept, to be restored
    assert open(j2.path).read().splitlines()[-1].startswith("# ended SIGTERM at ")


def test_a_full_disk_under_the_journal_warns_once_and_the_session_goes_on(tmp_path):
    app, out, err = app_in(tmp_path)
    j = journal_of(app, tmp_path)
    # the journal's descriptor swapped for /dev/full: every write fails with ENOSPC
    os.close(j._fd)
    j._fd = os.open("/dev/full", os.O_WRONLY)
    for line in ["param a real", "param b real", "prior a ~ normal(0, 1)"]:
        assert app.run(line) == "ok"
    assert out.getvalue().count("warning: the journal ") == 1
    assert "cannot be written (No space left on device)" in out.getvalue()
    assert [e.text for e in app.log][-1] == "prior a ~ normal(0, 1)"


def test_retention_prunes_old_journals_and_zero_turns_the_journal_off(tmp_path):
    folder = tmp_path / "quadrat" / "journals"
    env = {"XDG_STATE_HOME": str(tmp_path), "QUADRAT_JOURNAL_DAYS": "2"}
    app, out, _ = app_in(tmp_path)
    old = J.Journal(str(folder), None)
    old.finish("SIGHUP")
    recent = J.Journal(str(folder), None)
    recent.finish("SIGHUP")
    three_days = time.time() - 3 * 86400
    os.utime(old.path, (three_days, three_days))
    j = J.start(app, interactive=True, environ=env)
    assert not os.path.exists(old.path) and os.path.exists(recent.path)
    j.finish()
    app2, out2, _ = app_in(tmp_path)
    assert J.start(app2, interactive=True, environ=dict(env, QUADRAT_JOURNAL_DAYS="0")) is None
    assert app2.journal is None
    app3, out3, _ = app_in(tmp_path)
    J.start(app3, interactive=False, environ=dict(env, QUADRAT_JOURNAL_DAYS="soon")).finish()
    assert "QUADRAT_JOURNAL_DAYS is `soon`; give a number of days >= 0" in out3.getvalue()


# ---------------------------------------------------------------------------
# restoring, in one process

def test_restore_gives_the_same_state_and_numbers(tmp_path):
    app, out, _ = app_in(tmp_path)
    j = journal_of(app, tmp_path)
    for line in MODEL + ["whatif", "data append y = 9", "mean a", "whatif end",
                         "grid a 150 250 81", "undo", "prob a > 200"]:
        assert app.run(line) in ("ok", "checked"), line
    asked = [x for x in out.getvalue().splitlines() if x.startswith(("mean a", "prob a"))]
    j.finish("SIGHUP")
    info = J.info_of(j.path)
    assert info.unexpected and info.ended == "SIGHUP" and info.commands == len(app.log)
    app2, out2, err2 = app_in(tmp_path)
    journal_of(app2, tmp_path)
    assert app2.run(f"journal restore {info.id}") == "ok", err2.getvalue()
    assert [e.text for e in app2.log] == [e.text for e in app.log]
    # every check held: the numbers as shown then are the numbers now
    assert f"restored journal {info.id}: {len(app.log)} commands, all 4 checks held" in \
        out2.getvalue()
    again = [x for x in out2.getvalue().splitlines() if x.startswith(("mean a", "prob a"))]
    assert again == asked
    assert J.info_of(j.path).restored and not J.info_of(j.path).unexpected
    # once restored, it is not offered again
    assert app2.run("reset") == "ok"
    assert "no session ended unexpectedly" in (app2.run("journal restore") and
                                              err2.getvalue())


def test_restore_refuses_a_changed_data_file_and_a_busy_session(tmp_path):
    (tmp_path / "d.csv").write_text("y\n1.2\n0.4\n")
    app, _, _ = app_in(tmp_path)
    j = journal_of(app, tmp_path)
    app.run("data load d.csv")
    j.finish("SIGTERM")
    (tmp_path / "d.csv").write_text("y\n1.2\n0.5\n")
    app2, out2, err2 = app_in(tmp_path)
    journal_of(app2, tmp_path)
    assert app2.run("journal restore") == "error"
    assert "has changed since the session was saved" in err2.getvalue()
    assert "--allow-changed-data` goes on" in err2.getvalue()
    app2.run("param q real")
    assert app2.run("journal restore") == "error"
    assert "`journal restore` starts from an empty session; `reset` first" in err2.getvalue()


# ---------------------------------------------------------------------------
# on a pseudo-terminal, hung up and stopped

class Terminal:
    """`quadrat` on a pseudo-terminal of 100 x 30, its output gathered."""

    def __init__(self, cwd, state, args=()):
        self.master, slave = pty.openpty()
        fcntl.ioctl(slave, termios.TIOCSWINSZ, struct.pack("HHHH", 30, 100, 0, 0))
        env = dict(os.environ, PYTHONPATH=ROOT, XDG_STATE_HOME=str(state), NO_COLOR="1",
                   TERM="xterm", COLUMNS="100")
        env.pop("QUADRAT_JOURNAL_DAYS", None)
        self.proc = subprocess.Popen([sys.executable, "-m", "shell.main", *args], cwd=cwd,
                                     stdin=slave, stdout=slave, stderr=slave, env=env,
                                     start_new_session=True)
        os.close(slave)
        self.raw = ""
        self.text = ""      # the output with escape sequences taken out

    def read(self, seconds=0.2):
        end = time.monotonic() + seconds
        while True:
            left = end - time.monotonic()
            if left <= 0:
                return
            r, _, _ = select.select([self.master], [], [], left)
            if not r:
                return
            try:
                chunk = os.read(self.master, 65536)
            except OSError:
                return
            if not chunk:
                return
            if b"\x1b[6n" in chunk:      # the prompt asks where the cursor is
                os.write(self.master, b"\x1b[1;1R")
            self.raw += chunk.decode("utf-8", "replace")
            self.text = plain(self.raw)

    def wait_for(self, needle, start=0):
        end = time.monotonic() + WAIT
        while needle not in self.text[start:]:
            assert time.monotonic() < end, (needle, self.text[-2000:])
            assert self.proc.poll() is None, (needle, self.text[-2000:])
            self.read(0.2)
        return self.text.index(needle, start)

    def type(self, line, expect=None):
        start = len(self.text)
        os.write(self.master, line.encode() + b"\r")
        if expect is not None:
            self.wait_for(expect, start)
        return start

    def close(self):
        if self.proc.poll() is None:
            self.proc.kill()
        self.proc.wait(WAIT)
        try:
            os.close(self.master)
        except OSError:
            pass


def plain(text: str) -> str:
    """The terminal's text with escape sequences and carriage returns taken out."""
    return re.sub(r"\x1b\[[0-9;?]*[ -/]*[@-~]|\x1b[()][0-9A-Za-z]|\x1b[=>]|\r", "", text)


@pytest.fixture
def term(tmp_path):
    made = []

    def open_(args=()):
        t = Terminal(tmp_path, tmp_path / "state", args)
        made.append(t)
        t.wait_for("quadrat>")
        return t

    yield open_
    for t in made:
        t.close()


def answers(text: str) -> list[str]:
    return re.findall(r"^(?:mean a = .*|a 90% .*|s 90% .*|s: .*interval.*)$", plain(text), re.M)


def restore_and_compare(term, before_hangup: str, expect_commands: int, undo: int = 0):
    t2 = term()
    t2.read(0.5)
    banner = plain(t2.text)
    assert "a session ended unexpectedly by SIGHUP at " in banner, banner
    assert f"after {expect_commands} commands" in banner
    t2.type("journal restore", "restored journal ")
    t2.wait_for("checks held", t2.text.index("restored journal "))
    done = t2.text
    assert f": {expect_commands} commands, all 2 checks held" in done, done[-1500:]
    # and asked again (after undoing the grids the compute was for), the numbers are
    # those shown before the hang-up
    for _ in range(undo):
        t2.type("undo", "undone: ")
    start = t2.type("mean a", "mean a = ")
    at = t2.text.index("mean a = ", start)
    t2.wait_for("\n", at)
    first = [x for x in plain(before_hangup).splitlines() if x.startswith("mean a = ")][0]
    now = t2.text[at:t2.text.index("\n", at)]
    assert now.strip() == first.strip()
    t2.type("quit")
    assert t2.proc.wait(WAIT) == 0


def test_sighup_during_a_compute_then_restore(term):
    t = term()
    for line in MODEL:
        t.type(line, "quadrat>")
    shown = t.text
    for line in SLOW[:2]:
        t.type(line, "grid replaced")
    t.type(SLOW[2])
    time.sleep(1.5)             # well inside a compute of several seconds
    assert t.proc.poll() is None, plain(t.text)[-500:]
    t.proc.send_signal(signal.SIGHUP)
    assert t.proc.wait(WAIT) == 128 + signal.SIGHUP
    # the two grids are in the journal; the compute they were in the middle of is not
    restore_and_compare(term, shown, len(MODEL) + 2, undo=2)


def test_sighup_during_a_replay_then_restore(term, tmp_path):
    (tmp_path / "slow.qd").write_text("# invented: a long replay\n" + "\n".join(MODEL + SLOW)
                                      + "\n")
    t = term()
    for line in MODEL:
        t.type(line, "quadrat>")
    shown = t.text
    t.type("replay slow.qd", "grid replaced: " + SLOW_SEEN)
    time.sleep(1.5)
    assert t.proc.poll() is None, plain(t.text)[-500:]
    t.proc.send_signal(signal.SIGHUP)
    assert t.proc.wait(WAIT) == 128 + signal.SIGHUP
    # the replay had not finished: the session is restored as it was before it
    restore_and_compare(term, shown, len(MODEL))


def test_sigterm_during_a_batch_run_keeps_its_journal(tmp_path):
    (tmp_path / "run.qd").write_text("# invented\n" + "\n".join(MODEL + SLOW) + "\n")
    env = dict(os.environ, PYTHONPATH=ROOT, XDG_STATE_HOME=str(tmp_path / "state"),
               NO_COLOR="1")
    proc = subprocess.Popen([sys.executable, "-m", "shell.main", "run.qd"], cwd=tmp_path,
                            stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env, text=True)
    seen = ""
    end = time.monotonic() + WAIT
    while SLOW_SEEN not in seen:
        assert time.monotonic() < end and proc.poll() is None, seen
        seen += proc.stdout.readline()
    time.sleep(1.5)
    proc.send_signal(signal.SIGTERM)
    assert proc.wait(WAIT) == 128 + signal.SIGTERM
    err = proc.stderr.read()
    assert "quadrat: ended by SIGTERM; `journal restore` in the next `quadrat` brings the " \
           "session back" in err
    (info,) = J.scan(str(tmp_path / "state" / "quadrat" / "journals"))
    assert info.ended == "SIGTERM" and info.unexpected
    assert info.commands == len(MODEL) + 2
