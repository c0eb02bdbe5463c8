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

from engine.export import atomic_write

from . import __version__
from .words import Line, ShellError, split_lines

#: The first line of every file `save` writes starts with this.
HEADER = "# quadrat session"
#: How deep `replay` may nest (a file that replays another ...).
MAX_REPLAY_DEPTH = 8
#: Largest session file read, in bytes.
MAX_SESSION_BYTES = 64 * 1024 * 1024
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
    """Whether the file at `path` starts with the header `save` writes."""
    try:
        with open(path, "r", encoding="utf-8", errors="replace") as fh:
            return fh.readline().startswith(HEADER)
    except OSError:
        return False


def refuse_replayed_overwrite(app, full: str, shown: str, word=None) -> None:
    """A session file being replayed may write new files, and files this session
    wrote, but never overwrite another existing file, `force` or not: a file
    someone sent must not be able to replace the user's data or sessions."""
    if app.replaying and os.path.exists(full) and os.path.realpath(full) not in app.written:
        raise ShellError(f"`{shown}` exists: a session file being replayed may write new "
                         "files only, never over existing ones",
                         word.column if word is not None else None)


def save(app, path: str, *, force: bool = False, word=None) -> SaveReport:
    """Write the session atomically to `path` (never a half-written file).

    An existing file is overwritten only if this session wrote it, if `save`
    wrote it (its first line is the header), or with `force`.
    """
    if not path.endswith(".qd"):
        raise ShellError(f"`{path}`: session files end in .qd",
                         word.column if word is not None else None)
    full = app.ws.resolve(path)
    refuse_replayed_overwrite(app, full, path, word)
    if os.path.exists(full) and not force and os.path.realpath(full) not in app.written \
            and not written_by_save(full):
        raise ShellError(f"`{path}` exists and was not written by `save`; `save {path} force` "
                         "overwrites it", word.column if word is not None else None)
    st = session_text(app, full)
    atomic_write(full, st.text)
    app.written.add(os.path.realpath(full))
    return SaveReport(path, st.commands, st.checks, st.data_files)


# ---------------------------------------------------------------------------
# reading and replaying

def read_session(path: str, shown: str | None = None) -> list[str]:
    """The lines of session file `path` (named `shown` in messages)."""
    shown = shown or path
    try:
        if os.path.exists(path) and not os.path.isdir(path) and not os.path.isfile(path):
            raise ShellError(f"`{shown}` is not a regular file")
        with open(path, "rb") as fh:
            raw = fh.read(MAX_SESSION_BYTES + 1)
        if len(raw) > MAX_SESSION_BYTES:
            raise ShellError(f"`{shown}` is larger than {MAX_SESSION_BYTES // (1 << 20)} MiB; "
                             "it is not a session file")
    except FileNotFoundError:
        raise ShellError(f"file `{shown}` does not exist") from None
    except IsADirectoryError:
        raise ShellError(f"`{shown}` is a folder, not a session file") from None
    except OSError as exc:
        raise ShellError(f"file `{shown}` cannot be read ({exc.strerror or exc})") from None
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise ShellError(f"`{shown}` line {line}: not UTF-8 text") from None
    if "\x00" in text:
        raise ShellError(f"`{shown}` holds NUL bytes; it is not a session file")
    return split_lines(text)


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
            out.append(DataCheck(m.group("path"), m.group("sha").lower(), i))
        elif _DATA_LIKE.match(s):
            raise ShellError(f"`{shown}` line {i}: a data checksum line reads `# data PATH "
                             "sha256 HEX` with 64 hex digits; this one does not, so the data "
                             "cannot be verified")
    return out


def verify_data(path: str, checks: list[DataCheck]) -> list[str]:
    """Each data file named in the header whose bytes are not the ones saved."""
    from engine.data import sha256_of

    folder = os.path.dirname(os.path.abspath(path))
    problems = []
    for c in checks:
        full = c.path if os.path.isabs(c.path) else os.path.join(folder, c.path)
        try:
            now = sha256_of(full)
        except FileNotFoundError:
            problems.append(f"data file `{c.path}` is missing")
            continue
        except OSError as exc:
            problems.append(f"data file `{c.path}` cannot be read ({exc.strerror or exc})")
            continue
        if now != c.sha256:
            problems.append(f"data file `{c.path}` has changed since the session was saved "
                            f"(sha256 was {c.sha256[:12]}..., now {now[:12]}...)")
    return problems


def replay(app, path: str, *, shown: str | None = None, allow_changed_data: bool = False):
    """Replay session file `path` through `app`'s one-command path.

    Returns the `Tally` of the run. Raises `ShellError` (before running anything)
    when a data file changed, unless allowed.
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
    if problems and not allow:
        raise ShellError(f"`{shown}`: {problems[0]}; replay with --allow-changed-data to go on"
                         + (f" ({len(problems) - 1} more)" if len(problems) > 1 else ""))
    for p in problems:
        app.printer.warning(f"`{shown}`: {p}; going on as told")
    ws = app.ws
    old_base = ws.base_dir
    ws.base_dir = os.path.dirname(full)
    app.replaying.append(real)
    name = shown
    try:
        tally = app.run_lines(lines, lambda i: f"{name} line {i}")
    finally:
        app.replaying.pop()
        ws.base_dir = old_base
    return tally
