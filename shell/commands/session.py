"""Sessions and housekeeping: save, replay, history, undo, reset, note, help, quit."""

from __future__ import annotations

import os
import textwrap

from engine.expr import FUNCTIONS
from engine.families import FAMILIES

from .. import script
from ..registry import COMMANDS, GROUP_WORDS, GROUPS, LATER, NOTHING, Slot, command
from ..replies import Reply
from ..words import Line, Quit, ShellError, path_word
from .common import say


@command("save", usage="save FILE.qd [force]", group="session",
         complete=lambda words, text: Slot(files=(".qd",)) if len(words) == 1
         else Slot(words=("force",)),
         help="""Writes the session to FILE.qd: a header with quadrat's version, the date and
         the SHA-256 of every data file, then the commands that changed the state or asked a
         question, as typed (undone ones left out), each question followed by a `check`
         line with the numbers shown and a tolerance. The write is atomic: the old file
         stays whole until the new one replaces it. An existing file is overwritten only if
         `save` wrote it; `save FILE.qd force` overwrites any regular file. A symbolic link is
         written through to the file it points to, and the message says so; a pipe or a
         device is refused. Inside a file being replayed, `save` writes new files only.""")
def save(app, line: Line):
    w = line.words
    if len(w) < 2:
        raise ShellError("`save` needs a file name: save FILE.qd [force]", line.end_column())
    force = False
    if len(w) > 2:
        if w[2].text != "force" or len(w) > 3:
            bad = w[2] if w[2].text != "force" else w[3]
            raise ShellError(f"unexpected `{bad.text}`; usage: save FILE.qd [force]", bad.column)
        force = True
    rep = script.save(app, path_word(w[1]), force=force, word=w[1])
    extra = f", {rep.data_files} data file{'s' if rep.data_files != 1 else ''}" \
        if rep.data_files else ""
    app.printer.line(f"saved `{rep.path}`: {rep.commands} command"
                     f"{'s' if rep.commands != 1 else ''}, {rep.checks} check"
                     f"{'s' if rep.checks != 1 else ''}{extra}{rep.via}")
    if app.ws.in_whatif:
        app.printer.note("saved inside a what-if layer: the file ends inside it, without "
                         "`whatif end`")


_ALLOW = ("--allow-changed-data", "allow-changed-data")


REPLAY_USAGE = "replay FILE.qd [merge] [--allow-changed-data]"


@command("replay", usage=REPLAY_USAGE, group="session",
         complete=lambda words, text: Slot(files=(".qd",)) if len(words) == 1
         else Slot(words=("merge", _ALLOW[0])),
         help="""Runs a session file, line by line, as if typed, in a fresh workspace: when
         the session holds anything, it is set aside first as by `reset` (the line says what
         is dropped; `undo` after the replay brings it back). `replay FILE.qd merge` runs the
         file on top of the current model, data and keeps instead. First it checks the
         SHA-256 of every data file in the file's header and refuses a file that changed,
         naming it, unless `--allow-changed-data` is given. It stops at the first error, and
         then keeps nothing of the file: the state is as before the replay. Every check
         that moved is reported with its old and new value. Relative paths in the file are
         read from the file's folder. A replayed file writes new files only: its `save` and
         `export` never replace a file that was there before the replay, this session's
         own files included, `force` or not; the files it wrote are listed at the end.
         Ctrl-C stops it and leaves the state as before.""")
def replay(app, line: Line):
    w = line.words
    if len(w) < 2:
        raise ShellError(f"`replay` needs a file name: {REPLAY_USAGE}", line.end_column())
    allow = merge = False
    for x in w[2:]:
        if x.text in _ALLOW and not allow:
            allow = True
        elif x.text == "merge" and not merge:
            merge = True
        else:
            raise ShellError(f"unexpected `{x.text}`; usage: {REPLAY_USAGE}", x.column)
    path = path_word(w[1])

    def fresh():
        if merge:
            app.printer.note(f"replaying `{path}` on top of the current session (merge)")
        elif not app.ws.empty:
            app.printer.note(f"replaying `{path}` in a fresh workspace; `replay {path} merge` "
                             "would add it to the current session")
            if app.run("reset", app.current_where) != "ok":
                raise ShellError("the session could not be set aside for the replay")

    tally = script.replay(app, path, allow_changed_data=allow, first=fresh)
    report(app, path, tally, undone=True)
    if tally.errors:
        return Reply(status="error")  # the dispatcher puts the state back
    return Reply(status="failed" if tally.failed else "ok")


def report(app, path: str, tally, *, undone: bool = False) -> None:
    """One line on how a replay went (`undone`: a replay that ends in an error is
    undone whole, and the line says so)."""
    checks = tally.checked + tally.failed
    if tally.wrote:
        n = len(tally.wrote)
        app.printer.line(f"the replay of `{path}` wrote {n} new file{'s' if n != 1 else ''}: "
                         + ", ".join(f"`{_shown(app, p)}`" for p in tally.wrote))
    if tally.errors:
        tail = "; the state is as it was before the replay" if undone else ""
        app.printer.error((f"replay of `{path}` stopped at an error" if not app.keep_going else
                           f"replay of `{path}` had {tally.errors} error"
                           f"{'s' if tally.errors != 1 else ''}") + tail)
    elif tally.failed:
        app.printer.error(f"replayed `{path}`: {tally.failed} of {checks} checks moved")
    elif checks:
        app.printer.line(f"replayed `{path}`: all {checks} checks held", "ok")
    else:
        app.printer.line(f"replayed `{path}`")


def _shown(app, path: str) -> str:
    """A path written as the user would: relative to the working folder when inside it."""
    rel = os.path.relpath(path)
    return path if rel.startswith("..") else rel


