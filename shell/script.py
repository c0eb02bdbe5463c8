"""Session files (``.qd``): write, read, verify and replay.

A session file is plain text: a header comment (quadrat's version, the date,
and ``# data PATH sha256 HEX`` for every data file read), then the commands that
changed the state or asked a question, as typed, each question followed by a
``check`` line with the numbers it showed. Replaying verifies every data file's
checksum first, then runs the lines through the same one-command path as the
prompt; a check that moved is reported with its old and new value.
"""

from __future__ import annotations

import datetime
import os
import re
from dataclasses import dataclass

from engine.characters import file_name_problem
from engine.errors import FileError
from engine.files import (MAX_SESSION_BYTES, Target, atomic_write, first_line, read_text,
                          sha256_of, write_target)

from . import __version__
from .words import Line, ShellError, check_characters, split_lines

#: The first line of every file `save` writes starts with this.
HEADER = "# quadrat session"
#: How deep `replay` may nest (a file that replays another ...).
MAX_REPLAY_DEPTH = 8
_DATA = re.compile(r"^#\s*data\s+(?P<path>.+?)\s+sha256\s+(?P<sha>[0-9a-fA-F]{64})\s*$")
#: A header comment that means to be a checksum line (and must then be whole).
_DATA_LIKE = re.compile(r"^#\s*data\s.*\bsha256\b")


@dataclass(frozen=True)
class DataCheck:
    """A ``# data PATH sha256 HEX`` line of a session file's header."""

    path: str
    sha256: str
    line: int


@dataclass(frozen=True)
class SessionText:
    """What `save` writes, and what is in it."""

    text: str
    commands: int
    checks: int
    data_files: int


@dataclass(frozen=True)
class SaveReport:
    path: str
    commands: int
    checks: int
    data_files: int
    via: str = ""       # how it went through a symbolic link, if it did


# ---------------------------------------------------------------------------
# writing

def _quote(path: str) -> str:
    return f'"{path}"' if any(c.isspace() for c in path) else path


def _relocated(text: str, typed: str, rel: str) -> str:
    """The `data load` line `text` with its path spelled `rel` instead."""
    if rel == typed:
        return text
    w = Line.of(text).words
    if len(w) < 3:
        return text
    return text[:w[2].start] + _quote(rel) + text[w[2].end:]


def session_text(app, path: str, *, now: datetime.datetime | None = None) -> SessionText:
    """The text `save` writes for the session of `app` to `path`."""
    now = now or datetime.datetime.now(datetime.timezone.utc)
    folder = os.path.dirname(os.path.abspath(path))
    body: list[str] = []
    files: dict[str, str] = {}
    checks = 0
    for e in app.log:
        text = e.text
        if e.data_file is not None:
            if os.path.isabs(e.data_file.typed):
                rel = e.data_file.absolute
            else:
                rel = os.path.relpath(e.data_file.absolute, folder)
            text = _relocated(text, e.data_file.typed, rel)
            files[rel] = e.data_file.sha256
        body.append(text)
        for s in e.shown:
            body.append(s.check_line())
            checks += 1
    head = [f"{HEADER}, saved by quadrat {__version__} on "
            f"{now.isoformat(timespec='seconds')}"]
    for rel, sha in files.items():
        head.append(f"# data {rel} sha256 {sha}")
    text = "\n".join(head + [""] + body) + "\n"
    return SessionText(text, len(app.log), checks, len(files))


def written_by_save(path: str) -> bool:
    """Whether the regular file at `path` starts with the header `save` writes."""
    first = first_line(path)
    return first is not None and first.startswith(HEADER)


def may_write(app, full: str, shown: str, *, force: bool = False, word=None,
              session_file: bool = False) -> Target:
    """Where a write of `full` (typed as `shown`) lands, or the one line saying why not.

    A session file being replayed writes new files only: never over a file that
    was there before the replay began, this session's own files included, `force`
    or not (a file someone sent must not replace the user's data, sessions or
    results). Otherwise an existing file is overwritten only if this session wrote
    it, with `force`, or (`session_file`) if `save` wrote it.
    """
    column = word.column if word is not None else None
    try:
        target = write_target(full, shown=shown)
    except FileError as exc:
        raise ShellError(str(exc), column) from None
    there = target.exists or target.link is not None
    if app.replaying and there and target.path not in app.replay_writes[0]:
        raise ShellError(f"`{shown}` exists: a session file being replayed writes new files "
                         "only, never over an existing one (nothing was written)", column)
    if not there or force or target.path in app.written:
        return target
    if session_file and written_by_save(target.path):
        return target
    if session_file:
        raise ShellError(f"`{shown}` exists and was not written by `save`; `save {shown} force` "
                         "overwrites it", column)
    raise ShellError(f"`{shown}` exists and this session did not write it; add `force` to "
                     "overwrite it", column)


def wrote(app, target: Target) -> str:
    """Record a file just written (for `may_write` and a replay's list of writes);
    returns the words to add to the message when it went through a link."""
    app.written.add(target.path)
    for frame in app.replay_writes:
        if target.path not in frame:
            frame.append(target.path)
    return f" (written through the link to `{target.path}`)" if target.link else ""


def save(app, path: str, *, force: bool = False, word=None) -> SaveReport:
    """Write the session atomically to `path` (never a half-written file).

    An existing file is overwritten only if this session wrote it, if `save`
    wrote it (its first line is the header), or with `force`; never by a file
    being replayed (see `may_write`).
    """
    if not path.endswith(".qd"):
        raise ShellError(f"`{path}`: session files end in .qd",
                         word.column if word is not None else None)
    full = app.ws.resolve(path)
    target = may_write(app, full, path, force=force, word=word, session_file=True)
    st = session_text(app, target.path)
    atomic_write(target.path, st.text, shown=path)
    via = wrote(app, target)
    return SaveReport(path, st.commands, st.checks, st.data_files, via)


