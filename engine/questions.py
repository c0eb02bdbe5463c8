"""Questions asked of a computed posterior.

Probabilities of conditions, expectations, sds and quantiles of any expression of
the parameters and lets, the distribution of a derived quantity, and the joint
mode. Each answer carries an error estimate from the nested coarse grids.

A condition's indicator jumps inside grid cells; counting whole cells would give
an error of the order of the spacing. Instead each node's cell is taken as a box
over which the compared quantity is linear (its gradient is found symbolically),
and the node contributes the fraction of its box where the condition holds. A
condition on a single continuous parameter uses that parameter's marginal cdf.
"""

from __future__ import annotations

import math
from dataclasses import dataclass
from typing import Sequence

import numpy as np
import sympy as sp
from scipy import optimize

from .errors import ComputeError, ModelError
from .model import ParamFunction, expand_lets, param_function
from . import finite, regions
from .posterior import Estimate, Posterior, combine, evaluate_block, walk


@dataclass(frozen=True)
class _Expression:
    """A question's expression with lets expanded, and compiled over grid points."""

    expr: sp.Basic
    fn: ParamFunction


def _compile(post: Posterior, expr: sp.Basic) -> _Expression:
    e = expand_lets(expr, post.compiled.model)
    names = {p.name for p in post.compiled.params}
    bad = {s.name for s in e.free_symbols} - names
    if bad:
        raise ModelError(f"`{sorted(bad)[0]}` is a data column; a question is about "
                         "parameters and lets")
    return _Expression(e, param_function(e, post.compiled.params))


def _constant(e: sp.Basic) -> float:
    """The value of an expression that is a number (perhaps after simplification,
    as p / p), refused unless finite and real."""
    value = complex(e)
    if value.imag != 0 or not math.isfinite(value.real):
        raise ComputeError(f"the expression is `{e}`, not a finite real number")
    return value.real


def _truncated(est: Estimate, term: float) -> Estimate:
    """`est` with `term` (the effect of the mass beyond the grid) added to its error."""
    if est.error is None or not term > 0:
        return est
    return Estimate(est.value, est.error + term, est.method)


def _levels_estimate(post: Posterior, vals: Sequence[float], *,
                     smooth: bool = True) -> Estimate:
    """Combine the values of the fine and coarse levels into an `Estimate`.

    ``smooth=False`` is for the cell-fraction answers of conditions: their error
    is of second order in the spacing but not a clean power series (it moves
    with where the boundary cuts the cells), so neither extrapolation nor a
    projected geometric decay is justified; the difference with the first
    coarse level is the error."""
    exact = all(a.discrete for a in post.grid.axes)
    order = min((a.order for a in post.grid.axes if not a.discrete), default=2)
    return combine(vals[0], vals[1] if len(vals) > 1 else None,
                   vals[2] if len(vals) > 2 and smooth else None, order=order, exact=exact)


# ---------------------------------------------------------------------------
# expectations

@dataclass(frozen=True)
class Moments:
    """Mean and sd of an expression under the posterior."""

    mean: Estimate
    sd: Estimate


def moments(post: Posterior, expr: sp.Expr, *, notes: list | None = None,
            text: str | None = None) -> Moments:
    """Posterior mean and sd of `expr` (parameters and lets).

    Nodes where it is not a finite number are left out when their posterior mass
    is below the answers' relative error (and noted in `notes`), else refused; so
    is an expression that grows faster than 1/distance near a node of positive
    density (its mean does not exist)."""
    ex = _compile(post, expr)
    e, fn = ex.expr, ex.fn
    if isinstance(e, sp.Symbol):
        return Moments(post.param_mean(e.name), post.param_sd(e.name))
    if e.is_number:
        # a constant: its own mean, and sd 0
        return Moments(Estimate(_constant(e), 0.0, "exact"), Estimate(0.0, 0.0, "exact"))
    absent = _absent_moments(post, e)
    if absent is not None:
        return absent
    return moments_on_grid(post, e, fn, notes=notes, text=text)


