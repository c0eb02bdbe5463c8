"""Every file quadrat opens goes through here: one bounded reader, one atomic writer.

Reading (`read_bytes`, `read_text`, `sha256_of`): regular files only, never a
device, a pipe (FIFO) or a socket, which could block for ever or never end
(``/dev/zero``, ``/dev/stdin``); at most a size limit; text must be UTF-8 without
NUL bytes. The file is opened without blocking and checked on the open
descriptor, so it cannot be swapped for a pipe between the check and the read.

Writing (`write_target`, `atomic_write`): the text goes to a temporary file with
a short name in the target's folder, is flushed to disk and replaces the target
in one rename, so a crash at any moment leaves the old file whole or the new one
whole. A target that is a symbolic link is written through to the file it
points to (the link stays); a link that points nowhere, or a target that is not
a regular file, is refused.

Every problem is a `FileError`: one line naming the file as the user typed it.
"""

from __future__ import annotations

import errno
import hashlib
import os
import stat
import tempfile
from dataclasses import dataclass

from .errors import FileError

#: Largest data file (CSV, and any file named in a checksum line), in bytes.
MAX_DATA_BYTES = 512 * 1024 * 1024
#: Largest session file, in bytes.
MAX_SESSION_BYTES = 64 * 1024 * 1024


def _kind(mode: int) -> str | None:
    """What a file that is not a regular file is, in words (None for a regular one)."""
    if stat.S_ISREG(mode):
        return None
    if stat.S_ISDIR(mode):
        return "a folder"
    if stat.S_ISFIFO(mode):
        return "a pipe (FIFO)"
    if stat.S_ISSOCK(mode):
        return "a socket"
    if stat.S_ISCHR(mode) or stat.S_ISBLK(mode):
        return "a device"
    return "not a regular file"


def _mib(n: int) -> str:
    return f"{n // (1 << 20)} MiB" if n >= 1 << 20 else f"{n:,} bytes"


def _not_regular(shown: str, kind: str, what: str) -> FileError:
    if kind == "a folder":
        return FileError(f"`{shown}` is a folder, not a {what}")
    return FileError(f"`{shown}` is {kind}, not a regular file; quadrat reads {what}s from "
                     "regular files only")


def _os_error(exc: OSError, shown: str, what: str, doing: str = "read",
              path: str | None = None) -> FileError:
    if isinstance(exc, FileNotFoundError):
        where = ""
        folder = os.path.dirname(os.path.abspath(path)) if path is not None else ""
        if path is not None and not os.path.isabs(shown) and \
                folder != os.path.dirname(os.path.abspath(shown)):
            # a relative name read from a session file's folder: say which folder
            where = f" in folder `{folder}`"
        return FileError(f"file `{shown}` does not exist{where}")
    if isinstance(exc, IsADirectoryError):
        return FileError(f"`{shown}` is a folder, not a {what}")
    if isinstance(exc, PermissionError):
        return FileError(f"file `{shown}` cannot be {doing} (permission denied)")
    if exc.errno == errno.ENXIO:
        return _not_regular(shown, "a socket", what)
    if exc.errno == errno.ENAMETOOLONG:
        return FileError(f"the name of file `{shown[:60]}...` is too long for the file system")
    return FileError(f"file `{shown}` cannot be {doing} ({exc.strerror or exc})")


def _open_regular(path: str, shown: str, what: str) -> int:
    """A descriptor of the regular file at `path`, opened without blocking."""
    try:
        st = os.stat(path)
    except OSError as exc:
        raise _os_error(exc, shown, what, path=path) from None
    kind = _kind(st.st_mode)
    if kind is not None:
        raise _not_regular(shown, kind, what)
    flags = os.O_RDONLY | getattr(os, "O_NONBLOCK", 0) | getattr(os, "O_CLOEXEC", 0) \
        | getattr(os, "O_NOCTTY", 0)
    try:
        fd = os.open(path, flags)
    except OSError as exc:
        raise _os_error(exc, shown, what) from None
    try:
        kind = _kind(os.fstat(fd).st_mode)
        if kind is not None:  # swapped between the stat and the open
            raise _not_regular(shown, kind, what)
    except BaseException:
        os.close(fd)
        raise
    return fd


def read_bytes(path: str, *, shown: str | None = None, what: str = "file",
               limit: int = MAX_DATA_BYTES) -> bytes:
    """The bytes of the regular file at `path`, at most `limit` of them.

    Parameters
    ----------
    path : str
        Where the file is.
    shown : str, keyword-only
        The file's name in messages (as the user typed it; default `path`).
    what : str, keyword-only
        What the file should be, in messages ("CSV file", "session file").
    limit : int, keyword-only
        Largest size read, in bytes; a larger file is refused whole.
    """
    shown = path if shown is None else shown
    fd = _open_regular(path, shown, what)
    try:
        size = os.fstat(fd).st_size
        if size > limit:
            raise FileError(f"file `{shown}` is {size:,} bytes; a {what} may have at most "
                            f"{_mib(limit)}")
        chunks, total = [], 0
        while True:
            chunk = os.read(fd, min(1 << 20, limit + 1 - total))
            if not chunk:
                break
            chunks.append(chunk)
            total += len(chunk)
            if total > limit:   # it grew while being read
                raise FileError(f"file `{shown}` is larger than {_mib(limit)}, the most a "
                                f"{what} may have")
    except OSError as exc:
        raise _os_error(exc, shown, what) from None
    finally:
        os.close(fd)
    return b"".join(chunks)


