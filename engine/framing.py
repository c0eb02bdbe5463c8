"""Computing on a rule in the frame, on a state: compute, fresh, and which
questions such a posterior answers.

Each operation takes a `State` and returns an `Outcome` (the state holding the
new `NodePosterior`, current under its own basis, and the report), as
engine/runs.py does for the tensor grid; nothing is committed here.
"""

from __future__ import annotations

from .errors import ComputeError
from .framerun import NodePosterior, Targets, compute as compute_frame
from .plan import format_count
from .results import ComputeReport, Fresh
from .state import Outcome, State

#: Log-density evaluations a frame rule may spend, mode search included, when its
#: setting is not given (the rule is raised while the next step fits).
EVALUATION_BUDGET = 100_000
#: What each kind of question needs of a posterior on a rule in the frame.
ANSWERED = ("evidence", "mean and sd of a parameter", "compare and keep")


def compute(s: State, *, budget_seconds: float, progress=None) -> Outcome:
    """The posterior on the state's frame rule: an Outcome with a `ComputeReport`."""
    choice = s.frame_rule
    post = compute_frame(s.compiled(), choice, targets=Targets(budget=EVALUATION_BUDGET))
    notes = (f"rule {post.label}: {format_count(post.points)} evaluations, "
             f"{format_count(post.mode_evaluations)} more for the mode and the frame",)
    notes += tuple(post.compiled.improper)
    warns = post.problems
    return Outcome(s.with_posterior(post, steps=()),
                   ComputeReport(post.points + post.mode_evaluations, post.seconds,
                                 post.log_evidence, notes, warns))


def fresh(s: State, *, budget_seconds: float) -> Outcome:
    """The current node posterior (a `Fresh`), computed first when there is none:
    a frame rule's evaluations are bounded by its budget."""
    if s.current:
        return Outcome(s, Fresh(s.posterior))
    what = "no posterior yet" if s.posterior is None else "the posterior is out of date"
    out = compute(s, budget_seconds=budget_seconds)
    rep = out.result
    return Outcome(out.state, Fresh(out.state.posterior,
                                    (f"{what}: computed first ({rep.notes[0]})",)
                                    + rep.notes[1:] + rep.warnings))


def refuse(s: State, what: str) -> None:
    """Refuse a question the frame rule of `s` does not answer yet, naming the rule
    that does.

    Raises
    ------
    ComputeError
    """
    choice = s.frame_rule
    if choice is None:
        return
    raise ComputeError(f"{what} is not answered on rule `{choice.name}` yet (it answers "
                       f"{', '.join(ANSWERED)}): `rule grid` answers it")


def is_node(post) -> bool:
    """Whether `post` is a posterior on a rule in the frame."""
    return isinstance(post, NodePosterior)


def points_of(post) -> int:
    """The points a posterior was computed on (grid points, or the rule's evaluations)."""
    return post.points if is_node(post) else post.grid.size
