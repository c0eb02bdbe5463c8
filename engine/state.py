"""The state commands act on, what a posterior was computed from, and undo.

A `State` is immutable: model, data, grid specs, rule, posterior, keeps,
refinement steps and predictions. Its posterior is current when the `Basis` it
was computed from (the revisions of the model and the data, the grid specs and
the rule) is the state's own. Revisions are issued once per new `Model` or
`DataSet` and never reused, so an object freed after many undos cannot make a
stale posterior read as current. The compiled model is cached on the state's
memo, keyed on the same revisions, and shared by every state derived from it.

`History` holds the current state and the states before it, for `undo` and for
putting the state back after an error or a Ctrl-C.
"""

from __future__ import annotations

from collections import OrderedDict
from dataclasses import dataclass, field, replace

from .data import DataSet
from .framerun import NodePosterior, RuleChoice
from .model import Compiled, Model, compile_model
from .posterior import Posterior
from .refine import AxisSpec, RefineStep
from .results import Kept

#: How many earlier states `undo` can go back to.
UNDO_DEPTH = 200
#: Predictive distributions kept per memo (each a prediction under one posterior).
PREDICTIVES_KEPT = 8
#: Compiled models kept per memo (the state and a what-if layer's base each need one).
MEMO_SIZE = 4


@dataclass(frozen=True)
class Basis:
    """What a posterior was computed from."""

    model: int                      # `Model.revision`
    data: int                       # `DataSet.revision`
    specs: tuple[AxisSpec, ...]
    rule: str
    choice: RuleChoice | None = None      # a rule in the frame, or the grid


@dataclass(frozen=True)
class Sized:
    """Axes that quadrat sized (`grid auto`, `refine`, `zoom`, an append), not the user,
    and the model and data they were sized for: once either changes they are stale,
    and the next compute sizes them again."""

    names: frozenset[str]
    content: tuple[int, int]      # (model revision, data revision)
    by: str                       # what sized them, as the user would name it


@dataclass(frozen=True)
class Prediction:
    """A predicted new observation ``NAME ~ FAMILY(args)``."""

    name: str
    family: str
    args: tuple
    text: str


class Memo:
    """Compiled models by (model revision, data revision), and posterior predictive
    distributions by (the basis of their posterior, the prediction), the most recent
    few of each.

    A cache, not state: states derived from one another share one memo, and what
    it holds is a pure function of its key.
    """

    def __init__(self, size: int = MEMO_SIZE):
        self._size = size
        self._items: OrderedDict[tuple[int, int], Compiled] = OrderedDict()
        self._predictives: OrderedDict[tuple, object] = OrderedDict()

    def predictive(self, key: tuple, make):
        """The predictive under `key` ((Basis, Prediction)), made by `make()` once."""
        pv = self._predictives.get(key)
        if pv is None:
            pv = make()
            self._predictives[key] = pv
            while len(self._predictives) > PREDICTIVES_KEPT:
                self._predictives.popitem(last=False)
        self._predictives.move_to_end(key)
        return pv

    def get(self, key: tuple[int, int]) -> Compiled | None:
        c = self._items.get(key)
        if c is not None:
            self._items.move_to_end(key)
        return c

    def put(self, key: tuple[int, int], compiled: Compiled) -> None:
        self._items[key] = compiled
        self._items.move_to_end(key)
        while len(self._items) > self._size:
            self._items.popitem(last=False)


