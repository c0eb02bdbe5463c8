"""The interactive loop: prompt_toolkit with completion, history and toolbar.

`Repl` takes prompt_toolkit's `input` and `output` so that tests drive it with
`create_pipe_input()` and `DummyOutput()`. Each line goes through the same
`App.run` as batch use.
"""

from __future__ import annotations

import os
import signal
import sys

from prompt_toolkit import PromptSession
from prompt_toolkit.history import FileHistory, History, InMemoryHistory

from . import __version__
from .app import App
from .completer import Names, ShellCompleter
from .keys import bindings
from .paths import history_file
from . import render as R
from .toolbar import toolbar_text
from .words import Quit, split_commands

PROMPT = "quadrat> "
#: The prompt inside a what-if layer.
WHATIF_PROMPT = "quadrat (what-if)> "
#: Between the pages of a long listing.
MORE = "-- more: Enter for the next page, q to stop -- "


def prompt_text(ws) -> str:
    """The prompt: it shows a what-if layer while one is open."""
    return WHATIF_PROMPT if ws.in_whatif else PROMPT


class KeptHistory(FileHistory):
    """The prompt's history in a file, which a full disk or a lost file system does not
    break: the first failed write gives one warning and the history goes on in
    memory only. A history file that is not a regular file (a pipe) is not read."""

    def __init__(self, filename: str, warn=None):
        super().__init__(filename)
        self.warn = warn
        self.failed = False

    def load_history_strings(self):
        if os.path.lexists(self.filename) and not os.path.isfile(self.filename):
            return []
        try:
            return list(super().load_history_strings())
        except OSError:
            return []

    def store_string(self, string: str) -> None:
        if self.failed:
            return
        try:
            super().store_string(string)
        except OSError as exc:
            self.failed = True
            if self.warn is not None:
                self.warn(f"the prompt's history cannot be written to `{self.filename}` "
                          f"({exc.strerror or exc}); it is kept in memory for this session")


def default_history(warn=None) -> History:
    """History kept in the XDG state folder (in memory if that cannot be written)."""
    path = history_file()
    try:
        os.makedirs(os.path.dirname(path), exist_ok=True)
        if os.path.lexists(path) and not os.path.isfile(path):
            return InMemoryHistory()
        return KeptHistory(path, warn)
    except OSError:
        return InMemoryHistory()


class Repl:
    """The prompt loop over an `App`.

    Parameters
    ----------
    app : App
    input, output : prompt_toolkit Input and Output, optional
        The terminal by default; a pipe input and `DummyOutput` in tests.
    history : prompt_toolkit History, optional
        By default a file under the XDG state folder.
    """

    def __init__(self, app: App, *, input=None, output=None, history: History | None = None):
        self.app = app
        try:
            self.tty = input is None and sys.stdin.isatty()
        except (AttributeError, ValueError):
            self.tty = False
        self.session = PromptSession(
            lambda: prompt_text(app.ws),
            completer=ShellCompleter(lambda: Names.of(app.ws)),
            complete_while_typing=False,
            history=history if history is not None else default_history(app.printer.warning),
            bottom_toolbar=self.toolbar,
            key_bindings=bindings(),
            input=input,
            output=output,
        )
        # a listing longer than the screen stops after each page
        self.pager = PromptSession(input=input, output=output, history=InMemoryHistory())
        app.printer.more = self.more

    def more(self) -> bool:
        """Between pages: Enter goes on, `q` (or Ctrl-C, Ctrl-D) stops."""
        try:
            text = self.pager.prompt(MORE)
        except (KeyboardInterrupt, EOFError):
            return False
        return not text.strip().lower().startswith("q")

    def terminal_gone(self) -> bool:
        """Whether an end of input came from a terminal that hung up (a dropped
        connection), not from Ctrl-D: the journal then says it ended unexpectedly."""
        if not self.tty:
            return False
        try:
            import termios
        except ImportError:  # pragma: no cover - not on POSIX
            return False
        try:
            termios.tcgetattr(sys.stdin.fileno())
        except (termios.error, OSError, ValueError):
            return True
        return False

    def toolbar(self) -> str:
        with R.showing(self.app.digits):
            return toolbar_text(self.app.ws.status(), self.app.printer.width)

    def run(self) -> int:
        """Read and run lines until `quit` or Ctrl-D; returns the exit status."""
        self.app.printer.line(f"quadrat {__version__}: `help` lists the commands; Ctrl-D or "
                              "`quit` leaves")
        while True:
            try:
                text = self.session.prompt()
            except KeyboardInterrupt:
                continue
            except EOFError:
                if self.terminal_gone():
                    from .journal import Ended
                    raise Ended(signal.SIGHUP) from None
                break
            try:
                self.run_line(text)
            except Quit:
                break
        return 0

    def run_line(self, text: str) -> None:
        """One typed line: one command, or several separated by `;` as in batch use,
        run in turn until one fails."""
        parts = [p for p in split_commands(text) if p.strip()]
        if len(parts) <= 1:
            self.app.run(text)
            return
        for i, part in enumerate(parts, 1):
            status = self.app.run(part, f"command {i} of {len(parts)}")
            if status in ("error", "cancelled") and i < len(parts):
                left = len(parts) - i
                self.app.printer.note(f"the {left} command{'s' if left != 1 else ''} after "
                                      "it on the line did not run")
                break
