"""The hostile-input corpus (tests/hostile/lines.tsv), case by case.

Each case runs through the shell's one-command path (`App.run`) from the base model
or from an empty session, in a scratch copy of tests/hostile/files, and must end as
the table says: a normal answer holding the expected text, or exactly one `error:`
line holding it, with the workspace's state, the session log and the files in the
folder unchanged. No case may leave a file behind that it tried to create by
running code (`pwned`). A few cases also run through `quadrat` in a subprocess.

The one number the table expects, `mean p = 0.31429` of the base model (shown to the
digit its error supports), is the posterior mean 11/35 of beta(2 + 9, 3 + 21):
beta-binomial conjugacy (common practice) for the prior beta(2, 3) and 9 successes in
30 trials.
"""

from __future__ import annotations

import os
import re
import shutil
import subprocess
import sys
from dataclasses import dataclass

import pytest

from hostile.harness import Probe, base_app, prepare_folder

HERE = os.path.join(os.path.dirname(os.path.abspath(__file__)), "hostile")
_ESCAPE = re.compile(r"\\(x[0-9a-fA-F]{2}|u[0-9a-fA-F]{4}|t|\\)")


def unescape(text: str) -> str:
    """The table's escapes: \\t, \\xNN, \\uNNNN and \\\\."""
    def one(m):
        code = m.group(1)
        if code == "t":
            return "\t"
        if code == "\\":
            return "\\"
        return chr(int(code[1:], 16))
    return _ESCAPE.sub(one, text)


@dataclass(frozen=True)
class Case:
    lineno: int
    start: str
    setup: tuple[str, ...]
    line: str
    kind: str       # "ok" or "error"
    text: str

    @property
    def id(self) -> str:
        return f"{self.lineno}:{self.line[:40]}"


def read_cases() -> list[Case]:
    out = []
    with open(os.path.join(HERE, "lines.tsv"), encoding="utf-8") as fh:
        for i, raw in enumerate(fh, 1):
            raw = raw.rstrip("\n")
            if not raw.strip() or raw.startswith("#"):
                continue
            start, setup, line, expect = raw.split("\t")
            kind, text = expect.split(": ", 1)
            assert start in ("base", "empty") and kind in ("ok", "error"), raw
            steps = () if setup == "-" else tuple(unescape(x) for x in setup.split(" ; "))
            out.append(Case(i, start, steps, unescape(line), kind, text))
    return out


CASES = read_cases()


@pytest.fixture(scope="module")
def folder(tmp_path_factory):
    d = str(tmp_path_factory.mktemp("hostile"))
    prepare_folder(d)
    shutil.copytree(os.path.join(HERE, "files"), os.path.join(d, "files"))
    return d


@pytest.fixture(scope="module")
def base(folder):
    return base_app(folder)


def test_the_corpus_covers_the_issue():
    """Every kind of hostile input the issue lists has cases in the table."""
    text = open(os.path.join(HERE, "lines.tsv"), encoding="utf-8").read()
    for needle in ("__import__", "__class__", "lambda", "9^9^9^9", "1e309", "nests more than",
                   "unknown name", "takes 2 arguments", "reserved word", "NaN", "-inf",
                   "ragged", "1e+308", "bom_crlf.csv", "crlf.csv", "sd > 0", "scale > 0",
                   "grid points (51.2%)", "zero at every grid point", "one grid point",
                   "does not exist", "cannot be read", "has changed since the session"):
        assert needle in text, needle
    assert len(CASES) >= 150


@pytest.mark.parametrize("case", CASES, ids=lambda c: c.id)
def test_case(case, base, folder, fuzz_tally):
    probe = Probe(folder, base if case.start == "base" else None)
    for step in case.setup:
        o = probe.run(step)
        assert o.status == "ok" and not o.problems, (step, o.err)
    o = probe.run(case.line)
    fuzz_tally.add(o)
    assert not o.problems, (o.problems, o.out, o.err)
    if case.kind == "ok":
        assert o.status in ("ok", "checked", "failed"), o.err
        assert case.text in o.out, o.out
    else:
        assert o.status == "error", o.out
        (line,) = [x for x in o.err.splitlines() if "error: " in x]
        assert case.text in line, line
    assert not os.path.exists(os.path.join(folder, "pwned"))
    assert not os.path.exists(os.path.join(folder, "files", "pwned"))


def test_the_state_after_an_error_is_the_state_before(base, folder):
    """Not only the same objects: the same answers, before and after a run of errors."""
    probe = Probe(folder, base)
    first = probe.run("summary").out
    for case in CASES:
        if case.kind == "error" and case.start == "base" and not case.setup:
            assert probe.run(case.line).status == "error", case.line
    assert probe.run("summary").out == first
    assert [e.text for e in probe.app.log] == ["summary", "summary"]


# ---------------------------------------------------------------------------
# a few through `quadrat` itself

SUBPROCESS = [c for c in CASES if c.start == "empty" and c.kind == "error"
              and ";" not in c.line and (c.line.startswith(("data ", "replay ", "param ")))]


def test_cases_through_the_quadrat_command(folder):
    """Commands piped to `quadrat` (stdin), each case after a `reset`: every case's one
    error line is on standard error with its line number, the run goes on with
    --keep-going, and the exit status is 2."""
    lines, expect = [], {}
    for case in SUBPROCESS:
        lines.append("reset")
        lines.extend(case.setup)
        lines.append(case.line)
        expect[len(lines)] = case
    env = dict(os.environ, NO_COLOR="1", XDG_STATE_HOME=folder)
    proc = subprocess.run([sys.executable, "-m", "shell.main", "--keep-going"],
                          input="\n".join(lines) + "\n", capture_output=True, text=True,
                          timeout=300, cwd=folder, env=env)
    assert proc.returncode == 2
    errors = [x for x in proc.stderr.splitlines() if "error: " in x]
    assert "Traceback" not in proc.stderr and "internal error" not in proc.stderr
    assert len(errors) == len(expect) >= 20
    for line, (n, case) in zip(errors, sorted(expect.items())):
        # a replayed file's error names the file and its line; the others, stdin's line
        if not case.line.startswith("replay "):
            assert line.startswith(f"stdin line {n}: error: "), line
        assert case.text in line, (case.line, line)
    assert not os.path.exists(os.path.join(folder, "pwned"))
