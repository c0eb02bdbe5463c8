"""The one command table: a frozen record per command, filled by `command`.

`help` and the completer both read `COMMANDS`; the dispatcher looks handlers
up in it. Each command module registers its commands with the decorator, with
the usage line and the help paragraph beside the handler.
"""

from __future__ import annotations

from dataclasses import dataclass, field
from typing import Callable

#: What a command does to the session, which decides what `save` keeps:
#: ``change`` (changes the state: kept, undoable), ``question`` (asks the
#: posterior: kept, with check lines), ``check``, ``note`` (kept as typed) and
#: ``other`` (housekeeping: not kept).
KINDS = ("change", "question", "check", "note", "other")

GROUPS = (
    ("model", "declaring the model"),
    ("grid", "grids and computing"),
    ("question", "questions"),
    ("arrival", "data arriving, what-if, prediction and comparing models"),
    ("view", "looking and exporting"),
    ("session", "sessions and housekeeping"),
)

#: The word `help WORD` takes for each group (none is a command's name).
GROUP_WORDS = {"model": "model", "grid": "computing", "question": "questions",
               "arrival": "arrivals", "view": "views", "session": "sessions"}


@dataclass(frozen=True)
class Slot:
    """What may come at the cursor: literal words and kinds of names.

    Attributes
    ----------
    words : tuple of str
        Literal words (keywords of the command).
    params, columns, lets, families, functions, commands, predicted, kept : bool
        Which kinds of names may come (`predicted`: names given to `predict`;
        `kept`: names given to `keep`).
    files : tuple of str or None
        File name endings expected there (``(".csv",)``); None: no file.
    """

    words: tuple[str, ...] = ()
    params: bool = False
    columns: bool = False
    lets: bool = False
    families: bool = False
    functions: bool = False
    commands: bool = False
    predicted: bool = False
    kept: bool = False
    files: tuple[str, ...] | None = None

    @classmethod
    def formula(cls, *, families: bool = False, columns: bool = False,
                predicted: bool = False) -> "Slot":
        return cls(params=True, lets=True, functions=True, columns=columns, families=families,
                   predicted=predicted)


NOTHING = Slot()


@dataclass(frozen=True)
class Command:
    """One command of the shell.

    Attributes
    ----------
    name : str
    usage : str
        One line, the command's syntax.
    help : str
        One paragraph.
    handler : callable
        ``handler(app, line) -> Reply or None``.
    kind : str
        One of `KINDS`.
    group : str
        For the listing of `help`.
    complete : callable or None
        ``complete(words, text) -> Slot``: what may come at the cursor, given
        the complete words before it and the text of the line up to it.
    ask : callable or None
        For questions that yield numbers: ``ask(app, line) -> Asked`` without
        printing; `check` uses it.
    """

    name: str
    usage: str
    help: str
    handler: Callable = field(repr=False)
    kind: str = "other"
    group: str = "session"
    complete: Callable | None = field(default=None, repr=False)
    ask: Callable | None = field(default=None, repr=False)


COMMANDS: dict[str, Command] = {}


def command(name: str, *, usage: str, help: str, kind: str = "other", group: str = "session",
            complete: Callable | None = None, ask: Callable | None = None):
    """Register the decorated function as the handler of command `name`."""
    if kind not in KINDS:
        raise ValueError(f"unknown command kind `{kind}`")
    if group not in dict(GROUPS):
        raise ValueError(f"unknown command group `{group}`")

    def deco(fn):
        if name in COMMANDS:
            raise ValueError(f"command `{name}` registered twice")
        COMMANDS[name] = Command(name, usage, " ".join(help.split()), fn, kind, group,
                                 complete, ask)
        return fn

    return deco


#: Commands of the product's vocabulary that this version does not have yet.
LATER: tuple[str, ...] = ()
