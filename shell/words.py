"""Splitting a command line into its parts, with the column of each.

A line is one command; ``#`` starts a comment (a formula never holds ``#``).
Every error a command reports about its words carries the 1-based column of
the offending part in the line as typed, so that `error: column 21: ...`
points at it. A formula handed to the engine keeps its offset in the line, and
the engine's column (relative to the formula) is shifted by it.
"""

from __future__ import annotations

import math
import re
from dataclasses import dataclass

from engine.characters import file_name_problem, line_flaw, line_message
from engine.errors import FormulaError, QuadratError


class ShellError(QuadratError):
    """Bad input to a command: one line, with the column in the line if known."""

    def __init__(self, message: str, column: int | None = None):
        self.reason = message
        self.column = column
        super().__init__(f"column {column}: {message}" if column is not None else message)


class Quit(Exception):
    """Leave the shell (raised by `quit`)."""


@dataclass(frozen=True)
class Word:
    """A whitespace-separated word and its 0-based start in the line."""

    text: str
    start: int

    @property
    def column(self) -> int:
        return self.start + 1

    @property
    def end(self) -> int:
        return self.start + len(self.text)


@dataclass(frozen=True)
class Segment:
    """A stretch of the line (a formula, a file name) and its 0-based start."""

    text: str
    start: int

    @property
    def column(self) -> int:
        return self.start + 1


_WORD = re.compile(r'"[^"]*"|\S+')


@dataclass(frozen=True)
class Line:
    """A command line, or a part of one (``check`` hands its question on).

    Attributes
    ----------
    source : str
        The whole line as typed, comment included.
    start, end : int
        The part of `source` this command reads (comment and outer blanks off).
    """

    source: str
    start: int
    end: int

    @classmethod
    def of(cls, source: str) -> "Line":
        cut = source.find("#")
        body = source if cut < 0 else source[:cut]
        stripped = body.rstrip()
        start = len(stripped) - len(stripped.lstrip())
        return cls(source, start, len(stripped))

    @property
    def text(self) -> str:
        return self.source[self.start:self.end]

    @property
    def blank(self) -> bool:
        return self.start >= self.end

    @property
    def words(self) -> tuple[Word, ...]:
        return tuple(Word(m.group(0), self.start + m.start())
                     for m in _WORD.finditer(self.text))

    @property
    def name(self) -> str:
        w = self.words
        return w[0].text if w else ""

    def rest(self, index: int) -> Segment:
        """Everything from word `index` to the end (empty at the end of the line)."""
        w = self.words
        if index >= len(w):
            return Segment("", self.end)
        return Segment(self.source[w[index].start:self.end], w[index].start)

    def after(self, pos: int) -> Segment:
        """The text from 0-based position `pos` to the end, leading blanks off."""
        text = self.source[pos:self.end]
        shift = len(text) - len(text.lstrip())
        return Segment(text.strip(), pos + shift)

    def part(self, start: int, end: int) -> "Line":
        """A sub-line of this line (positions 0-based in `source`)."""
        text = self.source[start:end]
        a = start + len(text) - len(text.lstrip())
        b = start + len(text.rstrip())
        return Line(self.source, a, max(a, b))

    def end_column(self) -> int:
        return self.end + 1


def check_characters(line: Line) -> None:
    """Refuse a control or format character anywhere in the line, its comment
    included (an escape sequence, a bidi override, a NUL byte): echoed, or shown
    by `cat` of a session file, it could rewrite or hide what the line says."""
    flaw = line_flaw(line.source, (line.start, line.end))
    if flaw is not None:
        raise ShellError(line_message(flaw), flaw.index + 1)


def split_lines(text: str) -> list[str]:
    """Lines end at \\n (after \\r\\n or a lone \\r) only: the other breaks that
    `str.splitlines` knows (\\x85, \\u2028, form feeds) would hide a second command
    inside what an editor shows as one line; left in, they are refused."""
    lines = text.replace("\r\n", "\n").replace("\r", "\n").split("\n")
    return lines[:-1] if lines and lines[-1] == "" else lines


