"""Batch use: `-c`, stdin, session files, exit statuses, save then replay.

Batch runs go through the same one-command path as the prompt; exit status 0 when
all went well, 1 when a check failed, 2 at the first error (`--keep-going` runs on).
"""

from __future__ import annotations

import io
import os
import re
import subprocess
import sys

import pytest
import scipy.stats as st

from shell.main import main

MODEL = "param p unit; prior p ~ beta(2, 3); data k = 3, 2, 4; likelihood k ~ binomial(10, p)"
# posterior beta(2 + 9, 3 + 21) (beta-binomial conjugacy, common practice)
POST = st.beta(11, 24)


def run(argv, stdin: str = "", cwd=None):
    """main() in this process; returns (status, stdout, stderr)."""
    out, err = io.StringIO(), io.StringIO()
    old = os.getcwd()
    if cwd is not None:
        os.chdir(cwd)
    try:
        code = main(argv, stdin=io.StringIO(stdin), stdout=out, stderr=err)
    finally:
        os.chdir(old)
    return code, out.getvalue(), err.getvalue()


def test_dash_c_runs_commands_separated_by_semicolons():
    code, out, err = run(["-c", MODEL + "; mean p"])
    assert code == 0 and err == ""
    m = re.search(r"^mean p = (\S+)", out, re.M)
    assert float(m.group(1)) == pytest.approx(POST.mean(), abs=6e-7)  # scipy.stats.beta


def test_commands_piped_on_stdin():
    text = MODEL.replace("; ", "\n") + "\n# a comment\n\nsd p\n"
    code, out, err = run([], stdin=text)
    assert code == 0 and err == ""
    m = re.search(r"^sd p = (\S+)", out, re.M)
    assert float(m.group(1)) == pytest.approx(POST.std(), abs=6e-7)  # scipy.stats.beta


def test_exit_status_1_when_a_check_fails():
    code, out, err = run(["-c", MODEL + "; check mean p = 0.5 tol 1e-3; mean p"])
    assert code == 1
    assert err == ("-c command 5: check failed: mean p = 0.314286, expected 0.5 (off by 0.19; "
                   "tol 0.001)\n")
    assert "\nmean p = 0.314286" in out  # the run went on after the failed check


def test_exit_status_2_at_the_first_error_with_file_and_line(tmp_path):
    text = MODEL.replace("; ", "\n") + "\nmean sigm\nmean p\n"
    code, out, err = run([], stdin=text)
    assert code == 2
    assert err == "stdin line 5: error: column 6: unknown name `sigm`\n"
    assert "mean p =" not in out  # stopped at the error


def test_keep_going_runs_on_and_still_ends_with_2():
    code, out, err = run(["--keep-going", "-c", MODEL + "; mean sigm; mean p"])
    assert code == 2
    assert err == "-c command 5: error: column 6: unknown name `sigm`\n"
    assert "mean p = 0.314286" in out


def test_a_session_file_reports_its_errors_by_file_and_line(tmp_path):
    (tmp_path / "demo.qd").write_text(MODEL.replace("; ", "\n") + "\n\nlet x = sigm + 1\n")
    code, out, err = run(["demo.qd"], cwd=tmp_path)
    assert code == 2
    assert err.splitlines()[0] == "demo.qd line 6: error: column 9: unknown name `sigm`"


def test_save_then_replay_reproduces_every_number(tmp_path):
    (tmp_path / "d.csv").write_text("n,y\n10,3\n10,2\n10,4\n")
    cmds = ("param p unit; param q in 0 1; prior p ~ beta(2, 3); data load d.csv; "
            "likelihood y ~ binomial(n, p * q); let odds = p / (1 - p); compute; summary; "
            "interval p 0.9 hpd; interval q; prob p > 0.5 and q < 0.9; mean odds; sd odds; "
            "quantile odds 0.8; mode; evidence; save s.qd")
    code, out1, err = run(["-c", cmds], cwd=tmp_path)
    assert code == 0, err
    saved = (tmp_path / "s.qd").read_text()
    checks = [x for x in saved.splitlines() if x.startswith("check ")]
    # every number the questions showed has its check line: summary 5 a parameter and a
    # let plus the evidence, then one for each of the other questions
    assert len(checks) == 3 * 5 + 1 + 8
    code, out2, err = run(["s.qd"], cwd=tmp_path)
    assert code == 0, err
    assert out2.count("check ok: ") == len(checks)
    assert out2.endswith(f"replayed `s.qd`: all {len(checks)} checks held\n")
    # and the numbers printed are the same, line for line
    numbers = [x for x in out1.splitlines() if " = " in x and not x.startswith("check")]
    for x in numbers:
        assert x in out2


