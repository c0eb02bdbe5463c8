"""The shell at 80 x 24 and 120 x 40: nothing wider than the terminal, no number cut,
a plot's command and legend on the screen, long listings in pages.

Two ways in: prompt_toolkit's pipe input with a sized printer (always), and a real
terminal in tmux (where tmux is installed), whose screen is read back with
`capture-pane`. The scenario is the pump test rig of `sessions/pumps.csv` (invented
data, a demonstration of our own), with long parameter names to press on the toolbar.
"""

from __future__ import annotations

import io
import os
import re
import shutil
import subprocess
import sys
import time

import pytest
from prompt_toolkit.history import InMemoryHistory
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput

from engine.results import Status
from shell import render as R
from shell.app import App
from shell.layout import Table, cells, wrap
from shell.printer import Printer
from shell.repl import Repl
from shell.toolbar import toolbar_text

HERE = os.path.dirname(os.path.abspath(__file__))
ROOT = os.path.dirname(HERE)
PUMPS = os.path.join(ROOT, "sessions", "pumps.csv")

SCENARIO = [
    "param weibull_shape positive",
    "param weibull_scale positive",
    "prior weibull_shape ~ gamma(2, 1)",
    "prior weibull_scale ~ lognormal(7.5, 1)",
    f"data load {PUMPS}",
    "likelihood hours ~ weibull(weibull_shape, weibull_scale) censored running",
    "grid weibull_shape 0.2 8 161",
    "grid weibull_scale 400 20000 201",
    "compute",
    "summary",
    "whatif",
    "data append hours = 2100, 2300",
    "data append running = 1, 1",
    "summary",
    "prob weibull_shape > 1 and weibull_scale < 2000",
    "plot weibull_shape weibull_scale",
]
SIZES = [(80, 24), (120, 40)]


# ---------------------------------------------------------------------------
# the pure parts

def test_wrap_breaks_at_blanks_only():
    text = ("note: likelihood `hours`: its columns differ in length (`hours` 16 rows, "
            "`running` 14 rows); the posterior waits until the columns agree, and "
            "log evidence -227.974  (± 3e-8) is kept")
    for width in (40, 57, 80):
        lines = wrap(text, width)
        assert all(cells(x) <= width for x in lines)
        # the words are those of the text, none cut: joined again they give it back
        assert " ".join(x.strip() for x in lines).split() == text.split()
        # an error's sign stays with its number
        assert not any(x.rstrip().endswith("±") or x.rstrip().endswith("(±") for x in lines)


def test_wrap_cuts_only_a_word_wider_than_the_line():
    lines = wrap("path " + "x" * 70, 40)
    assert all(cells(x) <= 40 for x in lines) and "".join(lines).count("x") == 70


def test_a_table_too_wide_stacks_its_rows():
    t = Table.of(["", "now", "what if"],
                 [["P(weibull_shape > 1 and weibull_scale < 2000 and hours > 100)",
                   "0.705668  (± 4e-6)", "0.382495  (± 3e-6)"]])
    assert len(t.fit(120)) == 2
    assert t.fit(80) == ["P(weibull_shape > 1 and weibull_scale < 2000 and hours > 100)",
                         "  now      0.705668  (± 4e-6)",
                         "  what if  0.382495  (± 3e-6)"]


@pytest.mark.parametrize("width", [40, 50, 60, 80, 100, 120])
def test_the_toolbar_shortens_names_never_numbers(width):
    statuses = [
        Status(("prevalence", "sensitivity", "specificity"), 4336565, "current",
               -227.974123, True),
        Status(tuple(f"parameter{i}" for i in range(12)), 123456789, "out of date",
               -12345.678, True),
        Status(("weibull_shape", "weibull_scale"), 32361, "out of date", -85.72941, False),
    ]
    for s in statuses:
        text = toolbar_text(s, width)
        assert cells(text) <= width
        assert re.search(rf"(?<![\d.]){re.escape(R.num(s.log_evidence))}(?![\d.])", text), text
        if s.whatif:
            assert text.endswith("what-if")
        # a point count, if shown, is shown whole
        for m in re.finditer(r"([\d,]+) p(oin)?ts", text):
            assert m.group(1) == R.count(s.points)


