"""The one-command path: every line, typed or read, goes through `App.run`.

`App` holds the workspace, the printer and the session log (the commands that
changed the state or asked a question, for `save`, `history` and `undo`). It
looks the command up in the table, runs its handler, prints one line for any
error (with the file and line in batch use), turns Ctrl-C during a command
into a clean cancel that leaves the state as before, and logs an unexpected
exception's traceback while the loop goes on.
"""

from __future__ import annotations

import datetime
import os
import sys
import traceback
from dataclasses import dataclass

from engine.characters import quoted
from engine.errors import QuadratError
from engine.state import State
from engine.workspace import Workspace

from . import commands  # noqa: F401  (fills the command table)
from . import render as R
from .paths import state_dir
from .printer import Printer
from .registry import COMMANDS, LATER
from .replies import DataFile, Reply, Shown
from .words import Line, Quit, ShellError, check_characters, layer_word


@dataclass
class Entry:
    """A command kept in the session log."""

    text: str
    kind: str
    before: State
    shown: tuple[Shown, ...] = ()
    data_file: DataFile | None = None


@dataclass(frozen=True)
class Mark:
    """Where things stood before a command: what an error or Ctrl-C goes back to."""

    before: State
    layer: bool            # whether a what-if layer was open
    log_length: int
    prefix: str            # "FILE line N: " for messages, in batch use


@dataclass
class Tally:
    """What a run of many lines came to."""

    errors: int = 0
    failed: int = 0
    checked: int = 0
    cancelled: bool = False
    quit: bool = False
    wrote: tuple[str, ...] = ()     # files a replay wrote (new files only)

    @property
    def exit_code(self) -> int:
        if self.errors or self.cancelled:
            return 2
        if self.failed:
            return 1
        return 0


def _same(a: str, b: str) -> bool:
    return " ".join(a.split()) == " ".join(b.split())