def test_replay_refuses_a_changed_data_file(tmp_path):
    (tmp_path / "d.csv").write_text("n,y\n10,3\n10,2\n")
    run(["-c", "param p unit; data load d.csv; likelihood y ~ binomial(n, p); mean p; "
         "save s.qd"], cwd=tmp_path)
    (tmp_path / "d.csv").write_text("n,y\n10,3\n10,9\n")
    code, out, err = run(["s.qd"], cwd=tmp_path)
    assert code == 2 and out == ""
    assert err.startswith("error: `s.qd`: data file `d.csv` has changed since the session was "
                          "saved (sha256 was ")
    assert err.endswith("; replay with --allow-changed-data to go on\n")
    code, out, err = run(["--allow-changed-data", "s.qd"], cwd=tmp_path)
    assert code == 1  # it ran, and the check of the mean moved
    assert "warning: `s.qd`: data file `d.csv` has changed" in out
    # posterior beta(1 + 12, 1 + 8) now (beta-binomial conjugacy): scipy.stats.beta
    was, now = re.search(r"check moved: mean p was (\S+), now (\S+) ", err).groups()
    assert float(was) == pytest.approx(st.beta(6, 16).mean(), abs=6e-7)
    assert float(now) == pytest.approx(st.beta(13, 9).mean(), abs=6e-7)


def test_replay_reads_data_beside_the_session_file(tmp_path):
    (tmp_path / "sub").mkdir()
    (tmp_path / "sub" / "d.csv").write_text("n,y\n10,3\n")
    run(["-c", "param p unit; data load d.csv; likelihood y ~ binomial(n, p); mean p; "
         "save s.qd"], cwd=tmp_path / "sub")
    code, out, err = run(["sub/s.qd"], cwd=tmp_path)
    assert code == 0, err
    # saved from elsewhere, the path is rewritten relative to the new session file
    run(["-c", "replay sub/s.qd; save t.qd"], cwd=tmp_path)
    text = (tmp_path / "t.qd").read_text()
    assert "\ndata load sub/d.csv\n" in text and "# data sub/d.csv sha256 " in text
    assert run(["t.qd"], cwd=tmp_path)[0] == 0


def test_quit_stops_a_batch():
    code, out, err = run(["-c", "param p unit; quit; param q unit"])
    assert code == 0 and "`q`" not in out


def test_no_colour_and_no_progress_bar_off_a_terminal():
    code, out, err = run(["-c", MODEL + "; grid p 0.001 0.999 400001; compute; plot p"])
    assert code == 0
    assert "\x1b[" not in out and "\r" not in out


def test_help_lists_the_options():
    proc = subprocess.run([sys.executable, "-m", "shell.main", "--help"], capture_output=True,
                          text=True, timeout=60)
    assert proc.returncode == 0
    for opt in ("FILE", "-c TEXT", "--keep-going", "--allow-changed-data", "--debug"):
        assert opt in proc.stdout


def test_the_command_in_a_subprocess_with_no_colour(tmp_path):
    env = dict(os.environ, NO_COLOR="1")
    proc = subprocess.run([sys.executable, "-m", "shell.main", "-c", MODEL + "; mean p"],
                          capture_output=True, text=True, timeout=120, env=env, cwd=tmp_path)
    assert proc.returncode == 0, proc.stderr
    assert "mean p = 0.314286" in proc.stdout and "\x1b[" not in proc.stdout
