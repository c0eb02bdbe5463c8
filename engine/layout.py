"""The log-density laid out on a tensor grid, so that a block costs little more than its
exponentials.

A block of a tensor grid is a range of rows (flat indices over every axis but the last)
times a range of nodes of the last axis (columns). The compiled log-density is split,
once per compiled model, into

- terms in the leading parameters only, summed on the rows;
- terms in the last parameter only, summed on the last axis;
- products ``g(leading) * h(last)`` (a sufficient-statistic term such as
  ``(s1 mu^2 - 2 s2 mu + s3) / sigma^2`` is one), grouped by ``h``;
- the rest, evaluated on the block.

so that over a block ``lp[r, c] = sum_k R[r, k] C[k, c] + rest[r, c]``: one matrix
product with a few columns. Transcendental functions run on the rows and on the last
axis, not on the block. Column 0 of ``R`` is the leading sum (times a row of ones in
``C``), row 1 of ``C`` the last sum (times a column of ones).

Where a block meets anything the split cannot vouch for (a value that is not finite in
a factor, NaN in the product, a reduced term whose cancellation guard fires), it is
evaluated exactly as `posterior.evaluate_block` does, so the answers do not depend on
the layout.
"""

from __future__ import annotations

from dataclasses import dataclass
from typing import Callable, Sequence

import numpy as np
import sympy as sp

from .grid import Block, Grid
from .model import Compiled, ParamTerm, ReducedTerm, _lambdify

#: Leading sub-grids up to this many rows keep their row factors for the whole pass.
ROW_TABLE_LIMIT = 1 << 20


# ---------------------------------------------------------------------------
# pieces of the log-density

class _Fn:
    """A compiled piece: ``fn(*theta[index], *stats)``, broadcast to the points."""

    def __init__(self, fn: Callable, index: tuple[int, ...], stats: tuple[float, ...] = ()):
        self.fn = fn
        self.index = index
        self.stats = stats

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        n = theta[0].shape[0]
        with np.errstate(all="ignore"):
            out = self.fn(*[theta[i] for i in self.index], *self.stats)
        return np.broadcast_to(np.asarray(out, float), (n,))


class _Mask(_Fn):
    """A condition as a log-density piece: 0 where it holds, -inf where not."""

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        n = theta[0].shape[0]
        with np.errstate(all="ignore"):
            ok = self.fn(*[theta[i] for i in self.index], *self.stats)
        ok = np.broadcast_to(np.asarray(ok, bool), (n,))
        return np.where(ok, 0.0, -np.inf)


@dataclass(frozen=True)
class Piece:
    """An additive piece of the log-density and the parameters it reads.

    Attributes
    ----------
    fn : callable
        ``fn(theta) -> (n,)`` on flat arrays, one per parameter (those it does not
        read may be anything of the right length).
    params : frozenset of int
    """

    fn: Callable
    params: frozenset


@dataclass(frozen=True)
class Outer:
    """``g(leading) * h(last)``: `g` on the rows, `h` on the last axis."""

    g: Callable
    h: Callable


@dataclass(frozen=True)
class Guard:
    """A reduced term's cancellation check as separated sums of magnitudes: where
    their bound over a block stays under `limit`, no point of the block needs its
    row-wise sum."""

    lead: tuple[Callable, ...]
    last: tuple[Callable, ...]
    outer: tuple[Outer, ...]
    limit: float


@dataclass(frozen=True)
class Layout:
    """The log-density of a compiled model split for tensor blocks (see the module).

    Attributes
    ----------
    lead, last : tuple of Piece
        Pieces in the leading parameters only, and in the last one only.
    outer : tuple of Outer
    rest : tuple of Piece
    guards : tuple of Guard
    """

    lead: tuple[Piece, ...]
    last: tuple[Piece, ...]
    outer: tuple[Outer, ...]
    rest: tuple[Piece, ...]
    guards: tuple[Guard, ...]


def _term_params(t) -> frozenset:
    """The parameter indices a compiled term reads."""
    if isinstance(t, ParamTerm):
        s = set(t.fn.index)
        if t.conds is not None:
            s |= set(t.conds.index)
        return frozenset(s)
    if isinstance(t, ReducedTerm):
        return frozenset(t.index)
    if hasattr(t, "args"):          # TruncationTerm
        return frozenset().union(*[set(a.index) for a in t.args]) if t.args else frozenset()
    return frozenset(t.index)       # RowTerm


@dataclass
class _Split:
    """An expression as lead + last + sum of g * h + rest (sympy, still)."""

    lead: list
    last: list
    outer: dict
    rest: list