def moments_on_grid(post: Posterior, e: sp.Expr, fn: ParamFunction | None = None, *,
                    notes: list | None = None, text: str | None = None) -> Moments:
    """Mean and sd of `e` (lets expanded) summed over the grid's points (see
    `moments` for the points where it is not a finite number)."""
    fn = fn or param_function(e, post.compiled.params)
    text = text or str(e)
    nf = finite.scan(post, fn)
    if nf.pole is not None:
        raise ComputeError(f"`{text}` has no mean or sd: it grows faster than 1/distance "
                           f"near {nf.pole}, where the posterior is not zero; ask for its "
                           "quantiles or an interval")
    if nf.infinite > finite.NEGLIGIBLE_INFINITE:
        # an overflow beside a node of positive density: the expression's values
        # there outweigh any small mass, so the mean is carried by the far tails
        raise ComputeError(
            f"`{text}` has no mean or sd here: it is infinite (beyond 1e308) on posterior "
            f"mass {nf.infinite:.2g}, first at {nf.where}, and where a quantity overflows "
            "with the posterior not zero its mean is carried by the far tails (or does not "
            "exist); ask for its quantiles or an interval, or the mean of its log")
    L = post.levels + 1
    s0 = np.zeros(L)
    s1 = np.zeros(L)
    s2 = np.zeros(L)
    shift = None
    vmin, vmax = math.inf, -math.inf
    for b in walk(post):
        theta, ws = b.theta, b.weights
        v = np.broadcast_to(np.asarray(fn(theta), float), ws[0].shape)
        ok = np.isfinite(v)
        live = (ws[0] > 0) & ok
        if live.any():
            vmin, vmax = min(vmin, float(np.min(v[live]))), max(vmax, float(np.max(v[live])))
        if shift is None and live.any():
            shift = float(np.sum(v[live] * ws[0][live]) / max(np.sum(ws[0][live]), 1e-300))
        d = np.where(ok, v - (shift or 0.0), 0.0)
        with np.errstate(over="ignore", invalid="ignore"):  # overflow is refused below
            for k, w in enumerate(ws):
                w = np.where(ok, w, 0.0)
                s0[k] += w.sum()
                s1[k] += np.dot(w, d)
                s2[k] += np.dot(w, d * d)
    shift = shift or 0.0
    with np.errstate(all="ignore"):
        means = [float(shift + s1[k] / s0[k]) for k in range(L)]
        var = [float(s2[k] / s0[k] - (s1[k] / s0[k]) ** 2) for k in range(L)]
    if not (math.isfinite(means[0]) and math.isfinite(var[0])):
        # finite values whose sums or squares overflow float64: no trustworthy answer
        raise ComputeError("the mean or sd of the expression overflows (beyond 1e308 in "
                           "double precision); ask about a smaller quantity, such as its log")
    means = [m if math.isfinite(m) else None for m in means]
    sds = [math.sqrt(max(v, 0.0)) if math.isfinite(v) else None for v in var]
    # the mass beyond the grid could sit anywhere in the expression's range
    span = (vmax - vmin) * post.diagnostics.missing if vmax > vmin else 0.0
    mo = Moments(_truncated(_levels_estimate(post, means), span),
                 _truncated(_levels_estimate(post, sds), span))
    scale = max(abs(mo.mean.value), mo.sd.value, 1e-300)
    rel = min(e.error for e in (mo.mean, mo.sd)) / scale if (
        mo.mean.error is not None and mo.sd.error is not None) else 0.0
    finite.check(post, nf, text, rel, what="mean", notes=notes)
    return mo


