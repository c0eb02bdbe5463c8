"""Probabilities of regions by integration along grid lines.

A condition such as ``a > b`` or ``mu - sqrt(v) > 2`` cuts the grid along a curved
boundary. Counting whole cells gives an error of the order of the spacing, and
smoothing the indicator over each cell only brings it to second order. Here the
grid is read as lines along one axis (the "line axis", which every relation that
involves several parameters must contain): on each line the boundary points are
solved for exactly (the relations are evaluated off the nodes), and the density
is integrated up to them with the trapezoid rule corrected at the cut by
Gregory's end weights plus a local quintic over the last, partial cell. Relations
on a single other axis become interval weights on that axis built the same way,
so boxes and their combinations are integrated to high order too. The full line
is the plain trapezoid sum, which for a smooth posterior negligible at the grid's
edges converges geometrically.

Only trapezoid axes of at least 8 nodes with a kept log-density qualify; the
caller falls back to the cell-fraction method otherwise.
"""

from __future__ import annotations

import itertools
import math
from dataclasses import dataclass
from typing import NamedTuple

import numpy as np
import sympy as sp

from .grid import Axis
from .model import ParamFunction, param_function
from .posterior import Posterior

#: Gregory's end corrections for the trapezoid rule at a right end (common
#: practice; the coefficients of the backward differences 1 .. 5).
GREGORY = (1 / 12, 1 / 24, 19 / 720, 3 / 160, 863 / 60480)
#: Largest number of single-axis relations on other axes (2^m combinations).
MAX_SEPARABLE = 6
#: Lines evaluated together (bounds the memory of a chunk).
CHUNK_POINTS = 1 << 18
OPS = {sp.StrictGreaterThan: "gt", sp.GreaterThan: "ge", sp.StrictLessThan: "lt",
        sp.LessThan: "le", sp.Equality: "eq", sp.Unequality: "ne"}


# ---------------------------------------------------------------------------
# one-dimensional pieces: cumulative integrals on a uniform grid

def _lagrange_antiderivatives() -> np.ndarray:
    """Coefficients (6, 7) of the antiderivatives from 0 of the Lagrange basis
    polynomials on the nodes 0, 1, ..., 5 (highest power first)."""
    nodes = np.arange(6.0)
    out = np.zeros((6, 7))
    for m in range(6):
        others = np.delete(nodes, m)
        poly = np.poly(others) / np.prod(nodes[m] - others)
        out[m] = np.polyint(poly)
    return out


_ANTI = _lagrange_antiderivatives()


def _gregory_weights(i: int) -> np.ndarray:
    """Weights on nodes i-5 .. i (oldest first) of the right-end correction at node
    i, in units of h; fewer differences when fewer nodes are behind."""
    w = np.zeros(6)
    for m, g in enumerate(GREGORY, start=1):
        if m > i:
            break
        for j in range(m + 1):
            # nabla^m f_i = sum_j (-1)^j C(m, j) f_{i-j}
            w[5 - j] -= g * (-1) ** j * math.comb(m, j)
    return w


_GREG = np.array([_gregory_weights(i) for i in range(6)])  # rows for i = 0..5 (i>=5: row 5)


