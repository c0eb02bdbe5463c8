"""Fuzzing: random and mutated command lines, formulas and session files.

Every input goes through the shell's one-command path (`App.run`, what the prompt
and batch mode use). Each must end in a normal answer or exactly one `error:` line
naming the problem: never a traceback or an "internal error" line, never more than
a few seconds before the error (`harness.HUNG_SECONDS`), and never a change of the
workspace's state, the session log or the files in its folder after an error.

Hypothesis runs derandomized (the same inputs every run, so CI is reproducible);
the counts go into the summary line that tests/conftest.py prints at the end:
``fuzz: N inputs tried, 0 crashed, 0 hung, 0 changed state after an error``.
"""

from __future__ import annotations

import hashlib
import os
import tempfile

import pytest
import sympy as sp
from hypothesis import HealthCheck, given, settings
from hypothesis import strategies as st

from engine.errors import FormulaError
from engine.expr import FUNCTIONS, parse
from engine.families import FAMILIES
from hostile.harness import BASE, CSV, Probe, base_app, prepare_folder
from shell.registry import COMMANDS


def fuzz(examples: int) -> settings:
    """Seeded (derandomized) settings; the timing is the harness's, not hypothesis's."""
    return settings(max_examples=examples, derandomize=True, deadline=None, database=None,
                    print_blob=True, suppress_health_check=list(HealthCheck))


@pytest.fixture(scope="module")
def folder():
    with tempfile.TemporaryDirectory(prefix="quadrat-fuzz-") as d:
        prepare_folder(d)
        yield d


@pytest.fixture(scope="module")
def base(folder):
    return base_app(folder)


def tried(tally, outcome) -> None:
    tally.add(outcome)
    assert not outcome.problems, (outcome.line, outcome.problems, outcome.out, outcome.err)


# ---------------------------------------------------------------------------
# the vocabulary

NAMES = ["p", "m", "k", "y", "odds", "n", "z", "q", "x1", "exp", "log", "normal", "beta",
         "pi", "inf", "nan", "True", "None", "lambda", "not", "and", "or", "if", "import",
         "__import__", "__class__", "__builtins__", "_x", "os", "sys", "eval", "exec",
         "open", "print", "self", "a" * 70]
NUMBERS = ["0", "1", "2", "-1", "0.5", "10", "1e-9", "1e308", "-1e308", "1e309", "1e-400",
           "nan", "inf", "-inf", "9" * 30, "0x10", "1_000", "1j", "07", "1e6", ".5", "5.",
           "3%", "95%", "1e", "--1", "+1", "0.0", "-0"]
KEYWORDS = ["log", "load", "as", "auto", "force", "until", "hpd", "central", "tol", "points",
            "in", "int", "set", "real", "positive", "unit", "summary", "refine", "end",
            "width", "level", "max", "sims", "seed", "using", "censored", "model", "data",
            "grid", "linear", "logit", "families", "functions", "trapezoid", "simpson",
            "gauss", "midpoint", "--allow-changed-data"]
SIGNS = ["~", "=", "==", "!=", "<", "<=", ">", ">=", "+", "-", "*", "/", "^", "**", "(",
         ")", ",", ".", "[", "]", "{", "}", ":", ";", "#", "\\", "`", "$", "'", '"', "@",
         "%", "&", "|", "!", "?", "\t", "\x00", "\x1b[31m", "é", "\u202e", "∞", "😀"]
FILES = ["d.csv", "s.qd", "t.qd", "missing.csv", "missing.qd", "d", "x.json", "x.csv",
         '"a b.csv"', "errors.log", ".", "..", "/", "/dev/null", "/dev/zero"]
CALLS = ([f"{f}(0, 1)" for f in FAMILIES] + [f"{f}(p)" for f in FUNCTIONS] +
         ["normal(m, -1)", "beta(0, 0)", "binomial(10, p)", "poisson(-1)", "exp(1000)",
          "log(0)", "log(-1)", "sqrt(-1)", "lgamma(0)", "min(p)", "max()", "exp(p, 2)",
          "exp(x=1)", "p.__class__", "().__class__.__bases__", "[].append", "(lambda: 0)()",
          "__import__('os')", "open('/etc/passwd')", "p[0]", "{1: 2}", "(x := 1)", "*p",
          "f'{p}'", "p if p else m", "9^9^9^9", "10^400", "2**1e6", "p^1e7", "(" * 120 + "p" +
          ")" * 120, "-" * 200 + "p", "p" + "+p" * 3000, "exp(" * 60 + "p" + ")" * 60])
WORDS = st.one_of(st.sampled_from(NAMES), st.sampled_from(NUMBERS), st.sampled_from(KEYWORDS),
                  st.sampled_from(SIGNS), st.sampled_from(FILES), st.sampled_from(CALLS),
                  st.text(max_size=8))
