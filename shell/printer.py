"""All of the shell's output goes through one `Printer`.

It knows the width to draw at, whether colours may be used (never when the
stream is not a terminal or ``NO_COLOR`` is set) and whether a progress bar
may be drawn (the same rule). Errors go to their own stream: standard error in
batch use, the same stream at the prompt.
"""

from __future__ import annotations

import os
import shutil
import sys
import time
import unicodedata
from typing import Callable, TextIO

_STYLES = {"error": "\x1b[31m", "warning": "\x1b[33m", "note": "\x1b[2m", "ok": "\x1b[32m",
           "bold": "\x1b[1m"}
_RESET = "\x1b[0m"


def hidden(ch: str) -> bool:
    """A control or format character (escape sequences, bidi overrides, byte-order
    marks): text from a file or a line must never carry one to the terminal."""
    return ch != "\t" and unicodedata.category(ch) in ("Cc", "Cf", "Zl", "Zp")


def visible(text: str) -> str:
    """`text` with every hidden character written as an escape (``\\x1b``)."""
    if not any(hidden(ch) for ch in text):
        return text
    return "".join(ch.encode("unicode_escape").decode("ascii") if hidden(ch) else ch
                   for ch in text)


def is_terminal(stream: TextIO) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


def colour_allowed(stream: TextIO, environ=os.environ) -> bool:
    """Colours and progress bars only on a terminal, and never with NO_COLOR."""
    if environ.get("NO_COLOR", "") != "":
        return False
    return is_terminal(stream)


class Printer:
    """Writes lines, notes, warnings and errors.

    Parameters
    ----------
    out : text stream
        Where answers go.
    err : text stream, optional
        Where errors go (default: `out`).
    width : int, optional
        Columns to draw at (default: the terminal's, or ``COLUMNS``, or 80).
    color : bool, optional
        Whether to colour (default: `colour_allowed(out)`).
    """

    def __init__(self, out: TextIO | None = None, err: TextIO | None = None, *,
                 width: int | None = None, color: bool | None = None,
                 clock: Callable[[], float] = time.monotonic):
        self.out = out if out is not None else sys.stdout
        self.err = err if err is not None else self.out
        self.color = colour_allowed(self.out) if color is None else color
        self._width = width
        self.clock = clock

    @property
    def width(self) -> int:
        if self._width:
            return self._width
        try:
            cols = int(os.environ.get("COLUMNS", "0"))
        except ValueError:
            cols = 0
        if cols <= 0 and is_terminal(self.out):
            cols = shutil.get_terminal_size((80, 24)).columns
        return max(40, min(cols or 80, 200))

    def _paint(self, text: str, style: str | None) -> str:
        if not self.color or style is None:
            return text
        return _STYLES[style] + text + _RESET

    def line(self, text: str = "", style: str | None = None) -> None:
        self.out.write(self._paint(text, style) + "\n")
        self.out.flush()

    def lines(self, texts) -> None:
        for t in texts:
            self.line(t)

    # notes, warnings and errors quote names, paths and cells from files: they are
    # shown with any control character escaped, on one line
    def note(self, text: str) -> None:
        self.line("note: " + visible(text), "note")

    def warning(self, text: str) -> None:
        self.line("warning: " + visible(text), "warning")

    def error(self, text: str) -> None:
        self.err.write(self._paint(visible(text), "error") + "\n")
        self.err.flush()

    def progress(self) -> "Progress":
        return Progress(self)


class Progress:
    """A progress bar for `compute`: drawn only on a terminal without NO_COLOR,
    and only once the work has taken more than a second."""

    DELAY = 1.0
    #: Seconds between redraws.
    EVERY = 0.1

    def __init__(self, printer: Printer):
        self.printer = printer
        self.t0 = printer.clock()
        self.drawn = False
        self.last = -1.0

    def __call__(self, done: int, total: int) -> None:
        p = self.printer
        if not p.color:
            return
        elapsed = p.clock() - self.t0
        if elapsed < self.DELAY or (elapsed - self.last < self.EVERY and done < total):
            return
        self.drawn = True
        self.last = elapsed
        p.out.write("\r" + bar(done, total, elapsed, p.width - 1))
        p.out.flush()

    def close(self) -> None:
        if self.drawn:
            self.printer.out.write("\r" + " " * (self.printer.width - 1) + "\r")
            self.printer.out.flush()
            self.drawn = False


def bar(done: int, total: int, elapsed: float, width: int) -> str:
    """``[#######.......]  45%  12.3 s, about 15.0 s left`` in `width` columns."""
    frac = done / total if total else 1.0
    left = elapsed * (1 - frac) / frac if frac > 0 else float("inf")
    tail = f" {100 * frac:3.0f}%  {elapsed:.1f} s"
    if frac < 1 and left < 1e7:
        tail += f", about {left:.0f} s left"
    room = max(10, width - len(tail) - 2)
    filled = int(round(room * frac))
    return ("[" + "#" * filled + "." * (room - filled) + "]" + tail)[:width]