def _absent_moments(post: Posterior, e: sp.Expr) -> Moments | None:
    """Mean and sd of a polynomial in parameters whose tails fall as |x|^-k: the
    moment of degree r exists only where every such k > r + 1; None when all exist
    (or the expression is not a polynomial, where the sums decide)."""
    gone = {1: False, 2: False}
    for x in e.free_symbols:
        if x.name not in post.marginals:
            continue
        k = post.tails(x.name).exponent()
        if k is None:
            continue
        try:
            deg = sp.Poly(e, x).degree()
        except sp.PolynomialError:
            continue
        for r in gone:
            gone[r] = gone[r] or k <= r * deg + 1 + 1e-9
    if not any(gone.values()):
        return None
    none = Estimate(math.nan, None, "absent")
    return Moments(none if gone[1] else moments_on_grid(post, e).mean, none)


# ---------------------------------------------------------------------------
# probabilities

@dataclass(frozen=True)
class _Rel:
    s: ParamFunction            # lhs - rhs
    grads: tuple[ParamFunction | None, ...]  # d s / d theta_d (None: discrete or zero)
    op: str                     # "gt", "ge", "lt", "le", "eq", "ne"


_OPS = regions.OPS


@dataclass(frozen=True)
class _Judged:
    """A condition as its and / or / not skeleton over numbered relations, each
    compiled with its gradients."""

    tree: tuple
    rels: list[_Rel]


def _relations(cond: sp.Basic, post: Posterior) -> _Judged:
    """Compile every relational of `cond` (with gradients) and the boolean skeleton."""
    params = post.compiled.params
    rels: list[_Rel] = []

    def relation(s, op):
        if op in ("eq", "ne"):
            cont = [p.name for p in params if not p.discrete and p.symbol in s.free_symbols]
            if cont:
                raise ComputeError(f"`==` and `!=` on continuous `{cont[0]}` have "
                                   "probability 0 and 1; compare with < or > instead")
        grads = []
        for p in params:
            if p.discrete or p.symbol not in s.free_symbols:
                grads.append(None)
                continue
            try:
                g = sp.diff(s, p.symbol)
                if g.has(sp.Derivative):
                    raise ValueError
                grads.append(param_function(g, params))
            except (ValueError, TypeError, NotImplementedError):
                grads.append(None)
        rels.append(_Rel(param_function(s, params), tuple(grads), op))
        return ("rel", len(rels) - 1)

    tree = regions.boolean_tree(cond, relation)
    if tree is None:
        raise ComputeError(f"`{cond}` is not a condition quadrat can judge")
    return _Judged(tree, rels)


def _fraction(rel: _Rel, theta, half: list[np.ndarray]) -> np.ndarray:
    """The fraction of each node's box where the relation holds; NaN where its
    sides are not numbers (the caller reports that, never drops it)."""
    n = len(theta[0]) if theta else 1
    with np.errstate(all="ignore"):
        s = np.broadcast_to(np.asarray(rel.s(theta), float), (n,))
        delta = np.zeros(n)
        for g, h in zip(rel.grads, half):
            if g is not None:
                delta = delta + np.abs(np.asarray(g(theta), float)) * h
        # fraction of the node's box where s > 0, s linear over the box
        ramp = np.clip((s + delta) / (2 * delta), 0.0, 1.0)
    hard_gt = (s > 0).astype(float)
    hard_ge = (s >= 0).astype(float)
    # an infinite side or slope is judged at the node itself
    smooth = (delta > 0) & np.isfinite(delta) & np.isfinite(s)
    if rel.op in ("gt", "ge"):
        out = np.where(smooth, ramp, hard_gt if rel.op == "gt" else hard_ge)
    elif rel.op in ("lt", "le"):
        out = np.where(smooth, 1.0 - ramp, 1.0 - (hard_ge if rel.op == "lt" else hard_gt))
    else:
        eq = (s == 0).astype(float)
        out = eq if rel.op == "eq" else 1.0 - eq
    return np.where(np.isnan(s), np.nan, out)


def _judge(tree, fr: list[np.ndarray], n: int) -> np.ndarray:
    kind = tree[0]
    if kind == "const":
        return np.full(n, 1.0 if tree[1] else 0.0)
    if kind == "rel":
        return fr[tree[1]]
    if kind == "not":
        return 1.0 - _judge(tree[1], fr, n)
    parts = [_judge(t, fr, n) for t in tree[1]]
    out = parts[0]
    for p in parts[1:]:
        out = out * p if kind == "and" else out + p - out * p
    return out


