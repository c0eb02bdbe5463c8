"""Faults: Ctrl-C during compute, refine and replay; kill -9 in the middle of a save;
saves over files this session did not write; replays of changed data; grids and 2-D
marginals that would not fit in memory.

The Ctrl-C tests run `quadrat` at its prompt on a pseudo-terminal, as a user over SSH
does, wait until the progress bar shows that the computation is under way, send
SIGINT, and then ask questions: the answers must be those from before the command.

The kill -9 test runs a save in a child process whose file writes pause halfway
through (a wrapper that only the test installs, in the child's driver script: the
product has no hook for it), kills the child there with SIGKILL, and checks that the
old session file is whole and still replays.
"""

from __future__ import annotations

import os
import pty
import re
import select
import signal
import subprocess
import sys
import textwrap
import time

import pytest

from shell.app import App
from shell.printer import Printer

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
_ANSI = re.compile(r"\x1b\[[0-?]*[ -/]*[@-~]|\x1b[()][0-9A-Za-z]|\x1b[=>]|\r")
# a normal(1.5, 0.5) posterior: a ~ normal(1.5, 0.5) prior and no data (its mean is 1.5,
# the textbook normal mean; common practice)
SMALL = ["param a real", "param b real", "prior a ~ normal(1.5, 0.5)", "prior b ~ normal(0, 1)",
         "grid a -2 5 61", "grid b -5 5 61", "compute", "mean a"]
#: Axes that make a compute of several seconds (400 million points).
LONG = ["grid a -2 5 20001", "grid b -5 5 20001"]


class Terminal:
    """`quadrat` at its prompt on a pseudo-terminal."""

    def __init__(self, cwd: str):
        env = dict(os.environ, XDG_STATE_HOME=cwd, TERM="xterm", COLUMNS="100", LINES="40",
                   PROMPT_TOOLKIT_NO_CPR="1", PYTHONPATH=ROOT)
        env.pop("NO_COLOR", None)
        self.pid, self.fd = pty.fork()
        if self.pid == 0:  # pragma: no cover - the child
            os.chdir(cwd)
            os.execve(sys.executable, [sys.executable, "-m", "shell.main"], env)
        self.buf = ""
        self.seen = 0

    def text(self) -> str:
        return _ANSI.sub("", self.buf)

    def _read(self, timeout: float) -> None:
        r, _, _ = select.select([self.fd], [], [], timeout)
        if r:
            try:
                data = os.read(self.fd, 65536)
            except OSError:
                return
            self.buf += data.decode(errors="replace")

    def expect(self, pattern: str, timeout: float = 60) -> re.Match:
        """Wait for `pattern` in what was printed since the last match."""
        end = time.monotonic() + timeout
        while True:
            m = re.compile(pattern).search(self.text(), self.seen)
            if m:
                self.seen = m.end()
                return m
            if time.monotonic() > end:
                raise AssertionError(f"no {pattern!r} in {self.text()[self.seen:][-3000:]!r}")
            self._read(0.1)

    def send(self, *lines: str) -> None:
        for line in lines:
            os.write(self.fd, (line + "\r").encode())

    def interrupt_when_busy(self) -> None:
        """SIGINT once the progress bar shows the work under way."""
        self.expect(r"\]\s+\d+%")
        os.kill(self.pid, signal.SIGINT)

    def close(self) -> int:
        try:
            self.send("quit")
            deadline = time.monotonic() + 30
            while time.monotonic() < deadline:
                pid, status = os.waitpid(self.pid, os.WNOHANG)
                if pid:
                    return os.waitstatus_to_exitcode(status)
                self._read(0.1)
            os.kill(self.pid, signal.SIGKILL)
            os.waitpid(self.pid, 0)
            return -9
        finally:
            os.close(self.fd)


@pytest.fixture
def term(tmp_path):
    t = Terminal(str(tmp_path))
    t.expect("quadrat>")
    yield t
    t.close()


def _mean(term) -> str:
    return term.expect(r"mean a = (\S+)").group(1)