def test_the_toolbar_at_80_columns_keeps_the_log_evidence_whole():
    s = Status(("prevalence", "sensitivity", "specificity"), 4336565, "current",
               -227.974123, True)
    text = toolbar_text(s, 80)
    assert "-227.974 " in text + " " and text.endswith("| what-if")


# ---------------------------------------------------------------------------
# through the prompt: pipe input, a sized printer

def drive(keys, width, height):
    out = io.StringIO()
    app = App(Printer(out, width=width, height=height, wrap=True, color=False))
    with create_pipe_input() as inp:
        repl = Repl(app, input=inp, output=DummyOutput(), history=InMemoryHistory())
        inp.send_text("".join(keys))
        repl.run()
    return out.getvalue(), repl


@pytest.mark.parametrize("width,height", SIZES)
def test_the_scenario_fits_the_terminal(width, height):
    # the output of each command, recorded apart: a command's output follows its line
    out = io.StringIO()
    app = App(Printer(out, width=width, height=height, wrap=True, color=False))
    outputs = {}
    for line in SCENARIO:
        out.seek(0)
        out.truncate()
        assert app.run(line) not in ("error", "cancelled"), line
        outputs[line] = out.getvalue().splitlines()
    for line, lines in outputs.items():
        for x in lines:
            assert cells(x) <= width, (line, x)
    # the side-by-side probability: "now" and "what if" aligned, whichever form fits
    prob = outputs[SCENARIO[-2]]
    now = next(x for x in prob if "now" in x)
    whatif = next(x for x in prob if "what if" in x)
    if width == 80:
        assert now.startswith("  now ") and whatif.startswith("  what if ")
        assert now.index("0.") == whatif.index("0.")
    # the joint plot: with its command line above and the prompt and toolbar below, on
    # one screen; its legend (the density ramp) and both axis names in it
    plot = outputs[SCENARIO[-1]]
    assert len(plot) + 3 <= height
    assert any("credible regions" in x and "50%" in x for x in plot)
    assert "weibull_shape" in plot[-1] and "weibull_scale" in plot[-1]


def test_help_at_the_prompt_pages_a_long_listing():
    # `help all` is longer than 24 rows: the first page, then the question; `q` stops
    out, _ = drive(["help all\r", "q\r", "quit\r"], 80, 24)
    lines = out.splitlines()
    assert "sessions and housekeeping" not in out          # stopped before the last group
    assert "declaring the model" in lines[1]
    assert len(lines) <= 24 + 2
    out, _ = drive(["help all\r", "\r", "\r", "\r", "quit\r"], 80, 24)
    assert "sessions and housekeeping" in out and "  quit\n" in out
    # the overview fits one screen
    out, _ = drive(["help\r", "quit\r"], 80, 24)
    assert len(out.splitlines()) - 1 <= 22


# ---------------------------------------------------------------------------
# in a real terminal: tmux

TMUX = shutil.which("tmux")
PROMPT = re.compile(r"^quadrat( \(what-if\))?>( |$)", re.M)