@dataclass(frozen=True)
class _OneParamSet:
    """A condition on one continuous parameter as the intervals where it holds."""

    name: str
    pieces: list[tuple[float, float]]


def _one_param_set(cond: sp.Basic, post: Posterior) -> _OneParamSet | None:
    """A condition on one continuous parameter made of ``param OP number``
    comparisons joined by and / or / not (``0.2 < p < 0.4``): the parameter's
    name and the intervals where it holds, so that the marginal's cdf answers
    it (accurately) instead of the cell fractions. None for any other condition."""
    syms = cond.free_symbols
    if len(syms) != 1:
        return None
    sym = next(iter(syms))
    par = [p for p in post.compiled.params if p.symbol == sym and not p.discrete]
    if not par:
        return None
    cuts = set()
    for r in cond.atoms(sp.core.relational.Relational):
        if type(r) not in _OPS or _OPS[type(r)] in ("eq", "ne"):
            return None
        if r.lhs == sym and r.rhs.is_number:
            cuts.add(float(r.rhs))
        elif r.rhs == sym and r.lhs.is_number:
            cuts.add(float(r.lhs))
        else:
            return None
    if not cuts:
        return None
    cuts = sorted(cuts)
    ends = [-math.inf] + cuts + [math.inf]
    pieces: list[tuple[float, float]] = []
    for a, b in zip(ends[:-1], ends[1:]):
        mid = (a + b) / 2 if math.isfinite(a) and math.isfinite(b) else (
            b - 1.0 if math.isfinite(b) else a + 1.0)
        if bool(cond.subs(sym, mid)):
            if pieces and pieces[-1][1] == a:
                pieces[-1] = (pieces[-1][0], b)
            else:
                pieces.append((a, b))
    return _OneParamSet(par[0].name, pieces)


def _single_param(cond: sp.Basic, post: Posterior) -> _OneParamSet | None:
    """``param OP number`` for a continuous parameter, or None."""
    if type(cond) not in _OPS or _OPS[type(cond)] in ("eq", "ne"):
        return None
    lhs, rhs, op = cond.lhs, cond.rhs, _OPS[type(cond)]
    flip = {"gt": "lt", "ge": "le", "lt": "gt", "le": "ge"}
    if isinstance(rhs, sp.Symbol) and lhs.is_number:
        lhs, rhs, op = rhs, lhs, flip[op]
    if not (isinstance(lhs, sp.Symbol) and rhs.is_number):
        return None
    for p in post.compiled.params:
        if p.symbol == lhs and not p.discrete:
            x = float(rhs)
            return _OneParamSet(p.name, [(-math.inf, x)] if op in ("lt", "le") else
                                [(x, math.inf)])
    return None


def probability(post: Posterior, cond: sp.Basic, *, notes: list | None = None,
                text: str | None = None) -> Estimate:
    """Posterior probability of condition `cond` (parameters and lets).

    A condition on one continuous parameter is read off its marginal's cdf; others
    are integrated along grid lines (`regions`) where the grid allows, else by the
    cell fractions (`_cell_fractions`). Where a side of it is not a number, the
    condition does not hold; that is refused when the mass there exceeds the
    answer's error, else noted in `notes`."""
    e = expand_lets(cond, post.compiled.model)
    names = {p.name for p in post.compiled.params}
    bad = {s.name for s in e.free_symbols} - names
    if bad:
        raise ModelError(f"`{sorted(bad)[0]}` is a data column; a question is about "
                         "parameters and lets")
    single = _single_param(e, post) or _one_param_set(e, post)
    if single is not None:
        vals = []
        for m in post._levels_of(single.name):
            vals.append(sum((1.0 if b == math.inf else m.cdf(b)) -
                            (0.0 if a == -math.inf else m.cdf(a)) for a, b in single.pieces))
        return _truncated(_levels_estimate(post, vals), post.diagnostics.missing)
    judged = _relations(e, post)
    nf = _scan_all(post, [r.s for r in judged.rels])
    lines = regions.region_probability(post, e)
    if lines is not None:
        # high order, but not a clean power series (the cut moves across the cells as
        # the grid coarsens): the difference with the first coarse level is the error
        est = _truncated(_levels_estimate(post, lines, smooth=False),
                         post.diagnostics.missing)
    else:
        vals = _cell_fractions(post, judged)
        est = _truncated(_levels_estimate(post, vals, smooth=False), post.diagnostics.missing)
    finite.check(post, nf, text or str(cond), est.error or 0.0, what="probability",
                 notes=notes)
    return est