class Line1D:
    """Cumulative integrals on one uniform axis with `n` nodes spaced `h`.

    `F(f, i, x)` gives, for rows of node values f (shape (m, n)), the integral from
    the first node to x in cell i: trapezoid up to node i, Gregory's correction at
    i, and the local quintic from node i to x.
    """

    def __init__(self, u: np.ndarray):
        self.u = np.asarray(u, float)
        self.n = len(u)
        self.h = float(u[1] - u[0])

    def trapezoid_cumulative(self, f: np.ndarray) -> np.ndarray:
        """C[:, i] = h (f0/2 + f1 + ... + f_{i-1} + f_i/2), shape (m, n)."""
        c = np.cumsum(f, axis=1) - 0.5 * f - 0.5 * f[:, :1]
        return self.h * c

    def corrections(self, cell: np.ndarray, x: np.ndarray):
        """The node indices and weights (each of shape (m,)) that, added to the
        trapezoid sum up to node `cell`, give the integral up to x: Gregory's
        correction at the node, then the local quintic from the node to x."""
        n, h = self.n, self.h
        i = np.asarray(cell)
        gi = np.minimum(i, 5)
        for k in range(6):
            # Gregory's correction at node i (nodes i-5 .. i; absent before node 0)
            j = i - 5 + k
            yield np.maximum(j, 0), np.where(j >= 0, h * _GREG[gi, k], 0.0)
        # the local quintic through the six nodes around the cell
        s0 = np.clip(i - 2, 0, n - 6)
        ta = (self.u[i] - self.u[s0]) / h
        tb = (x - self.u[s0]) / h
        for m in range(6):
            yield s0 + m, h * (np.polyval(_ANTI[m], tb) - np.polyval(_ANTI[m], ta))

    def F(self, f: np.ndarray, C: np.ndarray, rows: np.ndarray, cell: np.ndarray,
          x: np.ndarray) -> np.ndarray:
        """Integral from u[0] to x (x in cell `cell`, 0 <= cell <= n-2) of row `rows`."""
        out = C[rows, cell].copy()
        for j, w in self.corrections(cell, x):
            out += w * f[rows, j]
        return out

    def total(self, C: np.ndarray) -> np.ndarray:
        return C[:, -1]

    def weights_F(self, x: float) -> np.ndarray:
        """The weight vector c with integral from u[0] to x = c . f (O(n), the same
        rule as `F`)."""
        n, h = self.n, self.h
        i = int(np.clip(np.searchsorted(self.u, x, side="right") - 1, 0, n - 2))
        c = np.zeros(n)
        if i > 0:
            c[: i + 1] = h
            c[0] = c[i] = h / 2
        for j, w in self.corrections(np.array([i]), np.array([float(x)])):
            c[j[0]] += w[0]
        return c


# ---------------------------------------------------------------------------
# the condition

@dataclass(frozen=True)
class _Relation:
    s: ParamFunction          # lhs - rhs
    op: str
    cont: frozenset           # continuous axes it reads
    disc: frozenset           # discrete axes it reads


def _truth(op: str, s: np.ndarray) -> np.ndarray:
    if op == "gt":
        return s > 0
    if op == "ge":
        return s >= 0
    if op == "lt":
        return s < 0
    if op == "le":
        return s <= 0
    if op == "eq":
        return s == 0
    return s != 0


def boolean_tree(cond: sp.Basic, relation):
    """The and / or / not skeleton of `cond` as nested tuples; each comparison
    becomes ``relation(lhs - rhs, op)``, which returns a leaf or None (refused).
    None when any part is refused or is not a condition."""
    tree = _tree(cond, relation)
    return None if _has_none(tree) else tree


def _tree(cond: sp.Basic, relation):
    if cond is sp.true or cond == sp.true:
        return ("const", True)
    if cond is sp.false or cond == sp.false:
        return ("const", False)
    if isinstance(cond, (sp.And, sp.Or)):
        return ("and" if isinstance(cond, sp.And) else "or",
                [_tree(a, relation) for a in cond.args])
    if isinstance(cond, sp.Not):
        return ("not", _tree(cond.args[0], relation))
    if type(cond) in OPS:
        return relation(cond.lhs - cond.rhs, OPS[type(cond)])
    return None


@dataclass(frozen=True)
class _Parsed:
    """A condition as its and / or / not skeleton over numbered relations."""

    tree: tuple
    rels: list[_Relation]


def _parse(cond: sp.Basic, post: Posterior) -> _Parsed | None:
    params = post.compiled.params
    axes = post.grid.axes
    rels: list[_Relation] = []

    def relation(s, op):
        used = [k for k, p in enumerate(params) if p.symbol in s.free_symbols]
        cont = frozenset(k for k in used if not axes[k].discrete)
        disc = frozenset(k for k in used if axes[k].discrete)
        if op in ("eq", "ne") and cont:
            return None
        rels.append(_Relation(param_function(s, params), op, cont, disc))
        return ("rel", len(rels) - 1)

    tree = boolean_tree(cond, relation)
    return None if tree is None else _Parsed(tree, rels)


def _has_none(tree) -> bool:
    if tree is None:
        return True
    if tree[0] in ("and", "or"):
        return any(_has_none(t) for t in tree[1])
    if tree[0] == "not":
        return _has_none(tree[1])
    return False