def layer_word(text: str) -> str | None:
    """``begin`` for a `whatif` line, ``end`` for `whatif end`, else None."""
    w = Line.of(text).words
    if not w or w[0].text != "whatif":
        return None
    return "end" if len(w) == 2 and w[1].text == "end" else "begin" if len(w) == 1 else None


def split_commands(text: str) -> list[str]:
    """The commands of ``-c`` text: separated by newlines and by ``;``.

    A ``;`` inside a comment does not separate (the comment runs to the end of
    its line).
    """
    out: list[str] = []
    for raw in split_lines(text) or [""]:
        cut = raw.find("#")
        body, comment = (raw, "") if cut < 0 else (raw[:cut], raw[cut:])
        parts = body.split(";")
        parts[-1] = parts[-1] + comment
        out.extend(p.strip() for p in parts)
    return out


# ---------------------------------------------------------------------------
# reading words

def number(word: Word, what: str) -> float:
    """A finite number typed as a word."""
    t = word.text
    try:
        v = float(t)
    except ValueError:
        raise ShellError(f"{what} `{t}` is not a number", word.column) from None
    if not math.isfinite(v) or t.strip().lower().lstrip("+-") in ("nan", "inf", "infinity"):
        raise ShellError(f"{what} `{t}` is not a finite number", word.column)
    return v


def fraction(word: Word, what: str) -> float:
    """A probability or level strictly between 0 and 1, typed as ``0.95`` or ``95%``.

    A whole number between 1 and 100 is refused with the reading it probably meant
    (``95`` -> ``95%``), never taken as a percentage silently.
    """
    t = word.text
    if t.endswith("%"):
        v = number(Word(t[:-1], word.start), what)
        if not 0 < v < 100:
            raise ShellError(f"{what} must be between 0% and 100%; got `{t}`", word.column)
        return v / 100
    v = number(word, what)
    if 1 < v < 100 and v == int(v):
        raise ShellError(f"{what} must be between 0 and 1; for {v:g} percent write `{t}%` or "
                         f"`{v / 100:g}`", word.column)
    if not 0 < v < 1:
        raise ShellError(f"{what} must be between 0 and 1 (or 0% and 100%); got `{t}`",
                         word.column)
    return v


def is_fraction(text: str) -> bool:
    """Whether a word reads as a level (``0.9``, ``90%``, ``.05``)."""
    t = text[:-1] if text.endswith("%") else text
    try:
        float(t)
    except ValueError:
        return False
    return t.strip().lower().lstrip("+-") not in ("nan", "inf", "infinity")


def whole(word: Word, what: str, *, low: int | None = None) -> int:
    """A whole number typed as a word."""
    v = number(word, what)
    if v != int(v):
        raise ShellError(f"{what} `{word.text}` is not a whole number", word.column)
    if low is not None and v < low:
        raise ShellError(f"{what} must be at least {low}; got `{word.text}`", word.column)
    return int(v)


def path_word(word: Word) -> str:
    """A file name, with surrounding double quotes taken off; one holding an
    invisible character (which could pass for another name) is refused."""
    t = word.text
    if len(t) >= 2 and t[0] == t[-1] == '"':
        t = t[1:-1]
    problem = file_name_problem(t)
    if problem is not None:
        raise ShellError(problem, word.column)
    return t


def formula_at(seg: Segment, call, *args, **kwargs):
    """Call an engine function on a formula; shift a formula error's column by
    the formula's place in the line."""
    try:
        return call(*args, **kwargs)
    except FormulaError as exc:
        if exc.column is not None:
            raise ShellError(exc.reason, seg.start + exc.column) from None
        raise


def lone_equals(text: str) -> list[int]:
    """0-based positions of every ``=`` that is not part of ``==``, ``<=``,
    ``>=`` or ``!=``."""
    out = []
    for i, ch in enumerate(text):
        if ch != "=":
            continue
        before = text[i - 1] if i > 0 else ""
        after = text[i + 1] if i + 1 < len(text) else ""
        if before in "<>=!" and before != "" or after == "=":
            continue
        out.append(i)
    return out