def _history(term) -> list[str]:
    """The lines `history` printed (up to the next prompt)."""
    text = term.expect(r"history\s*\n((?:.*\n)*?)quadrat>").group(1)
    return [x.strip() for x in text.splitlines() if re.match(r"\s*\d+  ", x)]


def test_ctrl_c_during_compute_leaves_the_state_as_before(term):
    term.send(*SMALL)
    before = _mean(term)
    assert float(before) == pytest.approx(1.5, abs=1e-4)
    term.send(*LONG, "compute")
    term.interrupt_when_busy()
    term.expect("cancelled: the state is as it was before `compute`")
    # the posterior is still the one on the small grid, and the session goes on
    term.send("show grid")
    term.expect(r"the posterior \(out of date\) was computed on 3,721 points")
    term.send("undo", "undo", "mean a", "history")
    assert _mean(term) == before
    hist = _history(term)
    # the cancelled compute is not in the session, and the undone grids are gone
    assert [h.split("  ", 1)[1] for h in hist] == SMALL + ["mean a"]


def test_ctrl_c_during_refine_leaves_the_state_as_before(term):
    # the faster pass finishes a 4001 x 4001 step in about a second, before the progress
    # bar shows; so start at 4001 x 4001 and interrupt the 8001 x 8001 step
    term.send(*SMALL[:-2], "grid a -2 5 4001", "grid b -5 5 4001", "compute", "mean a")
    before = _mean(term)
    term.send("refine")   # the next step has 8001 x 8001 points
    term.interrupt_when_busy()
    term.expect("cancelled: the state is as it was before `refine`")
    term.send("show grid", "mean a")
    term.expect(r"the posterior \(current\) was computed on 16,008,001 points")
    assert _mean(term) == before


def test_ctrl_c_during_replay_leaves_the_state_as_before(term, tmp_path):
    (tmp_path / "long.qd").write_text("\n".join(SMALL[:-1] + LONG + ["compute", "mean a"]) + "\n")
    term.send("data w = 1, 2, 3", "replay long.qd")
    term.expect(r"computed 3,721 points")   # the replay is under way: its first compute is done
    term.interrupt_when_busy()              # ... and the long one is running
    term.expect("cancelled: the state is as it was before `replay`")
    term.send("show model", "show data", "history")
    term.expect(r"show model\s*\nno model yet")
    term.expect(r"show data\s*\ncolumn .*\nw +3 +typed")
    assert _history(term) == ["1  data w = 1, 2, 3"]


def test_ctrl_c_during_refine_in_python(tmp_path):
    """The engine alone (Workspace.refine), driven from a small script: SIGINT from
    outside during a refinement step leaves the state object untouched."""
    script = textwrap.dedent("""
        import os, signal, sys, threading
        from engine.workspace import Workspace
        ws = Workspace()
        ws.param("a", "real"); ws.param("b", "real")
        ws.prior("a", "normal(1.5, 0.5)"); ws.prior("b", "normal(0, 1)")
        ws.grid("a", -2, 5, 2001); ws.grid("b", -5, 5, 2001)
        ws.compute()
        before, depth = ws.state, len(ws.history)
        def progress(done, total):
            if done > total // 4:
                os.kill(os.getpid(), signal.SIGINT)
        try:
            ws.refine(progress=progress)
            print("finished")
        except KeyboardInterrupt:
            print("interrupted", ws.state is before, len(ws.history) == depth)
    """)
    proc = subprocess.run([sys.executable, "-c", script], capture_output=True, text=True,
                          timeout=300, cwd=ROOT)
    assert proc.stdout.strip() == "interrupted True True", proc.stderr


# ---------------------------------------------------------------------------
# save: atomic, and never over a file this session did not write