@command("history", usage="history", group="session",
         complete=lambda words, text: NOTHING,
         help="""Lists the commands of this session that `save` would keep, numbered: those
         that changed the state or asked a question (undone ones are gone).""")
def history(app, line: Line):
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `history` takes nothing", w[1].column)
    if not app.log:
        app.printer.line("nothing yet")
        return
    width = len(str(len(app.log)))
    for i, e in enumerate(app.log, 1):
        app.printer.line(f"{str(i).rjust(width)}  {e.text}")


@command("undo", usage="undo", group="session", complete=lambda words, text: NOTHING,
         help="""Undoes the last command that changed the state (a declaration, data, a
         grid, a rule, a compute, a refine or zoom, a keep, a reset): everything is as it
         was before it, and it leaves the session, with any questions asked after it. Inside
         a what-if layer it undoes the layer's own changes only (`whatif end` drops the
         rest); after a layer, it passes over it to the change before.""")
def undo(app, line: Line):
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `undo` takes nothing", w[1].column)
    n = len(app.log)
    e = app.undo()
    dropped = n - len(app.log) - 1
    tail = (f" (and the {dropped} question{'s' if dropped != 1 else ''} asked after it)"
            if dropped else "")
    app.printer.line(f"undone: `{e.text}`{tail}; the state is as it was before it")


@command("reset", usage="reset", kind="change", group="session",
         complete=lambda words, text: NOTHING,
         help="""Clears the model, the data, the grids and the posterior. `undo` brings them
         back.""")
def reset(app, line: Line):
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `reset` takes nothing", w[1].column)
    say(app, app.ws.reset())


@command("note", usage="note TEXT", kind="note", group="session",
         complete=lambda words, text: NOTHING,
         help="""Prints TEXT. Session files use it for what a reader must see when the
         session runs, such as a caution on how far its results may be taken; `save` keeps
         it.""")
def note(app, line: Line):
    seg = line.rest(1)
    if not seg.text:
        raise ShellError("`note` needs some text", line.end_column())
    app.printer.line(seg.text)


@command("quit", usage="quit", group="session", complete=lambda words, text: NOTHING,
         help="""Leaves quadrat (so does Ctrl-D at an empty prompt). Nothing is saved by
         itself: `save FILE.qd` first to keep the session.""")
def quit_(app, line: Line):
    w = line.words
    if len(w) > 1:
        raise ShellError(f"unexpected `{w[1].text}`: `quit` takes nothing", w[1].column)
    raise Quit()


# ---------------------------------------------------------------------------
# help

def _complete_help(words, text):
    if len(words) == 1:
        return Slot(commands=True, families=True, functions=True,
                    words=("all", "families", "functions", *GROUP_WORDS.values()))
    return NOTHING


HELP_USAGE = "help [COMMAND | GROUP | all | FAMILY | FUNCTION | families | functions]"


@command("help", usage=HELP_USAGE, group="session", complete=_complete_help,
         help="""Lists the commands by group, on one screen; `help GROUP` gives the usage
         lines of one group (model, computing, questions, arrivals, views, sessions), `help
         all` those of every command, `help COMMAND` tells what one does, `help families`
         and `help functions` list the distributions and the functions formulas may use,
         and `help NAME` describes one of them. At the prompt a listing longer than the
         screen stops after each page (Enter for the next, q to stop).""")
def help_(app, line: Line):
    w = line.words
    width = app.printer.width
    if len(w) == 1:
        app.printer.lines(overview())
        return
    if len(w) > 2:
        raise ShellError(f"unexpected `{w[2].text}`: help takes one name", w[2].column)
    app.printer.page(help_lines(w[1].text, width, column=w[1].column))


def overview() -> list[str]:
    """The commands by group: one screen at 80 x 24."""
    out = []
    for group, title in GROUPS:
        names = [c.name for c in COMMANDS.values() if c.group == group]
        if not names:
            continue
        out.append(f"{title} (`help {GROUP_WORDS[group]}`)")
        out.append("  " + "  ".join(names))
    out.append("`help COMMAND` tells what a command does; `help all` lists every usage line;")
    out.append("`help families` and `help functions` list what formulas may use.")
    out.append("`#` starts a comment; `;` separates commands on one line.")
    return out


def usage_lines(groups) -> list[str]:
    out = []
    for group, title in GROUPS:
        if group not in groups:
            continue
        out.append(title)
        out.extend("  " + c.usage for c in COMMANDS.values() if c.group == group)
    return out


def help_lines(name: str, width: int, *, column: int | None = None) -> list[str]:
    wrap = textwrap.TextWrapper(width=max(40, width - 1), initial_indent="  ",
                                subsequent_indent="  ", break_on_hyphens=False)
    if name in COMMANDS:
        c = COMMANDS[name]
        return [c.usage] + wrap.wrap(c.help)
    if name == "all":
        return usage_lines(dict(GROUPS))
    groups = {v: k for k, v in GROUP_WORDS.items()}
    if name in groups:
        return usage_lines((groups[name],))
    if name == "families":
        return [f"  {f.usage():<28} {f.support}" for f in FAMILIES.values()]
    if name == "functions":
        return ["  " + f.help for f in FUNCTIONS.values()]
    if name in FAMILIES:
        f = FAMILIES[name]
        lines = [f.usage(), *wrap.wrap(f.help), f"  support: {f.support}"]
        if f.constraints:
            lines.append("  arguments: " + "; ".join(f.constraints))
        lines.append("  right-censored rows: " + ("yes" if f.logsf is not None else "no"))
        return lines
    if name in FUNCTIONS:
        return [FUNCTIONS[name].help]
    if name in LATER:
        return [f"`{name}` is not in this version of quadrat yet"]
    raise ShellError(f"no help on `{name}`; `help` lists the commands", column)
