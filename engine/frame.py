"""The standardised frame around a mode.

From a mode ``u*`` in the unconstrained scales the grid uses (log, logit, linear;
discrete parameters stay outside, summed exactly) and the negative Hessian ``A``
of the log-density there, the frame is

    z = L^-1 (u - u*),   L L^T = A^-1,   L lower triangular,

so that a posterior close to normal is close to the standard normal in ``z``.
The log-density in ``z`` is the one in ``u`` plus ``log |det L|``; the rules of
engine/sparse.py and engine/rotated.py work in ``z``.

A negative Hessian that is not positive definite (a saddle, a flat direction, a
mode the optimiser did not reach) is regularised by flooring its eigenvalues, and
the `FrameHealth` record says so with the figures: the rules then work in a frame
that is only a guess, and their answers must be read with that warning.

`check_frame` measures how far the posterior is from normal along the frame's
axes: the log-density at z = -4, -2, +2, +4 on each axis against the quadratic
``-z^2 / 2``. Asymmetry at +-2 shows skewness; an excess at +-4 shows a heavy tail.
`Frame.conditional` gives what a 1-D marginal needs: the line of conditional
means of the other coordinates and their conditional Cholesky factor.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field
from typing import Callable, Sequence

import numpy as np
from scipy import linalg

from .errors import ComputeError, GridError

#: Eigenvalues of the negative Hessian below this fraction of the largest are floored.
EIGEN_FLOOR = 1e-10
#: Asymmetry of the log-density at z = +-2 (nats, half the difference of the two
#: sides' departures from -z^2/2) above which an axis is called skewed: the
#: polynomial rules then need high levels, or a frame re-centred on a first pass's
#: moments, to reach 1e-3 of a posterior sd. Our choice of threshold: on the
#: log-scale gamma family exp(a eta - e^eta) the asymmetry is about -1.33 / sqrt(a),
#: so 0.1 is a = 180; the sd of a regression on 200 rows, on its log scale, shows
#: 0.13 (measured), and there a sparse rule in 8 dimensions needed level 5.
SKEW_LIMIT = 0.1
#: Departure of the log-density from -z^2/2 at |z| = 4 (nats) above which a tail
#: is called heavy: the density there is e times the normal's (our choice).
TAIL_LIMIT = 1.0
#: Where the axes are probed.
PROBES = (-4.0, -2.0, 2.0, 4.0)

LogDensity = Callable[[np.ndarray], np.ndarray]


@dataclass(frozen=True)
class FrameHealth:
    """How usable the curvature at the mode was.

    Attributes
    ----------
    positive_definite : bool
        Whether the negative Hessian given was symmetric positive definite.
    eigenvalues : ndarray, shape (d,)
        Its eigenvalues, ascending.
    floored : int
        How many eigenvalues were replaced (negative ones by their magnitude,
        those below the floor by the floor).
    floor : float
        The floor used: `EIGEN_FLOOR` times the largest eigenvalue magnitude.
    condition : float
        Largest over smallest eigenvalue of the matrix used.
    message : str
        One line for the user; empty when the Hessian was positive definite.
    """

    positive_definite: bool
    eigenvalues: np.ndarray = field(repr=False)
    floored: int
    floor: float
    condition: float
    message: str = ""


@dataclass(frozen=True)
class ConditionalFrame:
    """The frame of the other coordinates given coordinate `index`.

    Under the normal approximation the other coordinates given ``u_k = t`` are
    normal with mean ``others_mode + slope * (t - mode)`` and covariance
    ``chol chol^T`` (the inverse of the precision's block of the others). A 1-D
    marginal at ``t`` is the integral, over ``w`` in the (d - 1)-dimensional frame,
    of the posterior at `to_u(t, w)` times ``exp(log_det)``.

    Attributes
    ----------
    index : int
    mode : float
        ``u*_k``.
    sd : float
        The normal approximation's sd of ``u_k``.
    others : tuple of int
        The other coordinates, in order.
    others_mode : ndarray, shape (d - 1,)
    slope : ndarray, shape (d - 1,)
        ``Sigma_{-k,k} / Sigma_{kk}``: how the conditional means move with ``t``.
    chol : ndarray, shape (d - 1, d - 1)
        Lower triangular, ``chol chol^T`` the conditional covariance.
    log_det : float
        ``log |det chol|``.
    """

    index: int
    mode: float
    sd: float
    others: tuple[int, ...]
    others_mode: np.ndarray = field(repr=False)
    slope: np.ndarray = field(repr=False)
    chol: np.ndarray = field(repr=False)
    log_det: float = 0.0

    def to_u(self, t: np.ndarray, w: np.ndarray) -> np.ndarray:
        """Points in ``u`` for each value `t` of coordinate `index` and each
        conditional-frame node `w`.

        Parameters
        ----------
        t : ndarray, shape (m,)
        w : ndarray, shape (n, d - 1)

        Returns
        -------
        ndarray, shape (m, n, d)
        """
        t = np.asarray(t, float).reshape(-1)
        w = np.asarray(w, float).reshape(-1, len(self.others))
        d = len(self.others) + 1
        centre = self.others_mode[None, :] + np.outer(t - self.mode, self.slope)   # (m, d-1)
        rest = centre[:, None, :] + (w @ self.chol.T)[None, :, :]                     # (m, n, d-1)
        out = np.empty((t.size, w.shape[0], d))
        out[:, :, self.index] = t[:, None]
        out[:, :, list(self.others)] = rest
        return out


@dataclass(frozen=True)
class Frame:
    """The standardised frame ``z = L^-1 (u - u*)`` around one mode.

    Attributes
    ----------
    mode : ndarray, shape (d,)
        ``u*``, in the unconstrained scales.
    chol : ndarray, shape (d, d)
        ``L``, lower triangular, ``L L^T = precision^-1``.
    precision : ndarray, shape (d, d)
        The negative Hessian used (regularised where it was not positive definite).
    log_det : float
        ``log |det L|`` (the Jacobian of ``z -> u``).
    health : FrameHealth
    names : tuple of str
        The coordinates' names (parameters), for messages.
    """

    mode: np.ndarray = field(repr=False)
    chol: np.ndarray = field(repr=False)
    precision: np.ndarray = field(repr=False)
    log_det: float
    health: FrameHealth
    names: tuple[str, ...]

    @property
    def dims(self) -> int:
        return int(self.mode.size)

    @property
    def cov(self) -> np.ndarray:
        """``L L^T``, shape (d, d): the normal approximation's covariance."""
        return self.chol @ self.chol.T

    @property
    def sd(self) -> np.ndarray:
        """The normal approximation's sds of the coordinates, shape (d,)."""
        return np.sqrt(np.einsum("ij,ij->i", self.chol, self.chol))

    def to_u(self, z: np.ndarray) -> np.ndarray:
        """``u* + L z`` for rows `z`, shape (n, d) -> (n, d)."""
        z = np.asarray(z, float)
        return self.mode[None, :] + z @ self.chol.T

    def to_z(self, u: np.ndarray) -> np.ndarray:
        """``L^-1 (u - u*)`` for rows `u`, shape (n, d) -> (n, d)."""
        u = np.atleast_2d(np.asarray(u, float))
        return linalg.solve_triangular(self.chol, (u - self.mode[None, :]).T, lower=True).T

    def log_density(self, log_u: LogDensity) -> LogDensity:
        """The log-density in ``z`` from the log-density in ``u``.

        Parameters
        ----------
        log_u : callable
            ``u`` of shape (n, d) -> log posterior density in ``u``, shape (n,)
            (the scales' Jacobians included).

        Returns
        -------
        callable
            ``z`` of shape (n, d) -> ``log_u(to_u(z)) + log_det``, shape (n,).
        """
        def in_z(z: np.ndarray) -> np.ndarray:
            return np.asarray(log_u(self.to_u(z)), float) + self.log_det
        return in_z

    def conditional(self, index: int) -> ConditionalFrame:
        """The frame of the other coordinates given coordinate `index`.

        Raises
        ------
        GridError
            `index` is not a coordinate of the frame.
        """
        d = self.dims
        if int(index) != index or not 0 <= index < d:
            raise GridError(f"the frame has coordinates 0 to {d - 1}; got `{index}`")
        k = int(index)
        others = tuple(i for i in range(d) if i != k)
        cov = self.cov
        slope = cov[list(others), k] / cov[k, k]
        if others:
            block = self.precision[np.ix_(others, others)]
            chol, log_det = _inverse_chol(block)
        else:
            chol, log_det = np.zeros((0, 0)), 0.0
        return ConditionalFrame(k, float(self.mode[k]), float(math.sqrt(cov[k, k])), others,
                                self.mode[list(others)].copy(), slope, chol, log_det)

    def axis_name(self, axis: int) -> str:
        """The coordinate that frame axis `axis` moves most, in sd units."""
        col = np.abs(self.chol[:, axis]) / self.sd
        return self.names[int(np.argmax(col))]


def make_frame(mode: Sequence[float], neg_hessian: np.ndarray, *,
               names: Sequence[str] | None = None, floor: float = EIGEN_FLOOR) -> Frame:
    """The frame around `mode` with curvature `neg_hessian`.

    Parameters
    ----------
    mode : array_like, shape (d,)
        The mode in the unconstrained scales.
    neg_hessian : array_like, shape (d, d)
        Minus the Hessian of the log-density in ``u`` at the mode.
    names : sequence of str, keyword-only
        Names of the coordinates (default ``u0, u1, ...``).
    floor : float, keyword-only
        Relative eigenvalue floor for a Hessian that is not positive definite.

    Returns
    -------
    Frame

    Raises
    ------
    GridError
        Shapes that do not match, or names of the wrong number.
    ComputeError
        A mode or Hessian entry that is not finite, an asymmetric Hessian, or one
        that is zero.
    """
    u = np.asarray(mode, float).reshape(-1)
    d = u.size
    A = np.asarray(neg_hessian, float)
    names = tuple(names) if names is not None else tuple(f"u{i}" for i in range(d))
    _check_frame_input(u, A, names)
    A = (A + A.T) / 2
    health = FrameHealth(True, np.linalg.eigvalsh(A), 0, 0.0, 0.0)
    try:
        chol, log_det = _inverse_chol(A)
    except np.linalg.LinAlgError:
        A, health = _regularised(A, floor, names)
        chol, log_det = _inverse_chol(A)
    lam = health.eigenvalues if health.positive_definite else np.linalg.eigvalsh(A)
    health = FrameHealth(health.positive_definite, health.eigenvalues, health.floored,
                         health.floor, float(lam[-1] / lam[0]), health.message)
    return Frame(u, chol, A, log_det, health, names)


def moment_frame(mean: Sequence[float], cov: np.ndarray, *,
                 names: Sequence[str] | None = None) -> Frame:
    """The frame of a normal with the given mean and covariance (re-centring on a
    first pass's posterior moments).

    A posterior that is skewed is better matched, for the polynomial rules, by the
    normal with its own mean and covariance than by the curvature at its mode.

    Parameters
    ----------
    mean : array_like, shape (d,)
    cov : array_like, shape (d, d)
        Symmetric positive definite.

    Raises
    ------
    GridError, ComputeError
        As `make_frame`; a covariance that is not positive definite is refused
        (``ComputeError``), since it comes from a rule that did not fit.
    """
    m = np.asarray(mean, float).reshape(-1)
    C = np.asarray(cov, float)
    names = tuple(names) if names is not None else tuple(f"u{i}" for i in range(m.size))
    _check_frame_input(m, C, names, what="the covariance", centre="the mean", arg="cov")
    C = (C + C.T) / 2
    try:
        L = np.linalg.cholesky(C)
    except np.linalg.LinAlgError:
        raise ComputeError("the covariance to re-centre on is not positive definite; keep the "
                           "frame at the mode") from None
    precision = linalg.cho_solve((L, True), np.eye(m.size))
    lam = np.linalg.eigvalsh(precision)
    health = FrameHealth(True, lam, 0, 0.0, float(lam[-1] / lam[0]))
    return Frame(m, L, (precision + precision.T) / 2, float(np.sum(np.log(np.diag(L)))),
                 health, names)


def _check_frame_input(u: np.ndarray, A: np.ndarray, names: tuple[str, ...], *,
                       what: str = "the Hessian at the mode", centre: str = "the mode",
                       arg: str = "neg_hessian") -> None:
    d = u.size
    if d == 0:
        raise GridError("a frame needs at least one continuous parameter")
    if A.shape != (d, d):
        raise GridError(f"{what} (`{arg}`) has shape {A.shape}; {centre} has {d} coordinates, "
                        f"so it must be ({d}, {d})")
    if len(names) != d:
        raise GridError(f"`names` has {len(names)} names for a frame of {d} coordinates")
    bad = np.flatnonzero(~np.isfinite(u))
    if bad.size:
        raise ComputeError(f"{centre} is not finite in `{names[bad[0]]}` ({u[bad[0]]}); no frame "
                           "can be built around it")
    bad = np.argwhere(~np.isfinite(A))
    if bad.size:
        i, j = bad[0]
        raise ComputeError(f"{what} is not finite in (`{names[i]}`, `{names[j]}`) "
                           f"({A[i, j]}); no frame can be built around it")
    scale = float(np.max(np.abs(A)))
    if scale == 0:
        raise ComputeError(f"{what} is zero: no frame can be built around {centre}")
    asym = np.abs(A - A.T)
    if float(asym.max()) > 1e-6 * scale:
        i, j = np.unravel_index(int(np.argmax(asym)), A.shape)
        raise ComputeError(f"{what} is not symmetric: (`{names[i]}`, "
                           f"`{names[j]}`) is {A[i, j]:.6g} but (`{names[j]}`, `{names[i]}`) is "
                           f"{A[j, i]:.6g}")


def _inverse_chol(A: np.ndarray) -> tuple[np.ndarray, float]:
    """Lower triangular ``L`` with ``L L^T = A^-1``, and ``log |det L|``, without
    forming ``A^-1``: with P the reversal, ``P A P = R R^T`` gives ``L = P R^-T P``.

    Raises
    ------
    numpy.linalg.LinAlgError
        `A` is not positive definite.
    """
    d = A.shape[0]
    R = np.linalg.cholesky(A[::-1, ::-1])
    Rinv_T = linalg.solve_triangular(R, np.eye(d), lower=True).T
    L = Rinv_T[::-1, ::-1]
    return L, float(-np.sum(np.log(np.diag(R))))


def _regularised(A: np.ndarray, floor: float, names: tuple[str, ...]
                 ) -> tuple[np.ndarray, FrameHealth]:
    lam, V = np.linalg.eigh(A)
    top = float(np.max(np.abs(lam)))
    fl = floor * top
    new = np.maximum(np.abs(lam), fl)
    count = int(np.sum(new != lam))
    worst = V[:, 0]
    along = names[int(np.argmax(np.abs(worst)))]
    msg = (f"the Hessian at the mode is not positive definite (smallest eigenvalue of its "
           f"negative {lam[0]:.3g}, mostly along `{along}`; {count} of {len(lam)} eigenvalue"
           f"{'s' if count != 1 else ''} replaced by their magnitude or {fl:.3g}): the mode may "
           "be a saddle, on a boundary or not reached, and the frame is only a guess")
    return (V * new) @ V.T, FrameHealth(False, lam, count, fl, 0.0, msg)


# ---------------------------------------------------------------------------
# diagnostics

@dataclass(frozen=True)
class AxisCheck:
    """The log-density along one frame axis against the normal's.

    Attributes
    ----------
    axis : int
        The frame axis (a column of L).
    name : str
        The coordinate that axis moves most.
    departure : ndarray, shape (4,)
        ``log f(z e_axis) - log f(0) + z^2 / 2`` at z = -4, -2, +2, +4 (0 for a
        normal posterior; ``-inf`` where the density is zero).
    asymmetry : float
        ``(departure(+2) - departure(-2)) / 2``.
    skewed : bool
        ``|asymmetry| > SKEW_LIMIT``.
    heavy : tuple of (bool, bool)
        Whether the lower / upper tail's departure at 4 exceeds `TAIL_LIMIT`.
    cliff : tuple of (bool, bool)
        Whether the density is zero within 4 on the lower / upper side.
    """

    axis: int
    name: str
    departure: np.ndarray = field(repr=False)
    asymmetry: float
    skewed: bool
    heavy: tuple[bool, bool]
    cliff: tuple[bool, bool]


@dataclass(frozen=True)
class FrameCheck:
    """What `check_frame` measured.

    Attributes
    ----------
    axes : tuple of AxisCheck
    log_centre : float
        The log-density at z = 0.
    skewed, heavy, cliffs : tuple of int
        The axes flagged.
    messages : tuple of str
        One line each, with the figures.
    evaluations : int
        Log-density evaluations spent (4 d + 1).
    """

    axes: tuple[AxisCheck, ...]
    log_centre: float
    skewed: tuple[int, ...]
    heavy: tuple[int, ...]
    cliffs: tuple[int, ...]
    messages: tuple[str, ...]
    evaluations: int

    @property
    def normal(self) -> bool:
        """Whether no axis was flagged."""
        return not (self.skewed or self.heavy or self.cliffs)


def check_frame(frame: Frame, log_z: LogDensity) -> FrameCheck:
    """Probe the log-density in ``z`` at +-2 and +-4 on every frame axis.

    Parameters
    ----------
    frame : Frame
    log_z : callable
        ``z`` of shape (n, d) -> log-density in ``z``, shape (n,) (for example
        ``frame.log_density(log_u)``).

    Returns
    -------
    FrameCheck

    Raises
    ------
    ComputeError
        The log-density is not finite at the mode, or NaN at a probe.
    """
    d = frame.dims
    probes = np.array(PROBES)
    pts = np.zeros((1 + 4 * d, d))
    for j in range(d):
        pts[1 + 4 * j:5 + 4 * j, j] = probes
    with np.errstate(all="ignore"):
        lf = np.asarray(log_z(pts), float)
    if not np.isfinite(lf[0]):
        raise ComputeError(f"the log-density at the mode is {lf[0]}; the frame is not around a mode")
    nan = np.flatnonzero(np.isnan(lf))
    if nan.size:
        j, p = divmod(int(nan[0]) - 1, 4)
        raise ComputeError(f"the log-density is NaN at z = {probes[p]:+g} on frame axis {j} "
                           f"(mostly `{frame.axis_name(j)}`)")
    axes, messages = [], []
    skewed, heavy, cliffs = [], [], []
    for j in range(d):
        dep = lf[1 + 4 * j:5 + 4 * j] - lf[0] + probes ** 2 / 2
        name = frame.axis_name(j)
        with np.errstate(invalid="ignore"):
            asym = float((dep[2] - dep[1]) / 2)
        cl = (bool(np.isneginf(dep[:2]).any()), bool(np.isneginf(dep[2:]).any()))
        hv = (bool(dep[0] > TAIL_LIMIT), bool(dep[3] > TAIL_LIMIT))
        sk = bool(not math.isfinite(asym) or abs(asym) > SKEW_LIMIT)
        axes.append(AxisCheck(j, name, dep, asym, sk, hv, cl))
        if any(cl):
            cliffs.append(j)
            side = " and ".join(s for s, c in zip(("below", "above"), cl) if c)
            messages.append(f"frame axis {j} (mostly `{name}`): the posterior is zero within 4 "
                            f"sd {side} the mode: a bound is close, use `rule grid` or `rotated`")
        elif sk:
            skewed.append(j)
            messages.append(f"frame axis {j} (mostly `{name}`) is skewed: the log-density departs "
                            f"from the normal's by {dep[1]:+.3g} at z = -2 and {dep[2]:+.3g} at "
                            f"z = +2 (nats)")
        if any(hv) and not any(cl):
            heavy.append(j)
            side = " and ".join(s for s, h in zip(("lower", "upper"), hv) if h)
            messages.append(f"frame axis {j} (mostly `{name}`) has a heavy {side} tail: the "
                            f"log-density departs from the normal's by {dep[0]:+.3g} at z = -4 "
                            f"and {dep[3]:+.3g} at z = +4 (nats)")
    return FrameCheck(tuple(axes), float(lf[0]), tuple(skewed), tuple(heavy), tuple(cliffs),
                      tuple(messages), int(lf.size))
