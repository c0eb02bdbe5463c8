"""One-dimensional integration rules on an interval.

Each rule gives nodes and weights on ``[a, b]``, and the weights of the nested
coarser rules that use a subset of the same nodes. A posterior pass accumulates
the fine and the coarse sums together, so that the difference gives an error
estimate at no extra evaluations.

The trapezoid rule on an odd number of points is the default: for a smooth
integrand that is negligible at both ends it converges geometrically (common
practice; the Euler-Maclaurin formula's correction terms all vanish), and every
second node forms the nested coarse grid.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable

import numpy as np

from .errors import GridError


@dataclass(frozen=True)
class RuleNodes:
    """Nodes and weights of a rule, with its nested coarse levels.

    Attributes
    ----------
    nodes : ndarray, shape (n,)
    weights : ndarray, shape (n,)
    coarse : tuple of ndarray, each shape (n,)
        Weights of the nested coarser rules on the same nodes (zero at nodes a
        coarse rule does not use), finest first.
    order : int
        The rule's algebraic order for integrands that are not negligible at
        the ends (used to judge Richardson extrapolation).
    """

    nodes: np.ndarray
    weights: np.ndarray
    coarse: tuple[np.ndarray, ...]
    order: int


def _trap_weights(n: int, h: float) -> np.ndarray:
    w = np.full(n, h)
    if n > 1:
        w[0] = w[-1] = h / 2
    return w


def _simpson_weights(n: int, h: float) -> np.ndarray | None:
    if n < 3 or n % 2 == 0:
        return None
    w = np.full(n, 2 * h / 3)
    w[1::2] = 4 * h / 3
    w[0] = w[-1] = h / 3
    return w


def _embed(n: int, step: int, sub: np.ndarray) -> np.ndarray:
    out = np.zeros(n)
    out[::step] = sub
    return out


def trapezoid(a: float, b: float, n: int) -> RuleNodes:
    """Trapezoid rule on `n` equally spaced nodes including both ends."""
    if n == 1:
        return RuleNodes(np.array([(a + b) / 2]), np.array([b - a]), (), 2)
    x = np.linspace(a, b, n)
    h = (b - a) / (n - 1)
    coarse = []
    step = 2
    while (n - 1) % step == 0 and (n - 1) // step >= 2 and len(coarse) < 2:
        m = (n - 1) // step + 1
        coarse.append(_embed(n, step, _trap_weights(m, h * step)))
        step *= 2
    return RuleNodes(x, _trap_weights(n, h), tuple(coarse), 2)


def midpoint(a: float, b: float, n: int) -> RuleNodes:
    """Midpoint rule: `n` cells, a node at each centre. Nests by threes."""
    h = (b - a) / n
    x = a + h * (np.arange(n) + 0.5)
    coarse = []
    step = 3
    while n % step == 0 and n // step >= 2 and len(coarse) < 2:
        out = np.zeros(n)
        out[step // 2::step] = h * step
        coarse.append(out)
        step *= 3
    return RuleNodes(x, np.full(n, h), tuple(coarse), 2)


def simpson(a: float, b: float, n: int) -> RuleNodes:
    """Composite Simpson rule on an odd number `n` >= 3 of nodes."""
    if n < 3 or n % 2 == 0:
        raise GridError(f"the Simpson rule needs an odd number of points, at least 3; got {n}")
    x = np.linspace(a, b, n)
    h = (b - a) / (n - 1)
    coarse = []
    step = 2
    while (n - 1) % step == 0 and (n - 1) // step >= 2 and len(coarse) < 2:
        m = (n - 1) // step + 1
        w = _simpson_weights(m, h * step)
        if w is None:
            w = _trap_weights(m, h * step)
        coarse.append(_embed(n, step, w))
        step *= 2
    return RuleNodes(x, _simpson_weights(n, h), tuple(coarse), 4)


def gauss(a: float, b: float, n: int) -> RuleNodes:
    """Gauss-Legendre rule with `n` nodes (no nested coarse rule)."""
    if n > 2000:
        raise GridError(f"Gauss-Legendre with {n} points is not supported (at most 2,000)")
    t, w = np.polynomial.legendre.leggauss(n)
    return RuleNodes(a + (b - a) * (t + 1) / 2, w * (b - a) / 2, (), 2 * n)


RULES: dict[str, Callable[[float, float, int], RuleNodes]] = {
    "trapezoid": trapezoid,
    "midpoint": midpoint,
    "simpson": simpson,
    "gauss": gauss,
}

RULE_HELP = {
    "trapezoid": "equally spaced, ends included; odd counts nest (default)",
    "midpoint": "cell centres, ends excluded; counts divisible by 3 nest",
    "simpson": "equally spaced, odd counts, order 4",
    "gauss": "Gauss-Legendre nodes; no nested error estimate",
}


def rule(name: str, a: float, b: float, n: int) -> RuleNodes:
    """Nodes and weights of rule `name` on ``[a, b]`` with `n` points.

    Raises
    ------
    GridError
        Unknown rule, or a bad count or interval.
    """
    if name not in RULES:
        raise GridError(f"unknown rule `{name}`; known: {', '.join(RULES)}")
    if not (np.isfinite(a) and np.isfinite(b)) or not a < b:
        raise GridError(f"rule `{name}` needs a finite interval with LO < HI; got [{a:g}, {b:g}]")
    if int(n) != n or n < 1:
        raise GridError(f"rule `{name}` needs a whole number of points, at least 1; got {n}")
    return RULES[name](float(a), float(b), int(n))