COMMAND_NAMES = st.one_of(st.sampled_from(sorted(COMMANDS)), st.sampled_from(NAMES),
                          st.text(max_size=6))


@st.composite
def command_line(draw) -> str:
    name = draw(COMMAND_NAMES)
    rest = draw(st.lists(WORDS, max_size=8))
    sep = draw(st.sampled_from([" ", " ", " ", "", "  ", "\t"]))
    return name + sep + " ".join(rest)


def _safe(line: str) -> bool:
    """Lines the fuzzer leaves out: a forced job beyond the time budget is a legitimately
    long computation, not a fault, and `save` / `export` stay in the scratch folder."""
    words = line.split()
    if words and words[0] in ("compute", "zoom", "refine") and "force" in words:
        return False
    return not (words and words[0] in ("save", "export") and ("/" in line or "\\" in line))


# the lines of the base model and of common questions, for mutation
VALID = BASE + [
    "mean p", "sd odds", "prob p > 0.5 and m < 1", "quantile odds 0.3", "interval p 0.9 hpd",
    "interval m", "mode", "evidence", "summary", "check mean p = 0.3 tol 0.1", "plot p",
    "plot p m", "show model", "show data", "show grid", "cost", "grid auto", "rule simpson",
    "data load d.csv as t", "let r = exp(m) * p", "prior log -p^2", "likelihood log -m^2",
    "predict k ~ binomial(10, p)", "keep a", "compare a a", "whatif", "whatif end",
    "samplesize p width 0.3 sims 20 max 50", "refine p", "zoom", "undo", "history", "reset",
    "export x.csv", "save s.qd", "replay s.qd", "note hello", "help prior", "data append k = 3",
    "param n int 0 5", "param s set 0.5 1 2", "likelihood y ~ normal(m, 1) censored k",
]


@st.composite
def mutated_line(draw) -> str:
    line = draw(st.sampled_from(VALID))
    for _ in range(draw(st.integers(1, 3))):
        kind = draw(st.sampled_from(["insert", "delete", "replace", "word", "swap", "dup"]))
        if kind in ("insert", "replace", "delete") and line:
            i = draw(st.integers(0, len(line) - 1))
            piece = draw(st.one_of(st.sampled_from(SIGNS + NUMBERS + NAMES), st.text(max_size=3)))
            if kind == "insert":
                line = line[:i] + piece + line[i:]
            elif kind == "replace":
                line = line[:i] + piece + line[i + 1:]
            else:
                j = draw(st.integers(i, min(len(line), i + 6)))
                line = line[:i] + line[j:]
        else:
            words = line.split(" ")
            i = draw(st.integers(0, len(words) - 1))
            if kind == "word":
                words[i] = draw(WORDS)
            elif kind == "swap" and len(words) > 1:
                j = draw(st.integers(0, len(words) - 1))
                words[i], words[j] = words[j], words[i]
            else:
                words.insert(i, words[i])
            line = " ".join(words)
    return line


# ---------------------------------------------------------------------------
# formulas

ATOMS = st.one_of(st.sampled_from(["p", "m", "odds", "k", "y", "pi", "2", "0.5", "0", "1e300",
                                   "1e-300", "zz", "_p", "exp", "__class__", "True", "'s'",
                                   "1j", "None", "...", "nan", "inf"]),
                  st.floats(allow_nan=False, allow_infinity=False).map(repr),
                  st.integers(-10**40, 10**40).map(str))
BINARY = ["+", "-", "*", "/", "^", "**", "<", "<=", ">", ">=", "==", "!=", " and ", " or ",
          "//", "%", "@", "&", "|", "<<", ".", " if ", " in ", " is "]
UNARY = ["-", "+", "not ", "~", "*", "**", "lambda: ", "await "]
FN_NAMES = sorted(FUNCTIONS) + ["zz", "p", "eval", "__import__", "normal", "getattr"]


def _formula(children):
    return st.one_of(
        st.tuples(children, st.sampled_from(BINARY), children).map(lambda t: "".join(t)),
        st.tuples(st.sampled_from(UNARY), children).map(lambda t: "".join(t)),
        children.map(lambda c: f"({c})"),
        st.tuples(st.sampled_from(FN_NAMES), st.lists(children, max_size=3)).map(
            lambda t: f"{t[0]}({', '.join(t[1])})"),
        st.tuples(children, st.sampled_from(["[0]", ".real", "(1)", "[::2]", ", 1", "=1"])).map(
            lambda t: "".join(t)),
    )