@dataclass(frozen=True)
class State:
    model: Model = field(default_factory=Model)
    data: DataSet = field(default_factory=DataSet)
    specs: tuple[AxisSpec, ...] = ()      # grids the user set
    rule: str = "trapezoid"
    choice: RuleChoice | None = None      # `rule grid / hermite / sparse / rotated`; None: not set
    posterior: Posterior | NodePosterior | None = None
    basis: Basis | None = None            # what the posterior was computed from
    keeps: tuple[Kept, ...] = ()          # by name
    steps: tuple[RefineStep, ...] = ()    # refinement steps of the current posterior
    predictions: tuple[Prediction, ...] = ()   # by name
    sized: Sized | None = None            # which specs quadrat sized, for what content
    memo: Memo = field(default_factory=Memo, compare=False, repr=False)

    # -- lookups --------------------------------------------------------------
    def spec(self, name: str) -> AxisSpec | None:
        for s in self.specs:
            if s.name == name:
                return s
        return None

    def prediction(self, name: str) -> Prediction | None:
        for p in self.predictions:
            if p.name == name:
                return p
        return None

    def sized_by(self, by: str, names=None) -> Sized:
        """A record that the axes `names` (default: every spec) were sized now by `by`."""
        names = frozenset(x.name for x in self.specs) if names is None else frozenset(names)
        return Sized(names, self.content, by)

    @property
    def stale_specs(self) -> tuple[str, ...]:
        """The axes sized for a model or data set that has since changed."""
        if self.sized is None or self.sized.content == self.content:
            return ()
        return tuple(x.name for x in self.specs if x.name in self.sized.names)

    @property
    def content(self) -> tuple[int, int]:
        """The revisions of the model and the data: what compiling depends on."""
        return (self.model.revision, self.data.revision)

    @property
    def own_basis(self) -> Basis:
        """The basis a posterior computed now would have."""
        return Basis(self.model.revision, self.data.revision, self.specs, self.rule, self.choice)

    @property
    def current(self) -> bool:
        """Whether the posterior was computed from this state's model, data, grid
        specs and rule."""
        return self.posterior is not None and self.basis == self.own_basis

    @property
    def frame_rule(self) -> RuleChoice | None:
        """The rule in the frame `compute` uses, or None for the tensor grid."""
        return self.choice if self.choice is not None and self.choice.in_frame else None

    # -- the compiled model -----------------------------------------------------
    def compiled(self) -> Compiled:
        """The model compiled with the data (cached on the memo by revision)."""
        c = self.memo.get(self.content)
        if c is None:
            c = compile_model(self.model, self.data)
            self.memo.put(self.content, c)
        return c

    def remember(self, compiled: Compiled) -> None:
        """Cache `compiled` as this state's model compiled with its data."""
        self.memo.put(self.content, compiled)

    # -- changes ------------------------------------------------------------------
    def with_posterior(self, post: Posterior | NodePosterior, **changes) -> "State":
        """This state (with `changes`) holding `post`, current under its own basis."""
        new = replace(self, posterior=post, **changes)
        return replace(new, basis=new.own_basis)


@dataclass(frozen=True)
class Outcome:
    """What an operation on a state came to: the new state (the same object when
    nothing changed) and the result to hand back. The workspace commits the state."""

    state: State
    result: object


class History:
    """The current state and the states before it (at most `depth` of them).

    `push` makes a new state current; `pop` goes back one; `restore` goes back to
    a given earlier state, or, when it is no longer held (the history was cut at
    its depth, or a what-if layer was dropped since), simply makes it current.
    """

    def __init__(self, current: State | None = None, earlier=(), *, depth: int = UNDO_DEPTH):
        self._current = current if current is not None else State()
        self._earlier = list(earlier)
        self.depth = depth

    @property
    def current(self) -> State:
        return self._current

    @property
    def earlier(self) -> tuple[State, ...]:
        """The states before the current one, oldest first."""
        return tuple(self._earlier)

    def __len__(self) -> int:
        return len(self._earlier)

    def push(self, new: State) -> None:
        self._earlier.append(self._current)
        if len(self._earlier) > self.depth:
            del self._earlier[0]
        self._current = new

    def pop(self) -> State:
        """Go back one state (`IndexError` when there is none)."""
        self._current = self._earlier.pop()
        return self._current

    def reachable(self, target: State) -> bool:
        """Whether `target` is the current state or one held before it."""
        return target is self._current or any(s is target for s in self._earlier)

    def restore(self, target: State) -> None:
        if target is self._current:
            return
        if self.reachable(target):
            while self._current is not target:
                self._current = self._earlier.pop()
        else:
            self._current = target

    def copy(self, current: State | None = None) -> "History":
        """A history with the same earlier states (and `current`, if given)."""
        return History(self._current if current is None else current, self._earlier,
                       depth=self.depth)
