"""Posterior predictions of new observations, and how many more are needed.

`predictive` mixes a family's distribution over the grid with the posterior
weights: its cdf, pmf or density, mean, sd and quantiles are exact sums over the
grid points (no sampling). `sample_size` finds how many further observations
make the expected width of an interval fall below a target: the average length
criterion of Joseph, Wolfson and du Berger (1995), by simulation with a seed;
each simulated data set updates the posterior on the same grid through the
likelihood's sufficient statistics.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, replace
from typing import Callable, Sequence

import numpy as np
import sympy as sp
from scipy import optimize

from . import families as fam
from .data import Column, DataSet
from .errors import ComputeError, ModelError
from .grid import Grid
from .model import (Likelihood, Model, ParamFunction, ReducedTerm, RowTerm, compile_model,
                    expand_lets, param_function)
from .posterior import Estimate, Marginal, Posterior, combine, walk

#: The predictive mixes over the grid points holding all but this much mass.
MIX_TAIL = 1e-13
#: Most grid points a predictive mixes over.
MIX_MAX = 2_000_000
#: Most whole numbers the pmf table of a discrete predictive holds.
MAX_PMF_VALUES = 100_000


@dataclass(frozen=True)
class Predictive:
    """The posterior predictive distribution of one new observation.

    Attributes
    ----------
    name : str
    family : str
    discrete : bool
    values : ndarray
        Support points (discrete) or a plotting mesh (continuous).
    density : ndarray
        pmf at `values` (discrete) or density (continuous).
    mean, sd : float
        ``nan`` where the family's moments do not exist (e.g. cauchy).
    """

    name: str
    family: str
    discrete: bool
    values: np.ndarray
    density: np.ndarray
    mean: float
    sd: float
    _weights: np.ndarray
    _args: tuple[np.ndarray, ...]
    #: The same predictive from the nested coarse levels of the grid (level 1, then 2),
    #: for the error estimates of `estimate`.
    coarse: tuple["Predictive", ...] = ()
    #: The posterior mass beyond the grid (which the mixture cannot hold).
    missing: float = 0.0
    #: How far the components' means reach from the mixture's mean, and their
    #: largest sd: what mass beyond the grid, lying past its edges, could move.
    reach: float = 0.0

    def estimate(self, of: Callable[["Predictive"], float], *, tail: float = 0.0) -> Estimate:
        """`of(self)` with its error: from the same question on the nested coarse
        levels (`posterior.combine`), plus `tail`, what the points left out of the
        mixture (`MIX_TAIL` of the mass) can move the answer by."""
        v0 = float(of(self))
        if not math.isfinite(v0):
            return Estimate(v0, None, "none")
        vs = []
        for c in self.coarse:
            try:
                vs.append(float(of(c)))
            except ComputeError:
                break
        est = combine(v0, *(vs[:2] + [None] * (2 - len(vs[:2]))))
        if est.error is None:
            return Estimate(v0, None, "none")
        # rounding: relative to the number, or to 1 for a number at 0
        return Estimate(v0, max(est.error, 4e-16 * max(abs(v0), 1.0)) + tail, est.method)

    def truncation(self, what: str, value: float = math.nan, q: float = math.nan) -> float:
        """How far the posterior mass beyond the grid (`missing`, placed as far out
        again as the mixture reaches, twice over as for a fast-falling tail) could
        move an answer: a probability by that mass, a mean or sd by the mass times
        the reach, a quantile by the mass over the density there (a whole step of a
        count where the cdf is within the mass of the level)."""
        miss = self.missing + MIX_TAIL
        if what == "prob":
            return miss
        if what in ("mean", "sd"):
            return 2.0 * miss * self.reach if math.isfinite(self.reach) else math.inf
        if what == "quantile":
            if self.discrete:
                c = self.cdf(value)
                below = self.cdf(value - 1)
                return 0.0 if (c - q > miss and q - below > miss) else 1.0
            if len(self.values) > 1:
                f = float(np.interp(value, self.values, self.density))
                return miss / f if f > 0 else math.inf
            return 0.0
        raise ValueError(what)

    def dist(self, sl=slice(None)):
        return fam.get(self.family).scipy(*[a[sl] for a in self._args])

    def cdf(self, y: float) -> float:
        """P(new observation <= y)."""
        total = 0.0
        for sl in _chunks(len(self._weights)):
            with np.errstate(all="ignore"):
                c = np.nan_to_num(self.dist(sl).cdf(y), nan=0.0)
            total += float(np.dot(self._weights[sl], c))
        return min(max(total, 0.0), 1.0)

    def pmf(self, y: float) -> float:
        total = 0.0
        for sl in _chunks(len(self._weights)):
            with np.errstate(all="ignore"):
                d = self.dist(sl)
                v = d.pmf(y) if self.discrete else np.zeros(1)
            total += float(np.dot(self._weights[sl], np.nan_to_num(v)))
        return total

    def quantile(self, q: float) -> float:
        if not 0 < q < 1:
            raise ComputeError(f"quantile level must be between 0 and 1; got {q:g}")
        if self.discrete:
            c = np.cumsum(self.density)
            i = int(np.searchsorted(c, q - 1e-12))
            if i < len(self.values):
                return float(self.values[i])
            return float(self.values[-1])
        if len(self.values):
            lo, hi = float(self.values[0]), float(self.values[-1])
        else:
            # no plotting mesh yet: the mixture's q-quantile lies between the
            # q-quantiles of its components
            with np.errstate(all="ignore"):
                qs = np.asarray(self.dist().ppf(q), float)
            qs = qs[np.isfinite(qs)]
            lo, hi = (float(qs.min()), float(qs.max())) if qs.size else (-1.0, 1.0)
        if not hi > lo:
            pad = 1e-6 * max(1.0, abs(lo))
            lo, hi = lo - pad, hi + pad
        span = hi - lo
        while self.cdf(lo) > q:
            lo -= span
            span *= 2
        span = hi - lo
        while self.cdf(hi) < q:
            hi += span
            span *= 2
        return float(optimize.brentq(lambda y: self.cdf(y) - q, lo, hi, xtol=1e-12 * max(1, abs(hi)),
                                     rtol=1e-12))

    def prob(self, op: str, c: float) -> float:
        """P(y OP c) for OP in <, <=, >, >=, ==, !=."""
        if self.discrete:
            le = self.cdf(c)
            lt = self.cdf(math.ceil(c) - 1) if float(c).is_integer() else le
            eq = self.pmf(c) if float(c).is_integer() else 0.0
        else:
            le = lt = self.cdf(c)
            eq = 0.0
        return {"<": lt, "<=": le, ">": 1 - le, ">=": 1 - lt, "==": eq, "!=": 1 - eq}[op]


def _chunks(n: int, size: int = 200_000):
    for a in range(0, n, size):
        yield slice(a, min(n, a + size))


@dataclass(frozen=True)
class _MassPoints:
    """Grid points and their normalised posterior weights, each shape (k,)."""

    theta: list[np.ndarray]
    weights: np.ndarray


def _mixture_points(post: Posterior, level: int = 0) -> _MassPoints:
    """The grid points holding all but `MIX_TAIL` of the mass (at most `MIX_MAX`),
    weighted as on the nested grid `level` (0 the fine one)."""
    thetas: list[list[np.ndarray]] = [[] for _ in post.grid.axes]
    ws = []
    for b in walk(post, coarse=level > 0):
        w0 = b.weights[level]
        keep = w0 > 0
        for k, t in enumerate(b.theta):
            thetas[k].append(t[keep])
        ws.append(w0[keep])
    w = np.concatenate(ws)
    th = [np.concatenate(t) for t in thetas]
    order = np.argsort(w)
    c = np.cumsum(w[order])
    drop = int(np.searchsorted(c, MIX_TAIL * c[-1]))
    keep = order[drop:]
    if len(keep) > MIX_MAX:
        keep = order[-MIX_MAX:]
    w = w[keep]
    return _MassPoints([t[keep] for t in th], w / w.sum())


def _mixture_sd(w: np.ndarray, means: np.ndarray, sds: np.ndarray, mean: float) -> float:
    """The sd of a mixture by the law of total variance, taken about the mean and
    scaled so that no square overflows; NaN where a component has no sd."""
    if not np.all(np.isfinite(sds)):
        return math.nan
    dev = means - mean
    # differences at the rounding level of the mean are not spread
    dev = np.where(np.abs(dev) <= 64 * np.spacing(abs(mean)), 0.0, dev)
    scale = max(float(np.max(np.abs(dev))), float(np.max(sds)), 1e-300)
    with np.errstate(all="ignore"):
        inner = float(np.dot(w, (dev / scale) ** 2) + np.dot(w, (sds / scale) ** 2))
    return scale * math.sqrt(max(inner, 0.0))


def predictive(post: Posterior, name: str, family: str, args: Sequence[sp.Expr],
               model: Model) -> Predictive:
    """The posterior predictive of one new observation ``name ~ family(args)``.

    `args` are expressions of the parameters and lets (numbers for covariates).
    """
    f = fam.get(family)
    fns = _argument_functions(post, f, args, model)
    mix = _mixture(post, fns, family)
    pred = _untabled(name, f, mix)
    coarse = []
    for level in range(1, min(3, len(post.coarse_marginals) + 1)):
        try:
            c = _untabled(name, f, _mixture(post, fns, family, level))
            coarse.append(_with_pmf_table(c) if f.discrete else c)
        except (ComputeError, ValueError, ZeroDivisionError):
            break
    pred = replace(pred, coarse=tuple(coarse), missing=float(post.diagnostics.missing),
                   reach=_reach(pred, f, mix))
    return _with_pmf_table(pred) if f.discrete else _with_density_mesh(pred)


def _reach(pred: Predictive, f: fam.Family, mix: _Mixture) -> float:
    """The largest distance of a component's mean from the mixture's mean, plus the
    largest component sd (inf where they do not exist)."""
    if not (math.isfinite(pred.mean) and math.isfinite(pred.sd)):
        return math.inf
    dist = f.scipy(*mix.args)
    with np.errstate(all="ignore"):
        means = np.asarray(dist.mean(), float)
        sds = np.asarray(dist.std(), float)
    return float(np.max(np.abs(means - pred.mean)) + np.max(sds))


def _argument_functions(post: Posterior, f: fam.Family, args: Sequence[sp.Expr],
                        model: Model) -> list[ParamFunction]:
    """The family's arguments compiled over the grid points (parameters and lets only)."""
    if len(args) != len(f.params):
        raise ModelError(f"`{f.name}` takes {len(f.params)} argument"
                         f"{'s' if len(f.params) != 1 else ''} ({', '.join(f.params)}), "
                         f"got {len(args)}")
    params = post.compiled.params
    pnames = {p.name for p in params}
    fns = []
    for a in args:
        e = expand_lets(a, model)
        bad = {s.name for s in e.free_symbols} - pnames
        if bad:
            raise ModelError(f"predict: `{sorted(bad)[0]}` is a data column; give the new "
                             "row's values as numbers")
        fns.append(param_function(e, params))
    return fns


