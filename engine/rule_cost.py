"""What each rule in the frame costs before it runs: points, memory, accuracy class.

Pure functions of the dimension and the rule's setting (no timing: seconds per
evaluation come from engine/plan.py's measured run of the model, multiplied by
`RuleCost.points`). The hermite and sparse counts are exact; the rotated grid's
depends on the posterior, and is estimated for a normal one: the lattice points
inside the level set where the normal's log-density is within the pruning depth
of its top, plus one layer of frontier.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Callable

from scipy import special

from .errors import GridError
from .rotated import MASS, STEP, check_rotated, initial_drop
from .sparse import check_hermite, check_sparse, hermite_points, sparse_degree, sparse_points

#: Bytes a node costs while a rule is held and reduced: z (d doubles), per level a
#: log weight and a sign, the log-density, and the moments' products (d doubles).
_BYTES_DOUBLE = 8


@dataclass(frozen=True)
class RuleCost:
    """The cost of one rule in the frame.

    Attributes
    ----------
    rule : str
    settings : tuple of (str, float)
    dims : int
    points : int
        Log-density evaluations (exact for hermite and sparse; an estimate for a
        normal posterior for rotated).
    exact_count : bool
        Whether `points` is exact.
    levels : int
        Levels the error estimate compares.
    memory : int
        Bytes to hold the nodes, weights and values.
    exact_degree : int or None
        Total degree of the polynomials times the normal density integrated exactly.
    accuracy : str
        The rule's accuracy class, in a phrase.
    """

    rule: str
    settings: tuple[tuple[str, float], ...]
    dims: int
    points: int
    exact_count: bool
    levels: int
    memory: int
    exact_degree: int | None
    accuracy: str


def _memory(points: int, d: int, levels: int) -> int:
    return int(points * (_BYTES_DOUBLE * (2 * d + 1 + levels) + levels))


def hermite_cost(d: int, *, K: int = 3, compare: int = 2) -> RuleCost:
    """Cost of `sparse.hermite(d, K, compare=compare)`."""
    d, K, compare = check_hermite(d, K, compare)
    n = hermite_points(d, K, compare=compare)
    top = K + compare
    acc = ("exact for normal posteriors; for n observations the relative error of the "
           f"evidence falls as n^-{math.ceil(top / 3)} (K = {top})")
    levels = 2 if compare else 1
    settings = (("K", K), ("compare", top)) if compare else (("K", K),)
    return RuleCost("hermite", settings, d, n, True, levels, _memory(n, d, levels), 2 * top - 1,
                    acc)


def sparse_cost(d: int, *, L: int = 3) -> RuleCost:
    """Cost of `sparse.sparse(d, L)`."""
    d, L = check_sparse(d, L)
    n = sparse_points(d, L)
    deg = sparse_degree(d, L)
    levels = min(L + 1, 3)
    acc = (f"exact for polynomials of total degree {deg} times a normal; error from level "
           f"{L} against {L - 1}" if L else "the Laplace approximation; no error estimate")
    return RuleCost("sparse", (("L", L),), d, n, True, levels, _memory(n, d, levels), deg, acc)


def rotated_cost(d: int, *, step: float = STEP, mass: float = MASS) -> RuleCost:
    """Estimated cost of `rotated.rotated(..., step=step, mass=mass)` on a normal
    posterior: the lattice points within radius ``r = sqrt(2 drop)`` plus a frontier
    layer, ``V_d (r + step)^d / step^d`` with ``V_d`` the unit ball's volume."""
    d, step, mass = check_rotated(d, step, mass)
    r = math.sqrt(2 * initial_drop(d, mass))
    log_ball = 0.5 * d * math.log(math.pi) - special.gammaln(d / 2 + 1)
    log_n = log_ball + d * (math.log(r + step) - math.log(step))
    n = int(math.ceil(math.exp(min(log_n, 700.0))))
    acc = (f"geometric in 1/H^2 for smooth posteriors, robust to skew; mass beyond the "
           f"explored region below {mass:g}")
    return RuleCost("rotated", (("step", step), ("mass", mass)), d, max(n, 1), False, 3,
                    _memory(max(n, 1), d, 3), None, acc)


RULE_COSTS: dict[str, Callable[..., RuleCost]] = {
    "hermite": hermite_cost,
    "sparse": sparse_cost,
    "rotated": rotated_cost,
}


def rule_cost(rule: str, d: int, **setting) -> RuleCost:
    """Cost of rule `rule` in `d` dimensions with its setting (K, L or step).

    Raises
    ------
    GridError
        Unknown rule or bad setting.
    """
    if rule not in RULE_COSTS:
        raise GridError(f"unknown rule `{rule}`; known: {', '.join(RULE_COSTS)}")
    return RULE_COSTS[rule](d, **setting)
