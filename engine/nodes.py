"""Weighted node sets in the standardised frame, and signed sums in log space.

Every rule built around the posterior (engine/sparse.py, engine/rotated.py)
produces a `NodeSet`: nodes ``z`` in the frame and, for each level of the rule
(finest first), a weight on every node, zero where a level does not use it. The
weights are for integrating a function ``f(z) dz`` directly (the normal weight
of the polynomial rules is folded in), so that the posterior density in ``z``
is integrated as it is. The posterior pass (engine/reduction.py) reduces any
node set with the log-density at its nodes.

Smolyak rules have negative weights, so each weight is kept as ``log |w|`` and
a sign, and sums are formed by a signed log-sum-exp (`signed_sum`).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field

import numpy as np

from .errors import GridError

#: Largest node set a rule may build (nodes, weights and values in memory).
MAX_NODES = 4_000_000

#: How a rule's levels converge, which decides how their differences are read:
#: ``geometric`` (the trapezoid in z: the nested coarse grids of the tensor grid,
#: read by posterior.combine) or ``levels`` (polynomial rules: the difference with
#: the next coarser level is the error, never extrapolated).
CONVERGENCE = ("geometric", "levels")


@dataclass(frozen=True)
class NodeSet:
    """Nodes in the frame with one weight vector per level of a rule.

    Attributes
    ----------
    z : ndarray, shape (n, d)
        The nodes in the standardised frame.
    log_weights : ndarray, shape (levels, n)
        ``log |w|`` of each level's weight at each node (``-inf`` where the level
        does not use the node); weights integrate ``f(z) dz``.
    signs : ndarray of int8, shape (levels, n)
        The sign of each weight: +1, -1, or 0 where the level does not use the node.
    rule : str
        ``hermite``, ``sparse`` or ``rotated``.
    settings : tuple of (str, float)
        The rule's parameters, e.g. ``(("K", 5), ("compare", 7))``.
    labels : tuple of str
        One label per level, finest first (``"K = 7"``, ``"level 3"``, ``"step 0.5"``).
    convergence : str
        ``geometric`` or ``levels`` (see `CONVERGENCE`).
    log_outside : float
        ``log`` of the estimated integral of ``f`` beyond the nodes (rules that
        explore the posterior); ``-inf`` for rules that cover all of space by
        construction (their error is in the level differences). ``+inf`` means the
        mass outside could not be bounded.
    exact_degree : int or None
        Total degree of the polynomials ``p(z)`` for which the finest level
        integrates ``p(z) * normal density`` exactly; None for the trapezoid.
    note : str
        What a user must know about how the nodes were built (an exploration
        stopped by its budget, say); the reduction reports it as a problem.
    """

    z: np.ndarray = field(repr=False)
    log_weights: np.ndarray = field(repr=False)
    signs: np.ndarray = field(repr=False)
    rule: str
    settings: tuple[tuple[str, float], ...]
    labels: tuple[str, ...]
    convergence: str
    log_outside: float = -math.inf
    exact_degree: int | None = None
    note: str = ""

    def __post_init__(self):
        n, d = self.z.shape
        if self.log_weights.shape != (len(self.labels), n) or self.signs.shape != self.log_weights.shape:
            raise GridError(f"rule `{self.rule}`: weights of shape {self.log_weights.shape} do not "
                            f"match {len(self.labels)} levels on {n} nodes")
        if self.convergence not in CONVERGENCE:
            raise GridError(f"rule `{self.rule}`: unknown convergence `{self.convergence}`")

    @property
    def points(self) -> int:
        """Number of nodes (log-density evaluations)."""
        return int(self.z.shape[0])

    @property
    def dims(self) -> int:
        return int(self.z.shape[1])

    @property
    def levels(self) -> int:
        return len(self.labels)

    def setting(self, name: str) -> float:
        return dict(self.settings)[name]

    def level_points(self, level: int) -> int:
        """How many nodes level `level` (0 = finest) uses."""
        return int(np.count_nonzero(self.signs[level]))


def from_weights(z: np.ndarray, weights: np.ndarray, log_extra: np.ndarray | None = None
                 ) -> tuple[np.ndarray, np.ndarray]:
    """``log |w| + log_extra`` and the signs, from plain weights.

    Parameters
    ----------
    z : ndarray, shape (n, d)
        Only its row count is used (to check shapes).
    weights : ndarray, shape (levels, n)
    log_extra : ndarray, shape (n,), optional
        A log factor every weight carries (the ``exp(|z|^2 / 2)`` of rules built
        for the normal weight).

    Returns
    -------
    log_weights : ndarray, shape (levels, n)
    signs : ndarray of int8, shape (levels, n)
    """
    weights = np.atleast_2d(np.asarray(weights, float))
    if weights.shape[1] != z.shape[0]:
        raise GridError(f"{weights.shape[1]} weights for {z.shape[0]} nodes")
    with np.errstate(divide="ignore"):
        lw = np.log(np.abs(weights))
    if log_extra is not None:
        lw = np.where(weights != 0, lw + log_extra[None, :], -np.inf)
    return lw, np.sign(weights).astype(np.int8)


@dataclass(frozen=True)
class SignedSum:
    """A sum of signed terms held in log space.

    Attributes
    ----------
    log_abs : float
        ``log |S|`` (``-inf`` for an empty or exactly cancelling sum).
    sign : int
        +1, -1 or 0.
    cancellation : float
        ``sum |terms| / |S|``: 1 for a sum of positive terms; large where
        positive and negative terms cancel (rounding error grows with it).
    scale : float
        The log of the largest term's magnitude (the reference the terms were
        scaled by).
    """

    log_abs: float
    sign: int
    cancellation: float
    scale: float

    @property
    def positive(self) -> bool:
        return self.sign > 0 and math.isfinite(self.log_abs)


def signed_sum(log_terms: np.ndarray, signs: np.ndarray) -> SignedSum:
    """``sum_i signs_i * exp(log_terms_i)`` as a `SignedSum`, safely.

    Parameters
    ----------
    log_terms : ndarray, shape (m,)
        Log magnitudes; ``-inf`` terms are zero.
    signs : ndarray, shape (m,)
        +1, -1 or 0.
    """
    log_abs, sign, canc, scale = signed_sums(np.asarray(log_terms, float)[None, :], signs)
    return SignedSum(float(log_abs[0]), int(sign[0]), float(canc[0]), float(scale[0]))


def signed_sums(log_terms: np.ndarray, signs: np.ndarray
                ) -> tuple[np.ndarray, np.ndarray, np.ndarray, np.ndarray]:
    """Row-wise signed sums in log space.

    Parameters
    ----------
    log_terms : ndarray, shape (r, m)
        Log magnitudes; ``-inf`` terms are zero.
    signs : ndarray, shape (m,) or (r, m)
        +1, -1 or 0.

    Returns
    -------
    log_abs : ndarray, shape (r,)
        ``log |S|`` of each row (``-inf`` for an empty or exactly cancelling sum).
    sign : ndarray of int, shape (r,)
    cancellation : ndarray, shape (r,)
        ``sum |terms| / |S|`` (inf where S is 0).
    scale : ndarray, shape (r,)
        The log of each row's largest term.
    """
    T = np.asarray(log_terms, float)
    S = np.broadcast_to(np.asarray(signs), T.shape)
    T = np.where(S != 0, T, -np.inf)
    m = np.max(T, axis=1)
    ref = np.where(np.isfinite(m), m, 0.0)
    with np.errstate(invalid="ignore", over="ignore"):
        e = np.exp(T - ref[:, None])
    total = np.einsum("ij,ij->i", S.astype(float), e)
    mag = e.sum(axis=1)
    with np.errstate(divide="ignore", invalid="ignore"):
        log_abs = np.where(total != 0, np.log(np.abs(total)) + ref, -np.inf)
        canc = np.where(total != 0, mag / np.abs(total), np.where(mag > 0, np.inf, 1.0))
    return log_abs, np.sign(total).astype(int), canc, m


def check_dims(rule: str, d) -> int:
    """The dimension of a rule: a whole number >= 1."""
    if isinstance(d, bool) or not isinstance(d, (int, np.integer, float)) or int(d) != d or d < 1:
        raise GridError(f"rule `{rule}` needs a dimension, a whole number >= 1; got {d}")
    return int(d)


def check_budget(rule: str, points: int, what: str) -> None:
    """Refuse a node set larger than `MAX_NODES`, with the figure."""
    if points > MAX_NODES:
        raise GridError(f"rule `{rule}` with {what} needs {points:,} points, more than the "
                        f"{MAX_NODES:,} a node set may hold; choose a smaller setting")