def _scan_all(post: Posterior, fns) -> finite.NonFinite:
    """Where any of `fns` is not a finite number (masses added: an upper bound)."""
    parts = [finite.scan(post, f) for f in fns]
    first = next((p.where for p in parts if p.where is not None), None)
    return finite.NonFinite(sum(p.undefined for p in parts), sum(p.infinite for p in parts),
                            sum(p.isolated for p in parts), first,
                            next((p.pole for p in parts if p.pole is not None), None))


def _cell_fractions(post: Posterior, judged: "_Judged") -> list[float]:
    """P(condition) on every level, each node counting the fraction of its box where
    the condition holds."""
    L = post.levels + 1
    tot = np.zeros(L)
    norm = np.zeros(L)
    halves = []
    for lev in range(L):
        halves.append([a.spacing() * (a.nest ** lev) / 2 for a in post.grid.axes])
    for b in walk(post):
        theta, ws = b.theta, b.weights
        for lev in range(L):
            half = [h[i] for h, i in zip(halves[lev], b.idx)]
            fr = [_fraction(r, theta, half) for r in judged.rels]
            ind = _judge(judged.tree, fr, len(theta[0]))   # NaN: outside (scanned before)
            tot[lev] += np.dot(ws[lev], np.nan_to_num(ind))
            norm[lev] += ws[lev].sum()
    return [float(np.clip(tot[k] / norm[k], 0.0, 1.0)) for k in range(L)]


# ---------------------------------------------------------------------------
# quantiles and distributions of derived quantities

def quantile(post: Posterior, expr: sp.Expr, q: float, *, notes: list | None = None,
             text: str | None = None) -> Estimate:
    """The q-quantile of `expr` under the posterior.

    A parameter's quantile comes from its marginal, a strictly monotone function of
    one parameter maps that parameter's quantile (`_monotone_quantile`); otherwise
    ``P(expr <= x) = q`` is solved on every level (`_solve_levels`) from a bracket
    read off the ranked values at the grid points (`_Ranked`). Infinite values order
    as +-inf; undefined ones are never below x (refused when their mass exceeds the
    answer's error, else noted in `notes`)."""
    if not 0 < q < 1:
        raise ComputeError(f"quantile level must be between 0 and 1 (exclusive); got {q:g}")
    ex = _compile(post, expr)
    e = ex.expr
    if isinstance(e, sp.Symbol):
        return post.quantile(e.name, q)
    if e.is_number:
        return Estimate(_constant(e), 0.0, "exact")
    mono = _monotone_in_one(post, e)
    if mono is not None:
        return _monotone_quantile(post, mono, q)
    nf = finite.scan(post, ex.fn)
    ranked = _ranked(post, ex.fn)
    text = text or str(expr)
    if all(ax.discrete for ax in post.grid.axes):
        finite.check(post, nf, text, 0.0, what="quantile", notes=notes)
        value = ranked.at(q - 1e-12)
        if not math.isfinite(value):
            raise ComputeError(f"the {q:g} quantile of `{text}` is infinite")
        return Estimate(value, 0.0, "exact")
    a, b = ranked.bracket(q)
    cdf = regions.region_cdf(post, e)
    out = _solve_levels(post, e, q, cdf, a, b)
    if out[0] is None:
        raise ComputeError("could not solve for the quantile")
    est = _levels_estimate(post, out, smooth=False)
    miss = post.diagnostics.missing
    # the density at the quantile: how far it moves when mass is misplaced
    slope = ranked.slope(q)
    if cdf is not None:
        x0 = out[0]
        dx = 1e-5 * max(abs(x0), abs(b - a), 1e-300)
        p_hi, p_lo = cdf(x0 + dx, 0), cdf(x0 - dx, 0)
        if p_hi is not None and p_lo is not None and p_hi > p_lo:
            slope = (p_hi - p_lo) / (2 * dx)
    if miss > 0 and slope > 0:
        # how far the quantile moves if the mass beyond the grid were added
        est = _truncated(est, miss / slope)
    finite.check(post, nf, text, (est.error or 0.0) * slope, what="quantile", notes=notes)
    return est


