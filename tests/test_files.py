"""Files: one bounded, regular-file-only reader; one atomic writer; replays that
write new files only; links, pipes, devices, long names; closed pipes and full disks.

The checksums are compared with hashlib's SHA-256 (Python's standard library, FIPS
180-4). Device and pipe behaviour is POSIX's: reading /dev/zero never ends, opening
a pipe with no writer blocks unless opened without blocking (common practice).
"""

from __future__ import annotations

import hashlib
import io
import os
import socket
import subprocess
import sys
import threading
import time

import pytest
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput

from engine.errors import FileError
from engine.files import atomic_write, read_bytes, read_text, sha256_of, write_target
from shell.app import App
from shell.printer import Printer
from shell.repl import KeptHistory, Repl

ROOT = os.path.dirname(os.path.dirname(os.path.abspath(__file__)))
#: Generous bound on a subprocess that must end at once: a hang waits for ever.
HANG = 120


def run_quadrat(args, cwd, *, input=None, tmp_state=None):
    env = dict(os.environ, NO_COLOR="1", PYTHONPATH=ROOT,
               XDG_STATE_HOME=str(tmp_state or cwd))
    return subprocess.run([sys.executable, "-m", "shell.main", *args], input=input,
                          capture_output=True, text=True, timeout=HANG, cwd=cwd, env=env)


def errors(text: str) -> list[str]:
    return [x for x in text.splitlines() if "error: " in x]


# ---------------------------------------------------------------------------
# reading

def test_the_reader_refuses_devices_pipes_sockets_and_folders(tmp_path):
    fifo = tmp_path / "p.csv"
    os.mkfifo(fifo)
    with pytest.raises(FileError, match=r"`p.csv` is a pipe \(FIFO\), not a regular file; "
                                        "quadrat reads CSV files from regular files only"):
        read_bytes(str(fifo), shown="p.csv", what="CSV file")
    for dev in ("/dev/zero", "/dev/urandom"):
        with pytest.raises(FileError, match=f"`{dev}` is a device, not a regular file"):
            read_bytes(dev)
        with pytest.raises(FileError, match="is a device"):
            sha256_of(dev)
    with pytest.raises(FileError, match=r"`/dev/stdin` is a (device|pipe)"):
        sha256_of("/dev/stdin")
    sock_path = str(tmp_path / "s.qd")
    srv = socket.socket(socket.AF_UNIX)
    try:
        srv.bind(sock_path)
        with pytest.raises(FileError, match="is a socket, not a regular file"):
            read_text(sock_path, what="session file")
    finally:
        srv.close()
    with pytest.raises(FileError, match="is a folder, not a session file"):
        read_text(str(tmp_path), shown="here", what="session file")


def test_the_reader_bounds_size_and_checks_utf8(tmp_path):
    f = tmp_path / "a.csv"
    f.write_bytes(b"x\n" * 600)
    with pytest.raises(FileError, match=r"file `a.csv` is 1,200 bytes; a CSV file may have "
                                        r"at most 1,000 bytes"):
        read_bytes(str(f), shown="a.csv", what="CSV file", limit=1000)
    with pytest.raises(FileError, match="larger than 1,000 bytes"):
        sha256_of(str(f), limit=1000)
    assert len(read_bytes(str(f), limit=1200)) == 1200
    f.write_bytes(b"ok\nstill ok\n\xff\xfe\n")
    with pytest.raises(FileError, match=r"file `a.csv` line 3: not UTF-8 text"):
        read_text(str(f), shown="a.csv")
    f.write_bytes(b"a\nb\x00\n")
    with pytest.raises(FileError, match=r"line 2 holds a NUL byte; it is not a session file"):
        read_text(str(f), shown="a.csv", what="session file")
    f.write_bytes("\ufeffh\u00e9\n".encode())
    assert read_text(str(f))[0] == "h\u00e9\n"


