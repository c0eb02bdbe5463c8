"""Characters: what a line, a name and a file name may hold, and how text is quoted.

The classes of characters are the Unicode Character Database's (general categories
Cc, Cf, Cs, Zs, Zl, Zp; the names of U+202E, U+3164 and the others), read through
Python's `unicodedata`; the bidi controls are those Unicode's bidirectional algorithm
(UAX #9) defines. NFKC is Unicode's compatibility normalisation (UAX #15):
U+FF50 FULLWIDTH LATIN SMALL LETTER P normalises to `p`, U+FB01 LATIN SMALL LIGATURE FI
to `fi` (values from the standard's tables, checked here with `unicodedata`).
"""

from __future__ import annotations

import io
import os
import unicodedata

import pytest

from engine.characters import (BIDI, escaped, file_name_problem, hidden, line_flaw,
                               name_problem, quoted)
from engine.data import read_csv
from engine.errors import DataError, FormulaError
from engine.expr import check_name
from shell.app import App
from shell.printer import Printer
from shell.script import read_session
from shell.words import ShellError

# the bidi controls of UAX #9 (embeddings, overrides, isolates, marks)
UAX9 = ["\u202a", "\u202b", "\u202c", "\u202d", "\u202e", "\u2066", "\u2067", "\u2068",
        "\u2069", "\u200e", "\u200f", "\u061c"]


@pytest.mark.parametrize("ch", UAX9 + ["\x1b", "\x9b", "\x00", "\x07", "\x7f", "\u2028",
                                       "\u2029", "\u200b", "\u200d", "\ufeff", "\U000e0041"])
def test_no_line_may_hold_a_control_or_format_character(ch):
    assert hidden(ch)
    flaw = line_flaw(f"mean p # note {ch} here")
    assert flaw is not None and flaw.index == 14 and flaw.char == ch


def test_the_bidi_set_is_the_standard_one_and_all_format_characters():
    assert BIDI == frozenset(UAX9)
    assert all(unicodedata.category(c) == "Cf" for c in UAX9)


@pytest.mark.parametrize("text", ["mean p", "mean p\t# a tab, é, μ, 日本", "data x = 1, 2"])
def test_ordinary_lines_pass(text):
    assert line_flaw(text, (0, len(text))) is None


def test_odd_spaces_are_refused_in_the_command_not_in_its_comment():
    text = "let a\u00a0b = p  # a\u00a0comment"
    body_end = text.index("#")
    assert line_flaw(text, (0, body_end)).index == 5
    assert line_flaw(text[body_end:], (0, 0)) is None


def test_escaped_shows_codes_never_raw_characters():
    assert escaped("a\x1b[2Jb") == "a\\x1b[2Jb"
    assert escaped("x\u202ey") == "x<U+202E>y"
    assert escaped("d\u3164.csv") == "d<U+3164>.csv"
    assert escaped("plain é μ") == "plain é μ"


def test_quoted_is_short_and_escaped():
    long = "root:$6$" + "x" * 200
    q = quoted(long)
    assert len(q) == 40 and q.endswith("...") and q.startswith("root:$6$")
    assert quoted("\x1b" * 100).count("\\x1b") == 9        # 9 escapes of 4 and "..."
    assert "\x1b" not in quoted("\x1b" * 100)
    assert quoted("short") == "short"


# ---------------------------------------------------------------------------
# names

@pytest.mark.parametrize("name, message", [
    ("a\u3164", r"parameter name `a<U\+3164>` holds `U\+3164` \(hangul filler\), an "
                r"invisible character, at character 2"),
    ("a\u115f", r"`U\+115F` \(hangul choseong filler\), an invisible character"),
    ("a\u1160", r"`U\+1160` \(hangul jungseong filler\), an invisible character"),
    ("a\uffa0", r"`U\+FFA0` \(halfwidth hangul filler\), an invisible character"),
    ("a\u2800", r"`U\+2800` \(braille pattern blank\), an invisible character"),
    ("a\u200b", r"`U\+200B` \(zero width space\), an invisible character"),
    ("a\u200d", r"`U\+200D` \(zero width joiner\), an invisible character"),
    ("a\u00a0b", r"`\\xa0` \(no-break space\), an invisible character"),
    ("a\u202eb", r"`U\+202E` \(right-to-left override\), an invisible character"),
    ("\uff50", r"parameter name `ｐ` looks like `p` but is written with other characters"),
    ("\ufb01t", r"parameter name `ﬁt` looks like `fit`"),
    ("\U0001d44e", r"looks like `a`"),                      # mathematical italic small a
    ("\u0430", r"holds `а` \(U\+0430 cyrillic small letter a\) at character 1"),
    ("\u03bc", r"holds `μ` \(U\+03BC greek small letter mu\) at character 1"),
    ("caf\u00e9", r"holds `é` \(U\+00E9 latin small letter e with acute\) at character 4"),
])
def test_a_name_with_another_character_is_refused_naming_it(name, message):
    with pytest.raises(FormulaError, match=message):
        check_name(name, "parameter name")


