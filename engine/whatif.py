"""The what-if layer: hypothetical changes on top of the state as things are.

A `Layer` holds the state from before `whatif` (the "now" side) and the undo
history of that moment. Inside it, changes go to the workspace's state as
usual; a question is answered on that state (what if) and on the layer's base
(now), side by side, each on its own state: nothing is swapped in place. A
recomputation of the "now" posterior is kept in the layer's base, so asking
again does not compute it again; dropping the layer gives back the base and
the history as they were.
"""

from __future__ import annotations

import difflib
from dataclasses import dataclass, replace
from typing import Callable

from .data import DataSet
from .errors import QuadratError
from .state import History, Outcome, State

#: The most differences named one by one; the rest are counted.
SHOWN_DIFFERENCES = 8


@dataclass(frozen=True)
class Layer:
    """An open what-if layer.

    Attributes
    ----------
    base : State
        The state as things are (with any "now" posterior computed since).
    history : History
        The undo history when the layer opened (`History.copy`), given back at its end.
    """

    base: State
    history: History

    @classmethod
    def open(cls, history: History) -> "Layer":
        return cls(history.current, history.copy())

    def beside(self, ask: Callable[..., Outcome], whatif: Outcome, *args, **kwargs
               ) -> tuple[Outcome, "Layer"]:
        """The what-if outcome `whatif` of question `ask(state, *args, **kwargs)`, with
        the same question answered as things are beside it (its `now`), and the
        layer keeping any "now" posterior computed for it."""
        try:
            now = ask(self.base, *args, **kwargs)
        except QuadratError as exc:
            # the question may use names declared inside the layer
            ans = whatif.result
            note = (f"no answer as things are: {exc}",)
            return Outcome(whatif.state, replace(ans, notes=tuple(ans.notes) + note)), self
        return (Outcome(whatif.state, replace(whatif.result, now=now.result)),
                replace(self, base=now.state))

    def with_base(self, base: State) -> "Layer":
        return replace(self, base=base)

    def closed(self) -> History:
        """The history to go back to when the layer is dropped: as it was when the
        layer opened, with the base (and what it learned since) current."""
        return self.history.copy(self.base)


def _rows(rows: list[int]) -> str:
    """``row 3``, ``rows 3, 7`` or ``rows 3-6`` (1-based)."""
    if len(rows) == 1:
        return f"row {rows[0]}"
    if rows == list(range(rows[0], rows[-1] + 1)):
        return f"rows {rows[0]}-{rows[-1]}"
    return "rows " + ", ".join(map(str, rows))


def _changes(names: list[str], old: list[tuple], new: list[tuple]) -> list[tuple[str, str]]:
    """What turned the rows `old` of columns `names` into `new`: (kind, words) pairs,
    kind ``edit`` for a changed value (named with its column and row) and ``rows`` for
    rows dropped or added (to be said once for all the columns they touch)."""
    out = []
    ops = difflib.SequenceMatcher(None, old, new, autojunk=False).get_opcodes()
    for tag, i1, i2, j1, j2 in ops:
        if tag == "equal":
            continue
        if tag == "replace" and i2 - i1 == j2 - j1:
            for k in range(i2 - i1):
                for n, a, b in zip(names, old[i1 + k], new[j1 + k]):
                    if a != b:
                        out.append(("edit", f"`{n}` row {i1 + k + 1}: {a:g} -> {b:g}"))
            continue
        if i2 > i1:
            out.append(("rows", f"{_rows(list(range(i1 + 1, i2 + 1)))} dropped"))
        if j2 > j1:
            n = j2 - j1
            where = "appended" if i1 == len(old) else f"added before row {i1 + 1}"
            out.append(("rows", f"{n} row{'s' if n != 1 else ''} {where}"))
    return out


def _groups(base: DataSet, now: DataSet) -> list[list[str]]:
    """Columns whose rows are compared together: those of one table that have one
    length before and one after (a row is then the same row in all of them); any
    other column alone."""
    groups: dict[object, list[str]] = {}
    for c in now.columns:
        if c.name not in base:
            continue
        key = (c.table, base.get(c.name).rows, c.rows) if c.table is not None else c.name
        groups.setdefault(key, []).append(c.name)
    return list(groups.values())


def data_differences(base: DataSet, now: DataSet) -> tuple[str, ...]:
    """Which rows of the data differ between `base` (things as they are) and `now`,
    in words: changed values with their column and row, rows dropped or appended with
    the columns they touch, columns new or gone. Rows are numbered as in `base`."""
    out = [f"`{c.name}` is new" for c in now.columns if c.name not in base]
    out += [f"`{c.name}` is gone" for c in base.columns if c.name not in now]
    rows: dict[str, list[str]] = {}
    for names in _groups(base, now):
        old = [tuple(float(v) for v in r) for r in zip(*(base.values(n) for n in names))]
        new = [tuple(float(v) for v in r) for r in zip(*(now.values(n) for n in names))]
        if old == new:
            continue
        for kind, words in _changes(names, old, new):
            if kind == "edit":
                out.append(words)
            else:
                rows.setdefault(words, []).extend(f"`{n}`" for n in names)
    out += [f"{words} ({', '.join(cols)})" for words, cols in rows.items()]
    if len(out) > SHOWN_DIFFERENCES:
        more = len(out) - SHOWN_DIFFERENCES
        out = out[:SHOWN_DIFFERENCES] + [f"and {more} more"]
    return tuple(out)