def _judge(tree, values: dict) -> np.ndarray | bool:
    kind = tree[0]
    if kind == "const":
        return tree[1]
    if kind == "rel":
        return values[tree[1]]
    if kind == "not":
        return np.logical_not(_judge(tree[1], values))
    parts = [_judge(t, values) for t in tree[1]]
    out = parts[0]
    for p in parts[1:]:
        out = np.logical_and(out, p) if kind == "and" else np.logical_or(out, p)
    return out


def _qualifies(a: Axis) -> bool:
    return (not a.discrete) and a.rule == "trapezoid" and a.n >= 8


@dataclass(frozen=True)
class _LinePlan:
    """The line axis, and the relations that are separable (on one other axis each:
    they become interval weights there); the rest are read along the lines."""

    axis: int
    separable: list[int]


def _plan(rels: list[_Relation], post: Posterior, prefer: list[int] | None = None
          ) -> _LinePlan | None:
    """Choose the line axis (the first of `prefer` that qualifies, when given); split
    relations into line, separable and exact ones."""
    axes = post.grid.axes
    multi = [r for r in rels if len(r.cont) > 1 or (r.cont and r.disc)]
    candidates = [k for k, a in enumerate(axes) if not a.discrete]
    if multi:
        common = set.intersection(*[set(r.cont) for r in multi])
        candidates = [k for k in candidates if k in common]
    else:
        # prefer an axis that some relation reads
        read = [next(iter(r.cont)) for r in rels if r.cont]
        candidates = sorted(candidates, key=lambda k: (k not in read, k))
    if prefer is not None:
        candidates = sorted(candidates, key=lambda k: prefer.index(k) if k in prefer
                            else len(prefer))
    for k in candidates:
        if not _qualifies(axes[k]):
            continue
        sep = [i for i, r in enumerate(rels) if r.cont and k not in r.cont]
        if any(len(rels[i].cont) != 1 or rels[i].disc for i in sep):
            continue
        if any(not _qualifies(axes[next(iter(rels[i].cont))]) for i in sep):
            continue
        if len(sep) > MAX_SEPARABLE:
            continue
        return _LinePlan(k, sep)
    return None


# ---------------------------------------------------------------------------
# the integration

def _roots(rel: _Relation, theta_of, u_lo, u_hi, s_lo, s_hi, to_value, iters: int = 80):
    """Vectorised Illinois (regula falsi) for s(u) = 0 on brackets [u_lo, u_hi]
    where s changes sign."""
    a, b = np.array(u_lo, float), np.array(u_hi, float)
    fa, fb = np.array(s_lo, float), np.array(s_hi, float)
    # a root on a node: take it as it is
    x = np.where(fa == 0, a, np.where(fb == 0, b, 0.5 * (a + b)))
    todo = (fa != 0) & (fb != 0)
    if todo.any():
        sub = _illinois(rel, lambda v: theta_of(v, todo), a[todo], b[todo], fa[todo],
                        fb[todo], to_value, iters)
        x[todo] = sub
    return x


def _illinois(rel, theta_of, a, b, fa, fb, to_value, iters):
    """Regula falsi with the Illinois modification; an entry stops as soon as it has
    a zero or its bracket is at the rounding level."""
    x = 0.5 * (a + b)
    done = np.zeros(len(a), bool)
    for _ in range(iters):
        with np.errstate(all="ignore"):
            c = (a * fb - b * fa) / (fb - fa)
        lo, hi = np.minimum(a, b), np.maximum(a, b)
        c = np.where(np.isfinite(c) & (c > lo) & (c < hi), c, 0.5 * (a + b))
        c = np.where(done, x, c)
        fc = rel.s(theta_of(to_value(c)))
        cross = fc * fb < 0
        keep = ~done
        a = np.where(keep & cross, b, a)
        fa = np.where(keep, np.where(cross, fb, fa / 2), fa)
        b = np.where(keep, c, b)
        fb = np.where(keep, fc, fb)
        x = np.where(keep, c, x)
        tol = 4e-16 * np.maximum(np.abs(a) + np.abs(b), 1e-300)
        done |= (fc == 0) | (np.abs(b - a) <= tol)
        if done.all():
            break
    return x


