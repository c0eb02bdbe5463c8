"""Text laid out to the terminal: display widths, word wrapping, tables that fit.

`cells` measures text as the terminal shows it (wide characters take two columns,
combining marks and colour codes none). `wrap` breaks prose at blanks, never inside a
word (a number, a name, a path) unless the word alone is wider than the line. A
`Table` is drawn in columns when it fits the width and otherwise stacked: each row
becomes its label on a line of its own, then one line per column, so that values to be
compared ("now" and "what if") stand one under the other instead of wrapping apart.
"""

from __future__ import annotations

import re
import unicodedata
from dataclasses import dataclass
from typing import Sequence

_ANSI = re.compile(r"\x1b\[[0-9;?]*[A-Za-z]")
#: Words that stay with the word after them: an error's sign (``± 3e-8``).
_GLUE = ("±", "(±")


def cells(text: str) -> int:
    """Columns `text` takes on a terminal."""
    if text.isascii() and "\x1b" not in text:
        return len(text)
    n = 0
    for ch in _ANSI.sub("", text):
        if unicodedata.combining(ch):
            continue
        n += 2 if unicodedata.east_asian_width(ch) in "WF" else 1
    return n


def _chop(word: str, room: int) -> list[str]:
    """A word wider than a whole line, in pieces of `room` columns."""
    out, piece = [], ""
    for ch in word:
        if piece and cells(piece + ch) > room:
            out.append(piece)
            piece = ""
        piece += ch
    return out + [piece] if piece else out


def wrap(text: str, width: int, *, hang: int = 2) -> list[str]:
    """`text` broken at blanks into lines of at most `width` columns.

    Continuation lines are indented by the text's own indent plus `hang`. Runs of
    blanks inside a line are kept (they align columns); a break swallows them.
    """
    if cells(text) <= width:
        return [text]
    lead = len(text) - len(text.lstrip(" "))
    indent = " " * min(lead + hang, max(width // 2, 0))
    tokens = re.split(r"( +)", text[lead:])
    words: list[tuple[str, str]] = []          # (blanks before, word)
    gap = ""
    for i, t in enumerate(tokens):
        if i % 2:
            gap = t
        elif t:
            if words and words[-1][1] in _GLUE:
                before, w = words.pop()
                words.append((before, w + gap + t))
            else:
                words.append((gap, t))
            gap = ""
    lines: list[str] = []
    cur = " " * lead
    fresh = True                                # nothing but indent on `cur` yet
    for before, w in words:
        if not fresh and cells(cur + before + w) <= width:
            cur += before + w
            continue
        if not fresh:
            lines.append(cur)
            cur = indent
        room = width - cells(cur)
        if cells(w) > room:
            pieces = _chop(w, max(room, 1))
            for p in pieces[:-1]:
                lines.append(cur + p)
                cur = indent
            w = pieces[-1]
        cur += w
        fresh = False
    lines.append(cur)
    return lines


@dataclass(frozen=True)
class Table:
    """Rows of text in columns, drawn to fit a width.

    Attributes
    ----------
    header : tuple of str
        One title per column; the first column holds each row's label.
    rows : tuple of tuple of str
    align : str
        ``l`` or ``r`` per column (default: the first left, the rest right).
    indent : int
        Blanks before every line.
    lead : int
        How many leading cells make up a row's label in the stacked form (2 for a
        row named by a parameter and a side, as ``shape now``).
    compact : bool
        Stack each row on one line, ``label: title value, title value, ...`` (prose,
        wrapped at blanks by the printer), instead of a line per column.
    """

    header: tuple[str, ...]
    rows: tuple[tuple[str, ...], ...]
    align: str | None = None
    indent: int = 0
    lead: int = 1
    compact: bool = False

    @classmethod
    def of(cls, header: Sequence[str], rows: Sequence[Sequence[str]], *,
           align: str | None = None, indent: int = 0, lead: int = 1,
           compact: bool = False) -> "Table":
        return cls(tuple(header), tuple(tuple(r) for r in rows), align, indent, lead,
                   compact)

    def wide(self) -> list[str]:
        cols = len(self.header)
        align = self.align or ("l" + "r" * (cols - 1))
        widths = [cells(h) for h in self.header]
        for r in self.rows:
            for j, c in enumerate(r):
                widths[j] = max(widths[j], cells(c))

        def fmt(r):
            out = []
            for j, c in enumerate(r):
                pad = " " * (widths[j] - cells(c))
                out.append(c + pad if align[j] == "l" else pad + c)
            return (" " * self.indent + "  ".join(out)).rstrip()

        return [fmt(self.header)] + [fmt(r) for r in self.rows]

    def stacked(self) -> list[str]:
        """Each row as its label, then ``title  value`` lines under it."""
        pad = " " * self.indent
        titles = self.header[self.lead:]
        tw = max((cells(t) for t in titles), default=0)
        out = []
        if self.compact:
            for r in self.rows:
                label = " ".join(c for c in r[:self.lead] if c)
                parts: list[str] = []
                for t, c in zip(titles, r[self.lead:]):
                    if not c:
                        continue
                    if t.startswith("±") and parts:   # an error rides with its value
                        parts[-1] += " " + c
                    else:
                        parts.append(f"{t} {c}" if t else c)
                out.append(pad + (label + ": " if label else "") + ", ".join(parts))
            return out
        for r in self.rows:
            label = " ".join(c for c in r[:self.lead] if c)
            if label:
                out.append(pad + label)
            for t, c in zip(titles, r[self.lead:]):
                head = t + " " * (tw - cells(t))
                out.append((pad + "  " + (head + "  " if tw else "") + c).rstrip())
        return out

    def fit(self, width: int) -> list[str]:
        """The wide form when every line fits `width`, else the stacked form."""
        lines = self.wide()
        if all(cells(x) <= width for x in lines):
            return lines
        return self.stacked()
