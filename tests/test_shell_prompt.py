"""The prompt, driven through prompt_toolkit's pipe input and DummyOutput: typing,
completion, Ctrl-C, Ctrl-D; and its pure parts: the completer's "what may come
here?", the toolbar, line splitting and number formatting."""

from __future__ import annotations

import io
import threading
import time

import pytest
from prompt_toolkit.completion import CompleteEvent
from prompt_toolkit.document import Document
from prompt_toolkit.history import InMemoryHistory
from prompt_toolkit.input import create_pipe_input
from prompt_toolkit.output import DummyOutput

from engine.results import Status
from shell import render as R
from shell.app import App
from shell.completer import Names, ShellCompleter, candidates
from shell.printer import Printer, bar
from shell.repl import Repl
from shell.toolbar import toolbar_text
from shell.words import Line, lone_equals, split_commands


def drive(keys, *, app=None, wait_for=None):
    """Run the prompt on `keys` (a list of strings sent in turn; a callable in the
    list waits until it returns true, up to 10 s). Returns (exit status, output)."""
    out = io.StringIO()
    app = app or App(Printer(out, width=80, color=False))
    with create_pipe_input() as inp:
        repl = Repl(app, input=inp, output=DummyOutput(), history=InMemoryHistory())

        def feed():
            for k in keys:
                if callable(k):
                    t0 = time.monotonic()
                    while not k(repl) and time.monotonic() - t0 < 10:
                        time.sleep(0.01)
                else:
                    inp.send_text(k)

        th = threading.Thread(target=feed, daemon=True)
        th.start()
        code = repl.run()
        th.join(5)
    return code, out.getvalue(), app


def test_typing_a_command_runs_it_and_ctrl_d_leaves():
    code, out, app = drive(["param p unit\r", "show model\r", "\x04"])
    assert code == 0
    assert "parameter `p` declared: unit (0 to 1)" in out
    assert "  p: none given, so uniform on its domain" in out


def test_tab_completes_a_command_word_and_a_keyword():
    def typed(text):
        return lambda repl: repl.session.default_buffer.text == text

    code, out, app = drive(["para\t", typed("param"), " p un\t", typed("param p unit"), "\r",
                            "quit\r"])
    assert "parameter `p` declared: unit (0 to 1)" in out


def test_ctrl_c_at_the_prompt_clears_the_line():
    code, out, app = drive(["param zz real", "\x03", "param p unit\r", "quit\r"])
    assert app.ws.state.model.param_names == ("p",)
    assert "error" not in out


def test_an_error_at_the_prompt_and_the_loop_goes_on():
    code, out, app = drive(["mean p\r", "param p unit\r", "\x04"])
    assert "error: column 6: unknown name `p`" in out
    assert app.ws.state.model.param_names == ("p",)


def test_the_toolbar_follows_the_state():
    app = App(Printer(io.StringIO(), width=80, color=False))
    repl = Repl(app, input=None, output=DummyOutput(), history=InMemoryHistory())
    assert repl.toolbar() == "params none | no grid yet | no posterior"
    for line in ("param p unit", "data k = 3, 2, 4", "likelihood k ~ binomial(10, p)",
                 "grid p 0.001 0.999 101", "compute"):
        app.run(line)
    assert repl.toolbar().startswith("params p | 101 points | posterior current | log evidence -")
    app.run("prior p ~ beta(2, 2)")
    assert "posterior out of date" in repl.toolbar() and "-5.969" in repl.toolbar()


# ---------------------------------------------------------------------------
# the pure parts

def test_toolbar_text_is_a_pure_function_of_the_status():
    s = Status(("p", "q"), 40401, "current", -7.312345678, False)
    assert toolbar_text(s) == "params p, q | 40,401 points | posterior current | log evidence -7.31235"
    s = Status(("p",), 101, "out of date", -1.5, True)
    assert toolbar_text(s, width=120) == ("params p | 101 points | posterior out of date | log evidence "
                               "-1.5 (before the change) | what-if")
    s = Status(tuple(f"param{i}" for i in range(30)), None, "absent", None, False)
    text = toolbar_text(s, width=60)
    assert len(text) <= 60 and text.endswith("| no grid yet | no posterior")


NAMES = Names(params=("mu", "sigma", "p"), columns=("y", "yy", "flag"), lets=("odds",))


def texts(text, names=NAMES, **kw):
    return [c.text for c in candidates(text, names, **kw)]


def test_completion_of_command_words():
    assert texts("pr") == ["prior", "prob", "predict"]
    assert "quantile" in texts("") and "help" in texts("")