def _split(expr: sp.Expr, lead: set, last: sp.Symbol) -> _Split:
    out = _Split([], [], {}, [])
    allp = lead | {last}
    for term in sp.Add.make_args(expr):
        ps = term.free_symbols & allp
        if last not in ps:
            out.lead.append(term)
            continue
        if ps == {last}:
            out.last.append(term)
            continue
        g, h, mixed = [], [], False
        for f in sp.Mul.make_args(term):
            fs = f.free_symbols & allp
            if last not in fs:
                g.append(f)
            elif fs == {last}:
                h.append(f)
            else:
                mixed = True
                break
        if mixed:
            out.rest.append(term)
        else:
            out.outer.setdefault(sp.Mul(*h), []).append(sp.Mul(*g))
    return out


class _Builder:
    """Gathers the pieces of every term of a compiled model."""

    def __init__(self, d: int):
        self.last_index = d - 1
        self.lead: list[Piece] = []
        self.last: list[Piece] = []
        self.outer: dict = {}      # h expression (with its args) -> list of g pieces
        self.rest: list[Piece] = []
        self.guards: list[Guard] = []

    # -- whole terms -------------------------------------------------------
    def term(self, t) -> None:
        ps = _term_params(t)
        if self.last_index not in ps:
            self.lead.append(Piece(t, ps))
        elif ps == {self.last_index}:
            self.last.append(Piece(t, ps))
        elif not self._separate(t):
            self.rest.append(Piece(t, ps))

    def _separate(self, t) -> bool:
        if isinstance(t, ParamTerm):
            return self._separate_param(t)
        if isinstance(t, ReducedTerm):
            return self._separate_reduced(t)
        return False

    # -- split terms -------------------------------------------------------
    def _symbols(self, index: tuple[int, ...]):
        tp = [sp.Symbol(f"_t{k}", real=True) for k in range(len(index))]
        where = {s: i for s, i in zip(tp, index)}
        last = next((s for s, i in where.items() if i == self.last_index), None)
        return where, last

    def _fn(self, e: sp.Expr, where: dict, stats: tuple, mask: bool = False) -> Piece:
        ssyms = [sp.Symbol(f"_s{j}", real=True) for j in range(len(stats))]
        tsyms = sorted((s for s in e.free_symbols if s in where), key=lambda s: s.name)
        fn = _lambdify(tsyms + ssyms, e)
        index = tuple(where[s] for s in tsyms)
        cls = _Mask if mask else _Fn
        return Piece(cls(fn, index, stats), frozenset(index))

    def _conds(self, cond: sp.Basic, where: dict, stats: tuple) -> None:
        for c in sp.And.make_args(cond):
            p = self._fn(c, where, stats, mask=True)
            self._place(p)

    def _place(self, p: Piece) -> None:
        if self.last_index not in p.params:
            self.lead.append(p)
        elif p.params == {self.last_index}:
            self.last.append(p)
        else:
            self.rest.append(p)

    def _add_split(self, sp_: _Split, where: dict, stats: tuple) -> None:
        if sp_.lead:
            self.lead.append(self._fn(sp.Add(*sp_.lead), where, stats))
        if sp_.last:
            self.last.append(self._fn(sp.Add(*sp_.last), where, stats))
        for h, gs in sp_.outer.items():
            key = (h, tuple(sorted((s.name, where[s]) for s in h.free_symbols if s in where)),
                   stats if h.free_symbols - set(where) else ())
            entry = self.outer.setdefault(key, [self._fn(h, where, stats), []])
            entry[1].append(self._fn(sp.Add(*gs), where, stats))
        if sp_.rest:
            self.rest.append(self._fn(sp.Add(*sp_.rest), where, stats))

    def _separate_param(self, t: ParamTerm) -> bool:
        src = t.fn.source
        if src is None or (t.conds is not None and t.conds.source is None):
            return False
        # the term is -inf wherever its conditions fail, NaN or not: a NaN in the
        # split sends the block to the exact evaluation, which keeps that rule
        where, last = self._symbols(t.fn.index)
        if last is None:
            self._place(Piece(t.fn, frozenset(t.fn.index)))
        else:
            self._add_split(_split(src, set(where) - {last}, last), where, ())
        if t.conds is not None:
            cw, _ = self._symbols(t.conds.index)
            self._conds(t.conds.source, cw, ())
        return True

    def _separate_reduced(self, t: ReducedTerm) -> bool:
        if t.source is None or (t.conds is not None and t.cond_source is None):
            return False
        where, last = self._symbols(t.index)
        if last is None:
            return False
        split = _split(t.source, set(where) - {last}, last)
        guard = None
        if t.magnitude is not None:
            # the magnitude is the sum of the terms' absolute values: |g h| = |g| |h|
            if split.rest:
                return False

            def absum(terms):
                return (self._fn(sp.Add(*[sp.Abs(e) for e in terms]), where, t.stats).fn,) \
                    if terms else ()
            outer = tuple(Outer(absum(gs)[0], self._fn(sp.Abs(h), where, t.stats).fn)
                          for h, gs in split.outer.items())
            guard = Guard(absum(split.lead), absum(split.last), outer, t.tol / 2.2e-16)
        self._add_split(split, where, t.stats)
        if t.cond_source is not None:
            self._conds(t.cond_source, where, t.stats)
        if guard is not None:
            self.guards.append(guard)
        return True

    def layout(self) -> Layout:
        outer = []
        for h, gs in self.outer.values():
            outer.append(Outer(_Sum(tuple(g.fn for g in gs)), h.fn))
        return Layout(tuple(self.lead), tuple(self.last), tuple(outer), tuple(self.rest),
                      tuple(self.guards))


