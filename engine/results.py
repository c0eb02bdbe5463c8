"""Every result the engine hands out: frozen records with named fields.

A command that changes the state answers with a `Change`; a question with an
`Answer` whose `detail` is a record of its kind (a `Number`, a `Range`, a
`Point`, a `Predicted`, a `Needed`); `compute`, `cost`, `refine` and `zoom` with
their reports. `values` and `errors` of an answer are the numbers a `check` line
compares, in order, read off the detail: a reader of one kind uses its named
fields, never positions.
"""

from __future__ import annotations

import math
from dataclasses import dataclass

import numpy as np

from . import plan
from .posterior import Estimate, Posterior
from .predict import Predictive, SampleSize
from .refine import AutoGrid, RefineStep


@dataclass(frozen=True)
class Change:
    """What a state-changing command did: one message and any notes."""

    message: str
    notes: tuple[str, ...] = ()


# ---------------------------------------------------------------------------
# answers: one detail record per kind

@dataclass(frozen=True)
class Number:
    """One number: a probability, a mean, an sd, a quantile, a log evidence or a
    log Bayes factor.

    Attributes
    ----------
    value : float
    error : float or None
        Estimated absolute error (None where no estimate exists).
    scale : float or None
        The spread of the quantity asked about (its sd, for `mean` and `sd`), which a
        check's tolerance is measured against.
    predictive : Predictive or None
        The predictive distribution, when the question was about a predicted
        observation.
    """

    value: float
    error: float | None = None
    scale: float | None = None
    predictive: Predictive | None = None

    @property
    def checked(self) -> tuple[float, ...]:
        return (self.value,)

    @property
    def errors(self) -> tuple[float | None, ...]:
        return (self.error,)


@dataclass(frozen=True)
class Range:
    """A credible interval: its ends (the outermost ones of a region in several
    pieces), with their estimated errors."""

    lo: float
    hi: float
    lo_error: float | None
    hi_error: float | None
    level: float
    kind: str                                   # "central" or "hpd"
    pieces: tuple[tuple[float, float], ...] = ()
    predictive: Predictive | None = None

    @property
    def checked(self) -> tuple[float, ...]:
        return (self.lo, self.hi)

    @property
    def errors(self) -> tuple[float | None, ...]:
        return (self.lo_error, self.hi_error)


@dataclass(frozen=True)
class Point:
    """The joint mode: the value of each parameter there, and the posterior sd of
    each (the scale a check's tolerance of it is measured against)."""

    values: dict[str, float]
    converged: bool
    message: str
    spreads: tuple[float, ...] = ()

    @property
    def checked(self) -> tuple[float, ...]:
        return tuple(self.values.values())

    @property
    def errors(self) -> tuple[float | None, ...]:
        return tuple(None for _ in self.values)


@dataclass(frozen=True)
class Predicted:
    """A new observation's posterior predictive: mean, sd (``nan`` where they do not
    exist) and central 95% interval, sums over the grid, each with its estimated
    error (from the nested coarse levels; None where there are none)."""

    mean: float
    sd: float
    lo: float
    hi: float
    predictive: Predictive
    errs: tuple[float | None, ...] = (None, None, None, None)

    @property
    def checked(self) -> tuple[float, ...]:
        return (self.mean, self.sd, self.lo, self.hi)

    @property
    def errors(self) -> tuple[float | None, ...]:
        return self.errs


@dataclass(frozen=True)
class Needed:
    """How many further observations an interval needs (`n` None: not reached
    within the search), and the expected width there."""

    n: int | None
    width: float
    mc_error: float
    level: float
    kind: str
    search: SampleSize

    @property
    def checked(self) -> tuple[float, ...]:
        # not reached: -1 stands for "none", so that a check line can state it
        return (float(self.n) if self.n is not None else -1.0, self.width)

    @property
    def errors(self) -> tuple[float | None, ...]:
        return (None, self.mc_error)


@dataclass(frozen=True)
class NoMoment:
    """A mean or sd that does not exist (a tail falling as |x|^-k with k <= 2, or
    <= 3 for the sd), with the median and central 95% interval to read instead.

    Attributes
    ----------
    kind : str
        ``mean`` or ``sd``.
    reason : str
        Why, in words (``tails too heavy: ...``).
    median, lo, hi : Estimate or None
        The median and the 95% central interval (None for an expression whose
        quantiles are not asked here).
    """

    kind: str
    reason: str
    median: Estimate | None = None
    lo: Estimate | None = None
    hi: Estimate | None = None

    @property
    def checked(self) -> tuple[float, ...]:
        return (math.nan,)     # no number to check: `save` writes no check line

    @property
    def errors(self) -> tuple[float | None, ...]:
        return (None,)


@dataclass(frozen=True)
class Levels:
    """Quantiles of one quantity at several levels, in the order asked."""

    levels: tuple[float, ...]
    quantiles: tuple[float, ...]
    quantile_errors: tuple[float | None, ...]

    @property
    def checked(self) -> tuple[float, ...]:
        return self.quantiles

    @property
    def errors(self) -> tuple[float | None, ...]:
        return self.quantile_errors


Detail = Number | Range | Point | Predicted | Needed | NoMoment | Levels


@dataclass(frozen=True)
class SampleSizeOptions:
    """How `samplesize` searches: the interval's level and kind, the largest n
    tried, how future rows arise (``COL ~ FAMILY(args)``, or None for the model's
    own likelihood), and the simulations and their seed."""

    level: float = 0.95
    max_n: int = 10_000
    using: str | None = None
    sims: int = 200
    seed: int = 1
    kind: str = "central"