_SAVE_DRIVER = textwrap.dedent("""
    import os, sys, time
    import engine.files as E
    from shell.app import App

    real_fdopen = os.fdopen

    class Halfway:
        # writes half of what it is given, says so, then waits to be killed
        def __init__(self, fh):
            self.fh = fh
        def __enter__(self):
            return self
        def __exit__(self, *a):
            return self.fh.__exit__(*a)
        def write(self, data):
            self.fh.write(data[: len(data) // 2])
            self.fh.flush()
            os.fsync(self.fh.fileno())
            print("halfway", flush=True)
            time.sleep(120)
        def __getattr__(self, name):
            return getattr(self.fh, name)

    E.os = type(os)("os_for_the_test")
    E.os.__dict__.update(os.__dict__)
    E.os.fdopen = lambda fd, mode="r", *a, **k: Halfway(real_fdopen(fd, mode, *a, **k))
    import io
    from shell.printer import Printer
    app = App(Printer(io.StringIO(), io.StringIO()))
    for line in sys.argv[1:]:
        app.run(line)
""")


def test_kill_9_in_the_middle_of_save_leaves_the_old_file_whole(tmp_path):
    cmds = ["param p unit", "prior p ~ beta(2, 3)", "data k = 3, 2, 4",
            "likelihood k ~ binomial(10, p)", "grid p 0.001 0.999 41", "mean p"]
    env = dict(os.environ, NO_COLOR="1", XDG_STATE_HOME=str(tmp_path))
    first = subprocess.run([sys.executable, "-m", "shell.main", "-c",
                            "; ".join(cmds + ["save s.qd"])],
                           capture_output=True, text=True, timeout=120, cwd=tmp_path, env=env)
    assert first.returncode == 0, first.stderr
    old = (tmp_path / "s.qd").read_bytes()
    # a second, longer session saved over it, killed with SIGKILL halfway through the write
    more = cmds + [f"note line {i} of a long session" for i in range(20000)] + ["save s.qd"]
    child = subprocess.Popen([sys.executable, "-c", _SAVE_DRIVER, *more], cwd=tmp_path,
                             stdout=subprocess.PIPE, text=True, env=env)
    try:
        assert child.stdout.readline().strip() == "halfway"
        # the kill lands in the middle of the write: half the new text is in the temp file
        (temp,) = [n for n in os.listdir(tmp_path) if n.startswith(".qd-")]
        assert os.path.getsize(tmp_path / temp) > 10 * len(old)
        child.send_signal(signal.SIGKILL)
    finally:
        child.wait(timeout=60)
    assert child.returncode == -signal.SIGKILL
    assert (tmp_path / "s.qd").read_bytes() == old    # whole, byte for byte
    replay = subprocess.run([sys.executable, "-m", "shell.main", "s.qd"], capture_output=True,
                            text=True, timeout=120, cwd=tmp_path, env=env)
    assert replay.returncode == 0, replay.stderr
    assert "replayed `s.qd`: all 1 checks held" in replay.stdout


def _app(tmp_path) -> tuple[App, "io.StringIO"]:
    import io
    err = io.StringIO()
    app = App(Printer(io.StringIO(), err, color=False), log_file=str(tmp_path / "errors.log"))
    app.ws.base_dir = str(tmp_path)
    return app, err


def test_save_does_not_overwrite_a_file_it_did_not_write(tmp_path):
    notes = tmp_path / "notes.qd"
    notes.write_text("my own notes, not a session\n")
    app, err = _app(tmp_path)
    app.run("param p unit")
    assert app.run("save notes.qd") == "error"
    assert err.getvalue() == ("error: column 6: `notes.qd` exists and was not written by `save`; "
                              "`save notes.qd force` overwrites it\n")
    assert notes.read_text() == "my own notes, not a session\n"
    assert app.run("save notes.qd force") == "ok"
    assert notes.read_text().startswith("# quadrat session")
    # a file this session wrote, or one `save` wrote, is overwritten without `force`
    assert app.run("param q unit") == "ok" and app.run("save notes.qd") == "ok"
    other, _ = _app(tmp_path)
    assert other.run("save notes.qd") == "ok"
    # and nothing is left beside it
    assert sorted(os.listdir(tmp_path)) == ["notes.qd"]