FORMULAS = st.recursive(ATOMS, _formula, max_leaves=12)
NESTED = st.tuples(st.integers(1, 400), st.sampled_from(["(", "exp(", "-(", "[", "sqrt(abs("]),
                   st.sampled_from(["p", "1", "m"])).map(
    lambda t: t[1] * t[0] + t[2] + ")" * (t[0] * t[1].count("(")) + "]" * (t[0] * t[1].count("[")))
FORMULA_TEXT = st.one_of(FORMULAS, FORMULAS, NESTED)
USES = ["mean {}", "sd {}", "prob {}", "quantile {} 0.5", "prior log {}", "likelihood log {}",
        "let z = {}", "prior m ~ normal({}, 1)", "likelihood y ~ normal(m, {})",
        "predict w ~ normal({}, 1)", "check mean {} = 1"]


# ---------------------------------------------------------------------------
# session files

def _session_text() -> str:
    """A session as `save` writes it: a header with the data file's SHA-256, then
    the commands, each question followed by its check."""
    sha = hashlib.sha256(CSV.encode()).hexdigest()
    body = ["param p unit", "prior p ~ beta(2, 3)", "data load d.csv as t",
            "likelihood t_z ~ binomial(t_n, p)", "grid p 0.001 0.999 41", "compute", "mean p",
            "check mean p = 0.3 tol 0.2", "interval p", "note an invented demo"]
    return ("# quadrat session, saved by quadrat 0.1.0 on 2025-01-01T00:00:00+00:00\n"
            f"# data d.csv sha256 {sha}\n\n" + "\n".join(body) + "\n")


HOSTILE_LINES = ["__import__('os').system('touch pwned')", "exec('x')", "eval p",
                 "prior log __import__('os')", "let z = ().__class__", "replay s.qd",
                 "replay t.qd", "data load /etc/passwd", "data load ../../etc/shadow",
                 "# data d.csv sha256 " + "0" * 64, "save s.qd force", "quit", "undo",
                 "reset", "\x00\x01\x02", "whatif", "grid auto", "refine until 1e-300"]


@st.composite
def session_file(draw) -> bytes:
    lines = _session_text().split("\n")
    for _ in range(draw(st.integers(0, 4))):
        kind = draw(st.sampled_from(["drop", "dup", "swap", "hostile", "mutate", "sha"]))
        i = draw(st.integers(0, len(lines) - 1))
        if kind == "drop":
            del lines[i]
        elif kind == "dup":
            lines.insert(i, lines[i])
        elif kind == "swap":
            j = draw(st.integers(0, len(lines) - 1))
            lines[i], lines[j] = lines[j], lines[i]
        elif kind == "hostile":
            lines.insert(i, draw(st.one_of(st.sampled_from(HOSTILE_LINES), command_line(),
                                           mutated_line()).filter(_safe)))
        elif kind == "mutate":
            lines[i] = draw(mutated_line().filter(_safe)) if lines[i] else lines[i]
        else:
            lines[1] = lines[1][:-4] + draw(st.sampled_from(["0000", "zzzz", "", "ffff0"]))
        if not lines:
            lines = [""]
    text = "\n".join(lines).encode()
    tail = draw(st.sampled_from([b"", b"", b"", b"\r\n", b"\xff\xfe", b"\x00", b"\xef\xbb\xbf"]))
    if draw(st.booleans()) and tail:
        return tail + text
    return text + tail


# ---------------------------------------------------------------------------
# the tests

@fuzz(2500)
@given(lines=st.lists(st.one_of(command_line(), mutated_line()).filter(_safe), min_size=1,
                      max_size=3))
def test_command_lines(lines, base, folder, fuzz_tally):
    """Random and mutated command lines, a few in a row, from the computed base model."""
    probe = Probe(folder, base)
    for line in lines:
        tried(fuzz_tally, probe.run(line))


@fuzz(2000)
@given(text=FORMULA_TEXT, use=st.sampled_from(USES))
def test_formulas(text, use, base, folder, fuzz_tally):
    """Random formulas, in every command that reads one; the parser alone as well."""
    try:
        parse(text, {"p": sp.Symbol("p", real=True)}, condition="<" in text)
    except FormulaError:
        pass
    tried(fuzz_tally, Probe(folder, base).run(use.format(text)))


@fuzz(400)
@given(data=st.data())
def test_session_files(data, folder, fuzz_tally):
    """Mutated session files replayed from an empty session: a normal replay (checks
    may move), or one error line and nothing changed."""
    raw = data.draw(session_file())
    name = data.draw(st.sampled_from(["t.qd", "u.qd"]))
    with open(os.path.join(folder, name), "wb") as fh:
        fh.write(raw)
    probe = Probe(folder)
    tried(fuzz_tally, probe.run(f"replay {name}"))
    assert not os.path.exists(os.path.join(folder, "pwned"))