def _axis_interval_weights(axis_u, axis_values_of_u, rels_on_axis, sigma, params_theta,
                           line: Line1D) -> np.ndarray:
    """Weights on one axis's nodes that integrate over the set where each of its
    relations has the truth value `sigma` says."""
    u = axis_u
    n = len(u)
    # truth at nodes and at cell midpoints; roots where a relation changes
    breaks = [u[0], u[-1]]
    for r in rels_on_axis:
        s = r.s(params_theta(axis_values_of_u(u)))
        t = _truth(r.op, s)
        cells = np.flatnonzero(t[:-1] != t[1:])
        if cells.size:
            x = _roots(r, lambda v, m=None: params_theta(v), u[cells], u[cells + 1],
                       s[cells], s[cells + 1], axis_values_of_u)
            breaks.extend(x.tolist())
    breaks = np.unique(np.asarray(breaks))
    mids = 0.5 * (breaks[:-1] + breaks[1:])
    ok = np.ones(len(mids), bool)
    for r, want in zip(rels_on_axis, sigma):
        ok &= _truth(r.op, r.s(params_theta(axis_values_of_u(mids)))) == want
    w = np.zeros(n)
    for a, b, good in zip(breaks[:-1], breaks[1:], ok):
        if good:
            w += line.weights_F(b) - line.weights_F(a)
    return w


def region_probability(post: Posterior, cond: sp.Basic) -> list[float] | None:
    """P(cond) on the fine grid and each nested coarse level, or None when the
    condition or the grid is outside what line integration handles."""
    if post.logp is None:
        return None
    parsed = _parse(cond, post)
    if parsed is None:
        return None
    plan = _plan(parsed.rels, post, transverse_axes(post, [r.s for r in parsed.rels]))
    if plan is None:
        return None
    out = []
    for lev in range(post.levels + 1):
        v = _level_probability(post, parsed.tree, parsed.rels, plan.axis, plan.separable, lev)
        if v is None:
            if lev == 0:
                return None
            break
        out.append(v)
    return out


def _level_selection(a: Axis, lev: int) -> np.ndarray:
    if lev == 0 or a.discrete:
        return np.arange(a.n)
    return np.flatnonzero(np.isfinite(a.coarse[lev - 1]))


def _level_probability(post: Posterior, tree, rels, k: int, sep: list[int], lev: int):
    """P(tree) on level `lev` of the grid, read as lines along axis `k` (the
    relations in `sep` become interval weights on their own axes); None where the
    level is too coarse for the method."""
    lines = _level_lines(post, k, lev)
    if lines is None:
        return None
    cross = _cross_weights(post, lines, rels, sep, lev)
    if cross is None:
        return None
    total = float(np.dot(cross.full_factor, lines.line.total(lines.C)))
    if not total > 0:
        return None
    along = [i for i in range(len(rels)) if i not in sep]
    segs = _segments(lines, rels, along)
    return min(max(_numerator(tree, segs, cross, lines, sep) / total, 0.0), 1.0)


@dataclass(frozen=True)
class _Lines:
    """One level of the grid read as lines along the line axis `k`.

    Attributes
    ----------
    k : int
    d : int
        The number of axes.
    sel : list of ndarray
        Per axis, the nodes of this level.
    others : list of int
        The other axes, in order; the lines run over their nodes.
    values : list of ndarray
        The other axes' values at this level.
    index : tuple of ndarray
        Per other axis, the node of each line, shape (L,).
    f : ndarray, shape (L, n_k)
        The density (Jacobians included) on each line, scaled to its top.
    C : ndarray, shape (L, n_k)
        Its trapezoid cumulative integrals along each line.
    line : Line1D
        The rule along the line axis.
    axis : Axis
        The line axis.
    """

    k: int
    d: int
    sel: list[np.ndarray]
    others: list[int]
    values: list[np.ndarray]
    index: tuple
    f: np.ndarray
    C: np.ndarray
    line: Line1D
    axis: Axis

    @property
    def count(self) -> int:
        return self.f.shape[0]

    @property
    def n_k(self) -> int:
        return self.f.shape[1]

    @property
    def uk(self) -> np.ndarray:
        return self.line.u

    def theta(self, rows: np.ndarray, kvals: np.ndarray) -> list:
        """Parameter values at points of lines `rows`, `kvals` along the line axis."""
        th = [None] * self.d
        for q, j in enumerate(self.others):
            th[j] = self.values[q][self.index[q][rows]]
        th[self.k] = kvals
        return th