def decode_text(raw: bytes, *, shown: str, what: str = "file") -> str:
    """UTF-8 text (a byte-order mark dropped) with no NUL byte; errors name the line."""
    try:
        text = raw.decode("utf-8-sig")
    except UnicodeDecodeError as exc:
        line = raw[: exc.start].count(b"\n") + 1
        raise FileError(f"file `{shown}` line {line}: not UTF-8 text") from None
    if "\x00" in text:
        line = text[: text.index("\x00")].count("\n") + 1
        raise FileError(f"file `{shown}` line {line} holds a NUL byte; it is not a {what}")
    return text


def read_text(path: str, *, shown: str | None = None, what: str = "file",
              limit: int = MAX_DATA_BYTES) -> tuple[str, bytes]:
    """The text of the regular file at `path` and its bytes (see `read_bytes`)."""
    shown = path if shown is None else shown
    raw = read_bytes(path, shown=shown, what=what, limit=limit)
    return decode_text(raw, shown=shown, what=what), raw


def sha256_of(path: str, *, shown: str | None = None, what: str = "data file",
              limit: int = MAX_DATA_BYTES) -> str:
    """The SHA-256 of the regular file at `path` (hex), read in bounded chunks."""
    shown = path if shown is None else shown
    fd = _open_regular(path, shown, what)
    h = hashlib.sha256()
    total = 0
    try:
        while True:
            chunk = os.read(fd, 1 << 20)
            if not chunk:
                break
            total += len(chunk)
            if total > limit:
                raise FileError(f"file `{shown}` is larger than {_mib(limit)}, the most a "
                                f"{what} may have")
            h.update(chunk)
    except OSError as exc:
        raise _os_error(exc, shown, what) from None
    finally:
        os.close(fd)
    return h.hexdigest()


def first_line(path: str, *, limit: int = 4096) -> str | None:
    """The first line of a regular file (at most `limit` bytes of it), or None when
    it is not a regular file or cannot be read. Never blocks."""
    try:
        fd = _open_regular(path, path, "file")
    except FileError:
        return None
    try:
        raw = os.read(fd, limit)
    except OSError:
        return None
    finally:
        os.close(fd)
    return raw.split(b"\n", 1)[0].decode("utf-8", errors="replace").removeprefix("\ufeff")


# ---------------------------------------------------------------------------
# writing

@dataclass(frozen=True)
class Target:
    """Where a write lands.

    Attributes
    ----------
    path : str
        The file that is replaced (the link's target when `link` is set).
    link : str or None
        The symbolic link written through, as given, if the path was one.
    exists : bool
        Whether a file is there now (the write replaces it).
    """

    path: str
    link: str | None
    exists: bool


def write_target(path: str, *, shown: str | None = None) -> Target:
    """Where writing `path` lands, checked: a regular file or a new name in a folder
    that exists; a symbolic link to such a file is written through."""
    shown = path if shown is None else shown
    link = None
    real = path
    try:
        if os.path.islink(path):
            link = path
            real = os.path.realpath(path)
            if not os.path.lexists(real) or os.path.islink(real):
                raise FileError(f"`{shown}` is a symbolic link to `{real}`, which does not "
                                "exist; nothing was written (write to the file itself)")
        st = os.stat(real) if os.path.lexists(real) else None
    except OSError as exc:
        raise _os_error(exc, shown, "file", "written") from None
    if st is not None:
        kind = _kind(st.st_mode)
        if kind is not None:
            if kind == "a folder":
                raise FileError(f"`{shown}` is a folder, not a file")
            raise FileError(f"`{shown}` is {kind}, not a regular file; nothing was written "
                            "(quadrat writes regular files only)")
    folder = os.path.dirname(os.path.abspath(real))
    if not os.path.isdir(folder):
        raise FileError(f"cannot write `{shown}`: folder `{folder}` does not exist")
    return Target(real, link, st is not None)


def atomic_write(path: str, text: str, *, shown: str | None = None,
                 encoding: str = "utf-8") -> int:
    """Write `text` to `path` atomically; returns the number of bytes written.

    A symbolic link is written through (see `write_target`). The new file keeps
    the old one's permissions, else gets the usual ones for a new file.

    Raises
    ------
    FileError
        The target is not a regular file, or its folder does not exist or cannot
        be written; the target is then untouched.
    """
    shown = path if shown is None else shown
    target = write_target(path, shown=shown)
    real = target.path
    folder = os.path.dirname(os.path.abspath(real))
    data = text.encode(encoding)
    try:
        # a short temporary name: a legal 250-character target name must still fit
        fd, tmp = tempfile.mkstemp(prefix=".qd-", suffix=".tmp", dir=folder)
    except OSError as exc:
        raise FileError(f"cannot write `{shown}`: {exc.strerror or exc}") from None
    try:
        with os.fdopen(fd, "wb") as fh:
            fh.write(data)
            fh.flush()
            os.fsync(fh.fileno())
        try:
            mode = os.stat(real).st_mode & 0o777 if target.exists else 0o666 & ~_umask()
            os.chmod(tmp, mode)
        except OSError:
            pass
        os.replace(tmp, real)
    except BaseException as exc:
        try:
            os.unlink(tmp)
        except OSError:
            pass
        if isinstance(exc, OSError):
            raise FileError(f"cannot write `{shown}`: {exc.strerror or exc}") from None
        raise
    try:
        dfd = os.open(folder, os.O_RDONLY)
        try:
            os.fsync(dfd)
        finally:
            os.close(dfd)
    except OSError:
        pass  # some file systems cannot sync a folder; the rename itself is atomic
    return len(data)


def _umask() -> int:
    mask = os.umask(0)
    os.umask(mask)
    return mask