@dataclass(frozen=True)
class _Mixture:
    """The components of a predictive: normalised weights and the family's arguments
    at the grid points that carry them, each shape (k,)."""

    weights: np.ndarray
    args: tuple[np.ndarray, ...]


def _mixture(post: Posterior, fns: Sequence[ParamFunction], family: str,
             level: int = 0) -> _Mixture:
    """The grid points holding all but `MIX_TAIL` of the mass where the arguments are
    finite (weighted as on the nested grid `level`)."""
    pts = _mixture_points(post, level)
    w = pts.weights
    argv = tuple(np.asarray(fn(pts.theta), float) for fn in fns)
    ok = np.ones(len(w), bool)
    for a in argv:
        ok &= np.isfinite(a)
    if not ok.any():
        raise ComputeError(f"predict: the arguments of `{family}` are not finite anywhere")
    return _Mixture(w[ok] / w[ok].sum(), tuple(a[ok] for a in argv))


def _untabled(name: str, f: fam.Family, mix: _Mixture) -> Predictive:
    """The predictive with its mean and sd (law of total variance), before its pmf
    table or density mesh."""
    w = mix.weights
    dist = f.scipy(*mix.args)
    with np.errstate(all="ignore"):
        means = np.asarray(dist.mean(), float)
        sds = np.asarray(dist.std(), float)
    if np.all(np.isfinite(means)):
        with np.errstate(all="ignore"):
            mean = float(np.dot(w, means))
        if not math.isfinite(mean):
            raise ComputeError(f"predict: the mean of `{name}` overflows (beyond 1e308)")
        sd = _mixture_sd(w, means, sds, mean)
    else:
        mean = sd = math.nan
    if f.discrete and math.isfinite(mean) and abs(mean) + 40 * (sd if sd == sd else 0) > 2**53:
        raise ComputeError(f"predict: `{name}` would be a count of about {mean:.3g}, beyond "
                           "the whole numbers double precision holds exactly (2^53)")
    return Predictive(name, f.name, f.discrete, np.zeros(0), np.zeros(0), mean, sd, w, mix.args)


