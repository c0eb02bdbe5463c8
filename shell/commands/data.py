"""Data: typed columns and CSV files."""

from __future__ import annotations

import os
import re

from ..registry import NOTHING, Slot, command
from ..replies import DataFile, Reply
from ..words import Line, ShellError, path_word
from .common import say

DATA_USAGE = "data NAME = v1, v2, ...  or  data load FILE.csv [as PREFIX]"
_TYPED = re.compile(r"^(?P<name>[^\s=]+)\s*=(?!=)(?P<rest>.*)$", re.S)


def _complete_data(words, text):
    if len(words) == 1:
        return Slot(words=("load",), columns=True)
    if words[1] == "load":
        if len(words) == 2:
            return Slot(files=(".csv",))
        if len(words) == 3:
            return Slot(words=("as",))
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
         between values). `data load FILE.csv` reads a CSV file with a header row of column
         names and numeric cells; `as PREFIX` names its columns PREFIX_name. A relative
         path in a session file is read from the session file's folder. The SHA-256 of
         every file read goes into saved sessions, so that a replay can tell whether it
         reads the same data. A column of the same name is replaced.""")
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
    if w[1].text != "load":
        raise ShellError(f"expected `=` after `{w[1].text}` or `data load FILE.csv`; usage: "
                         f"{DATA_USAGE}", w[1].end + 1)
    if len(w) < 3:
        raise ShellError("`data load` needs a file name", line.end_column())
    path = path_word(w[2])
    prefix = None
    if len(w) > 3:
        if w[3].text != "as":
            raise ShellError(f"unexpected `{w[3].text}`; usage: {DATA_USAGE}", w[3].column)
        if len(w) < 5:
            raise ShellError("`as` needs a prefix", line.end_column())
        if len(w) > 5:
            raise ShellError(f"unexpected `{w[5].text}`", w[5].column)
        prefix = w[4].text
    ws = app.ws
    say(app, ws.data_load(path, prefix))
    record = ws.state.data.files[-1]
    return Reply(data_file=DataFile(path, os.path.abspath(ws.resolve(path)), record.sha256))