def test_replay_refuses_changed_data_naming_both_files(tmp_path):
    (tmp_path / "counts.csv").write_text("n,y\n10,3\n10,2\n")
    app, err = _app(tmp_path)
    for line in ["param p unit", "data load counts.csv", "likelihood y ~ binomial(n, p)",
                 "grid p 0.001 0.999 41", "mean p", "save s.qd"]:
        assert app.run(line) == "ok", err.getvalue()
    (tmp_path / "counts.csv").write_text("n,y\n10,3\n10,9\n")
    fresh, err = _app(tmp_path)
    fresh.run("param x unit")
    before = fresh.ws.state
    assert fresh.run("replay s.qd") == "error"
    line = err.getvalue()
    assert line.startswith("error: `s.qd`: data file `counts.csv` has changed since the session "
                           "was saved (sha256 was ")
    assert line.endswith("; replay with --allow-changed-data to go on\n")
    assert fresh.ws.state is before and [e.text for e in fresh.log] == ["param x unit"]


# ---------------------------------------------------------------------------
# memory: refused before allocation, with the figure

_MEMORY_DRIVER = textwrap.dedent("""
    import resource, sys
    limit = int(sys.argv[1])
    if limit:
        resource.setrlimit(resource.RLIMIT_AS, (limit, limit))
    from shell.main import main
    code = main(["--keep-going", "-c", sys.argv[2]])
    # the high-water mark of this process image (ru_maxrss would carry the parent's
    # over fork and exec)
    with open("/proc/self/status") as fh:
        peak = int(fh.read().split("VmHWM:")[1].split()[0]) * 1024
    print(f"exit {code} peak {peak}", file=sys.stderr)
""")


def _run_limited(tmp_path, limit: int, commands: str) -> tuple[str, int]:
    env = dict(os.environ, NO_COLOR="1", XDG_STATE_HOME=str(tmp_path), OPENBLAS_NUM_THREADS="1")
    proc = subprocess.run([sys.executable, "-c", _MEMORY_DRIVER, str(limit), commands],
                          capture_output=True, text=True, timeout=300, cwd=tmp_path, env=env)
    m = re.search(r"exit (\d+) peak (\d+)", proc.stderr)
    assert m, proc.stderr
    return proc.stderr, int(m.group(2))


GIB = 1 << 30


def test_a_grid_beyond_the_memory_limit_is_refused_before_allocation(tmp_path):
    """Under `ulimit -v` of 1.25 GiB (a shared server's limit), two axes of 10 million
    points need about 1.5 GiB for their nodes and sums alone: refused with the
    figures, with the process's peak memory far below them."""
    err, peak = _run_limited(tmp_path, 5 * GIB // 4, (
        "param a real; param b real; grid a -4 4 10000000; grid b -4 4 10000000; compute"))
    line = [x for x in err.splitlines() if "error:" in x]
    assert len(line) == 1, err
    m = re.search(r"-c command 5: error: this grid \(10\^14 points on axes of "
                  r"10,000,000 x 10,000,000\) needs about ([\d.]+) GiB of memory; quadrat may "
                  r"use 1.2 GiB here: use fewer points", line[0])
    assert m, line[0]
    assert float(m.group(1)) >= 1.2
    assert peak < 0.5 * float(m.group(1)) * GIB


def test_a_joint_marginal_beyond_memory_is_refused_before_allocation(tmp_path):
    """`plot a b` on axes of three million points each: 9 x 10^12 cells, 65.5 TiB."""
    err, peak = _run_limited(tmp_path, 0, (
        "param a real; param b real; prior a ~ normal(0, 1); prior b ~ normal(0, 1); "
        "grid a -4 4 3000000; grid b -4 4 3000000; plot a b"))
    assert ("-c command 7: error: the joint of `a` and `b` (3,000,000 x 3,000,000 = 9 x 10^12 "
            "cells) needs about 65.5 TiB of memory; quadrat may use ") in err, err
    assert peak < 600 * (1 << 20), peak