@dataclass(frozen=True)
class _Monotone:
    """An expression strictly monotone in one continuous parameter."""

    name: str
    fn: ParamFunction
    rising: bool


def _monotone_quantile(post: Posterior, mono: _Monotone, q: float) -> Estimate:
    """The function of the parameter's quantile (q, or 1 - q where it decreases),
    its error carried through the slope."""
    est = post.quantile(mono.name, q if mono.rising else 1 - q)

    def at(v):
        return float(mono.fn([np.array([v]) if p.name == mono.name else np.array([0.0])
                              for p in post.compiled.params])[0])

    value = at(est.value)
    err = None
    if est.error is not None:
        step = max(abs(est.value) * 1e-7, 1e-12)
        err = abs(at(est.value + step) - at(est.value - step)) / (2 * step) * est.error
    return Estimate(value, err, est.method)


@dataclass(frozen=True)
class _Ranked:
    """An expression's values at the grid points with mass, in increasing order,
    and the posterior mass up to each (normalised to end at 1)."""

    values: np.ndarray
    cdf: np.ndarray

    def at(self, p: float) -> float:
        """The value where the cumulative mass first reaches `p`."""
        return float(self.values[min(int(np.searchsorted(self.cdf, p)), len(self.values) - 1)])

    def bracket(self, q: float) -> tuple[float, float]:
        """Values about the q-quantile: those at q - 0.05 and q + 0.05, one further out
        (finite: infinite values are clipped to the finite extremes)."""
        lo_i = int(np.searchsorted(self.cdf, max(q - 0.05, 0.0)))
        hi_i = int(np.searchsorted(self.cdf, min(q + 0.05, 1.0)))
        fin = self.values[np.isfinite(self.values)]
        if fin.size == 0:
            raise ComputeError("the expression is infinite wherever the posterior has mass")
        lo = float(np.clip(self.values[max(lo_i - 1, 0)], fin[0], fin[-1]))
        hi = float(np.clip(self.values[min(hi_i + 1, len(self.values) - 1)], fin[0], fin[-1]))
        return lo, hi

    def slope(self, q: float) -> float:
        """A rough density at the q-quantile (0.1 over the spread of q -+ 0.05)."""
        lo, hi = self.bracket(q)
        return 0.1 / (hi - lo) if hi > lo else 0.0


def _ranked(post: Posterior, fn: ParamFunction) -> _Ranked:
    vals, wts = [], []
    for b in walk(post):
        w0 = b.weights[0]
        with np.errstate(all="ignore"):
            v = np.broadcast_to(np.asarray(fn(b.theta), float), w0.shape)
        keep = w0 > 0
        # undefined values are never below x: ranked last
        vals.append(np.where(np.isnan(v[keep]), np.inf, v[keep]))
        wts.append(w0[keep])
    v = np.concatenate(vals)
    w = np.concatenate(wts)
    order = np.argsort(v, kind="stable")
    c = np.cumsum(w[order])
    c /= c[-1]
    return _Ranked(v[order], c)