class Tmux:
    """quadrat at the prompt in a detached tmux window of a fixed size."""

    def __init__(self, tmp_path, width: int, height: int):
        self.name = f"quadrat-test-{os.getpid()}-{width}x{height}"
        conf = tmp_path / "tmux.conf"
        conf.write_text("set -g status off\nset -g history-limit 5000\n")
        env = dict(os.environ, PYTHONPATH=ROOT, XDG_STATE_HOME=str(tmp_path / "state"),
                   TERM="xterm-256color")
        env.pop("COLUMNS", None)
        env.pop("LINES", None)
        self.tmux = [TMUX, "-L", self.name, "-f", str(conf)]
        cmd = f"cd {tmp_path} && exec {sys.executable} -m shell.main"
        subprocess.run(self.tmux + ["new-session", "-d", "-s", "q", "-x", str(width),
                                    "-y", str(height), cmd], env=env, check=True)
        self.width, self.height = width, height
        self.wait(lambda screen: "quadrat>" in screen, 20)

    def screen(self, history: bool = False) -> str:
        args = ["capture-pane", "-p", "-J", "-t", "q"] + (["-S", "-"] if history else [])
        return subprocess.run(self.tmux + args, capture_output=True, text=True).stdout

    def wait(self, ready, timeout: float = 60) -> str:
        t0 = time.monotonic()
        last, since = None, time.monotonic()
        while time.monotonic() - t0 < timeout:
            s = self.screen()
            if s != last:
                last, since = s, time.monotonic()
            elif ready(s) and time.monotonic() - since > 0.4:
                return s
            time.sleep(0.1)
        raise AssertionError(f"the screen did not settle:\n{last}")

    def prompts(self) -> int:
        return len(PROMPT.findall(self.screen(history=True)))

    def type(self, line: str, ready=None) -> str:
        """Type `line` and Enter; wait for the next prompt (or `ready(screen)`)."""
        before = self.prompts()
        subprocess.run(self.tmux + ["send-keys", "-t", "q", "-l", line], check=True)
        subprocess.run(self.tmux + ["send-keys", "-t", "q", "Enter"], check=True)
        return self.wait(ready or (lambda s: self.prompts() > before))

    def close(self) -> None:
        subprocess.run(self.tmux + ["kill-server"], capture_output=True)


@pytest.mark.skipif(TMUX is None, reason="tmux is not installed")
@pytest.mark.parametrize("width,height", SIZES)
def test_in_a_real_terminal(tmp_path, width, height):
    t = Tmux(tmp_path, width, height)
    try:
        for line in SCENARIO:
            screen = t.type(line)
        rows = screen.split("\n")
        # the plot's command line and its legend are on the screen with the plot
        assert any(r.startswith("quadrat (what-if)> plot weibull_shape weibull_scale")
                   for r in rows), screen
        assert any("credible regions" in r and "99.9%" in r for r in rows), screen
        # the toolbar: the last row, the log evidence whole
        bottom = [r for r in rows if r.strip()][-1]
        m = re.search(r"log ev(idence)? (-?[\d.]+) ", bottom)
        assert m and len(m.group(2).replace("-", "").replace(".", "")) == 6, bottom
        assert bottom.rstrip().endswith("what-if"), bottom
        # nothing the terminal had to wrap: joined rows are no wider than the window
        for r in t.screen(history=True).split("\n"):
            assert cells(r.rstrip()) <= width, r
        screen = t.type("help all", lambda s: "-- more" in s)
        assert "declaring the model" in screen
        t.type("q")
    finally:
        t.close()


def test_a_slow_question_shows_it_is_working_and_clears_the_line():
    import threading

    from shell.printer import Waiting

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    out = Terminal()
    p = Printer(out, width=60, color=True)
    old = Waiting.DELAY, Waiting.EVERY
    Waiting.DELAY, Waiting.EVERY = 0.05, 0.02
    try:
        done = threading.Event()
        with p.waiting("prob weibull_shape > 1"):
            done.wait(0.3)                      # the question takes its time
            p.line("P(weibull_shape > 1) = 0.988364")
        text = out.getvalue()
    finally:
        Waiting.DELAY, Waiting.EVERY = old
    assert "\rworking on `prob weibull_shape > 1`: 0 s (Ctrl-C cancels)" in text
    # the answer comes after the line was cleared, and nothing is drawn after it
    cleared = "\r" + " " * 59 + "\r"
    assert text.endswith(cleared + "P(weibull_shape > 1) = 0.988364\n")
    # off a terminal nothing is drawn
    quiet = io.StringIO()
    with Printer(quiet, width=60, color=False).waiting("mean p"):
        time.sleep(0.01)
    assert quiet.getvalue() == ""
