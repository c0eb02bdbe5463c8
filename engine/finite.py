"""Where an expression of the parameters is not a finite number.

A node where it is NaN or infinite but finite a quarter of a cell away on both
sides lies on a set of zero measure (a pole or 0/0 on a node, as `-a/b` at
b = 0): it carries no posterior mass, and a mean is refused only where the
expression grows there faster than the inverse distance (its mean then does not
exist). Other such nodes carry their posterior mass, which each answer compares
with its own error: below it the answer goes on and says so.
"""

from __future__ import annotations

from dataclasses import dataclass

import numpy as np

from .errors import ComputeError
from .model import ParamFunction
from .posterior import Posterior, walk

#: Posterior mass on which an expression may be infinite and its mean still be
#: given: a value beyond 1e308 on more would outweigh the rest.
NEGLIGIBLE_INFINITE = 1e-300
#: A pole grows faster than 1/distance when its values a quarter and a sixteenth
#: of a cell away differ by more than this factor (4 for 1/distance, 2 for
#: 1/sqrt(distance), about 1.5 for a log).
POLE_GROWTH = 3.0


@dataclass(frozen=True)
class NonFinite:
    """Where an expression is not a finite number on the fine grid.

    Attributes
    ----------
    undefined, infinite : float
        The posterior mass of the nodes where it is NaN, or +-inf, on a set of
        positive measure.
    isolated : int
        Nodes of positive density where it is not finite on a set of zero measure.
    where : str or None
        The first node of positive measure and density where it is not finite.
    pole : str or None
        A node of positive density near which it grows faster than 1/distance.
    """

    undefined: float = 0.0
    infinite: float = 0.0
    isolated: int = 0
    where: str | None = None
    pole: str | None = None

    @property
    def mass(self) -> float:
        return self.undefined + self.infinite


def _point(post: Posterior, theta, k: int) -> str:
    return ", ".join(f"{a.name} = {t[k]:.6g}" for a, t in zip(post.grid.axes, theta))


def _shifted(post: Posterior, idx, frac: float, sign: float) -> list[np.ndarray]:
    """The nodes `idx` moved by `frac` of the local spacing on every continuous axis
    (in the axis's own scale), up (sign +1) or down (-1)."""
    out = []
    for a, i in zip(post.grid.axes, idx):
        if a.discrete or a.n < 2:
            out.append(a.values[i])
            continue
        du = np.gradient(a.u)[i]
        out.append(a.to_value(a.u[i] + sign * frac * du))
    return out


def scan(post: Posterior, fn: ParamFunction) -> NonFinite:
    """Where `fn` is not finite on the fine grid, among nodes of positive density."""
    undefined = infinite = 0.0
    isolated = 0
    where = pole = None
    for b in walk(post, coarse=False):
        w = b.weights[0]
        v = np.broadcast_to(np.asarray(fn(b.theta), float), w.shape)
        bad = (w > 0) & ~np.isfinite(v)
        if not bad.any():
            continue
        k = np.flatnonzero(bad)
        idx = tuple(i[k] for i in b.idx)
        vals = {}
        for frac in (0.25, 1 / 16):
            for sign in (1.0, -1.0):
                vals[frac, sign] = np.broadcast_to(np.asarray(
                    fn(_shifted(post, idx, frac, sign)), float), k.shape)
        zero = np.isfinite(vals[0.25, 1.0]) & np.isfinite(vals[0.25, -1.0])
        isolated += int(zero.sum())
        with np.errstate(all="ignore"):
            growth = np.maximum(np.abs(vals[1 / 16, 1.0]) / np.abs(vals[0.25, 1.0]),
                                np.abs(vals[1 / 16, -1.0]) / np.abs(vals[0.25, -1.0]))
        fast = zero & ~(growth <= POLE_GROWTH)   # NaN growth (overflow nearer) is fast
        if pole is None and fast.any():
            pole = _point(post, b.theta, int(k[np.flatnonzero(fast)[0]]))
        some = ~zero
        if some.any():
            nan = np.isnan(v[k]) & some
            undefined += float(w[k][nan].sum())
            infinite += float(w[k][some & ~nan].sum())
            if where is None:
                where = _point(post, b.theta, int(k[np.flatnonzero(some)[0]]))
    return NonFinite(undefined, infinite, isolated, where, pole)


def check(post: Posterior, nf: NonFinite, text: str, allowed: float, *, what: str,
          notes: list | None) -> None:
    """Refuse an answer when the mass where `text` is not a number (for a mean: not
    finite) exceeds `allowed` (the answer's error, in probability for a condition
    or a quantile, relative for a mean); else note it."""
    # infinities order as +-inf in a condition or a quantile: only NaN is lost there
    lost = nf.mass if what == "mean" else nf.undefined
    if lost > allowed:
        kind = "not a finite number" if what == "mean" else "not a number"
        raise ComputeError(
            f"`{text}` is {kind} on posterior mass {lost:.3g} (first at "
            f"{nf.where}), more than the {what}'s error allows ({allowed:.2g}); restrict "
            "the grid or the parameters' domains to where it is defined")
    if notes is None:
        return
    if nf.mass > 0:
        kinds = " and ".join(k for k, m in (("undefined", nf.undefined),
                                             ("infinite", nf.infinite)) if m > 0)
        notes.append(f"`{text}` is {kinds} on posterior mass {nf.mass:.2g} (first at "
                     f"{nf.where}), below the {what}'s error: "
                     + ("counted as outside the condition" if what == "probability" else
                        "undefined points left out, infinite ones ordered as +-inf"
                        if what == "quantile" else "left out"))