# ---------------------------------------------------------------------------
# reading and replaying

def read_session(path: str, shown: str | None = None) -> list[str]:
    """The lines of session file `path` (named `shown` in messages)."""
    shown = shown or path
    text, _ = read_text(path, shown=shown, what="session file", limit=MAX_SESSION_BYTES)
    lines = split_lines(text)
    for i, source in enumerate(lines, 1):
        # comments included, before anything runs: a file whose text `cat` would show
        # otherwise than it reads is refused whole
        try:
            check_characters(Line.of(source))
        except ShellError as exc:
            raise ShellError(f"file `{shown}` line {i}, column {exc.column}: {exc.reason}; "
                             "nothing was replayed") from None
    return lines


def data_checks(lines: list[str], shown: str = "the session file") -> list[DataCheck]:
    """The ``# data PATH sha256 HEX`` lines of the header (the comments and
    blank lines before the first command). A checksum line that is not whole (a
    digest cut short or altered) is refused rather than passed over, since the
    check it stands for would silently not happen."""
    out = []
    for i, raw in enumerate(lines, 1):
        s = raw.strip()
        if not s:
            continue
        if not s.startswith("#"):
            break
        m = _DATA.match(s)
        if m is not None:
            problem = file_name_problem(m.group("path"))
            if problem is not None:
                raise ShellError(f"`{shown}` line {i}: {problem}; nothing was replayed")
            out.append(DataCheck(m.group("path"), m.group("sha").lower(), i))
        elif _DATA_LIKE.match(s):
            raise ShellError(f"`{shown}` line {i}: a data checksum line reads `# data PATH "
                             "sha256 HEX` with 64 hex digits; this one does not, so the data "
                             "cannot be verified")
    return out


@dataclass(frozen=True)
class DataProblem:
    """A data file named in a session's header that is not as saved. `allowable`:
    whether `--allow-changed-data` may go on past it (a file that changed or is
    missing; not one that is a device or a pipe, or cannot be read)."""

    message: str
    allowable: bool


def verify_data(path: str, checks: list[DataCheck]) -> list[DataProblem]:
    """Each data file named in the header whose bytes are not the ones saved."""
    folder = os.path.dirname(os.path.abspath(path))
    problems = []
    for c in checks:
        full = c.path if os.path.isabs(c.path) else os.path.join(folder, c.path)
        try:
            now = sha256_of(full, shown=c.path)
        except FileError as exc:
            missing = not os.path.lexists(full)
            problems.append(DataProblem(f"data file `{c.path}` is missing" if missing
                                        else str(exc), missing))
            continue
        if now != c.sha256:
            problems.append(DataProblem(
                f"data file `{c.path}` has changed since the session was saved "
                f"(sha256 was {c.sha256[:12]}..., now {now[:12]}...)", True))
    return problems


def replay(app, path: str, *, shown: str | None = None, allow_changed_data: bool = False,
           first=None):
    """Replay session file `path` through `app`'s one-command path.

    Returns the `Tally` of the run. Raises `ShellError` (before running anything)
    when a data file changed, unless allowed. `first`, if given, is called once the
    file is read and checked, before its first line.
    """
    shown = shown or path
    full = os.path.abspath(app.ws.resolve(path))
    real = os.path.realpath(full)
    if real in app.replaying:
        raise ShellError(f"`{shown}` is already being replayed (a session cannot replay itself)")
    if len(app.replaying) >= MAX_REPLAY_DEPTH:
        raise ShellError(f"replays nest more than {MAX_REPLAY_DEPTH} deep")
    lines = read_session(full, shown)
    problems = verify_data(full, data_checks(lines, shown))
    allow = allow_changed_data or app.allow_changed_data
    more = f" ({len(problems) - 1} more)" if len(problems) > 1 else ""
    for p in problems:
        if not p.allowable:
            raise ShellError(f"`{shown}`: {p.message}; nothing was replayed{more}")
    if problems and not allow:
        raise ShellError(f"`{shown}`: {problems[0].message}; replay with "
                         f"--allow-changed-data to go on{more}")
    for p in problems:
        app.printer.warning(f"`{shown}`: {p.message}; going on as told")
    if first is not None:
        first()     # what comes before the first line (a fresh workspace), once all is checked
    name = shown
    with Replaying(app, real, os.path.dirname(full)) as frame:
        tally = app.run_lines(lines, lambda i: f"{name} line {i}")
    tally.wrote = tuple(frame.wrote)
    return tally


class Replaying:
    """While a file is replayed: relative paths are read from `folder`, the file is
    on the stack of replays (no loops, writes of new files only), and what it wrote
    is gathered in `wrote`."""

    def __init__(self, app, real: str, folder: str):
        self.app, self.real, self.folder = app, real, folder
        self.wrote: list[str] = []

    def __enter__(self) -> "Replaying":
        app = self.app
        self.old_base = app.ws.base_dir
        app.ws.base_dir = self.folder
        app.replaying.append(self.real)
        app.replay_writes.append(self.wrote)
        return self

    def __exit__(self, *exc) -> bool:
        app = self.app
        app.replaying.pop()
        app.replay_writes.pop()
        app.ws.base_dir = self.old_base
        return False