def test_nfkc_is_what_the_look_alike_message_names():
    # UAX #15: compatibility characters fold to plain ASCII letters
    assert unicodedata.normalize("NFKC", "\uff50") == "p"
    assert unicodedata.normalize("NFKC", "\ufb01") == "fi"
    assert "looks like `p`" in name_problem("\uff50")


@pytest.mark.parametrize("name", ["p", "theta_1", "Mu2", "x" * 64])
def test_plain_names_pass(name):
    assert name_problem(name) is None
    assert check_name(name) == name


# ---------------------------------------------------------------------------
# file names

@pytest.mark.parametrize("name, shown", [
    ("d\u3164.csv", "d<U+3164>.csv"), ("d\u200b.csv", "d<U+200B>.csv"),
    ("d\u00a0.csv", "d\\xa0.csv"), ("r\ufeff.qd", "r<U+FEFF>.qd"), ("a\tb.csv", "a\\x09b.csv"),
    ("d\ufe0f.csv", "d<U+FE0F>.csv"),
])
def test_a_file_name_with_an_invisible_character_is_refused(name, shown):
    problem = file_name_problem(name)
    assert problem is not None and f"file name `{shown}` holds" in problem


@pytest.mark.parametrize("name", ["d.csv", "données été.csv", "μέτρηση.csv", "sub/d 2.csv",
                                  "日本.qd"])
def test_visible_file_names_pass(name):
    assert file_name_problem(name) is None


# ---------------------------------------------------------------------------
# through the shell and the readers

def _app(tmp_path):
    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=100, color=False), log_file=str(tmp_path / "log"))
    app.ws.base_dir = str(tmp_path)
    return app, out, err


def test_a_comment_at_the_prompt_cannot_carry_an_escape(tmp_path):
    app, out, err = _app(tmp_path)
    assert app.run("param p unit   # \x1b[2K\x1b[1A") == "error"
    text = err.getvalue()
    assert "\x1b" not in text and "column 18: character `\\x1b` (escape)" in text
    assert app.ws.model.param_names == ()           # the command did not run either
    assert app.run("# only a comment \u202e") == "error"
    assert "`U+202E` (right-to-left override)" in err.getvalue()
    assert app.run("param p unit   # an ordinary comment, é") == "ok"


def test_a_session_file_with_a_hidden_comment_is_refused_before_anything_runs(tmp_path):
    path = tmp_path / "s.qd"
    path.write_text("param p unit\nprior p ~ beta(2, 3)\n# done\u2067 \u2069\n",
                    encoding="utf-8")
    with pytest.raises(ShellError, match=r"file `s.qd` line 3, column 7: character "
                                         r"`U\+2067` \(right-to-left isolate\) is not allowed"):
        read_session(str(path), "s.qd")
    app, out, err = _app(tmp_path)
    assert app.run("replay s.qd") == "error"
    assert app.ws.model.param_names == ()
    assert "nothing was replayed" in err.getvalue()


def test_a_password_file_is_not_echoed_as_a_column_name(tmp_path):
    # an invented line in the shape of a password file (no real account or hash)
    path = tmp_path / "shadow"
    path.write_text("root:$6$inventedsalt$inventedhash:19000:0:99999:7:::\n"
                    "bin:*:19000:0:99999:7:::\n", encoding="utf-8")
    with pytest.raises(DataError) as info:
        read_csv(str(path))
    msg = str(info.value)
    assert "row 1, column 1: not a CSV file with a header of names" in msg
    assert "root" not in msg and "invented" not in msg


def test_a_header_with_commas_names_the_first_cell_that_is_not_a_name(tmp_path):
    path = tmp_path / "p.csv"
    path.write_text("dose,resp onse,n\n1,2,3\n", encoding="utf-8")
    with pytest.raises(DataError, match=r"row 1, column 2: not a CSV file with a header of "
                                        r"names"):
        read_csv(str(path))


def test_a_file_that_looks_like_another_is_not_loaded(tmp_path):
    (tmp_path / "d.csv").write_text("n\n1\n", encoding="utf-8")
    (tmp_path / "d\u3164.csv").write_text("n\n99\n", encoding="utf-8")
    app, out, err = _app(tmp_path)
    assert app.run("data load d\u3164.csv") == "error"
    assert "column 11: file name `d<U+3164>.csv` holds `U+3164`" in err.getvalue()
    assert "n" not in app.ws.data
    assert app.run("data load d.csv") == "ok"
    assert list(app.ws.data.values("n")) == [1.0]
    assert os.path.exists(tmp_path / "d\u3164.csv")