class App:
    """The shell's state and its one-command path.

    Parameters
    ----------
    printer : Printer, optional
    workspace : Workspace, optional
    debug : bool, keyword-only
        Unexpected errors print their traceback to standard error instead of
        the log file.
    keep_going : bool, keyword-only
        Batch runs go on after an error.
    allow_changed_data : bool, keyword-only
        Replays go on when a data file's checksum changed.
    log_file : str, keyword-only
        Where tracebacks of unexpected errors go (default: under the XDG
        state folder).
    """

    def __init__(self, printer: Printer | None = None, workspace: Workspace | None = None, *,
                 debug: bool = False, keep_going: bool = False,
                 allow_changed_data: bool = False, log_file: str | None = None):
        self.printer = printer or Printer()
        self.ws = workspace or Workspace()
        self.debug = debug
        self.keep_going = keep_going
        self.allow_changed_data = allow_changed_data
        self._log_file = log_file
        self.log: list[Entry] = []
        self.written: set[str] = set()      # files this session's save/export wrote
        self.replaying: list[str] = []      # session files being replayed (nesting)
        self.replay_writes: list[list[str]] = []   # files each of those wrote, so far
        self.journal = None                 # shell.journal.Journal, written after each command
        self.depth = 0
        self.current_where: str | None = None
        self.digits = R.DIGITS              # significant digits shown (`digits N`)

    # -- the one path ----------------------------------------------------------
    def run(self, source: str, where: str | None = None) -> str:
        """Run one command line. Returns ``ok``, ``blank``, ``error``,
        ``checked`` (a check held), ``failed`` (a check did not hold) or
        ``cancelled``. Raises `Quit`."""
        line = Line.of(source)
        mark = Mark(self.ws.state, self.ws.in_whatif, len(self.log), f"{where}: " if where else "")
        try:
            check_characters(line)      # the whole line: a comment is shown by `cat` too
        except ShellError as exc:
            self.printer.error(f"{mark.prefix}error: {exc}")
            return "error"
        if line.blank:
            return "blank"
        self.printer.written = 0      # a picture leaves room for what this line prints
        self.depth += 1
        outer_where, self.current_where = self.current_where, where
        try:
            cmd = self.lookup(line)
            waits = cmd.kind == "question" or cmd.name == "plot"
            with R.showing(self.digits), self.printer.waiting(line.text, active=waits):
                reply = cmd.handler(self, line) or Reply()
        except (Quit, BrokenPipeError):
            raise   # leaving, or the reader of the output went away (`| head`)
        except (KeyboardInterrupt, Exception) as exc:  # noqa: BLE001 - the loop must go on
            return self._failed(exc, line, mark)
        finally:
            self.depth -= 1
            self.current_where = outer_where
        if reply.status == "error":
            # a command that ended in an error (a replay that stopped at one) keeps
            # nothing: the state and the session log are as before it
            self._back_to(mark, drop_log=True)
            return "error"
        self.keep(cmd.kind, line, mark.before, reply)
        if self.depth == 0 and self.journal is not None:
            self.journal.sync(self.log)
        if cmd.kind == "check" and reply.status == "ok":
            return "checked"
        return reply.status

    def _failed(self, exc: BaseException, line: Line, mark: "Mark") -> str:
        """Put everything back as it was before `line`, and say why in one line."""
        prefix = mark.prefix
        if isinstance(exc, KeyboardInterrupt):
            if self.depth > 1:
                raise exc
            self._back_to(mark, drop_log=True)
            self.printer.error(f"{prefix}cancelled: the state is as it was before "
                               f"`{line.name}`")
            return "cancelled"
        # the workspace commits nothing on an error; a command that committed part
        # of its work first (a replay) is undone too
        self._back_to(mark)
        if isinstance(exc, QuadratError):
            self.printer.error(f"{prefix}error: {exc}")
        elif isinstance(exc, (RecursionError, MemoryError)):
            what = "out of memory" if isinstance(exc, MemoryError) else "too deeply nested"
            self.printer.error(f"{prefix}error: `{line.name}` ran {what}; nothing was changed")
        else:
            self.internal_error(exc, prefix)
        return "error"

    def _back_to(self, mark: "Mark", *, drop_log: bool = False) -> None:
        self.restore(mark.before, mark.layer)
        if drop_log:
            del self.log[mark.log_length:]

    def lookup(self, line: Line):
        name = line.name
        cmd = COMMANDS.get(name)
        if cmd is not None:
            return cmd
        if name in LATER:
            raise ShellError(f"`{name}` is not in this version of quadrat yet", 1 + line.start)
        raise ShellError(f"unknown command `{quoted(name)}`; `help` lists the commands",
                         1 + line.start)

    def restore(self, before: State, layer_before: bool | None = None) -> None:
        """Put the workspace back to state `before` (going back through its history),
        dropping a what-if layer opened since (when `layer_before` is false)."""
        self.ws.restore(before, close_layer=layer_before is False)

    def internal_error(self, exc: BaseException, prefix: str = "") -> None:
        tb = "".join(traceback.format_exception(type(exc), exc, exc.__traceback__))
        short = f"{type(exc).__name__}: {exc}".splitlines()[0][:200]
        if self.debug:
            sys.stderr.write(tb)
            self.printer.error(f"{prefix}internal error: {short}")
            return
        path = self.log_file
        try:
            os.makedirs(os.path.dirname(path), exist_ok=True)
            with open(path, "a", encoding="utf-8") as fh:
                fh.write(f"--- {datetime.datetime.now().isoformat(timespec='seconds')}\n{tb}")
            where = path
        except OSError:
            sys.stderr.write(tb)
            where = "standard error"
        self.printer.error(f"{prefix}internal error: {short} (details in {where})")

    @property
    def log_file(self) -> str:
        return self._log_file or os.path.join(state_dir(), "errors.log")

    # -- the session log -----------------------------------------------------------
    def keep(self, kind: str, line: Line, before: State, reply: Reply) -> None:
        text = line.text
        if not reply.logged:
            return
        if kind == "change":
            self.log.append(Entry(text, kind, before, reply.shown, reply.data_file))
        elif kind == "question":
            self.log.append(Entry(text, kind, before, reply.shown))
        elif kind == "check":
            last = self.log[-1] if self.log else None
            if (reply.check_of is not None and last is not None
                    and last.kind in ("question", "change")
                    and any(_same(s.question, reply.check_of) for s in last.shown)):
                return  # the check of the question just asked: save writes it anew
            self.log.append(Entry(text, kind, before))
        elif kind == "note":
            self.log.append(Entry(text, kind, before))

    def undo(self) -> Entry:
        """Undo the last kept change: the state goes back to before it, and the
        change and everything asked after it leave the session log. Changes inside a
        what-if layer that was dropped are passed over; inside an open layer only its
        own changes can be undone."""
        i = self._last_change()
        e = self.log[i]
        if not self.ws.history.reachable(e.before):
            raise ShellError("cannot undo that far back: the undo history is used up")
        self.restore(e.before)
        del self.log[i:]
        return e

    def _last_change(self) -> int:
        """Where in the session log the change `undo` would undo stands."""
        closed = 0   # what-if layers passed over, walking back
        for i in range(len(self.log) - 1, -1, -1):
            e = self.log[i]
            layer = layer_word(e.text) if e.kind == "note" else None
            if layer == "end":
                closed += 1
                continue
            if layer == "begin":
                if closed:
                    closed -= 1
                    continue
                raise ShellError("nothing to undo inside this what-if layer; `whatif end` "
                                 "drops it")
            if e.kind == "change" and not closed:
                return i
        raise ShellError("nothing to undo")

    def run_lines(self, lines, label) -> Tally:
        """Run lines in order; `label(i)` names line i (1-based) in messages.
        Stops at the first error unless `keep_going`."""
        tally = Tally()
        for i, source in enumerate(lines, 1):
            try:
                status = self.run(source, label(i))
            except Quit:
                tally.quit = True
                break
            if status == "error":
                tally.errors += 1
                if not self.keep_going:
                    break
            elif status == "failed":
                tally.failed += 1
            elif status == "checked":
                tally.checked += 1
            elif status == "cancelled":
                tally.cancelled = True
                break
        return tally