def test_sha256_is_that_of_the_bytes(tmp_path):
    f = tmp_path / "d.csv"
    data = os.urandom(3 << 20)  # more than one chunk
    f.write_bytes(data)
    # hashlib's SHA-256 of the same bytes
    assert sha256_of(str(f)) == hashlib.sha256(data).hexdigest()


def test_checksum_headers_naming_devices_and_pipes_end_in_one_line(tmp_path):
    """A session whose header names /dev/zero, /dev/urandom, /dev/stdin or a pipe ends
    before its first command with one error line (it used to read for ever)."""
    os.mkfifo(tmp_path / "pipe")
    zeros = "0" * 64
    for target in ("/dev/zero", "/dev/urandom", "/dev/stdin", "pipe"):
        (tmp_path / "s.qd").write_text(f"# data {target} sha256 {zeros}\nparam p unit\n")
        t0 = time.monotonic()
        proc = run_quadrat(["s.qd"], tmp_path, input="")
        took = time.monotonic() - t0
        assert proc.returncode == 2, proc.stderr
        (line,) = errors(proc.stderr)
        assert f"`{target}` is a" in line and "not a regular file" in line, line
        assert "nothing was replayed" in line and proc.stdout == ""
        print(f"checksum header {target}: ended in {took:.2f} s")


# ---------------------------------------------------------------------------
# writing

def test_atomic_write_through_a_link_and_long_names(tmp_path):
    real = tmp_path / "real.qd"
    real.write_text("old\n")
    os.chmod(real, 0o640)
    link = tmp_path / "link.qd"
    link.symlink_to("real.qd")
    atomic_write(str(link), "new\n")
    assert os.path.islink(link) and real.read_text() == "new\n"
    assert os.stat(real).st_mode & 0o777 == 0o640
    assert write_target(str(link)).link == str(link)
    (tmp_path / "dangling.qd").symlink_to("nowhere.qd")
    with pytest.raises(FileError, match="is a symbolic link to .*nowhere.qd`, which does not "
                                        "exist; nothing was written"):
        atomic_write(str(tmp_path / "dangling.qd"), "x")
    assert not (tmp_path / "nowhere.qd").exists()
    long = tmp_path / ("n" * 247 + ".qd")   # 250 characters: legal on the usual file systems
    atomic_write(str(long), "long\n")
    assert long.read_text() == "long\n"
    assert sorted(os.listdir(tmp_path)) == sorted(["real.qd", "link.qd", "dangling.qd",
                                                   long.name])  # no temporary left


def test_save_onto_a_pipe_refuses_at_once(tmp_path):
    os.mkfifo(tmp_path / "out.qd")
    proc = run_quadrat(["-c", "param p unit; save out.qd; save out.qd force"], tmp_path)
    assert proc.returncode == 2
    (line,) = errors(proc.stderr)
    assert line == ("-c command 2: error: column 6: `out.qd` is a pipe (FIFO), not a regular "
                    "file; nothing was written (quadrat writes regular files only)")
    assert (tmp_path / "out.qd").is_fifo()


def test_save_onto_a_link_writes_through_and_says_so(tmp_path):
    (tmp_path / "real.qd").write_text("# quadrat session, by hand\n")
    (tmp_path / "link.qd").symlink_to("real.qd")
    proc = run_quadrat(["-c", "param p unit; save link.qd"], tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert f"(written through the link to `{tmp_path / 'real.qd'}`)" in proc.stdout
    assert os.path.islink(tmp_path / "link.qd")
    assert "param p unit" in (tmp_path / "real.qd").read_text()


# ---------------------------------------------------------------------------
# replays write new files only

OTHER = """# a session file someone sent (invented): it clears the session and writes
# over the three files the session wrote
reset
param p unit
prior p ~ beta(2, 3)
grid p 0.001 0.999 41
compute
save mine.qd
export results.csv
export results.json
mean p
check mean p = 0.4 tol 0.001
"""

MINE = ["param p unit", "prior p ~ beta(1, 1)", "grid p 0.001 0.999 21", "compute",
        "save mine.qd", "export results.csv", "export results.json"]


def shell_in(folder, **kw):
    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=80, color=False), log_file=str(folder / "e.log"), **kw)
    app.ws.base_dir = str(folder)
    return app, out, err