def _level_lines(post: Posterior, k: int, lev: int) -> _Lines | None:
    grid = post.grid
    axes = grid.axes
    sel = [_level_selection(a, lev) for a in axes]
    if len(sel[k]) < 8:
        return None
    logp = post.logp.reshape(grid.shape)[np.ix_(*sel)]
    shape = logp.shape
    d = len(axes)
    # log integrand with every axis's Jacobian (the rules' weights come later)
    lj = np.zeros(shape)
    for j, a in enumerate(axes):
        sh = [1] * d
        sh[j] = len(sel[j])
        lj = lj + a.logjac[sel[j]].reshape(sh)
    logf = logp + lj
    top = np.max(logf[np.isfinite(logf)]) if np.isfinite(logf).any() else 0.0
    f_all = np.exp(logf - top)
    f_all[~np.isfinite(f_all)] = 0.0
    # move the line axis last
    f_all = np.moveaxis(f_all, k, -1)
    others = [j for j in range(d) if j != k]
    oshape = [len(sel[j]) for j in others]
    f_lines = f_all.reshape(-1, len(sel[k]))
    index = np.unravel_index(np.arange(f_lines.shape[0]), oshape) if others else ()
    line = Line1D(axes[k].u[sel[k]])
    return _Lines(k, d, sel, others, [axes[j].values[sel[j]] for j in others], index, f_lines,
                  line.trapezoid_cumulative(f_lines), line, axes[k])


@dataclass(frozen=True)
class _CrossWeights:
    """Weights across the lines: per other axis, the level's rule weights, or for an
    axis with separable relations, interval weights for every truth assignment.

    Attributes
    ----------
    full : list of ndarray
        Per other axis, the weights over its whole range.
    rels_of : dict of int to list of int
        The separable relations on each axis.
    by_truth : dict of int to dict of tuple to ndarray
        Per axis with separable relations, the weights of the set where each of
        them has the truth value of the key.
    full_factor : ndarray, shape (L,)
        The weight of each line, from `full`.
    """

    full: list[np.ndarray]
    rels_of: dict[int, list[int]]
    by_truth: dict[int, dict[tuple, np.ndarray]]
    full_factor: np.ndarray

    @staticmethod
    def factor(ws: list[np.ndarray]) -> np.ndarray:
        """The weight of each line from per-axis weights (outer product, flat)."""
        fac = np.ones(1)
        for w in ws:
            fac = np.multiply.outer(fac, w)
        return fac.reshape(-1)


def _cross_weights(post: Posterior, lines: _Lines, rels, sep: list[int], lev: int
                   ) -> _CrossWeights | None:
    axes = post.grid.axes
    sel = lines.sel
    rels_of: dict[int, list[int]] = {}
    for i in sep:
        rels_of.setdefault(next(iter(rels[i].cont)), []).append(i)
    full, by_truth = [], {}
    for j in lines.others:
        a = axes[j]
        if a.discrete:
            w = np.ones(len(sel[j]))
        elif lev == 0:
            w = a.weights[sel[j]]
        else:
            w = np.exp(a.coarse[lev - 1][sel[j]] - a.logjac[sel[j]])
        if j in rels_of:
            if len(sel[j]) > 4000:
                return None
            lj_ = Line1D(a.u[sel[j]])
            w = lj_.weights_F(a.u[sel[j]][-1])  # the same cumulative rule, full range
            idx_rels = [rels[i] for i in rels_of[j]]

            def theta_j(v, j=j):
                th = [np.full(np.shape(v), float(axes[q].values[sel[q][0]]))
                      for q in range(lines.d)]
                th[j] = np.asarray(v, float)
                return th

            by_truth[j] = {}
            for sig in itertools.product((True, False), repeat=len(idx_rels)):
                by_truth[j][sig] = _axis_interval_weights(
                    a.u[sel[j]], a.to_value, idx_rels, sig, theta_j, lj_)
        full.append(w)
    return _CrossWeights(full, rels_of, by_truth, _CrossWeights.factor(full))


@dataclass(frozen=True)
class _Segments:
    """The pieces of every line between its breakpoints (its ends and the roots of
    the relations read along it).

    Attributes
    ----------
    rows : ndarray of int
        The line of each segment.
    integral : ndarray
        The density's integral over each segment.
    truth : dict of int to ndarray of bool
        Each along-line relation's truth value on each segment.
    undefined : ndarray of bool
        Segments where a relation's sides are not numbers: outside the condition,
        whatever its and / or / not say.
    """

    rows: np.ndarray
    integral: np.ndarray
    truth: dict[int, np.ndarray]
    undefined: np.ndarray


