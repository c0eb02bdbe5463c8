"""Small helpers the command modules share."""

from __future__ import annotations

from engine.results import Change

from ..words import Line, ShellError, Word


def say(app, change: Change) -> None:
    """Print what a state-changing command did, and its notes."""
    app.printer.line(change.message)
    for n in change.notes:
        app.printer.note(n)


def with_progress(app, call, *args, **kwargs):
    """Run ``call(*args, progress=bar, **kwargs)`` with the printer's progress bar,
    closing the bar whatever happens (Ctrl-C included)."""
    bar = app.printer.progress()
    try:
        return call(*args, progress=bar, **kwargs)
    finally:
        bar.close()


def notes(app, items) -> None:
    for n in items:
        app.printer.note(n)


def need(line: Line, count: int, usage: str) -> tuple[Word, ...]:
    """The words of `line`, at least `count` of them (the command included)."""
    w = line.words
    if len(w) < count:
        raise ShellError(f"`{line.name}` needs more: {usage}", line.end_column())
    return w


def no_more(words, index: int, usage: str) -> None:
    """Refuse words beyond `index`."""
    if len(words) > index:
        raise ShellError(f"unexpected `{words[index].text}`; usage: {usage}", words[index].column)
