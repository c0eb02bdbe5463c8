"""Data: typed columns and CSV files."""

from __future__ import annotations

import os
import re

from ..registry import NOTHING, Slot, command
from ..replies import DataFile, Reply
from ..words import Line, ShellError, path_word
from .common import say, with_progress

DATA_USAGE = "data [append] NAME = v1, v2, ...  or  data load | append FILE.csv [as PREFIX]"
APPEND_USAGE = "data append NAME = v1, v2, ...  or  data append FILE.csv [as PREFIX]"
_TYPED = re.compile(r"^(?P<name>[^\s=]+)\s*=(?!=)(?P<rest>.*)$", re.S)


def _complete_data(words, text):
    if len(words) == 1:
        return Slot(words=("load", "append"), columns=True)
    if words[1] in ("load", "append"):
        if len(words) == 2:
            return Slot(files=(".csv",), columns=words[1] == "append")
        if len(words) == 3 and "=" not in words[2]:
            if words[2].lower().endswith(".csv") or words[1] == "load":
                return Slot(words=("as",))
            return Slot(words=("=",))
    return NOTHING


def split_values(text: str) -> list[str]:
    """``3, 2, 4`` or ``3 2 4``: the value texts, an empty one where two commas meet."""
    out: list[str] = []
    for piece in text.split(","):
        parts = piece.split()
        out.extend(parts if parts else [""])
    if len(out) > 1 and out[-1] == "" and text.rstrip().endswith(","):
        out.pop()  # a trailing comma
    return out


@command("data", usage=DATA_USAGE, kind="change", group="model", complete=_complete_data,
         help="""Gives data. `data NAME = v1, v2, ...` types a column (commas or blanks
         between values); a value may be a range LO:HI or LO:HI:STEP, both ends included
         and written without blanks (`data year = 1851:1962`, `data dose = 0:100:5`,
         `data x = 1, 2, 5:8`). `data load FILE.csv` reads a CSV file with a header row of column
         names and numeric cells; `as PREFIX` names its columns PREFIX_name. A relative
         path in a session file is read from the session file's folder. The SHA-256 of
         every file read goes into saved sessions, so that a replay can tell whether it
         reads the same data. A column of the same name is replaced. `data append NAME =
         v1, ...` adds values at the end of a column, and `data append FILE.csv [as
         PREFIX]` adds the rows of a CSV file to the table loaded with the same header:
         a current posterior is then updated by evaluating only the new rows'
         log-likelihood on its grid, and if the mass moves toward an edge of the grid the
         grid is re-sized, and you are told. While the columns of a likelihood differ in
         length (one appended, the other not yet), the posterior waits and questions say
         which columns and how many rows.""")
def data(app, line: Line):
    seg = line.rest(1)
    if not seg.text:
        raise ShellError(f"`data` needs more: {DATA_USAGE}", line.end_column())
    m = _TYPED.match(seg.text)
    if m is not None:
        values = split_values(m.group("rest"))
        if values == [""]:
            raise ShellError(f"`data {m.group('name')}` has no values after `=`",
                             seg.start + m.start("rest") + 1)
        say(app, app.ws.data_typed(m.group("name"), values))
        return None
    w = line.words
    if w[1].text == "append":
        return _append(app, line)
    if w[1].text != "load":
        raise ShellError(f"expected `=` after `{w[1].text}` or `data load FILE.csv`; usage: "
                         f"{DATA_USAGE}", w[1].end + 1)
    if len(w) < 3:
        raise ShellError("`data load` needs a file name", line.end_column())
    path, prefix = _file_and_prefix(line, DATA_USAGE)
    say(app, app.ws.data_load(path, prefix))
    return _file_reply(app.ws, path)


def _file_and_prefix(line: Line, usage: str) -> tuple[str, str | None]:
    """``FILE [as PREFIX]`` from the third word of `line` on."""
    w = line.words
    path = path_word(w[2])
    if len(w) == 3:
        return path, None
    if w[3].text != "as":
        raise ShellError(f"unexpected `{w[3].text}`; usage: {usage}", w[3].column)
    if len(w) < 5:
        raise ShellError("`as` needs a prefix", line.end_column())
    if len(w) > 5:
        raise ShellError(f"unexpected `{w[5].text}`", w[5].column)
    return path, w[4].text


def _file_reply(ws, path: str) -> Reply:
    """The reply that records the data file just read (its checksum goes into `save`)."""
    record = ws.data.files[-1]
    return Reply(data_file=DataFile(path, os.path.abspath(ws.resolve(path)), record.sha256))


def _append(app, line: Line):
    """``data append NAME = v1, ...`` or ``data append FILE.csv [as PREFIX]``."""
    ws = app.ws
    seg = line.rest(2)
    if not seg.text:
        raise ShellError(f"`data append` needs more: {APPEND_USAGE}", line.end_column())
    m = _TYPED.match(seg.text)
    if m is not None:
        name = m.group("name")
        values = split_values(m.group("rest"))
        if values == [""]:
            raise ShellError(f"`data append {name}` has no values after `=`",
                             seg.start + m.start("rest") + 1)
        if name not in ws.data:
            raise ShellError(f"no data column `{name}` to append to; `data {name} = ...` "
                             "gives a new one", seg.column)
        say(app, with_progress(app, ws.data_append, name, values))
        return None
    w = line.words
    if w[2].text in ws.data:
        raise ShellError(f"expected `=` after `{w[2].text}`; usage: {APPEND_USAGE}",
                         w[2].end + 1)
    path, prefix = _file_and_prefix(line, APPEND_USAGE)
    say(app, with_progress(app, ws.data_append_file, path, prefix))
    return _file_reply(ws, path)