def _segments(lines: _Lines, rels, along: list[int], nodes: dict | None = None) -> _Segments:
    """The segments of every line; `nodes` may give a relation's side at the nodes
    already (relation index -> shape (L, n_k))."""
    L, n_k, uk = lines.count, lines.n_k, lines.uk
    vals_k = lines.axis.to_value
    rows_b, cells_b, x_b = [], [], []
    for i in along:
        r = rels[i]
        if not r.cont:
            continue  # exact on the line: no roots along it
        step = max(1, CHUNK_POINTS // n_k)
        for start in range(0, L, step):
            stop = min(L, start + step)
            rows = np.repeat(np.arange(start, stop), n_k)
            kv = np.tile(lines.axis.values[lines.sel[lines.k]], stop - start)
            if nodes is not None and i in nodes:
                s = nodes[i][start:stop]
            else:
                s = r.s(lines.theta(rows, kv)).reshape(stop - start, n_k)
            t = _truth(r.op, s)
            rr, cc = np.nonzero(t[:, :-1] != t[:, 1:])
            if rr.size == 0:
                continue
            rows_abs = rr + start
            x = _roots(r, lambda kvals, m, rows_abs=rows_abs: lines.theta(rows_abs[m], kvals),
                       uk[cc], uk[cc + 1], s[rr, cc], s[rr, cc + 1], vals_k)
            rows_b.append(rows_abs)
            cells_b.append(cc)
            x_b.append(x)
    # every line has its two ends as breakpoints
    rows_all = np.concatenate(rows_b + [np.arange(L), np.arange(L)])
    cells_all = np.concatenate(cells_b + [np.zeros(L, int), np.full(L, n_k - 2)])
    x_all = np.concatenate(x_b + [np.full(L, uk[0]), np.full(L, uk[-1])])
    order = np.lexsort((x_all, rows_all))
    rows_all, cells_all, x_all = rows_all[order], cells_all[order], x_all[order]
    Fv = lines.line.F(lines.f, lines.C, rows_all, cells_all, x_all)
    same = rows_all[1:] == rows_all[:-1]
    seg_rows = rows_all[:-1][same]
    seg_mid = (0.5 * (x_all[1:] + x_all[:-1]))[same]
    th_mid = lines.theta(seg_rows, vals_k(seg_mid))
    truth, undefined = {}, np.zeros(len(seg_rows), bool)
    for i in along:
        s_mid = np.broadcast_to(np.asarray(rels[i].s(th_mid), float), seg_rows.shape)
        truth[i] = _truth(rels[i].op, s_mid)
        undefined |= np.isnan(s_mid)
    return _Segments(seg_rows, (Fv[1:] - Fv[:-1])[same], truth, undefined)


def _numerator(tree, segs: _Segments, cross: _CrossWeights, lines: _Lines, sep: list[int]
               ) -> float:
    """The integral of the density over the segments where `tree` holds, each line
    weighted across; with separable relations, summed over their truth values."""
    if not sep:
        ok = np.asarray(_judge(tree, segs.truth), bool) & ~segs.undefined
        return float(np.dot(cross.full_factor[segs.rows], np.where(ok, segs.integral, 0.0)))
    num = 0.0
    for sig in itertools.product((True, False), repeat=len(sep)):
        values = dict(segs.truth)
        assign = dict(zip(sep, sig))
        for i in sep:
            values[i] = np.full(len(segs.rows), assign[i])
        ok = np.asarray(_judge(tree, values), bool) & ~segs.undefined
        if not ok.any():
            continue
        ws = []
        for q, j in enumerate(lines.others):
            if j in cross.by_truth:
                ws.append(cross.by_truth[j][tuple(assign[i] for i in cross.rels_of[j])])
            else:
                ws.append(cross.full[q])
        fac = _CrossWeights.factor(ws)
        num += float(np.dot(fac[segs.rows], np.where(ok, segs.integral, 0.0)))
    return num


class _Shifted:
    """s(theta) - x for a compiled s."""

    def __init__(self, base: ParamFunction, x: float):
        self.base, self.x = base, x

    def __call__(self, theta):
        return self.base(theta) - self.x


class _Prepared(NamedTuple):
    """The lines of one level along one axis, their cross weights, their total
    weight and the expression at their nodes (count x n_k)."""

    lines: _Lines
    cross: _CrossWeights
    total: float
    g: np.ndarray


def _prepare_lines(post: Posterior, k: int, lev: int, base: ParamFunction
                   ) -> _Prepared | None:
    lines = _level_lines(post, k, lev)
    if lines is None:
        return None
    cross = _cross_weights(post, lines, [], [], lev)
    total = float(np.dot(cross.full_factor, lines.line.total(lines.C)))
    rows = np.repeat(np.arange(lines.count), lines.n_k)
    kv = np.tile(lines.axis.values[lines.sel[k]], lines.count)
    g = np.broadcast_to(np.asarray(base(lines.theta(rows, kv)), float),
                        rows.shape).reshape(lines.count, lines.n_k)
    return _Prepared(lines, cross, total, g)


def region_cdf(post: Posterior, expr: sp.Expr):
    """A function ``cdf(x, level)`` = P(expr <= x) by line integration, or None when
    the expression or the grid is outside what the method handles."""
    if post.logp is None:
        return None
    params = post.compiled.params
    axes = post.grid.axes
    used = [k for k, p in enumerate(params) if p.symbol in expr.free_symbols]
    cont = frozenset(k for k in used if not axes[k].discrete)
    disc = frozenset(k for k in used if axes[k].discrete)
    if not cont:
        return None
    base = param_function(expr, params)
    probe = _Relation(base, "le", cont, disc)
    plan = _plan([probe], post, transverse_axes(post, [base]))
    if plan is None:
        return None

    cache: dict[int, _Prepared | None] = {}

    def prepared(lev: int) -> _Prepared | None:
        if lev not in cache:
            cache[lev] = _prepare_lines(post, plan.axis, lev, base)
        return cache[lev]

    def cdf(x: float, lev: int) -> float | None:
        got = prepared(lev)
        if got is None:
            return None
        lines, cross, total, g = got
        if not total > 0:
            return None
        rel = _Relation(_Shifted(base, x), "le", cont, disc)
        segs = _segments(lines, [rel], [0], {0: g - x})
        return min(max(_numerator(("rel", 0), segs, cross, lines, []) / total, 0.0), 1.0)

    return cdf


def transverse_axes(post: Posterior, fns: list[ParamFunction]) -> list[int] | None:
    """The continuous axes, best line axis first, where the functions are not
    finite at some nodes of positive density (a pole or 0/0 on a node, as `-a/b`
    with the node b = 0): along a line that crosses such a set the root finder
    splits the line at it and each side is judged on its own, while a line lying in
    it would carry the value of one side only, a jump across the lines that the
    rule there integrates to first order. So the axes along which fewest such nodes
    have a bad neighbour come first; None when every node is finite."""
    grid = post.grid
    if post.logp is None or len(grid.axes) < 2:
        return None
    shape = grid.shape
    bad = np.zeros(grid.size, bool)
    for start, stop in grid.blocks(1 << 18):
        theta = [a.values[i] for a, i in zip(grid.axes, grid.indices(start, stop))]
        live = np.isfinite(post.logp[start:stop])
        for fn in fns:
            v = np.broadcast_to(np.asarray(fn(theta), float), live.shape)
            bad[start:stop] |= live & ~np.isfinite(v)
    if not bad.any():
        return None
    bad = bad.reshape(shape)
    runs = {}
    for k, a in enumerate(grid.axes):
        if a.discrete or a.n < 2:
            continue
        lo = [slice(None)] * len(shape)
        hi = [slice(None)] * len(shape)
        lo[k], hi[k] = slice(0, -1), slice(1, None)
        runs[k] = int(np.count_nonzero(bad[tuple(lo)] & bad[tuple(hi)]))
    return sorted(runs, key=lambda k: (runs[k], k))


def _lagrange_basis() -> np.ndarray:
    """Coefficients (6, 6) of the Lagrange basis polynomials on the nodes 0 .. 5."""
    nodes = np.arange(6.0)
    out = np.zeros((6, 6))
    for m in range(6):
        others = np.delete(nodes, m)
        out[m] = np.poly(others) / np.prod(nodes[m] - others)
    return out


_BASIS = _lagrange_basis()


def region_density(post: Posterior, expr: sp.Expr):
    """A function ``density(x, level)`` giving the posterior density of `expr` at x
    by the coarea formula along grid lines, or None when the expression or the grid
    is outside what line integration handles.

    The density is split over the continuous axes the expression reads by a
    partition of unity, w_k = (h_k d_k g)^2 / sum_j (h_j d_j g)^2 (d_j the slope
    along axis j's scale, h_j its spacing), and part k is integrated along the lines
    of axis k: on each line the roots u* of g = x are solved for as in `region_cdf`,
    and the line contributes f w_k / |d_k g| = f h_k^2 |d_k g| / sum_j (h_j d_j g)^2
    there (f interpolated by the local quintic through the six nodes about the
    root's cell); the lines are weighted across by the rule. So a line that lies
    along a level set (`-a/b` = 0 on the line a = 0 along b) or runs into a pole
    carries no weight where it would be singular: another axis crosses there. A
    sign change through a pole is no root (its slope is unbounded; it adds
    nothing)."""
    if post.logp is None:
        return None
    params = post.compiled.params
    axes = post.grid.axes
    used = [k for k, p in enumerate(params) if p.symbol in expr.free_symbols]
    cont = frozenset(k for k in used if not axes[k].discrete)
    disc = frozenset(k for k in used if axes[k].discrete)
    if not cont or not all(_qualifies(axes[k]) for k in cont):
        return None
    base = param_function(expr, params)
    cache: dict[tuple[int, int], _Prepared | None] = {}

    def prepared(k: int, lev: int) -> _Prepared | None:
        if (k, lev) not in cache:
            cache[k, lev] = _prepare_lines(post, k, lev, base)
        return cache[k, lev]

    def slopes(lines: _Lines, rows: np.ndarray, ur: np.ndarray, lev: int) -> dict:
        """h_j d_j g at the points `ur` of lines `rows`, for every axis j in `cont`."""
        k = lines.k
        th = lines.theta(rows, lines.axis.to_value(ur))
        out = {}
        for j in cont:
            a = axes[j]
            h = lines.line.h if j == k else abs(a.u[1] - a.u[0]) * a.nest ** lev
            du = 1e-6 * h
            if j == k:
                u0 = ur
            else:
                q = lines.others.index(j)
                u0 = a.u[lines.sel[j]][lines.index[q][rows]]
            up, dn = list(th), list(th)
            up[j], dn[j] = a.to_value(u0 + du), a.to_value(u0 - du)
            with np.errstate(all="ignore"):
                out[j] = (np.asarray(base(up), float) - np.asarray(base(dn), float)) / 2e-6
        return out

    def part(k: int, x: float, lev: int) -> float | None:
        got = prepared(k, lev)
        if got is None:
            return None
        lines, cross, total, g = got
        if not total > 0:
            return None
        uk, n_k, h = lines.uk, lines.n_k, lines.line.h
        with np.errstate(invalid="ignore"):
            t = g - x <= 0
        rr, cc = np.nonzero(t[:, :-1] != t[:, 1:])
        if rr.size == 0:
            return 0.0
        rel = _Relation(_Shifted(base, x), "le", cont, disc)
        ur = _roots(rel, lambda kvals, m: lines.theta(rr[m], kvals), uk[cc], uk[cc + 1],
                    g[rr, cc] - x, g[rr, cc + 1] - x, lines.axis.to_value)
        s0 = np.clip(cc - 2, 0, n_k - 6)
        tb = (ur - uk[s0]) / h
        f_root = np.zeros(len(rr))
        for m in range(6):
            f_root += np.polyval(_BASIS[m], tb) * lines.f[rr, s0 + m]
        sl = slopes(lines, rr, ur, lev)
        with np.errstate(all="ignore"):
            norm = sum(v * v for v in sl.values())
            # f w_k / |d_k g| with d_k g in u: (h d_k g) / h over the norm of the h d g
            contrib = cross.full_factor[rr] * np.maximum(f_root, 0.0) * h * np.abs(sl[k]) / norm
        contrib = np.where(np.isfinite(contrib), contrib, 0.0)
        return float(contrib.sum() / total)

    def density(x: float, lev: int) -> float | None:
        total = 0.0
        for k in sorted(cont):
            v = part(k, x, lev)
            if v is None:
                return None
            total += v
        return total

    return density