class _Sum:
    """The sum of several pieces on the same points."""

    def __init__(self, fns: tuple[Callable, ...]):
        self.fns = fns

    def __call__(self, theta):
        out = np.array(self.fns[0](theta), float)
        for f in self.fns[1:]:
            out = out + f(theta)
        return out


def layout(compiled: Compiled) -> Layout:
    """The split of `compiled`'s log-density (cached on the compiled model, keyed on the
    kinds of its terms: `Compiled.verified` may swap a reduced term for its row-wise
    form, and shares the cache)."""
    key = ("layout",) + tuple(tuple(type(t).__name__ for t in p.terms) for p in compiled.likelihood)
    got = compiled._cache.get(key)
    if got is None:
        b = _Builder(compiled.dims)
        for t in compiled.prior_terms:
            b.term(t)
        for part in compiled.likelihood:
            for t in part.terms:
                b.term(t)
        got = b.layout()
        compiled._cache[key] = got
    return got


# ---------------------------------------------------------------------------
# a layout on a grid

def _dummy_theta(d: int, n: int, fill: dict[int, np.ndarray]) -> list[np.ndarray]:
    z = np.zeros(n)
    return [fill.get(i, z) for i in range(d)]


@dataclass(frozen=True)
class RowFactors:
    """The row side of a block.

    Attributes
    ----------
    R : ndarray, shape (rows, K)
    clean : bool
        Every factor is finite but the leading sum, which is at worst -inf.
    neginf : bool
        The leading sum is -inf somewhere.
    bounds : tuple of float
        Per guard, the largest magnitude its row side reaches (one per sum).
    """

    R: np.ndarray
    clean: bool
    neginf: bool
    bounds: tuple


