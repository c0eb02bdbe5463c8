"""Data: typed columns and CSV files."""

from __future__ import annotations

import os
import re

from ..registry import NOTHING, Slot, command
from ..replies import DataFile, Reply
from ..words import Line, ShellError, Word, path_word, whole
from .common import say, with_progress

DATA_USAGE = ("data [append] NAME = v1, v2, ...  or  data load | append FILE.csv [as PREFIX]"
              "  or  data edit COL row N = VALUE  or  data drop COL row N")
EDIT_USAGE = "data edit COL row N = VALUE"
DROP_USAGE = "data drop COL row N"
APPEND_USAGE = "data append NAME = v1, v2, ...  or  data append FILE.csv [as PREFIX]"
_TYPED = re.compile(r"^(?P<name>[^\s=]+)\s*=(?!=)(?P<rest>.*)$", re.S)


def _complete_data(words, text):
    if len(words) == 1:
        return Slot(words=("load", "append", "edit", "drop"), columns=True)
    if words[1] in ("edit", "drop"):
        if len(words) == 2:
            return Slot(columns=True)
        return Slot(words=("row",)) if len(words) == 3 else NOTHING
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
         which columns and how many rows. `data edit COL row N = VALUE` changes the value
         of column COL in row N (rows counted from 1, as in the file below its header),
         such as a censoring flag (`data edit running row 12 = 0`); `data drop COL row N`
         takes row N out of every column of the table that holds COL (a typed column
         alone). Inside a `whatif` layer these are hypothetical like any data command,
         and the side-by-side answers say which rows differ.""")
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
    if w[1].text in ("edit", "drop"):
        return _edit(app, line)
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


_ROW_IS = re.compile(r"^(?P<row>[^\s=]+)\s*(?:=(?P<value>.*))?$", re.S)


def _edit(app, line: Line):
    """``data edit COL row N = VALUE`` and ``data drop COL row N``."""
    w = line.words
    verb = w[1].text
    usage = EDIT_USAGE if verb == "edit" else DROP_USAGE
    if len(w) < 3:
        raise ShellError(f"`data {verb}` needs a column and a row: {usage}", line.end_column())
    col = w[2]
    if col.text not in app.ws.data:
        raise ShellError(f"no data column `{col.text}`", col.column)
    if len(w) < 4 or w[3].text != "row":
        at = w[3].column if len(w) > 3 else line.end_column()
        raise ShellError(f"expected `row N` after `{col.text}`; usage: {usage}", at)
    seg = line.rest(4)
    m = _ROW_IS.match(seg.text)
    if not seg.text or m is None:
        at = seg.start + 1 if seg.text else line.end_column()
        raise ShellError(f"`row` needs a row number (counted from 1); usage: {usage}", at)
    row = whole(Word(m.group("row"), seg.start), "row", low=1)
    value = m.group("value")
    if verb == "drop":
        if value is not None:
            raise ShellError(f"`data drop` takes no value; usage: {DROP_USAGE}",
                             seg.start + seg.text.index("=") + 1)
        say(app, app.ws.data_drop(col.text, row))
        return None
    if value is None:
        raise ShellError(f"expected `= VALUE` after the row; usage: {EDIT_USAGE}",
                         line.end_column())
    if not value.strip():
        raise ShellError("no value after `=`", line.end_column())
    if len(value.split()) > 1:
        raise ShellError(f"one value only: `data edit` changes one row; usage: {EDIT_USAGE}",
                         seg.start + seg.text.index("=") + 2)
    say(app, app.ws.data_edit(col.text, row, value.strip()))
    return None