def test_completion_of_names_by_place():
    assert texts("prior ") == ["log", "mu", "sigma", "p"]
    assert texts("prior mu ~ no") == ["normal"]
    assert texts("prior mu ~ normal(0, si") == ["sigma", "sin"]
    assert texts("likelihood y") == ["y", "yy"]
    assert texts("likelihood y ~ normal(mu, sigma) ") == ["censored"]
    assert texts("mean exp(m") == ["mu", "min", "max"]
    assert "odds" in texts("mean o") and "logit" in texts("mean lo")
    assert texts("param x ") == ["real", "positive", "unit", "in", "int", "set"]
    assert texts("interval mu 0.9") == ["0.9", "0.95", "0.99"]
    assert texts("show ") == ["model", "data", "grid"]
    assert texts("grid ") == ["auto", "mu", "sigma", "p"]
    assert texts("check me") == ["mean"]
    assert texts("mean mu # a comment ") == []


def test_completion_of_file_names_where_a_file_is_expected():
    files = {".": ["data.csv", "notes.txt", "run.qd", "sub", ".hidden.csv"],
             "sub": ["more.csv"]}

    def listdir(d):
        return files[d]

    def isdir(p):
        return p == "sub" or p.rstrip("/") == "sub"

    assert texts("data load ", listdir=listdir, isdir=isdir) == ["data.csv", "sub/"]
    assert texts("data load sub/", listdir=listdir, isdir=isdir) == ["sub/more.csv"]
    assert texts("replay ", listdir=listdir, isdir=isdir) == ["run.qd", "sub/"]
    assert texts("save r", listdir=listdir, isdir=isdir) == ["run.qd"]


def test_the_completer_reads_the_document():
    comp = ShellCompleter(lambda: NAMES)
    got = list(comp.get_completions(Document("prior mu ~ normal(0, sig"), CompleteEvent()))
    assert [(c.text, c.start_position) for c in got] == [("sigma", -3)]


def test_line_words_and_columns():
    line = Line.of("  prior p ~ beta(1, 1)   # a comment")
    assert line.text == "prior p ~ beta(1, 1)"
    assert [(w.text, w.column) for w in line.words][:3] == [("prior", 3), ("p", 9), ("~", 11)]
    assert Line.of("# only").blank and Line.of("   ").blank


def test_split_commands_on_semicolons_and_newlines():
    assert split_commands("a; b\nc # x; y") == ["a", "b", "c # x; y"]


def test_lone_equals():
    text = "check prob k == 0 and p <= 1 = 0.63 tol 1e-3"
    assert lone_equals(text) == [text.index(" = ") + 1]


def test_numbers_are_shown_to_six_digits():
    assert R.num(0.28571428) == "0.285714"
    assert R.num(3.12345678e-5) == "3.12346e-5"
    assert R.num(-7.31) == "-7.31"
    assert R.with_error(0.285714, 3e-12) == "0.285714  (± 3e-12)"


def test_check_tolerances():
    # one unit in the sixth digit, unless ten times the estimated error is larger
    assert R.check_tol([0.3125], [1e-16]) == pytest.approx(1e-6)
    assert R.check_tol([0.574], [1.2e-4]) == pytest.approx(2e-3)
    assert R.typed_precision("0.2857") == pytest.approx(5e-5)
    assert R.typed_precision("1.5e-3") == pytest.approx(5e-5)


def test_progress_bar_only_on_a_terminal_after_a_second():
    clock = iter([0.0, 0.5, 2.0, 3.0])
    out = io.StringIO()
    p = Printer(out, width=60, color=True, clock=lambda: next(clock))
    prog = p.progress()
    prog(10, 100)          # at 0.5 s: nothing yet
    assert out.getvalue() == ""
    prog(50, 100)          # at 2.0 s: drawn
    assert out.getvalue().startswith("\r[") and " 50%" in out.getvalue()
    quiet = Printer(io.StringIO(), width=60, color=False, clock=lambda: 5.0).progress()
    quiet(50, 100)
    assert quiet.printer.out.getvalue() == ""
    assert len(bar(1, 3, 10.0, 50)) <= 50


def test_colour_only_on_a_terminal_and_never_with_no_color(monkeypatch):
    from shell.printer import colour_allowed

    monkeypatch.delenv("NO_COLOR", raising=False)

    class Terminal(io.StringIO):
        def isatty(self):
            return True

    assert colour_allowed(Terminal(), {}) is True
    assert colour_allowed(Terminal(), {"NO_COLOR": "1"}) is False
    assert colour_allowed(io.StringIO(), {}) is False
    p = Printer(Terminal(), color=None)
    p.error("error: x")
    assert p.out.getvalue() == "\x1b[31merror: x\x1b[0m\n"