def test_a_replay_never_overwrites_the_sessions_own_files(tmp_path):
    """save, export, export; replay a file that says `reset` and writes the same three
    paths: all three files stay byte for byte, one line each, no "checks held"."""
    (tmp_path / "other.qd").write_text(OTHER)
    names = ("mine.qd", "results.csv", "results.json")
    for keep_going in (False, True):
        app, out, err = shell_in(tmp_path, keep_going=keep_going)
        for line in MINE:
            forced = line + " force" if line.startswith(("save", "export")) else line
            assert app.run(forced) == "ok", line
        before = {n: (tmp_path / n).read_bytes() for n in names}
        assert app.run("replay other.qd") == "error"
        assert {n: (tmp_path / n).read_bytes() for n in names} == before
        lines = errors(err.getvalue())
        refused = [x for x in lines if "a session file being replayed writes new files only"
                   in x]
        assert [x.split(": error: ")[0] for x in refused] == (
            ["other.qd line 8", "other.qd line 9", "other.qd line 10"] if keep_going
            else ["other.qd line 8"])
        assert "checks held" not in out.getvalue() + err.getvalue()
        assert ("replay of `other.qd` had 3 errors" if keep_going else
                "replay of `other.qd` stopped at an error") in err.getvalue()
        # the state is the session's own, as before the replay
        assert [e.text for e in app.log] == MINE[:4]
        assert app.ws.model.params[0].name == "p" and app.ws.posterior_now is not None


def test_a_replay_lists_the_new_files_it_wrote(tmp_path):
    (tmp_path / "writes.qd").write_text("param p unit\nsave a.qd\nsave a.qd\n"
                                        "export b.csv\n")
    app, out, err = shell_in(tmp_path)
    assert app.run("replay writes.qd") == "ok", err.getvalue()
    # a file the replay itself created it may write again; it is listed once
    assert f"the replay of `writes.qd` wrote 2 new files: `{tmp_path / 'a.qd'}`, " \
           f"`{tmp_path / 'b.csv'}`" in out.getvalue()
    # replayed again, both exist now: nothing is overwritten
    assert app.run("replay writes.qd") == "error"
    assert "`a.qd` exists: a session file being replayed writes new files only" in \
        err.getvalue()


# ---------------------------------------------------------------------------
# output that goes away

def test_a_closed_pipe_ends_quietly():
    """`quadrat -c help | head -5`: no traceback, no `internal error`, status 141."""
    env = dict(os.environ, NO_COLOR="1", PYTHONPATH=ROOT)
    proc = subprocess.Popen([sys.executable, "-m", "shell.main", "-c", "; ".join(["help"] *
                            400)], stdout=subprocess.PIPE, stderr=subprocess.PIPE, env=env)
    head = [proc.stdout.readline() for _ in range(5)]
    proc.stdout.close()
    err = proc.stderr.read().decode()
    assert proc.wait(timeout=HANG) == 141
    assert len(head) == 5 and head[0].strip()
    assert err == ""


def test_a_full_disk_under_the_history_warns_once(tmp_path):
    """History on a file system with no room left (/dev/full: every write fails with
    ENOSPC): one warning, and every command still runs."""
    path = tmp_path / "history"
    path.symlink_to("/dev/full")
    out = io.StringIO()
    app = App(Printer(out, width=80, color=False))
    with create_pipe_input() as inp:
        warn = app.printer.warning
        repl = Repl(app, input=inp, output=DummyOutput(), history=KeptHistory(str(path), warn))

        def feed():
            for k in ["param p unit\r", "param q unit\r", "show model\r", "\x04"]:
                inp.send_text(k)
                time.sleep(0.05)

        th = threading.Thread(target=feed, daemon=True)
        th.start()
        assert repl.run() == 0
        th.join(5)
    text = out.getvalue()
    assert text.count("warning: the prompt's history cannot be written") == 1
    assert "parameter `q` declared" in text and "  q: none given" in text
