"""The journal: every state change of a shell, on disk as it happens.

Each shell appends to its own journal under ``$XDG_STATE_HOME/quadrat/journals``:
after every command typed or read at the top level, the entries its session log
gained (the commands that changed the state or asked a question, as `save` would
write them, each question with its ``check`` line), flushed and synced to disk
before the next prompt. An `undo` is written as ``# rewind K`` (the log went back
to its first K entries); each record ends with ``# now N commands``. Data files are named by their absolute paths with a
``# data PATH sha256 HEX`` line before the command that read them; the journal
holds no data value that a session file would not.

A journal ends with ``# ended HOW at TIME after N commands``: ``quit`` for a shell
that ended as asked (batch journals are then deleted: their input is the user's),
``SIGHUP`` or ``SIGTERM`` when a signal ended it. A journal with no end line whose
shell is gone (its lock is free) was killed outright. The next interactive start
names the latest one that ended unexpectedly, and `journal restore` replays it
through the one-command path, verifying its checks and data files like a replay.

Each record is one `os.write` on a descriptor opened with ``O_APPEND`` and then
synced, with SIGHUP and SIGTERM held off while it is written, so a journal never
holds half a record; a reader drops a last line without its newline all the same.
Journals older than ``QUADRAT_JOURNAL_DAYS`` days (default 14; 0 turns the journal
off) are deleted at the next start, never one whose shell still runs.
"""

from __future__ import annotations

import datetime
import os
import re
import signal
import socket
from dataclasses import dataclass

from engine.errors import FileError
from engine.files import MAX_SESSION_BYTES, read_text

from .paths import state_dir

try:
    import fcntl
except ImportError:  # pragma: no cover - not on POSIX
    fcntl = None

HEADER = "# quadrat journal"
SUFFIX = ".qdj"
#: Days a journal is kept when QUADRAT_JOURNAL_DAYS is not set.
DEFAULT_DAYS = 14.0
_SIGNALS = (signal.SIGHUP, signal.SIGTERM) if hasattr(signal, "SIGHUP") else (signal.SIGTERM,)
_STARTED = re.compile(r"^# started (?P<when>\S+) pid (?P<pid>\d+) host (?P<host>\S*)$")
_ENDED = re.compile(r"^# ended (?P<how>\S+) at (?P<when>\S+) after (?P<n>\d+) commands?$")
_REWIND = re.compile(r"^# rewind (?P<k>\d+)$")
_NOW = re.compile(r"^# now (?P<n>\d+) commands?$")


class Ended(SystemExit):
    """SIGHUP or SIGTERM arrived (or the terminal went away): finish the journal and
    leave with status 128 + the signal's number."""

    def __init__(self, signum: int):
        super().__init__(128 + signum)
        self.signum = signum

    @property
    def name(self) -> str:
        try:
            return signal.Signals(self.signum).name
        except ValueError:
            return f"signal {self.signum}"


def _on_signal(signum, frame):
    for s in _SIGNALS:
        signal.signal(s, signal.SIG_IGN)   # a second one must not cut the journal's end
    raise Ended(signum)


def catch_signals():
    """Turn SIGHUP and SIGTERM into `Ended` (main thread only); returns what to hand
    `release_signals` to put the old handlers back."""
    old = {}
    try:
        for s in _SIGNALS:
            old[s] = signal.signal(s, _on_signal)
    except ValueError:   # not the main thread
        pass
    return old


def release_signals(old) -> None:
    for s, h in old.items():
        try:
            signal.signal(s, h)
        except (ValueError, TypeError):
            pass


def journals_dir(environ=os.environ) -> str:
    return os.path.join(state_dir(environ), "journals")


def retention_days(environ=os.environ) -> float:
    """Days to keep journals (QUADRAT_JOURNAL_DAYS); 0 means no journal at all.

    Raises
    ------
    ValueError
        The variable is set to something that is not a number of days >= 0.
    """
    text = environ.get("QUADRAT_JOURNAL_DAYS", "").strip()
    if not text:
        return DEFAULT_DAYS
    try:
        days = float(text)
    except ValueError:
        days = -1.0
    if not (0 <= days < float("inf")):
        raise ValueError(f"QUADRAT_JOURNAL_DAYS is `{text[:20]}`; give a number of days >= 0 "
                         "(0 turns the journal off)")
    return days