def _solve_levels(post: Posterior, e: sp.Expr, q: float, cdf, a: float, b: float
                  ) -> list[float | None]:
    """The root of P(e <= x) = q on every level (None where it cannot be bracketed),
    by line integration where `cdf` answers, else by cell fractions."""
    out = []
    for lev in range(post.levels + 1):
        def f(x, lev=lev):
            if cdf is not None:
                v = cdf(x, lev)
                if v is not None:
                    return v - q
            return _prob_le(post, e, x, lev) - q
        lo, hi = a, b
        span = max(abs(hi - lo), 1e-12 * max(1.0, abs(lo)))
        for _ in range(60):
            if f(lo) <= 0:
                break
            lo -= span
            span *= 2
        span = max(abs(hi - lo), 1e-12)
        for _ in range(60):
            if f(hi) >= 0:
                break
            hi += span
            span *= 2
        try:
            out.append(optimize.brentq(f, lo, hi, xtol=1e-13 * max(1.0, abs(lo) + abs(hi)),
                                       rtol=1e-13, maxiter=200))
        except ValueError:
            out.append(None)
    return out


def _monotone_in_one(post: Posterior, e: sp.Expr) -> _Monotone | None:
    """`e` when it reads one continuous parameter and is strictly monotone over its
    grid axis (checked on a mesh four times finer than the nodes), else None."""
    params = post.compiled.params
    used = [p for p in params if p.symbol in e.free_symbols]
    if len(used) != 1 or used[0].discrete:
        return None
    p = used[0]
    ax = post.grid.axis(p.name)
    fn = param_function(e, params)
    u = np.linspace(ax.u[0], ax.u[-1], 4 * ax.n + 1)
    vals = ax.to_value(u)
    theta = [vals if q.name == p.name else np.zeros_like(vals) for q in params]
    g = fn(theta)
    if not np.all(np.isfinite(g)):
        return None
    d = np.diff(g)
    if np.all(d > 0):
        return _Monotone(p.name, fn, True)
    if np.all(d < 0):
        return _Monotone(p.name, fn, False)
    return None


def _prob_le(post: Posterior, e: sp.Expr, x: float, lev: int) -> float:
    judged = _relations(sp.Le(e, x), post)
    half_axes = [a.spacing() * (a.nest ** lev) / 2 for a in post.grid.axes]
    tot = norm = 0.0
    for b in walk(post):
        theta, ws = b.theta, b.weights
        half = [h[i] for h, i in zip(half_axes, b.idx)]
        ind = _judge(judged.tree, [_fraction(r, theta, half) for r in judged.rels],
                     len(theta[0]))   # NaN: outside the condition
        tot += float(np.dot(ws[lev], np.nan_to_num(ind)))
        norm += float(ws[lev].sum())
    return tot / norm


@dataclass(frozen=True)
class Distribution:
    """The posterior distribution of a derived quantity.

    Attributes
    ----------
    mean, sd : Estimate
    quantiles : dict of float to Estimate
        At 2.5%, 50% and 97.5%.
    edges : ndarray, shape (bins + 1,)
    density : ndarray, shape (bins,)
        A histogram of the posterior density, for plotting.
    """

    mean: Estimate
    sd: Estimate
    quantiles: dict[float, Estimate]
    edges: np.ndarray
    density: np.ndarray


def distribution(post: Posterior, expr: sp.Expr, *, bins: int = 60) -> Distribution:
    """Mean, sd, quantiles and a density histogram of `expr`."""
    mo = moments(post, expr)
    qs = {q: quantile(post, expr, q) for q in (0.025, 0.5, 0.975)}
    fn = _compile(post, expr).fn
    # beyond the 95% interval by two sds, or by its width where no sd exists
    pad = 2 * mo.sd.value if math.isfinite(mo.sd.value) else qs[0.975].value - qs[0.025].value
    lo = qs[0.025].value - pad
    hi = qs[0.975].value + pad
    if not hi > lo:
        hi = lo + 1.0
    edges = np.linspace(lo, hi, bins + 1)
    hist = np.zeros(bins)
    for b in walk(post):
        v = fn(b.theta)
        h, _ = np.histogram(v, bins=edges, weights=b.weights[0])
        hist += h
    dens = hist / np.diff(edges)
    return Distribution(mo.mean, mo.sd, qs, edges, dens)