def _with_pmf_table(pred: Predictive) -> Predictive:
    """A discrete predictive with its pmf at every whole number between its
    1e-12 and 1 - 1e-12 quantiles."""
    w = pred._weights
    lo = _int_quantile(pred, 1e-12, low=True)
    hi = _int_quantile(pred, 1 - 1e-12, low=False)
    if hi - lo > MAX_PMF_VALUES:
        # a cut table would give wrong quantiles without a word
        raise ComputeError(f"predict: `{pred.name}` spreads over {hi - lo + 1:,} whole numbers "
                           f"({lo:,} .. {hi:,}); its pmf table holds at most "
                           f"{MAX_PMF_VALUES:,}")
    vals = np.arange(lo, hi + 1, dtype=float)
    pm = np.zeros(len(vals))
    for sl in _chunks(len(w), max(1, 2_000_000 // max(len(vals), 1))):
        d = pred.dist(sl)
        with np.errstate(all="ignore"):
            pm += np.nan_to_num(np.einsum("k,vk->v", w[sl], d.pmf(vals[:, None])))
    return replace(pred, values=vals, density=pm)


def _with_density_mesh(pred: Predictive) -> Predictive:
    """A continuous predictive with its density on 401 points between its 1e-4 and
    1 - 1e-4 quantiles."""
    w = pred._weights
    vals = np.linspace(pred.quantile(1e-4), pred.quantile(1 - 1e-4), 401)
    dens = np.zeros(len(vals))
    for sl in _chunks(len(w), max(1, 2_000_000 // len(vals))):
        d = pred.dist(sl)
        with np.errstate(all="ignore"):
            dens += np.nan_to_num(np.einsum("k,vk->v", w[sl], d.pdf(vals[:, None])))
    return replace(pred, values=vals, density=dens)


def _int_quantile(pred: Predictive, q: float, *, low: bool) -> int:
    """A whole number at or beyond the q-quantile of a discrete predictive: the
    smallest (`low`) or largest component quantile, between which the mixture's
    quantile lies (0 where no component has a finite one)."""
    with np.errstate(all="ignore"):
        qs = np.asarray(pred.dist().ppf(q), float)
    qs = qs[np.isfinite(qs)]
    guess = int(np.min(qs) if low else np.max(qs)) if qs.size else 0
    return guess


# ---------------------------------------------------------------------------
# sample size

@dataclass(frozen=True)
class SampleSizeStep:
    n: int
    width: float
    mc_error: float


@dataclass(frozen=True)
class SampleSize:
    """How many further observations make the interval narrow enough.

    Attributes
    ----------
    n : int or None
        The smallest number of further observations whose expected interval width is
        at most the target (None if not reached by `max_n`).
    width : float
        Expected width at `n` (or at `max_n`).
    mc_error : float
        Its Monte Carlo standard error.
    steps : tuple of SampleSizeStep
        Every n tried.
    message : str
    """

    n: int | None
    width: float
    mc_error: float
    steps: tuple[SampleSizeStep, ...]
    message: str
    sims: int
    seed: int
    unit: str = ""              # what one further observation is, in words
    plateau: bool = False       # the expected width levels off above the target
    stopped: bool = False       # the search stopped at the time budget


@dataclass(frozen=True)
class FutureRows:
    """The likelihood future observations follow: ``column ~ family(args)``, the
    arguments in the parameters and lets."""

    column: str
    family: str
    args: tuple[sp.Expr, ...]


def future_likelihood(model: Model, data: DataSet, using: FutureRows | None) -> FutureRows:
    """The likelihood future rows follow: `using` if given, else the model's only
    likelihood, if its arguments read no data column."""
    if using is not None:
        return using
    lks = [lk for lk in model.likelihoods if lk.column is not None]
    if len(lks) != 1 or len(model.likelihoods) != 1:
        raise ModelError("the future rows are ambiguous (several likelihood terms); name them "
                         "with `using COL ~ FAMILY(args)`")
    lk = lks[0]
    cols = set(data.names)
    for a in lk.args:
        used = {s.name for s in expand_lets(a, model).free_symbols} & cols
        if used:
            raise ModelError(f"the future rows are ambiguous: the likelihood of `{lk.column}` "
                             f"reads column `{sorted(used)[0]}`; name them with "
                             "`using COL ~ FAMILY(args)`")
    if lk.censor:
        raise ModelError("the likelihood has censored rows; name the future rows with "
                         "`using COL ~ FAMILY(args)`")
    return FutureRows(lk.column, lk.family, tuple(lk.args))


def sample_size(post: Posterior, model: Model, name: str, width: float, *, level: float = 0.95,
                max_n: int = 10_000, using: FutureRows | None = None,
                data: DataSet | None = None, sims: int = 200, seed: int = 1,
                kind: str = "central", progress: Callable[[int, int], None] | None = None,
                budget_seconds: float | None = None) -> SampleSize:
    """Average length criterion by simulation (Joseph, Wolfson and du Berger, 1995).

    For each simulation a parameter value is drawn from the posterior (a grid
    point, by its mass), then future observations from the likelihood's family at
    that value; the posterior updated by the first ``n`` of them gives an interval
    of `name`; the widths are averaged over simulations. The same draws serve every
    ``n`` (common random numbers), so the expected width falls smoothly with ``n``.

    The phases: checks (`_samplesize_iv`), the simulation set up once
    (`_Simulation`), today's width, then doubling and bisection on ``n``
    (`_search`), each ``n`` simulated once (`_Expected`).
    """
    max_n = _samplesize_iv(post, width, level, max_n)
    future = future_likelihood(model, data if data is not None else DataSet(), using)
    fam.get(future.family)   # an unknown family is refused before any work
    if name not in post.grid.names:
        raise ModelError(f"no parameter `{name}`")
    # the posteriors simulated are narrower than today's: refine the grid until the
    # axis of `name` has about 25 nodes across the target width (nested doubling, so
    # today's evaluations are reused), within a budget of points
    post = _fine_enough(post, name, width)
    sim = _Simulation(post, model, future, name, sims=sims, seed=seed, max_n=max_n)
    w0 = _width(post.marginals[name], level, kind)
    if w0 <= width:
        return SampleSize(0, w0, 0.0, (), f"the {level:g} interval of `{name}` is already "
                          f"{w0:.4g} wide: no further observations are needed", sims, seed)
    expected = _Expected(sim, level, kind, progress, width=width, max_n=max_n,
                         budget_seconds=budget_seconds)
    unit = (f"one further observation is one row of `{future.column}` ~ "
            f"{future.family}({', '.join(str(a) for a in future.args)})")
    try:
        found = _search(expected, width, max_n)
    except _OverBudget as over:
        last = expected.steps()[-1]
        return SampleSize(None, last.width, last.mc_error, expected.steps(),
                          f"stopped before n = {over.n:,}: that step would take about "
                          f"{_secs(over.predicted)}, past the time budget ({_secs(over.budget)} "
                          f"in all, {_secs(over.elapsed)} used); raise it with `budget SECONDS`, "
                          "or use fewer `sims`", sims, seed, unit, stopped=True)
    if isinstance(found, _Plateau):
        return SampleSize(None, found.last.width, found.last.mc_error, expected.steps(),
                          f"cannot be reached: the expected width levels off near "
                          f"{found.last.width:.4g} (it fell by less than {100 * PLATEAU:g}% a "
                          f"doubling of n from {found.first.n:,} to {found.last.n:,} further "
                          "observations); "
                          + _dominant(model, future, name),
                          sims, seed, unit, True)
    if found is None:
        at = expected(max_n)
        return SampleSize(None, at.width, at.mc_error, expected.steps(),
                          f"not reached by {max_n:,} further observations (expected "
                          f"width there {at.width:.4g}); raise `max`", sims, seed, unit)
    msg = ""
    if abs(found.width - width) < 2 * found.mc_error:
        msg = "the expected width is within two Monte Carlo errors of the target; more " \
              "simulations would firm up n"
    return SampleSize(found.n, found.width, found.mc_error, expected.steps(), msg, sims, seed,
                      unit)


def _dominant(model: Model, future: FutureRows, name: str) -> str:
    """Which uncertainty a levelled expected width is left with: the other
    parameters the future rows read, which those rows inform only together with
    `name` (so more of them pin the combination, not `name` itself)."""
    others = sorted({str(x) for a in future.args for x in expand_lets(a, model).free_symbols}
                    & (set(model.param_names) - {name}))
    if not others:
        return (f"the uncertainty that further rows of `{future.column}` do not reduce "
                "dominates the width")
    named = ", ".join(f"`{o}`" for o in others)
    return (f"further rows of `{future.column}` inform `{name}` only together with {named}, "
            f"so the uncertainty of {named} (from the prior and the data so far) dominates "
            "the width")


def _samplesize_iv(post: Posterior, width: float, level: float, max_n) -> int:
    if post.logp is None:
        raise ComputeError("samplesize needs a grid small enough to keep its density "
                           "(at most 16 million points)")
    if not width > 0:
        raise ComputeError(f"`width` must be positive; got {width:g}")
    if not 0 < level < 1:
        raise ComputeError(f"level must be between 0 and 1; got {level:g}")
    if int(max_n) != max_n or max_n < 1:
        raise ComputeError(f"`max` must be a whole number >= 1; got {max_n}")
    return int(max_n)


def _width(marg: Marginal, level: float, kind: str) -> float:
    """The width of the `level` interval of `kind` (an HPD region: its pieces' sum)."""
    if kind == "hpd":
        return sum(b - a for a, b in marg.hpd(level))
    a, b = marg.central(level)
    return b - a


class _Simulation:
    """Everything the simulated futures share, set up once.

    Attributes
    ----------
    draw_args : list of ndarray, each (sims,)
        The family's arguments at each simulation's parameter draw (a grid point,
        by posterior mass).
    U : ndarray, shape (sims, max_n)
        Uniforms, mapped through each draw's quantile function into future rows.
    terms : list
        The future likelihood's compiled terms (over a placeholder column).
    TH, LW, IDX : list of ndarray, ndarray, ndarray
        Every grid point's parameter values, log weight, and node on the axis of
        the parameter asked about.
    """

    def __init__(self, post: Posterior, model: Model, future: FutureRows, name: str, *,
                 sims: int, seed: int, max_n: int):
        f = fam.get(future.family)
        params = post.compiled.params
        grid = post.grid
        rng = np.random.default_rng(seed)
        # parameter draws: grid points by posterior mass
        pts = _mixture_points(post)
        pick = rng.choice(len(pts.weights), size=sims, p=pts.weights)
        arg_fns = [param_function(expand_lets(a, model), params) for a in future.args]
        self.draw_args = [np.asarray(fn([t[pick] for t in pts.theta]), float) for fn in arg_fns]
        # future rows as uniforms mapped through each draw's quantile function
        self.U = rng.random((sims, max_n))
        # the future likelihood, compiled once over a placeholder column
        col = future.column
        self.fut_model = Model(model.params, (),
                               (Likelihood(col, future.family, tuple(future.args), None, None,
                                           ""),), model.lets)
        placeholder = np.asarray(f.scipy(*[a[0] for a in self.draw_args]).ppf(self.U[0, :1]),
                                 float)
        ds, _ = DataSet().with_column(Column(col, placeholder))
        try:
            fut = compile_model(self.fut_model, ds)
        except Exception as exc:  # the placeholder row may be off-support for other draws
            raise ComputeError(f"cannot set up future rows of `{col}`: {exc}") from None
        self.terms = [t for part in fut.likelihood for t in part.terms]
        self.family, self.column, self.sims = f, col, sims
        self.base = post.logp
        self.axis = grid.axis(name)
        self._grid_points(grid, grid.index(name))

    def _grid_points(self, grid: Grid, k: int) -> None:
        flat_theta, lw, idx_name = [], [], []
        for start, stop in grid.blocks(1 << 22):
            idx = grid.indices(start, stop)
            flat_theta.append([a.values[i] for a, i in zip(grid.axes, idx)])
            l_ = np.zeros(stop - start)
            for a, i in zip(grid.axes, idx):
                l_ += a.logw[i]
            lw.append(l_)
            idx_name.append(idx[k])
        self.TH = [np.concatenate([b[d] for b in flat_theta]) for d in range(len(grid.axes))]
        self.LW = np.concatenate(lw)
        self.IDX = np.concatenate(idx_name)

    def widths(self, n: int, level: float, kind: str, *,
               tick: Callable[[int], None] | None = None) -> np.ndarray:
        """The interval width after the first `n` future rows, per simulation;
        `tick(k)` after the k-th."""
        out = np.empty(self.sims)
        for s_ in range(self.sims):
            if tick is not None:
                tick(s_)
            with np.errstate(all="ignore"):
                y = np.asarray(self.family.scipy(*[a[s_] for a in self.draw_args]).ppf(
                    self.U[s_, :n]), float)
            lp = self.base + _future_loglik(self.terms, self.TH, y, self.fut_model, self.column)
            tot = lp + self.LW
            m = np.max(tot)
            wt = np.exp(tot - m)
            mass = np.bincount(self.IDX, weights=wt, minlength=self.axis.n)
            out[s_] = _width(Marginal(self.axis, mass), level, kind)
        return out


def _secs(x: float) -> str:
    return f"{x:.2g} s" if x < 10 else f"{x:,.0f} s"


class _OverBudget(Exception):
    """The next step of the search would run past the time budget."""

    def __init__(self, n: int, predicted: float, elapsed: float, budget: float):
        super().__init__(n)
        self.n, self.predicted, self.elapsed, self.budget = n, predicted, elapsed, budget


class _Expected:
    """The expected width at ``n`` further rows with its Monte Carlo error, each
    ``n`` simulated once; `steps` lists those tried.

    Each step is timed; before the next one its time is predicted from the last
    (in proportion to n, never less than the last step took), and a step that would
    end past the budget is not started (`_OverBudget`). Progress is reported per
    simulation against the simulations the search is expected to need: the steps
    tried, plus those to reach the width where the expected width falls as
    1 / sqrt(n)."""

    def __init__(self, sim: _Simulation, level: float, kind: str, progress, *,
                 width: float = 0.0, max_n: int = 1, budget_seconds: float | None = None,
                 clock: Callable[[], float] | None = None):
        import time
        self.sim, self.level, self.kind, self.progress = sim, level, kind, progress
        self.width, self.max_n, self.budget = width, max_n, budget_seconds
        self.clock = clock or time.monotonic
        self.t0 = self.clock()
        self.last: tuple[int, float] | None = None   # (n, seconds) of the last step
        self._tried: dict[int, SampleSizeStep] = {}

    def _steps_ahead(self) -> int:
        """How many more steps the search is expected to take."""
        if not self._tried:
            return 2 * max(1, math.ceil(math.log2(max(self.max_n, 2))))
        last = max(self._tried.values(), key=lambda t: t.n)
        if last.width <= self.width or self.width <= 0:
            return max(1, math.ceil(math.log2(max(last.n, 2))))
        need = min(self.max_n, last.n * (last.width / self.width) ** 2)
        doublings = max(1, math.ceil(math.log2(max(need / last.n, 1.0))))
        return doublings + max(1, math.ceil(math.log2(max(need / 2, 2))))

    def __call__(self, n: int) -> SampleSizeStep:
        if n not in self._tried:
            elapsed = self.clock() - self.t0
            if self.budget is not None and self.last is not None:
                ln, lt = self.last
                predicted = lt * max(1.0, n / ln)
                if elapsed + predicted > self.budget:
                    raise _OverBudget(n, predicted, elapsed, self.budget)
            sims = self.sim.sims
            done_before = sims * len(self._tried)
            total = sims * (len(self._tried) + 1 + self._steps_ahead())

            def tick(k: int) -> None:
                if self.progress is not None:
                    self.progress(done_before + k, total)

            t = self.clock()
            ws = self.sim.widths(n, self.level, self.kind, tick=tick)
            self.last = (n, self.clock() - t)
            err = float(np.std(ws, ddof=1) / math.sqrt(sims)) if sims > 1 else 0.0
            self._tried[n] = SampleSizeStep(n, float(np.mean(ws)), err)
        return self._tried[n]

    def steps(self) -> tuple[SampleSizeStep, ...]:
        return tuple(sorted(self._tried.values(), key=lambda s: s.n))


#: Relative fall of the expected width over each of two doublings of n below which
#: it has levelled off (a 1/sqrt(n) fall is 29% a doubling; the same simulated rows
#: serve every n, so the falls are much surer than the widths' own Monte Carlo errors).
PLATEAU = 0.03


@dataclass(frozen=True)
class _Plateau:
    """The expected width stopped falling between the `first` and `last` n tried."""

    first: SampleSizeStep
    last: SampleSizeStep


def _search(expected: _Expected, width: float, max_n: int
            ) -> SampleSizeStep | _Plateau | None:
    """The smallest n whose expected width is at most `width`: doubling, then
    bisection; a `_Plateau` when two doublings in a row barely narrow it; None if
    not reached by `max_n`."""
    lo, hi = 0, 1
    seen: list[SampleSizeStep] = []
    while expected(hi).width > width:
        seen.append(expected(hi))
        if len(seen) >= 3 and seen[-3].n >= 16 and all(
                a.width - b.width < PLATEAU * a.width for a, b in zip(seen[-3:], seen[-2:])):
            return _Plateau(seen[-3], seen[-1])
        if hi >= max_n:
            return None
        lo, hi = hi, min(2 * hi, max_n)
    while hi - lo > 1:
        mid = (lo + hi) // 2
        if expected(mid).width <= width:
            hi = mid
        else:
            lo = mid
    return expected(hi)


#: Most points the grid of a sample-size search may have.
SAMPLESIZE_POINTS = 1 << 20


def _fine_enough(post: Posterior, name: str, width: float) -> Posterior:
    from .posterior import compute
    from .refine import refined_grid
    ax = post.grid.axis(name)
    if ax.discrete:
        return post
    current = post
    while True:
        a = current.grid.axis(name)
        spacing = float(np.median(a.spacing()))
        if spacing <= width / 25:
            return current
        nxt = refined_grid(current.grid, None)
        if nxt.size > SAMPLESIZE_POINTS:
            nxt = refined_grid(current.grid, name)
            if nxt.size > SAMPLESIZE_POINTS:
                return current
        current = compute(current.compiled, nxt, reuse=current, pairs=[])


def _future_loglik(terms, TH, y: np.ndarray, fut_model: Model, col: str) -> np.ndarray:
    """Log-likelihood of the future rows `y` at every grid point: through the
    sufficient statistics where they apply, else row by row."""
    n = len(y)
    try:
        total = np.zeros(len(TH[0]))
        for t in terms:
            if isinstance(t, ReducedTerm):
                total += t.restat({col: y}, n)(TH)
            elif isinstance(t, RowTerm):
                if len(t.columns) != 1:
                    raise ValueError
                total += replace(t, columns=(np.asarray(y, float),))(TH)
            else:
                total += t(TH)
        return total
    except ValueError:
        ds, _ = DataSet().with_column(Column(col, np.asarray(y, float)))
        return compile_model(fut_model, ds, reduce=False).log_likelihood(TH)