@dataclass(frozen=True)
class Answer:
    """The answer to a question.

    Attributes
    ----------
    kind : str
        ``prob``, ``mean``, ``sd``, ``quantile``, ``interval``, ``evidence``,
        ``mode``, ``predict``, ``samplesize`` or ``compare``.
    label : str
        What was asked, in words (for a table row).
    detail : Number, Range, Point, Predicted or Needed
        The answer's own record, by kind.
    notes : tuple of str
    now : Answer or None
        Inside a what-if layer: the same question, as things are.
    """

    kind: str
    label: str
    detail: Detail
    notes: tuple[str, ...] = ()
    now: "Answer | None" = None
    unresolved: str = ""     # why the grid does not resolve the posterior it came from

    @property
    def values(self) -> tuple[float, ...]:
        """The numbers `check` compares, in order."""
        return self.detail.checked

    @property
    def errors(self) -> tuple[float | None, ...]:
        """Their estimated absolute errors (None where there is none)."""
        return self.detail.errors


@dataclass(frozen=True)
class SummaryRow:
    name: str
    mean: Estimate
    sd: Estimate
    q025: Estimate
    q50: Estimate
    q975: Estimate
    let: bool = False     # a let's row (its statistics computed from its expression)


@dataclass(frozen=True)
class Summary:
    rows: tuple[SummaryRow, ...]
    log_evidence: Estimate | None
    points: int
    notes: tuple[str, ...] = ()
    now: "Summary | None" = None
    unresolved: str = ""
    rule: str = ""          # a rule in the frame (its points are nodes), or "" for a grid


# ---------------------------------------------------------------------------
# model comparison

@dataclass(frozen=True)
class Kept:
    """A model kept for comparison: its evidence and what it was fitted to."""

    name: str
    log_evidence: Estimate | None
    improper: tuple[str, ...]
    data_key: str
    data_rows: str
    model_lines: tuple[str, ...]
    cautions: tuple[str, ...]
    points: int


@dataclass(frozen=True)
class Comparison:
    """Two kept models: log Bayes factor (first over second) and its error."""

    first: Kept
    second: Kept
    log_bf: Estimate
    notes: tuple[str, ...]

    @property
    def bayes_factor(self) -> float:
        v = self.log_bf.value
        return math.exp(v) if v < 709 else math.inf

    @property
    def answer(self) -> Answer:
        """The log Bayes factor as an answer (what a `check` compares)."""
        return Answer("compare", f"log Bayes factor of `{self.first.name}` over "
                      f"`{self.second.name}`", Number(self.log_bf.value, self.log_bf.error))


# ---------------------------------------------------------------------------
# posteriors handed out, and the reports of runs

@dataclass(frozen=True)
class Fresh:
    """The current posterior, and notes on how it came to be (computed first)."""

    posterior: Posterior
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class Joint:
    """The 2-D posterior marginal of two parameters: node masses, shape
    ``(n_a, n_b)``, summing to 1."""

    mass: np.ndarray
    posterior: Posterior
    notes: tuple[str, ...] = ()


@dataclass(frozen=True)
class GridAuto:
    """What `grid auto` set, and what it found (modes, specs, its message)."""

    change: Change
    found: AutoGrid


@dataclass(frozen=True)
class ComputeReport:
    """What `compute` (or `zoom`) did."""

    points: int
    seconds: float
    log_evidence: Estimate | None
    notes: tuple[str, ...]
    warnings: tuple[str, ...]
    unresolved: str = ""


@dataclass(frozen=True)
class CostStep:
    """A refinement step ahead: its points, memory and predicted seconds."""

    step: int
    points: int
    memory: int
    seconds: float


@dataclass(frozen=True)
class RuleRow:
    """One rule in the frame at one setting, as `cost` lists it.

    Attributes
    ----------
    rule : str
        The rule and its setting, as typed (``sparse level 4``).
    points : int
        Log-density evaluations (the mode search aside).
    exact_count : bool
        Whether `points` is exact (the rotated lattice's is estimated for a normal
        posterior).
    memory : int
        Bytes.
    seconds : float or None
        Predicted from the density's measured cost (None: not timed).
    accuracy : str
    fits : bool
        Whether it fits in memory.
    chosen : bool
        Whether it is the rule set.
    """

    rule: str
    points: int
    exact_count: bool
    memory: int
    seconds: float | None
    accuracy: str
    fits: bool
    chosen: bool = False


@dataclass(frozen=True)
class CostReport:
    cost: plan.Cost
    grid: tuple[str, ...]      # one line per axis
    rule: str
    auto: bool                 # whether some axes would come from grid auto
    budget_seconds: float
    ahead: tuple[CostStep, ...] = ()
    advice: str = ""
    rules: tuple[RuleRow, ...] = ()    # the rules in the frame, for this model
    choice: str = ""                   # what `compute` would use, when not the grid


@dataclass(frozen=True)
class RefineReport:
    """What `refine` did: the table of steps and why it stopped."""

    steps: tuple[RefineStep, ...]
    converged: bool
    message: str
    notes: tuple[str, ...]
    warnings: tuple[str, ...]


@dataclass(frozen=True)
class Status:
    """What the toolbar shows: a pure summary of the state."""

    params: tuple[str, ...]
    points: int | None
    posterior: str            # "absent", "current", "out of date"
    log_evidence: float | None
    whatif: bool
    log_evidence_error: float | None = None
    unresolved: bool = False
