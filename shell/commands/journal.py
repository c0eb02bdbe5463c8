"""The journal: list the journals, restore one, drop ended ones."""

from __future__ import annotations

import os

from .. import journal as J
from ..registry import NOTHING, Slot, command
from ..replies import Reply
from ..words import Line, ShellError

USAGE = "journal  or  journal restore [ID] [--allow-changed-data]  or  journal drop ID | ended"
_ALLOW = ("--allow-changed-data", "allow-changed-data")


def _complete(words, text):
    if len(words) == 1:
        return Slot(words=("restore", "drop"))
    if len(words) == 2 and words[1] == "drop":
        return Slot(words=("ended",))
    if words[1] == "restore":
        return Slot(words=(_ALLOW[0],))
    return NOTHING


def _folder(app) -> str:
    j = app.journal
    return os.path.dirname(j.path) if j is not None else J.journals_dir()


def _others(app) -> list[J.JournalInfo]:
    j = app.journal
    return J.scan(_folder(app), skip=j.path if j is not None else None)


@command("journal", usage=USAGE, group="session", complete=_complete,
         help="""Every shell writes its own journal as it goes: each command that changed the
         state or asked a question (with its check line), synced to disk after each command,
         under the XDG state folder (`~/.local/state/quadrat/journals`). If the connection
         drops (SIGHUP), the shell is stopped (SIGTERM) or killed, the next `quadrat` at a
         terminal says so. `journal` lists the journals: this shell's and those of ended
         shells, when each started, how many commands it holds and how it ended. `journal
         restore [ID]` replays one (by default the latest that ended unexpectedly) into an
         empty session, verifying its checks and its data files as `replay` does; it is
         then marked restored. `journal drop ID` deletes one, `journal drop ended` all of
         ended shells. Journals are deleted after QUADRAT_JOURNAL_DAYS days (default 14);
         QUADRAT_JOURNAL_DAYS=0 writes none. Those of batch runs that end normally are
         deleted at once. A journal holds what `save` would write, nothing more.""")
def journal(app, line: Line):
    w = line.words
    if len(w) == 1:
        return _list(app)
    sub = w[1].text
    if sub == "restore":
        return _restore(app, line)
    if sub == "drop":
        return _drop(app, line)
    raise ShellError(f"unexpected `{sub}`; usage: {USAGE}", w[1].column)


def _list(app):
    j = app.journal
    p = app.printer
    if j is None:
        p.line("this session writes no journal (QUADRAT_JOURNAL_DAYS=0, or it could not be "
               "written)")
    else:
        p.line(f"this session's journal: `{j.path}` ({j.commands} command"
               f"{'s' if j.commands != 1 else ''} so far)")
    others = _others(app)
    if not others:
        p.line("no other journals")
        return
    width = max(len(i.id) for i in others)
    for i in others:
        flag = "restored" if i.restored else ("unexpected: `journal restore` brings it back"
                                              if i.unexpected else "")
        p.line(f"  {i.id.ljust(width)}  started {J.when_text(i.started)}, {i.commands:>4} "
               f"command{'s' if i.commands != 1 else ' '}, {i.how()}"
               + (f"; {flag}" if flag else ""))


def _pick(app, word) -> J.JournalInfo:
    others = _others(app)
    if word is None:
        lost = [i for i in others if i.unexpected]
        if not lost:
            raise ShellError("no session ended unexpectedly; `journal` lists the journals and "
                             "`journal restore ID` restores one")
        return lost[-1]
    for i in others:
        if i.id == word.text:
            if i.live:
                raise ShellError(f"journal `{i.id}` belongs to a shell that still runs",
                                 word.column)
            return i
    raise ShellError(f"no journal `{word.text}`; `journal` lists them", word.column)


def _restore(app, line: Line):
    w = line.words
    allow = False
    word = None
    for x in w[2:]:
        if x.text in _ALLOW and not allow:
            allow = True
        elif word is None and x.text not in _ALLOW:
            word = x
        else:
            raise ShellError(f"unexpected `{x.text}`; usage: {USAGE}", x.column)
    info = _pick(app, word)
    if app.log or app.ws.model.params or app.ws.data.names:
        raise ShellError("`journal restore` starts from an empty session; `reset` first "
                         "(`undo` brings this one back) or restore in a new `quadrat`")
    tally = J.restore(app, info, allow_changed_data=allow)
    checks = tally.checked + tally.failed
    name = f"journal {info.id}"
    if tally.errors:
        app.printer.error(f"restoring {name} stopped at an error; the state is as it was "
                          "before")
        return Reply(status="error")
    J.mark_restored(info, app.journal.id if app.journal is not None else "none")
    held = (f"{tally.failed} of {checks} checks moved" if tally.failed
            else f"all {checks} checks held" if checks else "no checks")
    app.printer.line(f"restored {name}: {len(app.log)} command{'s' if len(app.log) != 1 else ''}"
                     f", {held}", None if tally.failed else "ok")
    return Reply(status="failed" if tally.failed else "ok")


def _drop(app, line: Line):
    w = line.words
    if len(w) != 3:
        raise ShellError(f"`journal drop` takes one ID, or `ended`; usage: {USAGE}",
                         (w[3].column if len(w) > 3 else line.end_column()))
    others = [i for i in _others(app) if not i.live]
    if w[2].text == "ended":
        gone = others
    else:
        gone = [i for i in others if i.id == w[2].text]
        if not gone:
            raise ShellError(f"no ended journal `{w[2].text}`; `journal` lists them",
                             w[2].column)
    n = 0
    for i in gone:
        try:
            os.unlink(i.path)
            n += 1
        except OSError as exc:
            raise ShellError(f"journal `{i.id}` cannot be deleted ({exc.strerror or exc})") \
                from None
    app.printer.line(f"dropped {n} journal{'s' if n != 1 else ''}")
