"""The trapezoid grid in the frame, explored outward from the mode.

The nodes are the integer lattice times a step H in ``z``. Starting at the mode
(z = 0), the lattice is explored in whole batches: every kept node's 2 d axis
neighbours that have not been seen are evaluated together, and a node is kept
(its neighbours explored in turn) while its log-density is within `drop` of the
highest seen. The drop is set from the target share of mass left out (for a
normal posterior, the mass beyond the level set ``log f = max - drop`` is
``P(chi2_d > 2 drop)``), and raised while the mass estimated beyond the pruned
frontier is above the target. This is the exploration in z of Rue, Martino &
Chopin (2009). For a skewed posterior, where the polynomial rules lose their
accuracy, the trapezoid rule keeps converging fast in H (geometrically, for a
smooth density negligible at the frontier), which makes it the robust choice.

Every second node (all-even lattice indices) forms the nested coarse grid, and
every fourth the next one, as on the tensor grid: the fine, coarse and coarser
sums give the error estimate (posterior.combine). The mass beyond the explored
region is estimated from the frontier (the pruned nodes' mass and how fast it
falls from the kept layer inside them) and carried by the node set, so the
reduction adds it to every error.

Because its nodes depend on the density, this rule takes the log-density
callable and returns the nodes with the values it evaluated (each node once).
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable

import numpy as np

from .errors import ComputeError, GridError
from .nodes import NodeSet, check_dims

#: Default step in z. The trapezoid rule's error for a normal density with spacing
#: H is about 2 exp(-2 pi^2 / H^2) an axis (common practice, from the Poisson
#: summation formula): 5e-9 at H = 1, so at H = 0.5 the coarse level (step 1)
#: already gives a small, conservative error estimate.
STEP = 0.5
#: Default share of the integral that may lie beyond the explored region.
MASS = 1e-8
#: Default largest number of nodes.
MAX_POINTS = 2_000_000
#: Rows per call of the log-density.
BATCH = 1 << 16
#: How far from the mode (in z) the exploration may go.
ZMAX = 40.0
#: Factor on the extrapolated mass beyond the frontier (our choice: the outer
#: layers in d dimensions hold more nodes than the frontier does).
OUTSIDE_SAFETY = 2.0
#: The drop is never raised beyond this (nats below the highest density seen).
MAX_DROP = 400.0


@dataclass(frozen=True)
class Exploration:
    """The explored trapezoid grid with the log-density at its nodes.

    Attributes
    ----------
    nodes : NodeSet
        Levels: step H, 2H, 4H (the last where it has nodes off the origin).
    logf : ndarray, shape (n,)
        The log-density at ``nodes.z``.
    step : float
    drop : float
        The final pruning depth (nats below the highest density seen).
    kept : int
        Nodes whose neighbours were explored.
    frontier : int
        Nodes evaluated and pruned.
    rounds : int
        Batches of expansion.
    decay : float
        The fall-off per layer at the frontier (density of a pruned node over that
        of its kept neighbour, averaged over the frontier's mass) that the outside
        estimate extrapolates; nan when no node was pruned.
    outside : float
        Estimated share of the integral beyond the explored region.
    complete : bool
        Whether the exploration ended with the outside mass below the target
        (False: stopped by the budget, the box or the largest drop).
    message : str
        Why it stopped, when not complete.
    """

    nodes: NodeSet
    logf: np.ndarray = field(repr=False)
    step: float
    drop: float
    kept: int
    frontier: int
    rounds: int
    decay: float
    outside: float
    complete: bool
    message: str = ""


def initial_drop(d: int, mass: float) -> float:
    """The pruning depth at which a normal posterior leaves `mass` outside."""
    from scipy import stats   # imported where needed: it is slow to import
    return 0.5 * float(stats.chi2.isf(mass, d))


def rotated(log_z: Callable[[np.ndarray], np.ndarray], d: int, *, step: float = STEP,
            mass: float = MASS, max_points: int = MAX_POINTS, batch: int = BATCH,
            zmax: float = ZMAX) -> Exploration:
    """Explore the lattice ``step * Z^d`` outward from z = 0.

    Parameters
    ----------
    log_z : callable
        ``z`` of shape (n, d) -> log-density in ``z``, shape (n,).
    d : int
        Dimension of the frame.
    step : float, keyword-only
        The lattice spacing H in z.
    mass : float, keyword-only
        Target share of the integral left beyond the explored region.
    max_points : int, keyword-only
        Largest number of evaluations; the exploration stops (incomplete) rather
        than exceed it.
    batch : int, keyword-only
        Rows per call of `log_z`.
    zmax : float, keyword-only
        The exploration stays within ``|z_i| <= zmax``.

    Returns
    -------
    Exploration

    Raises
    ------
    GridError
        Bad settings.
    ComputeError
        The log-density is not finite at the mode, or NaN / +inf at a node.
    """
    d, step, mass, max_points, kmax = _check_rotated(d, step, mass, max_points, zmax)
    ex = _Explorer(log_z, d, step, kmax, max_points, batch)
    drop = initial_drop(d, mass)
    message = ""
    while True:
        stop = ex.expand(drop)
        outside, decay = ex.outside()
        if stop:
            message = stop
            break
        if outside <= mass:
            break
        if drop >= MAX_DROP:
            message = (f"the mass beyond the frontier stays above {mass:g} down to {drop:g} nats "
                       "below the highest density: the tails are too heavy for this rule")
            break
        # deeper: a normal tail's share falls about as exp(-drop), so this aims at the target
        drop = min(MAX_DROP, drop + max(2.0, math.log(outside / mass) + 1.0))
    return ex.finish(drop, outside, decay, message, mass)


def check_rotated(d, step, mass) -> tuple[int, float, float]:
    """Validate the dimension, step and mass of `rotated`; returns them.

    Raises
    ------
    GridError
    """
    d = check_dims("rotated", d)
    if not (isinstance(step, (int, float)) and math.isfinite(step) and 0 < step <= 4):
        raise GridError(f"rule `rotated` needs a step H with 0 < H <= 4 (in posterior sds); "
                        f"got {step}")
    if not (isinstance(mass, (int, float)) and 0 < mass < 0.5):
        raise GridError(f"rule `rotated`: the mass left outside must be between 0 and 0.5; "
                        f"got {mass}")
    return d, float(step), float(mass)


def _check_rotated(d, step, mass, max_points, zmax):
    d, step, mass = check_rotated(d, step, mass)
    if int(max_points) != max_points or max_points < 1:
        raise GridError(f"rule `rotated`: `max_points` must be a whole number >= 1; got "
                        f"{max_points}")
    # lattice indices are packed into one int64 key: (2 kmax + 1)^d < 2^62
    kmax_keys = int((2.0 ** (62.0 / d) - 1) // 2)
    kmax = min(int(math.ceil(zmax / step)), kmax_keys)
    if kmax < 2:
        raise GridError(f"rule `rotated` cannot index a lattice in {d} dimensions")
    return d, step, mass, int(max_points), kmax


class _Explorer:
    """The lattice seen so far: indices, keys (sorted copy for look-ups), values."""

    def __init__(self, log_z, d: int, step: float, kmax: int, max_points: int, batch: int):
        self.log_z = log_z
        self.d = d
        self.step = step
        self.kmax = kmax
        self.base = 2 * kmax + 1
        self.max_points = max_points
        self.batch = max(1, int(batch))
        self.powers = self.base ** np.arange(d, dtype=np.int64)
        self.offsets = np.concatenate([np.eye(d, dtype=np.int64), -np.eye(d, dtype=np.int64)])
        self.idx = [np.zeros((1, d), np.int64)]
        self.lf = [self._evaluate(self.idx[0])]
        if not np.isfinite(self.lf[0][0]):
            raise ComputeError(f"the log-density at the mode is {self.lf[0][0]}; the frame is "
                               "not around a mode")
        self.expanded = [np.zeros(1, bool)]
        self.sorted_keys = self._keys(self.idx[0])
        self.top = float(self.lf[0][0])
        self.rounds = 0
        self.count = 1
        self.box_hit = False

    def _keys(self, idx: np.ndarray) -> np.ndarray:
        return (idx + self.kmax) @ self.powers

    def _evaluate(self, idx: np.ndarray) -> np.ndarray:
        out = np.empty(idx.shape[0])
        for s in range(0, idx.shape[0], self.batch):
            z = idx[s:s + self.batch] * self.step
            with np.errstate(all="ignore"):
                v = np.asarray(self.log_z(z), float).reshape(-1)
            if v.size != z.shape[0]:
                raise ComputeError(f"the log-density returned {v.size} values for {z.shape[0]} "
                                   "nodes")
            bad = np.isnan(v) | np.isposinf(v)
            if bad.any():
                i = int(np.argmax(bad))
                where = ", ".join(f"{x:+.3g}" for x in z[i])
                raise ComputeError(f"the log-density is {'NaN' if np.isnan(v[i]) else '+inf'} at "
                                   f"z = ({where}) (rule `rotated`)")
            out[s:s + z.shape[0]] = v
        return out

    def _all(self):
        return (np.concatenate(self.idx), np.concatenate(self.lf), np.concatenate(self.expanded))

    def expand(self, drop: float) -> str:
        """Explore until no unexpanded node lies within `drop` of the top.

        A node is marked expanded only once its neighbours are evaluated, so an
        exploration stopped by the budget leaves its last layer in the frontier.
        Returns why it stopped early (budget, box), or an empty string."""
        idx, lf, done = self._all()
        self.idx, self.lf, self.expanded = [idx], [lf], [done]
        chunk = 0
        mask = ~done & (lf >= self.top - drop)
        while mask.any():
            self.rounds += 1
            front = self.idx[chunk][mask]
            cand = (front[:, None, :] + self.offsets[None, :, :]).reshape(-1, self.d)
            inside = np.all(np.abs(cand) <= self.kmax, axis=1)
            if not inside.all():
                self.box_hit = True
                cand = cand[inside]
            keys, first = np.unique(self._keys(cand), return_index=True)
            cand = cand[first]
            pos = np.minimum(np.searchsorted(self.sorted_keys, keys), self.sorted_keys.size - 1)
            new = self.sorted_keys[pos] != keys
            cand, keys = cand[new], keys[new]
            if self.count + cand.shape[0] > self.max_points:
                return (f"stopped at {self.count:,} nodes: the next layer of {cand.shape[0]:,} "
                        f"would pass the budget of {self.max_points:,}")
            self.expanded[chunk][mask] = True
            if not cand.shape[0]:
                break
            v = self._evaluate(cand)
            self.count += cand.shape[0]
            self.sorted_keys = np.union1d(self.sorted_keys, keys)
            self.top = max(self.top, float(v.max()))
            self.idx.append(cand)
            self.lf.append(v)
            self.expanded.append(np.zeros(cand.shape[0], bool))
            chunk = len(self.idx) - 1
            mask = v >= self.top - drop
        if self.box_hit:
            return (f"the exploration reached |z| = {self.kmax * self.step:g} (the edge of the "
                    "lattice it may index) with mass still there")
        return ""

    def outside(self) -> tuple[float, float]:
        """Share of the integral beyond the frontier, and the fall-off it used.

        Each pruned node b continues the ray from its kept neighbour a through it:
        with the fall-off rho_b = f(b) / f(a) (the slowest over b's kept
        neighbours) continuing geometrically, the ray beyond b holds
        f(b) rho_b / (1 - rho_b). Ray by ray, a tail that falls slowly in one
        direction only (an exponential tail beside a normal one) is not averaged
        away. For a log-concave tail the fall-off only steepens outward, but in d
        dimensions the outer layers hold more nodes than the frontier, so the sum
        is doubled (`OUTSIDE_SAFETY`)."""
        idx, lf, done = self._all()
        self.idx, self.lf, self.expanded = [idx], [lf], [done]
        live = np.isfinite(lf)
        total = np.exp(lf[live] - self.top).sum()
        pruned = np.flatnonzero(~done & live)
        if not pruned.size:
            # the frontier is all zeros of the density (a bound of the support)
            return (math.inf, math.nan) if self.box_hit else (0.0, math.nan)
        keys = self._keys(idx)
        order = np.argsort(keys)
        sorted_keys = keys[order]
        nb = self._keys((idx[pruned][:, None, :] + self.offsets[None, :, :]).reshape(-1, self.d))
        pos = np.minimum(np.searchsorted(sorted_keys, nb), sorted_keys.size - 1)
        found = sorted_keys[pos] == nb
        j = order[pos]
        inner = np.where(found & done[j] & live[j], lf[j], np.inf).reshape(pruned.size, -1)
        lowest = inner.min(axis=1)          # the kept neighbour with the least density
        lb = lf[pruned]
        with np.errstate(over="ignore", invalid="ignore"):
            rho = np.exp(lb - lowest)
        has = np.isfinite(lowest)
        if (rho[has] >= 1).any():
            return math.inf, float(rho[has].max())
        f_b = np.exp(lb[has] - self.top)
        beyond = float(np.sum(f_b * rho[has] / (1 - rho[has])))
        decay = float(np.sum(f_b * rho[has]) / f_b.sum()) if f_b.sum() > 0 else math.nan
        return OUTSIDE_SAFETY * beyond / total, decay

    def finish(self, drop: float, outside: float, decay: float, message: str,
               mass: float) -> "Exploration":
        idx, lf, done = self._all()
        d, H = self.d, self.step
        levels = [(np.ones(idx.shape[0], bool), H, f"step {H:g}")]
        for f in (2, 4):
            on = np.all(idx % f == 0, axis=1)
            if on.sum() > 1:
                levels.append((on, f * H, f"step {f * H:g}"))
        log_w = np.full((len(levels), idx.shape[0]), -np.inf)
        signs = np.zeros((len(levels), idx.shape[0]), np.int8)
        for i, (on, h, _) in enumerate(levels):
            log_w[i, on] = d * math.log(h)
            signs[i, on] = 1
        live = np.isfinite(lf)
        total = float(np.log(np.exp(lf[live] - self.top).sum()) + self.top + d * math.log(H))
        log_out = (math.log(outside) + total if outside > 0 and math.isfinite(outside)
                   else (-math.inf if outside == 0 else math.inf))
        complete = not message and outside <= mass
        note = message if message else (
            "" if complete else f"the mass beyond the explored region, about {outside:.2g}, is "
                                f"above the target {mass:g}")
        nodes = NodeSet(idx * H, log_w, signs, "rotated", (("step", H), ("mass", mass)),
                        tuple(lab for _, _, lab in levels), "geometric", log_out, note=note)
        return Exploration(nodes, lf, H, float(drop), int(done.sum()), int((~done).sum()),
                           self.rounds, decay, outside, complete, message)