def _now() -> datetime.datetime:
    return datetime.datetime.now(datetime.timezone.utc)


def _stamp(t: datetime.datetime) -> str:
    return t.isoformat(timespec="seconds")


class HeldSignals:
    """SIGHUP and SIGTERM held off while a record is written (delivered after)."""

    def __enter__(self):
        self.old = None
        if hasattr(signal, "pthread_sigmask"):
            try:
                self.old = signal.pthread_sigmask(signal.SIG_BLOCK, _SIGNALS)
            except (OSError, ValueError):
                self.old = None
        return self

    def __exit__(self, *exc):
        if self.old is not None:
            signal.pthread_sigmask(signal.SIG_SETMASK, self.old)
        return False


class Journal:
    """The journal of one shell.

    Parameters
    ----------
    folder : str
        Where journals are kept (created if need be, private to the user).
    warn : callable
        Called once with a message if the journal cannot be written (a full
        disk): the journal then stops and the session goes on.
    keep : bool, keyword-only
        Whether a journal that ends as asked is kept (interactive shells) or
        deleted (batch runs).
    """

    def __init__(self, folder: str, warn, *, keep: bool = True, now=None):
        now = now or _now()
        os.makedirs(folder, mode=0o700, exist_ok=True)
        base = f"{now.strftime('%Y%m%d-%H%M%S')}-{os.getpid()}"
        self.warn = warn
        self.keep = keep
        self.commands = 0
        self.closed = False
        self._entries: list = []     # the session log entries written so far
        for i in range(100):
            self.id = base if i == 0 else f"{base}-{i}"
            self.path = os.path.join(folder, self.id + SUFFIX)
            try:
                self._fd = os.open(self.path, os.O_WRONLY | os.O_CREAT | os.O_EXCL |
                                   os.O_APPEND | getattr(os, "O_CLOEXEC", 0), 0o600)
                break
            except FileExistsError:
                continue
        else:  # pragma: no cover - a hundred shells in one second with one pid
            raise OSError("no free journal name")
        if fcntl is not None:
            try:
                fcntl.flock(self._fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
            except OSError:
                pass
        self._write([HEADER + ", written by each command as it happens",
                     f"# started {_stamp(now)} pid {os.getpid()} host {socket.gethostname()}",
                     f"# folder {os.getcwd()}", ""])

    # -- writing ------------------------------------------------------------------
    def _write(self, lines: list[str]) -> None:
        if self.closed:
            return
        data = ("\n".join(lines) + "\n").encode("utf-8")
        try:
            with HeldSignals():
                view = memoryview(data)
                while view:
                    n = os.write(self._fd, view)
                    view = view[n:]
                os.fsync(self._fd)
        except OSError as exc:
            self._fail(exc)

    def _fail(self, exc: OSError) -> None:
        self.closed = True
        try:
            os.close(self._fd)
        except OSError:
            pass
        if self.warn is not None:
            self.warn(f"the journal `{self.path}` cannot be written ({exc.strerror or exc}); "
                      "this session goes on without one: `save` it to keep it")

    def sync(self, log) -> None:
        """Write what the session log `log` gained since the last call (a list of
        `Entry`): a rewind where it lost entries, then each new entry."""
        if self.closed:
            return
        k = 0
        old = self._entries
        while k < len(old) and k < len(log) and old[k] is log[k]:
            k += 1
        if k == len(old) == len(log):
            return
        lines: list[str] = []
        if k < len(old):
            lines.append(f"# rewind {k}")
        for e in log[k:]:
            lines.extend(entry_lines(e))
        self.commands = len(log)
        lines.append(f"# now {self.commands} command{'s' if self.commands != 1 else ''}")
        self._entries = list(log)
        self._write(lines)

    def finish(self, how: str = "quit") -> None:
        """End the journal: ``quit`` for an end as asked, or the signal's name."""
        if self.closed:
            return
        self._write([f"# ended {how} at {_stamp(_now())} after {self.commands} command"
                     f"{'s' if self.commands != 1 else ''}"])
        if self.closed:
            return
        self.closed = True
        try:
            os.close(self._fd)
        except OSError:
            pass
        if how == "quit" and not self.keep:
            try:
                os.unlink(self.path)
            except OSError:
                pass


def start(app, *, interactive: bool, environ=os.environ) -> Journal | None:
    """The journal of the shell of `app` (set as ``app.journal``), old journals pruned;
    an interactive start says when a session ended unexpectedly. None when the
    journal is off (QUADRAT_JOURNAL_DAYS=0) or cannot be written (one warning)."""
    warn = app.printer.warning
    try:
        days = retention_days(environ)
    except ValueError as exc:
        warn(f"{exc}; keeping journals {DEFAULT_DAYS:g} days")
        days = DEFAULT_DAYS
    if days == 0:
        return None
    folder = journals_dir(environ)
    try:
        journal = Journal(folder, warn, keep=interactive)
    except OSError as exc:
        warn(f"no journal for this session: `{folder}` cannot be written "
             f"({exc.strerror or exc}); `save` the session to keep it")
        return None
    prune(folder, days)
    app.journal = journal
    if interactive:
        line = notice(scan(folder, skip=journal.path))
        if line:
            app.printer.note(line)
    return journal


def entry_lines(e) -> list[str]:
    """A session log entry as the journal writes it: data files by absolute path, with
    their checksum; a question with the check lines of what it showed."""
    from .script import _quote, _relocated

    out = []
    text = e.text
    if e.data_file is not None:
        text = _relocated(text, e.data_file.typed, e.data_file.absolute)
        out.append(f"# data {_quote(e.data_file.absolute)} sha256 {e.data_file.sha256}")
    out.append(text)
    out.extend(s.check_line() for s in e.shown)
    return out


# ---------------------------------------------------------------------------
# reading

@dataclass(frozen=True)
class JournalInfo:
    """What a journal's file says about its shell.

    Attributes
    ----------
    id : str
        The file name without its suffix (``YYYYMMDD-HHMMSS-PID``).
    started : str
        When the shell started (UTC, ISO 8601), as the header says.
    ended : str or None
        How it ended (``quit``, ``SIGHUP``, ``SIGTERM``), or None with no end line.
    ended_at : str or None
    commands : int
        Entries of the session log it holds at its end (undone ones gone).
    restored : bool
        Whether a later shell restored it.
    live : bool
        Whether its shell still runs (its lock is held).
    mtime : float
    """

    id: str
    path: str
    started: str
    folder: str
    ended: str | None
    ended_at: str | None
    commands: int
    restored: bool
    live: bool
    mtime: float

    @property
    def unexpected(self) -> bool:
        """Ended by a signal or killed outright, with something in it, not restored."""
        return (not self.live and self.ended != "quit" and not self.restored
                and self.commands > 0)

    def how(self) -> str:
        if self.ended is None:
            return "live" if self.live else "killed (no end line)"
        return {"quit": "ended as asked"}.get(self.ended, f"ended by {self.ended}")


def _locked(path: str) -> bool:
    """Whether another shell holds the journal at `path` open (it still runs)."""
    if fcntl is None:
        return False
    try:
        fd = os.open(path, os.O_RDONLY | getattr(os, "O_NONBLOCK", 0))
    except OSError:
        return False
    try:
        fcntl.flock(fd, fcntl.LOCK_EX | fcntl.LOCK_NB)
    except OSError:
        return True
    finally:
        os.close(fd)
    return False


def read_journal(path: str) -> tuple[list[str], str]:
    """The whole lines of a journal (a last line cut short by a crash dropped)."""
    text, _ = read_text(path, shown=os.path.basename(path), what="journal",
                        limit=MAX_SESSION_BYTES)
    if text and not text.endswith("\n"):
        text = text[: text.rfind("\n") + 1]
    return text.split("\n")[:-1], text


def info_of(path: str) -> JournalInfo | None:
    """The `JournalInfo` of the journal at `path`, or None if it is not one."""
    try:
        lines, _ = read_journal(path)
        mtime = os.stat(path).st_mtime
    except (FileError, OSError):
        return None
    if not lines or not lines[0].startswith(HEADER):
        return None
    started, folder = "", ""
    ended = ended_at = None
    restored = False
    commands = 0
    for line in lines:
        if line.startswith("# started "):
            m = _STARTED.match(line)
            started = m.group("when") if m else ""
        elif line.startswith("# folder "):
            folder = line[len("# folder "):]
        elif line.startswith("# ended "):
            m = _ENDED.match(line)
            if m:
                ended, ended_at = m.group("how"), m.group("when")
        elif line.startswith("# restored "):
            restored = True
        elif line.startswith("# now "):
            m = _NOW.match(line)
            commands = int(m.group("n")) if m else commands
    return JournalInfo(os.path.basename(path)[: -len(SUFFIX)], path, started, folder, ended,
                       ended_at, commands, restored, ended is None and _locked(path), mtime)


def scan(folder: str, *, skip: str | None = None) -> list[JournalInfo]:
    """Every journal in `folder`, oldest first (`skip`: this shell's own)."""
    try:
        names = sorted(n for n in os.listdir(folder) if n.endswith(SUFFIX))
    except OSError:
        return []
    out = []
    for n in names:
        path = os.path.join(folder, n)
        if skip is not None and os.path.abspath(path) == os.path.abspath(skip):
            continue
        if os.path.islink(path) or not os.path.isfile(path):
            continue
        info = info_of(path)
        if info is not None:
            out.append(info)
    return out


def prune(folder: str, days: float, *, now: float | None = None) -> int:
    """Delete journals last written more than `days` days ago (never a live one);
    returns how many."""
    import time

    now = time.time() if now is None else now
    gone = 0
    for info in scan(folder):
        if info.live or now - info.mtime <= days * 86400:
            continue
        try:
            os.unlink(info.path)
            gone += 1
        except OSError:
            pass
    return gone


def when_text(iso: str | None) -> str:
    """``2026-12-03 13:01 UTC`` from an ISO time (or the text as it is)."""
    if not iso:
        return "an unknown time"
    try:
        t = datetime.datetime.fromisoformat(iso)
    except ValueError:
        return iso
    return t.astimezone(datetime.timezone.utc).strftime("%Y-%m-%d %H:%M UTC")


def notice(infos: list[JournalInfo]) -> str | None:
    """The line the prompt starts with when a session ended unexpectedly."""
    lost = [i for i in infos if i.unexpected]
    if not lost:
        return None
    last = lost[-1]
    how = f"by {last.ended}" if last.ended else "without finishing its journal (killed)"
    when = when_text(last.ended_at or datetime.datetime.fromtimestamp(
        last.mtime, datetime.timezone.utc).isoformat())
    more = (f"; {len(lost) - 1} more ended so (`journal` lists them)" if len(lost) > 1 else "")
    return (f"a session ended unexpectedly {how} at {when} after {last.commands} command"
            f"{'s' if last.commands != 1 else ''} (journal {last.id}); `journal restore` "
            f"brings it back{more}")


# ---------------------------------------------------------------------------
# restoring

@dataclass(frozen=True)
class Chunk:
    """A run of journal lines to replay, then where the log goes back to (or None)."""

    lines: tuple[tuple[int, str], ...]
    rewind: int | None


def chunks(lines: list[str]) -> list[Chunk]:
    """The journal's commands (comment lines off), cut at each ``# rewind K``."""
    out, cur = [], []
    for i, line in enumerate(lines, 1):
        m = _REWIND.match(line)
        if m:
            out.append(Chunk(tuple(cur), int(m.group("k"))))
            cur = []
        elif line.strip() and not line.lstrip().startswith("#"):
            cur.append((i, line))
    out.append(Chunk(tuple(cur), None))
    return out


def data_lines(lines: list[str]):
    """The ``# data PATH sha256 HEX`` lines anywhere in a journal, as `DataCheck`s."""
    from .script import _DATA, DataCheck

    out = []
    for i, raw in enumerate(lines, 1):
        m = _DATA.match(raw.strip())
        if m is not None:
            path = m.group("path")
            if len(path) >= 2 and path[0] == path[-1] == '"':
                path = path[1:-1]
            out.append(DataCheck(path, m.group("sha").lower(), i))
    return out


def mark_restored(info: JournalInfo, by: str) -> None:
    """Append ``# restored`` to an ended journal, so that it is not offered again (a
    last line cut short by a crash is cut off first, so it cannot become whole)."""
    try:
        fd = os.open(info.path, os.O_RDWR | getattr(os, "O_CLOEXEC", 0))
    except OSError:
        return
    try:
        size = os.fstat(fd).st_size
        tail = os.pread(fd, min(size, 1 << 16), max(0, size - (1 << 16))) if size else b""
        if tail and not tail.endswith(b"\n"):
            cut = tail.rfind(b"\n")
            os.ftruncate(fd, size - len(tail) + cut + 1 if cut >= 0 else size - len(tail))
        os.lseek(fd, 0, os.SEEK_END)
        os.write(fd, f"# restored at {_stamp(_now())} by journal {by}\n".encode())
        os.fsync(fd)
    except OSError:
        pass
    finally:
        os.close(fd)


def restore(app, info: JournalInfo, *, allow_changed_data: bool = False):
    """Replay the journal `info` through `app`'s one-command path, verifying its
    checks and its data files; returns the `Tally`. Raises `ShellError` before
    running anything when a data file changed (unless allowed) or is unreadable."""
    from .script import Replaying, verify_data
    from .words import ShellError

    try:
        lines, _ = read_journal(info.path)
    except FileError as exc:
        raise ShellError(str(exc)) from None
    shown = f"journal {info.id}"
    problems = verify_data(info.path, data_lines(lines))
    more = f" ({len(problems) - 1} more)" if len(problems) > 1 else ""
    for p in problems:
        if not p.allowable:
            raise ShellError(f"{shown}: {p.message}; nothing was restored{more}")
    if problems and not (allow_changed_data or app.allow_changed_data):
        raise ShellError(f"{shown}: {problems[0].message}; `journal restore {info.id} "
                         f"--allow-changed-data` goes on{more}")
    for p in problems:
        app.printer.warning(f"{shown}: {p.message}; going on as told")
    total = None
    folder = info.folder if os.path.isdir(info.folder) else os.getcwd()
    with Replaying(app, os.path.realpath(info.path), folder) as frame:
        for chunk in chunks(lines):
            numbers = [n for n, _ in chunk.lines]
            t = app.run_lines([text for _, text in chunk.lines],
                              lambda i: f"{shown} line {numbers[i - 1]}")
            if total is None:
                total = t
            else:
                total.errors += t.errors
                total.failed += t.failed
                total.checked += t.checked
                total.cancelled |= t.cancelled
                total.quit |= t.quit
            if t.cancelled or t.quit or (t.errors and not app.keep_going):
                break
            if chunk.rewind is not None:
                rewind(app, chunk.rewind, shown)
    total.wrote = tuple(frame.wrote)
    return total


def rewind(app, k: int, shown: str) -> None:
    """Take the session log back to its first `k` entries (what an `undo` did)."""
    from .words import ShellError

    if k > len(app.log):
        raise ShellError(f"{shown}: a rewind to {k} commands, but only {len(app.log)} were "
                         "restored; the journal is not whole")
    if k == len(app.log):
        return
    e = app.log[k]
    if not app.ws.history.reachable(e.before):
        raise ShellError(f"{shown}: cannot go back to command {k}: the undo history is "
                         "used up")
    app.restore(e.before)
    del app.log[k:]
