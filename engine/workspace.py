"""The workspace: a session's state, and the one door to the engine.

A thin facade. Each method checks what it must, calls one function that does
the work (`edits` for declarations, `runs` for computing, `asking` for the
questions, `comparing` for keeps and Bayes factors), commits the state that
function returns, and hands back its result. The work functions never change a
state in place, so an error or a Ctrl-C part way leaves the state exactly as it
was: the new state is committed only at the end. A question that computes the
posterior first returns the new state with its answer, and that is committed
too. Inside a what-if layer, questions are answered as things are and as they
would be, side by side (`whatif.Layer`). The workspace never prints.
"""

from __future__ import annotations

import os
from dataclasses import replace
from typing import Callable

from . import asking, comparing, edits, runs
from .data import DataSet
from .errors import QuadratError
from .model import Compiled, Model
from .posterior import Posterior
from .refine import AxisSpec, RefineStep
from .results import (Answer, Change, Comparison, ComputeReport, CostReport, Fresh, GridAuto,
                      Joint, Kept, RefineReport, SampleSizeOptions, Status, Summary)
from .framerun import RuleChoice
from .framing import points_of
from .runs import BUDGET_SECONDS, Progress
from .state import History, Outcome, Prediction, State
from .whatif import Layer, data_differences


class Workspace:
    """The session's state and the operations on it.

    Parameters
    ----------
    budget_seconds : float, keyword-only
        `compute` refuses a job predicted to take longer, unless forced.
    base_dir : str, keyword-only
        Relative data-file paths are read from here (default: the current folder).
    state : State, keyword-only
        The state to start from (default: an empty one).
    """

    def __init__(self, *, budget_seconds: float = BUDGET_SECONDS, base_dir: str | None = None,
                 state: State | None = None):
        self._history = History(state)
        self._layer: Layer | None = None
        self.budget_seconds = budget_seconds
        self.base_dir = base_dir

    # -- reading (the state is immutable: these hand out what it holds) ---------
    @property
    def state(self) -> State:
        return self._history.current

    @property
    def history(self) -> History:
        """The current state and the states before it (read it; change it through
        `undo`, `restore` and the commands)."""
        return self._history

    @property
    def model(self) -> Model:
        return self.state.model

    @property
    def data(self) -> DataSet:
        return self.state.data

    @property
    def posterior_now(self) -> Posterior | None:
        """The posterior the state holds, current or not (None before a compute)."""
        return self.state.posterior

    @property
    def keeps(self) -> tuple[Kept, ...]:
        return self.state.keeps

    @property
    def predictions(self) -> tuple[Prediction, ...]:
        return self.state.predictions

    @property
    def steps(self) -> tuple[RefineStep, ...]:
        """The refinement steps of the posterior the state holds."""
        return self.state.steps

    @property
    def rule_name(self) -> str:
        """The rule `compute` uses: a rule in the frame with its setting, or the
        tensor grid's 1-D rule."""
        fr = self.state.frame_rule
        return fr.describe() if fr is not None else self.state.rule

    @property
    def frame_rule(self) -> RuleChoice | None:
        """The rule in the frame `compute` uses, or None for the tensor grid."""
        return self.state.frame_rule

    def spec(self, name: str) -> AxisSpec | None:
        """The grid the user set for parameter `name`, if any."""
        return self.state.spec(name)

    @property
    def in_whatif(self) -> bool:
        return self._layer is not None

    @property
    def empty(self) -> bool:
        """Nothing declared, loaded, computed or kept: what `reset` leaves."""
        return edits.is_empty(self.state)

    def status(self) -> Status:
        s = self.state
        post = s.posterior
        st = "absent" if post is None else "current" if s.current else "out of date"
        ev = post.log_evidence if post is not None and post.log_evidence else None
        diag = getattr(post, "diagnostics", None)
        return Status(s.model.param_names, points_of(post) if post else None, st,
                      ev.value if ev else None, self.in_whatif, ev.error if ev else None,
                      bool(diag is not None and diag.unresolved))

    def resolve(self, path: str) -> str:
        """A data-file path as typed, read from `base_dir` when relative."""
        if os.path.isabs(path) or not self.base_dir:
            return path
        return os.path.join(self.base_dir, path)

    def compiled(self) -> Compiled:
        return self.state.compiled()

    # -- committing ---------------------------------------------------------------
    def _commit(self, out: Outcome):
        if out.state is not self.state:
            self._history.push(out.state)
        return out.result

    def _ask(self, ask: Callable[..., Outcome], *args, **kwargs):
        """Answer on the state; inside a what-if layer also as things are."""
        kwargs["budget_seconds"] = self.budget_seconds
        out = ask(self.state, *args, **kwargs)
        if self._layer is not None:
            out, self._layer = self._layer.beside(ask, out, *args, **kwargs)
        return self._commit(out)

    # -- declarations ---------------------------------------------------------------
    def param(self, name: str, kind: str, *, lo: float | None = None, hi: float | None = None,
              values=None, points: int | None = None) -> Change:
        return self._commit(edits.param(self.state, name, kind, lo=lo, hi=hi, values=values,
                                        points=points))

    def prior(self, name: str, text: str) -> Change:
        return self._commit(edits.prior(self.state, name, text))

    def prior_log(self, text: str) -> Change:
        return self._commit(edits.prior_log(self.state, text))

    def likelihood(self, column: str, text: str, censor: str | None = None) -> Change:
        return self._commit(edits.likelihood(self.state, column, text, censor))

    def likelihood_log(self, text: str) -> Change:
        return self._commit(edits.likelihood_log(self.state, text))

    def let(self, name: str, text: str) -> Change:
        return self._commit(edits.let(self.state, name, text))

    def data_typed(self, name: str, texts: list[str]) -> Change:
        return self._commit(edits.data_typed(self.state, name, texts))

    def data_load(self, path: str, prefix: str | None = None) -> Change:
        return self._commit(edits.data_load(self.state, path, self.resolve(path), prefix))

    def data_edit(self, name: str, row: int, text: str) -> Change:
        """The value of column `name` in row `row` (1-based) changed."""
        return self._commit(edits.data_edit(self.state, name, row, text))

    def data_drop(self, name: str, row: int) -> Change:
        """Row `row` (1-based) taken out of the table holding column `name`."""
        return self._commit(edits.data_drop(self.state, name, row))

    def whatif_rows(self) -> tuple[str, ...]:
        """Inside a what-if layer: which rows of the data differ from things as they
        are, in words (empty outside a layer or when the data are the same)."""
        if self._layer is None:
            return ()
        return data_differences(self._layer.base.data, self.state.data)

    def grid(self, name: str, lo: float, hi: float, n: int | None = None,
             scale: str | None = None) -> Change:
        return self._commit(edits.grid(self.state, name, lo, hi, n, scale))

    def rule(self, name: str, setting: float | None = None) -> Change:
        return self._commit(edits.rule(self.state, name, setting))

    def reset(self) -> Change:
        return self._commit(edits.reset(self.state))

    # -- computing --------------------------------------------------------------------
    def grid_auto(self) -> GridAuto:
        return self._commit(runs.grid_auto(self.state))

    def cost(self) -> CostReport:
        return runs.cost(self.state, budget_seconds=self.budget_seconds)

    def compute(self, *, progress: Progress = None, force: bool = False) -> ComputeReport:
        """Evaluate the posterior. The state changes only when it succeeds."""
        return self._commit(runs.compute(self.state, budget_seconds=self.budget_seconds,
                                         progress=progress, force=force))

    def refine(self, axis: str | None = None, until: float | None = None, *,
               progress: Progress = None) -> RefineReport:
        """Refine step by step (computing first if needed)."""
        return self._commit(runs.refine(self.state, axis, until, progress=progress,
                                        budget_seconds=self.budget_seconds))

    def zoom(self, mass: float = 1 - 1e-9, *, progress: Progress = None,
             force: bool = False) -> ComputeReport:
        """Shrink every axis to the region holding `mass` and compute again."""
        return self._commit(runs.zoom(self.state, mass, progress=progress, force=force,
                                      budget_seconds=self.budget_seconds))

    def data_append(self, name: str, texts: list[str], *, progress: Progress = None) -> Change:
        """New values at the end of column `name`; a current posterior is updated from
        the new rows alone."""
        data, message = edits.appended_values(self.state, name, texts)
        return self._commit(runs.append(self.state, data, message, progress=progress,
                                        budget_seconds=self.budget_seconds))

    def data_append_file(self, path: str, prefix: str | None = None, *,
                         progress: Progress = None) -> Change:
        """The rows of a CSV file at the end of the table loaded with the same header."""
        data, message = edits.appended_file(self.state, path, self.resolve(path), prefix)
        return self._commit(runs.append(self.state, data, message, progress=progress,
                                        budget_seconds=self.budget_seconds))

    def posterior(self) -> Fresh:
        """The current posterior; computed first when out of date and cheap."""
        return self._commit(asking.posterior(self.state, budget_seconds=self.budget_seconds))

    def posterior_beside(self) -> Fresh | None:
        """Inside a what-if layer: the posterior as things are (computed first when out
        of date and cheap, and kept in the layer); None outside a layer."""
        if self._layer is None:
            return None
        out = runs.fresh(self._layer.base, budget_seconds=self.budget_seconds)
        self._layer = self._layer.with_base(out.state)
        return out.result

    def joint(self, a: str, b: str) -> Joint:
        """The 2-D posterior marginal of parameters `a` and `b`."""
        return self._commit(asking.joint(self.state, a, b, budget_seconds=self.budget_seconds))

    # -- questions (side by side inside a what-if layer) ------------------------------
    def summary(self) -> Summary:
        return self._ask(asking.summary)

    def interval(self, name: str, level: float = 0.95, kind: str = "central") -> Answer:
        return self._ask(asking.interval, name, level, kind)

    def density(self, text: str) -> Answer:
        """The posterior density of a let or an expression (its detail a `Curve`)."""
        return self._ask(asking.density, text)

    def mode(self) -> Answer:
        return self._ask(asking.mode)

    def prob(self, text: str) -> Answer:
        return self._ask(asking.prob, text)

    def mean(self, text: str) -> Answer:
        return self._ask(asking.moment, "mean", text)

    def sd(self, text: str) -> Answer:
        return self._ask(asking.moment, "sd", text)

    def quantile(self, text: str, q: float) -> Answer:
        return self._ask(asking.quantile, text, q)

    def evidence(self) -> Answer:
        return self._ask(asking.evidence)

    def predict(self, name: str, text: str) -> Answer:
        """The posterior predictive of a new observation ``name ~ FAMILY(args)``; later
        `prob`, `mean`, `sd`, `quantile` and `interval` questions about `name` use it
        (inside a what-if layer too, and after it)."""
        pr = edits.prediction(self.state, name, text)
        ans = self._ask(asking.predict, pr)
        if self._layer is not None:
            self._layer = self._layer.with_base(edits.with_prediction(self._layer.base, pr))
        return self._commit(Outcome(edits.with_prediction(self.state, pr), ans))

    def samplesize(self, name: str, width: float, options: SampleSizeOptions | None = None, *,
                   progress: Progress = None, **given) -> Answer:
        """How many further observations until the expected width of the interval of
        `name` is at most `width`; `given` overrides fields of `options`. Inside a
        what-if layer it answers for the what-if state."""
        opts = replace(options or SampleSizeOptions(), **given)
        ans = self._commit(asking.samplesize(self.state, name, width, opts, progress=progress,
                                             budget_seconds=self.budget_seconds))
        if self._layer is None:
            return ans
        return replace(ans, notes=ans.notes + ("answered for the what-if state",))

    # -- model comparison ----------------------------------------------------------------
    def keep(self, name: str) -> Change:
        return self._commit(comparing.keep(self.state, name, budget_seconds=self.budget_seconds))

    def compare(self, a: str, b: str) -> Comparison:
        return comparing.compare(self.state, a, b)

    # -- what-if and undo ---------------------------------------------------------------
    def whatif_begin(self) -> Change:
        if self._layer is not None:
            raise QuadratError("already in a what-if layer; `whatif end` first")
        self._layer = Layer.open(self._history)
        return Change("what-if: the data commands that follow are hypothetical; questions "
                      "answer now and what-if side by side; `whatif end` drops the layer")

    def whatif_end(self) -> Change:
        if self._layer is None:
            raise QuadratError("not in a what-if layer")
        self._history, self._layer = self._layer.closed(), None
        return Change("what-if dropped: everything is as it was before `whatif`")

    def undo(self) -> Change:
        if not len(self._history):
            raise QuadratError("nothing to undo")
        self._history.pop()
        return Change("undone: the state is as it was before the last change")

    def restore(self, before: State, *, close_layer: bool = False) -> None:
        """Put the state back to `before`, going back through the history; with
        `close_layer`, first drop a what-if layer opened since."""
        if close_layer and self._layer is not None:
            self.whatif_end()
        self._history.restore(before)