# ---------------------------------------------------------------------------
# the joint mode

@dataclass(frozen=True)
class Mode:
    """The joint posterior mode (density in the parameters' own units).

    Attributes
    ----------
    values : dict of str to float
    log_density : float
        Unnormalised log posterior there.
    converged : bool
    message : str
    """

    values: dict[str, float]
    log_density: float
    converged: bool
    message: str


def mode(post: Posterior) -> Mode:
    """The grid's best point, polished by an optimiser over the continuous parameters."""
    params = post.compiled.params
    best = dict(post.best)
    cont = [i for i, p in enumerate(params) if not p.discrete]
    if not cont:
        return Mode(best, post.best_logp, True, "best grid point (all parameters discrete)")
    x0 = np.array([best[params[i].name] for i in cont])
    fixed = [best[p.name] for p in params]

    def f(x):
        th = list(fixed)
        for k, i in enumerate(cont):
            th[i] = x[k]
        lp = evaluate_block(post.compiled, [np.array([v], float) for v in th])[0]
        return -lp if np.isfinite(lp) else 1e300

    bounds = [(params[i].lo if math.isfinite(params[i].lo) else None,
               params[i].hi if math.isfinite(params[i].hi) else None) for i in cont]
    scale = np.array([max(post.marginals[params[i].name].sd, 1e-12) for i in cont])
    res = optimize.minimize(lambda z: f(x0 + z * scale), np.zeros(len(cont)), method="Nelder-Mead",
                            options={"xatol": 1e-10, "fatol": 1e-13, "maxiter": 4000 * len(cont)})
    z = res.x
    res2 = optimize.minimize(lambda z: f(x0 + z * scale), z, method="L-BFGS-B",
                             bounds=[((lo - x0[k]) / scale[k] if lo is not None else None,
                                      (hi - x0[k]) / scale[k] if hi is not None else None)
                                     for k, (lo, hi) in enumerate(bounds)],
                             options={"ftol": 1e-15, "gtol": 1e-10})
    agree = bool(np.all(np.abs(res2.x - res.x) < 1e-5))
    if res2.fun <= res.fun:
        z, fun = res2.x, res2.fun
    else:
        z, fun = res.x, res.fun
    ok = bool(res.success or res2.success or agree)
    x = x0 + z * scale
    if fun > -post.best_logp:
        return Mode(best, post.best_logp, False, "the optimiser did not improve on the best grid point")
    out = dict(best)
    for k, i in enumerate(cont):
        out[params[i].name] = float(x[k])
    out = _newton(post, out, [params[i] for i in cont])
    return Mode(out, float(-fun), ok, "polished from the best grid point" if ok else
                "the optimiser stopped before converging; the values are its best")


def _newton(post: Posterior, point: dict[str, float], cont) -> dict[str, float]:
    """`point` polished by Newton steps on the symbolic gradient: a minimiser of a
    flat function stops about sqrt(eps) of an sd from the mode, a root of the
    gradient about eps. Kept only while the steps shrink and stay in the domain."""
    best, last = dict(point), math.inf
    for _ in range(4):
        curv = post.compiled.curvature(best)
        if curv is None:
            return best
        try:
            step = np.linalg.solve(curv.hessian, -curv.gradient)
        except np.linalg.LinAlgError:
            return best
        size = float(np.max(np.abs(step) / np.maximum(
            [abs(best[p.name]) for p in cont], 1e-300)))
        if not (np.all(np.isfinite(step)) and size < last) or size > 1e-4:
            return best
        new = {**best, **{p.name: best[p.name] + float(d) for p, d in zip(cont, step)}}
        if any(not (p.lo < new[p.name] < p.hi) for p in cont):
            return best
        best, last = new, size
        if size < 1e-15:
            break
    return best