class OnGrid:
    """A `Layout` evaluated on a grid: the last axis's factors once, the rows' factors
    on demand (for the whole leading grid at once when it is small)."""

    def __init__(self, compiled: Compiled, grid: Grid, lay: Layout):
        self.compiled = compiled
        self.grid = grid
        self.lay = lay
        self.d = len(grid.axes)
        last = grid.axes[-1]
        self.K = 2 + len(lay.outer)
        n = last.n
        th = _dummy_theta(self.d, n, {self.d - 1: last.values})
        C = np.empty((self.K, n))
        C[0] = 1.0
        C[1] = _total([p.fn for p in lay.last], th, n)
        for k, o in enumerate(lay.outer):
            C[2 + k] = o.h(th)
        self.C = C
        with np.errstate(invalid="ignore"):
            self.cols_clean = bool(np.all(np.isfinite(C[2:])) and
                                   not np.any(np.isnan(C[1]) | np.isposinf(C[1])))
        self.cols_neginf = bool(np.any(np.isneginf(C[1])))
        self.col_bounds = tuple(self._col_bound(g, th, n) for g in lay.guards)
        self.lead_shape = grid.lead_shape
        self.n_lead = grid.size // n
        self._table = self.rows_of(0, self.n_lead) if self.n_lead <= ROW_TABLE_LIMIT else None

    def _col_bound(self, g: Guard, th, n) -> tuple:
        last = max((float(np.max(np.abs(f(th)))) for f in g.last), default=0.0)
        outer = tuple(float(np.max(np.abs(o.h(th)))) for o in g.outer)
        return last, outer

    def lead_theta(self, r0: int, r1: int) -> list[np.ndarray]:
        """Per parameter, the value at rows ``r0 .. r1-1`` (the last: zeros)."""
        n = r1 - r0
        if self.d == 1:
            return [np.zeros(n)]
        idx = np.unravel_index(np.arange(r0, r1), self.lead_shape)
        return _dummy_theta(self.d, n, {i: a.values[ix] for i, (a, ix) in
                                        enumerate(zip(self.grid.axes[:-1], idx))})

    def rows_of(self, r0: int, r1: int) -> RowFactors:
        n = r1 - r0
        th = self.lead_theta(r0, r1)
        R = np.empty((n, self.K))
        R[:, 0] = self.compiled.prior_const + _total([p.fn for p in self.lay.lead], th, n)
        R[:, 1] = 1.0
        for k, o in enumerate(self.lay.outer):
            R[:, 2 + k] = o.g(th)
        with np.errstate(invalid="ignore"):
            clean = bool(np.all(np.isfinite(R[:, 2:])) and
                         not np.any(np.isnan(R[:, 0]) | np.isposinf(R[:, 0])))
        neginf = bool(np.any(np.isneginf(R[:, 0])))
        bounds = tuple(self._row_bound(g, th) for g in self.lay.guards)
        return RowFactors(R, clean, neginf, bounds)

    @staticmethod
    def _row_bound(g: Guard, th) -> tuple:
        lead = sum(float(np.max(np.abs(f(th)))) for f in g.lead) if g.lead else 0.0
        outer = tuple(np.abs(o.g(th)) for o in g.outer)
        return lead, outer

    def rows(self, r0: int, r1: int) -> RowFactors:
        if self._table is None:
            return self.rows_of(r0, r1)
        t = self._table
        bounds = tuple((lead, tuple(o[r0:r1] for o in outer)) for lead, outer in t.bounds)
        return RowFactors(t.R[r0:r1], t.clean, t.neginf, bounds)

    def guarded(self, rf: RowFactors) -> bool:
        """Whether every guard's bound over the block stays under its limit."""
        for g, (lead, outer_r), (last, outer_c) in zip(self.lay.guards, rf.bounds,
                                                        self.col_bounds):
            b = lead + last + sum(float(np.max(r)) * c for r, c in zip(outer_r, outer_c))
            if not b <= g.limit:
                return False
        return True

    def block(self, blk: Block) -> tuple[np.ndarray | None, bool]:
        """The log-density over `blk`, shape (rows, cols), and whether it may be -inf
        somewhere; None where the block must be evaluated exactly instead."""
        rf = self.rows(blk.r0, blk.r1)
        if not (rf.clean and self.cols_clean) or (self.lay.guards and not self.guarded(rf)):
            return None, True
        lp = rf.R @ self.C[:, blk.c0:blk.c1]
        neginf = rf.neginf or self.cols_neginf
        for p in self.lay.rest:
            v = self._rest(p, blk)
            neginf = neginf or bool(np.any(np.isneginf(v)))
            lp += v
        return lp, neginf

    def _rest(self, p: Piece, blk: Block) -> np.ndarray:
        """A piece on the block, evaluated once per distinct row of the leading
        parameters it reads."""
        rows, cols = blk.shape
        lead = sorted(i for i in p.params if i != self.d - 1)
        last = self.grid.axes[-1]
        cv = last.values[blk.c0:blk.c1]
        idx = np.unravel_index(np.arange(blk.r0, blk.r1), self.lead_shape)
        key = np.ravel_multi_index(tuple(idx[i] for i in lead),
                                   tuple(self.lead_shape[i] for i in lead))
        uniq, inv = np.unique(key, return_inverse=True)
        sub = np.unravel_index(uniq, tuple(self.lead_shape[i] for i in lead))
        nu = uniq.size
        fill = {i: np.repeat(self.grid.axes[i].values[s], cols) for i, s in zip(lead, sub)}
        fill[self.d - 1] = np.tile(cv, nu)
        v = np.asarray(p.fn(_dummy_theta(self.d, nu * cols, fill)), float).reshape(nu, cols)
        return v if nu == rows else v[inv.reshape(-1)]


def _total(fns: Sequence[Callable], theta, n: int) -> np.ndarray:
    out = np.zeros(n)
    with np.errstate(all="ignore"):
        for f in fns:
            out = out + f(theta)
    return out


def on_grid(compiled: Compiled, grid: Grid) -> OnGrid:
    """`compiled`'s layout evaluated on `grid`."""
    return OnGrid(compiled, grid, layout(compiled))
