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

from dataclasses import dataclass, replace
from typing import Callable

from .errors import QuadratError
from .state import History, Outcome, State


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
