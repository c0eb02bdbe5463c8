"""Completion at the prompt: a pure "what may come here?" and a thin Completer.

`candidates` takes the text before the cursor and the names the session knows
and returns what may be typed there: command words, the command's keywords,
parameter / column / let names, distributions and functions inside formulas,
and file names where a file is expected. Each command says what may come
after it through the completion hook of its record in the command table.
"""

from __future__ import annotations

import os
import re
from dataclasses import dataclass
from typing import Callable, Iterable

from prompt_toolkit.completion import CompleteEvent, Completer, Completion
from prompt_toolkit.document import Document

from engine.expr import FUNCTIONS
from engine.families import FAMILIES

from .registry import COMMANDS, NOTHING, Slot

_IDENT = re.compile(r"[A-Za-z_][A-Za-z0-9_]*$")


@dataclass(frozen=True)
class Names:
    """The names a session knows, for completion."""

    params: tuple[str, ...] = ()
    columns: tuple[str, ...] = ()
    lets: tuple[str, ...] = ()
    predicted: tuple[str, ...] = ()
    kept: tuple[str, ...] = ()

    @classmethod
    def of(cls, ws) -> "Names":
        m = ws.model
        return cls(m.param_names, ws.data.names, tuple(lt.name for lt in m.lets),
                   tuple(p.name for p in ws.predictions), tuple(k.name for k in ws.keeps))


@dataclass(frozen=True)
class Candidate:
    """One completion: the text, where it starts (negative, from the cursor),
    and what it is."""

    text: str
    start: int
    meta: str = ""


def what_may_come(text: str) -> tuple[Slot, str, str]:
    """The slot at the end of `text`, the whitespace word being typed and the
    name being typed (the identifier at the cursor)."""
    if "#" in text:
        return NOTHING, "", ""
    m = _IDENT.search(text)
    ident = m.group(0) if m else ""
    word = "" if not text or text[-1].isspace() else text.split()[-1]
    done = text[:len(text) - len(word)].split()
    if not done:
        return Slot(commands=True), word, ident
    cmd = COMMANDS.get(done[0])
    if cmd is None or cmd.complete is None:
        return NOTHING, word, ident
    return cmd.complete(done, text[:len(text) - len(ident)]), word, ident


def _matches(options: Iterable[str], prefix: str, start: int, meta: str) -> list[Candidate]:
    return [Candidate(o, start, meta) for o in options if o.startswith(prefix)]


def file_candidates(word: str, endings: tuple[str, ...],
                    listdir: Callable[[str], list[str]] = os.listdir,
                    isdir: Callable[[str], bool] = os.path.isdir) -> list[Candidate]:
    """Files (with one of `endings`) and folders that complete `word`."""
    frag = word[1:] if word.startswith('"') else word
    folder, base = os.path.split(frag)
    try:
        entries = sorted(listdir(os.path.expanduser(folder) or "."))
    except OSError:
        return []
    out = []
    for e in entries:
        if not e.startswith(base) or (e.startswith(".") and not base.startswith(".")):
            continue
        full = os.path.join(folder, e)
        if isdir(os.path.expanduser(full) if folder else e):
            out.append(Candidate(full + "/", -len(word), "folder"))
        elif not endings or e.lower().endswith(endings):
            out.append(Candidate(full, -len(word), "file"))
    return out


def candidates(text: str, names: Names, *,
               listdir: Callable[[str], list[str]] = os.listdir,
               isdir: Callable[[str], bool] = os.path.isdir) -> list[Candidate]:
    """What may be typed at the end of `text`."""
    slot, word, ident = what_may_come(text)
    out: list[Candidate] = []
    if slot.commands:
        out += _matches(COMMANDS, word, -len(word), "command")
    out += _matches(slot.words, word, -len(word), "")
    ni = -len(ident)
    if slot.params:
        out += _matches(names.params, ident, ni, "parameter")
    if slot.lets:
        out += _matches(names.lets, ident, ni, "let")
    if slot.predicted:
        out += _matches(names.predicted, ident, ni, "predicted")
    if slot.columns:
        out += _matches(names.columns, ident, ni, "column")
    if slot.kept:
        out += _matches(names.kept, ident, ni, "kept model")
    if slot.families:
        out += _matches(FAMILIES, ident, ni, "distribution")
    if slot.functions:
        out += _matches(FUNCTIONS, ident, ni, "function")
    if slot.files is not None:
        out += file_candidates(word, slot.files, listdir, isdir)
    seen, unique = set(), []
    for c in out:
        if c.text not in seen:
            seen.add(c.text)
            unique.append(c)
    return unique


class ShellCompleter(Completer):
    """prompt_toolkit's view of `candidates`, over the session's names."""

    def __init__(self, names: Callable[[], Names]):
        self.names = names

    def get_completions(self, document: Document, complete_event: CompleteEvent):
        for c in candidates(document.text_before_cursor, self.names()):
            yield Completion(c.text, start_position=c.start, display_meta=c.meta)
