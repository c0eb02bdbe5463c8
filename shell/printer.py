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
import threading
import time
from typing import Callable, Iterable, TextIO

from engine.characters import escaped, terminal_safe

from .layout import Table, wrap

_STYLES = {"error": "\x1b[31m", "warning": "\x1b[33m", "note": "\x1b[2m", "ok": "\x1b[32m",
           "bold": "\x1b[1m"}
_RESET = "\x1b[0m"


def visible(text: str) -> str:
    """`text` with every control or format character written as an escape (``\\x1b``,
    ``<U+202E>``): text from a file or a line must never carry one to the terminal."""
    return terminal_safe(text)


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
    height : int, optional
        Rows of the screen (default: the terminal's, or ``LINES``; none when the
        output is not a terminal: pictures then take their natural size).
    wrap : bool, optional
        Break lines wider than `width` at blanks (default: when `out` is a terminal,
        which would otherwise break them anywhere, inside words and numbers).

    Attributes
    ----------
    more : callable or None
        Asked between the pages of a long listing (`page`); returns False to stop.
        The prompt sets it; batch use has none and prints listings whole.
    written : int
        Screen lines written so far (what a picture leaves room for).
    """

    def __init__(self, out: TextIO | None = None, err: TextIO | None = None, *,
                 width: int | None = None, color: bool | None = None,
                 height: int | None = None, wrap: bool | None = None,
                 clock: Callable[[], float] = time.monotonic):
        self.out = out if out is not None else sys.stdout
        self.err = err if err is not None else self.out
        self.color = colour_allowed(self.out) if color is None else color
        self._width = width
        self._height = height
        self.wrap = is_terminal(self.out) if wrap is None else wrap
        self.clock = clock
        self.more: Callable[[], bool] | None = None
        self.written = 0
        self.busy: "Waiting | None" = None      # a waiting line to clear before writing

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

    @property
    def height(self) -> int | None:
        if self._height:
            return self._height
        try:
            rows = int(os.environ.get("LINES", "0"))
        except ValueError:
            rows = 0
        if rows <= 0 and is_terminal(self.out):
            rows = shutil.get_terminal_size((80, 24)).lines
        return max(rows, 10) if rows > 0 else None

    def room(self, natural: int, *, keep: int = 3, least: int = 8) -> int:
        """Rows a picture of `natural` rows may take so that the command's own line
        above it, whatever the command printed before it, and the prompt and toolbar
        below it (`keep` rows in all besides those printed) stay on the screen."""
        h = self.height
        if h is None:
            return natural
        return max(least, min(natural, h - self.written - keep))

    def _paint(self, text: str, style: str | None) -> str:
        if not self.color or style is None:
            return text
        return _STYLES[style] + text + _RESET

    def _fitted(self, text: str) -> list[str]:
        return wrap(text, self.width) if self.wrap else [text]

    def _settle(self) -> None:
        if self.busy is not None:
            self.busy.finish()

    def line(self, text: str = "", style: str | None = None) -> None:
        self._settle()
        for piece in self._fitted(text):
            self.out.write(self._paint(piece, style) + "\n")
            self.written += 1
        self.out.flush()

    def lines(self, texts: Iterable) -> None:
        """Lines of prose, and `Table`s drawn to the width."""
        for t in texts:
            if isinstance(t, Table):
                for x in t.fit(self.width):
                    self.line(x)
            else:
                self.line(t)

    def block(self, text: str) -> None:
        """A picture already drawn to the width: written as it is, never wrapped."""
        self._settle()
        for x in text.splitlines():
            self.out.write(x + "\n")
            self.written += 1
        self.out.flush()

    def page(self, texts: Iterable) -> None:
        """A long listing: in pages of a screen when the prompt can ask for more."""
        flat: list[str] = []
        for t in texts:
            if isinstance(t, Table):
                flat.extend(t.fit(self.width))
            else:
                flat.extend(self._fitted(t))
        h = self.height
        if self.more is None or h is None or len(flat) <= h - 2:
            for x in flat:
                self.line(x)
            return
        step = max(h - 2, 5)
        for start in range(0, len(flat), step):
            for x in flat[start:start + step]:
                self.line(x)
            if start + step < len(flat) and not self.more():
                break

    # notes, warnings and errors quote names, paths and cells from files: they are
    # shown with any control character escaped, on one line
    def note(self, text: str) -> None:
        self.line("note: " + visible(text), "note")

    def warning(self, text: str) -> None:
        self.line("warning: " + visible(text), "warning")

    def error(self, text: str) -> None:
        self._settle()
        # an error quotes what was typed or read: fillers and odd spaces are shown too
        for piece in self._fitted(escaped(text.replace("\t", " "))):
            self.err.write(self._paint(piece, "error") + "\n")
            if self.err is self.out:
                self.written += 1
        self.err.flush()

    def progress(self) -> "Progress":
        return Progress(self)

    def waiting(self, what: str, *, active: bool = True) -> "Waiting":
        """A line that counts the seconds of a command with no bar of its own, once it
        has taken more than a second (on a terminal without NO_COLOR only; never when
        not `active`)."""
        return Waiting(self, what, active=active)


class Waiting:
    """``working on `prob p > 0.5`: 3 s (Ctrl-C cancels)``, redrawn from a thread
    while the command runs, and cleared when it ends (Ctrl-C included)."""

    DELAY = 1.0
    EVERY = 0.5

    def __init__(self, printer: "Printer", what: str, *, active: bool = True):
        self.printer = printer
        self.active = active
        self.what = visible(what if len(what) <= 40 else what[:37] + "...")
        self.stop = threading.Event()
        self.drawn = False
        self.thread: threading.Thread | None = None

    def __enter__(self) -> "Waiting":
        if self.printer.color and self.active:
            self.printer.busy = self
            self.thread = threading.Thread(target=self._run, daemon=True)
            self.thread.start()
        return self

    def _run(self) -> None:
        t0 = time.monotonic()
        if self.stop.wait(self.DELAY):
            return
        p = self.printer
        while not self.stop.is_set():
            text = f"working on `{self.what}`: {time.monotonic() - t0:.0f} s (Ctrl-C cancels)"
            p.out.write("\r" + text[:p.width - 1])
            p.out.flush()
            self.drawn = True
            self.stop.wait(self.EVERY)

    def finish(self) -> None:
        """Stop counting and clear the line (before anything else is written)."""
        self.stop.set()
        if self.thread is not None:
            self.thread.join()
            self.thread = None
        if self.printer.busy is self:
            self.printer.busy = None
        if self.drawn:
            self.drawn = False
            self.printer.out.write("\r" + " " * (self.printer.width - 1) + "\r")
            self.printer.out.flush()

    def __exit__(self, *exc) -> None:
        self.finish()


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
        if p.busy is not None:
            p.busy.finish()   # the bar replaces a waiting line
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
