"""Parameters, priors, likelihood terms and derived quantities; compilation.

A `Model` is an immutable description: each change returns a new one, so that
undo, what-if layers and model keeps are plain values. `compile_model` turns a
model and its data into a `Compiled` log-density that is vectorised over grid
points (numpy), built once with sympy's ``lambdify`` and common-subexpression
elimination. Data stay separate from parameters in the compiled form: sums over
rows are reduced to sufficient statistics where the algebra allows it, and are
otherwise evaluated with the rows as a vectorised axis in bounded chunks.
"""

from __future__ import annotations

import math
from dataclasses import dataclass, field, replace
from typing import Callable, Sequence

import numpy as np
import sympy as sp

from . import families as fam
from . import special as S
from .data import DataSet
from .errors import DataError, FormulaError, ModelError
from .expr import check_name
from .revision import next_revision

#: Largest number of values a discrete parameter may take.
MAX_DISCRETE_VALUES = 1_000_000
#: Budget, in float64 cells, for one chunk of (grid points x data rows): 2 MiB arrays,
#: which stay in the caches (a Student-t likelihood over 10,000 rows sums about 20%
#: faster than with chunks of 2^21 cells; tests/bench_cost_check.py).
ROW_CHUNK_CELLS = 1 << 18

KINDS = ("real", "positive", "unit", "interval", "int", "set")


# ---------------------------------------------------------------------------
# declarations

@dataclass(frozen=True)
class Param:
    """A parameter and its domain.

    Attributes
    ----------
    name : str
    kind : str
        One of `KINDS`.
    lo, hi : float
        Domain bounds (``-inf`` / ``inf`` where unbounded).
    values : tuple of float or None
        The values of a discrete parameter (``int`` and ``set``).
    points : int or None
        The number of grid points asked for, if any.
    """

    name: str
    kind: str
    lo: float = -math.inf
    hi: float = math.inf
    values: tuple[float, ...] | None = None
    points: int | None = None

    @property
    def discrete(self) -> bool:
        return self.kind in ("int", "set")

    @property
    def bounded(self) -> bool:
        return math.isfinite(self.lo) and math.isfinite(self.hi)

    @property
    def symbol(self) -> sp.Symbol:
        return sp.Symbol(self.name, real=True)

    def describe(self) -> str:
        if self.kind == "real":
            dom = "real"
        elif self.kind == "positive":
            dom = "positive"
        elif self.kind == "unit":
            dom = "unit (0 to 1)"
        elif self.kind == "interval":
            dom = f"in {_g(self.lo)} {_g(self.hi)}"
        elif self.kind == "int":
            dom = f"int {_g(self.lo)} {_g(self.hi)}"
        else:
            dom = "set " + " ".join(_g(v) for v in self.values or ())
        if self.points:
            dom += f" points {self.points}"
        return dom

    def log_uniform(self) -> float | None:
        """Log density of the uniform prior on the domain, or None if unbounded."""
        if self.discrete:
            return -math.log(len(self.values or ()))
        if not self.bounded:
            return None
        return -math.log(self.hi - self.lo)


def _g(v: float) -> str:
    return f"{v:g}"


def make_param(name: str, kind: str, *, lo: float | None = None, hi: float | None = None,
               values: Sequence[float] | None = None, points: int | None = None) -> Param:
    """Build and check a `Param`.

    Raises
    ------
    ModelError
        Unknown kind, bad bounds, empty or too large a set of values, or a bad
        number of points.
    """
    try:
        check_name(name, "parameter name")
    except FormulaError as exc:
        raise ModelError(str(exc)) from None
    if points is not None and (int(points) != points or points < 1 or points > 10**7):
        raise ModelError(f"`points` for `{name}` must be a whole number from 1 to 10,000,000")
    if kind == "real":
        return Param(name, kind, points=points)
    if kind == "positive":
        return Param(name, kind, 0.0, math.inf, points=points)
    if kind == "unit":
        return Param(name, kind, 0.0, 1.0, points=points)
    if kind == "interval":
        if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi)):
            raise ModelError(f"`{name}`: `in LO HI` needs two finite numbers")
        if not lo < hi:
            raise ModelError(f"`{name}`: `in {lo:g} {hi:g}` needs LO < HI")
        return Param(name, kind, float(lo), float(hi), points=points)
    if kind == "int":
        if lo is None or hi is None or not (math.isfinite(lo) and math.isfinite(hi)):
            raise ModelError(f"`{name}`: `int LO HI` needs two whole numbers")
        if lo != int(lo) or hi != int(hi):
            raise ModelError(f"`{name}`: `int {lo:g} {hi:g}` needs whole numbers")
        if not lo <= hi:
            raise ModelError(f"`{name}`: `int {lo:g} {hi:g}` needs LO <= HI")
        count = int(hi) - int(lo) + 1
        if count > MAX_DISCRETE_VALUES:
            raise ModelError(f"`{name}`: {count:,} values; the limit is {MAX_DISCRETE_VALUES:,}")
        vals = tuple(float(v) for v in range(int(lo), int(hi) + 1))
        return Param(name, kind, float(lo), float(hi), vals, points=points)
    if kind == "set":
        if not values:
            raise ModelError(f"`{name}`: `set` needs at least one value")
        for v in values:
            if not math.isfinite(v):
                raise ModelError(f"`{name}`: set value `{v}` is not a finite number")
        vals = tuple(sorted(set(float(v) for v in values)))
        if len(vals) > MAX_DISCRETE_VALUES:
            raise ModelError(f"`{name}`: too many values")
        return Param(name, kind, vals[0], vals[-1], vals, points=points)
    raise ModelError(f"unknown domain `{kind}`; use real, positive, unit, in LO HI, "
                     "int LO HI or set V1 V2 ...")


@dataclass(frozen=True)
class Prior:
    """A named prior ``prior NAME ~ FAMILY(args)`` or a free ``prior log EXPR``."""

    target: str | None
    family: str | None
    args: tuple[sp.Expr, ...] = ()
    log: sp.Expr | None = None
    text: str = ""


@dataclass(frozen=True)
class Likelihood:
    """``likelihood COL ~ FAMILY(args) [censored FLAG]`` or ``likelihood log EXPR``."""

    column: str | None
    family: str | None
    args: tuple[sp.Expr, ...] = ()
    censor: str | None = None
    log: sp.Expr | None = None
    text: str = ""


@dataclass(frozen=True)
class Let:
    """A derived quantity ``let NAME = EXPR``."""

    name: str
    expr: sp.Expr
    text: str = ""


@dataclass(frozen=True)
class Model:
    """The model as declared. Every change returns a new `Model`, with a new
    `revision` (never reused, unlike ``id()``; not part of equality)."""

    params: tuple[Param, ...] = ()
    priors: tuple[Prior, ...] = ()
    likelihoods: tuple[Likelihood, ...] = ()
    lets: tuple[Let, ...] = ()
    revision: int = field(init=False, default_factory=next_revision, compare=False, repr=False)

    # -- lookups ---------------------------------------------------------
    def param(self, name: str) -> Param:
        for p in self.params:
            if p.name == name:
                return p
        raise ModelError(f"no parameter `{name}`")

    def has_param(self, name: str) -> bool:
        return any(p.name == name for p in self.params)

    def let(self, name: str) -> Let | None:
        for l_ in self.lets:
            if l_.name == name:
                return l_
        return None

    @property
    def param_names(self) -> tuple[str, ...]:
        return tuple(p.name for p in self.params)

    def symbols(self, data: DataSet | None = None) -> dict[str, sp.Symbol]:
        """The names a formula may use: parameters, lets and data columns."""
        out = {p.name: p.symbol for p in self.params}
        out.update({l_.name: sp.Symbol(l_.name, real=True) for l_ in self.lets})
        if data is not None:
            out.update({n: sp.Symbol(n, real=True) for n in data.names})
        return out

    def taken(self, name: str, data: DataSet | None = None) -> str | None:
        """What `name` already names, if anything."""
        if self.has_param(name):
            return "parameter"
        if self.let(name) is not None:
            return "let"
        if data is not None and name in data:
            return "data column"
        return None

    # -- changes ---------------------------------------------------------
    def with_param(self, p: Param, data: DataSet | None = None) -> tuple["Model", bool]:
        other = self.taken(p.name, data)
        if other not in (None, "parameter"):
            raise ModelError(f"`{p.name}` is already a {other}")
        ps = list(self.params)
        for i, q in enumerate(ps):
            if q.name == p.name:
                ps[i] = p
                return replace(self, params=tuple(ps)), True
        return replace(self, params=self.params + (p,)), False

    def with_prior(self, pr: Prior) -> tuple["Model", bool]:
        if pr.target is not None:
            self.param(pr.target)
            ps = list(self.priors)
            for i, q in enumerate(ps):
                if q.target == pr.target:
                    ps[i] = pr
                    return replace(self, priors=tuple(ps)), True
        return replace(self, priors=self.priors + (pr,)), False

    def with_likelihood(self, lk: Likelihood) -> tuple["Model", bool]:
        if lk.column is not None:
            ls = list(self.likelihoods)
            for i, q in enumerate(ls):
                if q.column == lk.column:
                    ls[i] = lk
                    return replace(self, likelihoods=tuple(ls)), True
        return replace(self, likelihoods=self.likelihoods + (lk,)), False

    def with_let(self, lt: Let, data: DataSet | None = None) -> tuple["Model", bool]:
        other = self.taken(lt.name, data)
        if other not in (None, "let"):
            raise ModelError(f"`{lt.name}` is already a {other}")
        if sp.Symbol(lt.name, real=True) in expand_lets(lt.expr, self).free_symbols:
            raise ModelError(f"let `{lt.name}` refers to itself")
        ls = list(self.lets)
        for i, q in enumerate(ls):
            if q.name == lt.name:
                ls[i] = lt
                return replace(self, lets=tuple(ls)), True
        return replace(self, lets=self.lets + (lt,)), False


def expand_lets(expr: sp.Basic, model: Model) -> sp.Basic:
    """Replace let names by their definitions, recursively."""
    if not model.lets:
        return expr
    table = {sp.Symbol(l_.name, real=True): l_.expr for l_ in model.lets}
    for _ in range(len(table) + 1):
        new = expr.xreplace(table)
        if new == expr:
            return new
        expr = new
    return expr


# ---------------------------------------------------------------------------
# compiled pieces

_MODULES = [S.NAMESPACE, "scipy", "numpy"]


def _lambdify(args: Sequence[sp.Symbol], expr: sp.Basic) -> Callable:
    # the generated code holds only placeholder names (_t0, _c0, _s0) and numbers:
    # no text a user typed reaches it
    return sp.lambdify(list(args), expr, modules=_MODULES, cse=True, printer=S.code_printer())


def _placeholders(prefix: str, n: int) -> list[sp.Symbol]:
    # a leading underscore: no user name can take it (names start with a letter)
    return [sp.Symbol(f"_{prefix}{i}", real=True) for i in range(n)]


def _as_array(v, n: int, dtype=float) -> np.ndarray:
    a = np.asarray(v, dtype=dtype)
    if a.shape != (n,):
        a = np.broadcast_to(a, (n,)) if a.ndim <= 1 else a.reshape(n)
    return a


@dataclass(frozen=True)
class ParamFunction:
    """A compiled function of the parameters, vectorised over grid points."""

    fn: Callable
    index: tuple[int, ...]  # which parameters it reads, in order
    boolean: bool = False
    #: The expression `fn` was made from, in placeholders ``_t0, _t1, ...`` standing
    #: for the parameters of `index` (for laying the pass out on a tensor grid).
    source: sp.Basic | None = field(default=None, repr=False, compare=False)

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        n = theta[0].shape[0] if theta else 1
        with np.errstate(all="ignore"):
            out = self.fn(*[theta[i] for i in self.index])
        return _as_array(out, n, bool if self.boolean else float)


def param_function(expr: sp.Basic, params: Sequence[Param]) -> ParamFunction:
    """Compile `expr` (in parameter symbols only) for evaluation on grid points."""
    syms = [p.symbol for p in params]
    used = [i for i, s in enumerate(syms) if s in expr.free_symbols]
    ph = _placeholders("t", len(used))
    e = expr.xreplace({syms[i]: ph[k] for k, i in enumerate(used)})
    boolean = isinstance(expr, sp.logic.boolalg.Boolean) and not isinstance(expr, sp.Expr)
    return ParamFunction(_lambdify(ph, e), tuple(used), boolean, e)


@dataclass(frozen=True)
class RowTerm:
    """A sum over data rows of a per-row expression, evaluated row-wise."""

    fn: Callable          # fn(*theta_used, *cols) -> (B, R)
    index: tuple[int, ...]
    columns: tuple[np.ndarray, ...]  # each (R,)
    conds: Callable | None  # same arguments -> bool (B, R)

    @property
    def rows(self) -> int:
        return int(self.columns[0].shape[0]) if self.columns else 1

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        n = theta[0].shape[0] if theta else 1
        R = self.rows
        out = np.zeros(n)
        step = max(1, ROW_CHUNK_CELLS // max(R, 1))
        cols = [c[None, :] for c in self.columns]
        with np.errstate(all="ignore"):
            for a in range(0, n, step):
                b = min(n, a + step)
                th = [theta[i][a:b, None] for i in self.index]
                v = np.broadcast_to(np.asarray(self.fn(*th, *cols), float), (b - a, R))
                s = v.sum(axis=1)
                if self.conds is not None:
                    ok = np.broadcast_to(np.asarray(self.conds(*th, *cols), bool), (b - a, R))
                    s = np.where(ok.all(axis=1), s, -np.inf)
                out[a:b] = s
        return out


@dataclass(frozen=True)
class StatDef:
    """How one sufficient statistic is made from the data columns."""

    kind: str              # "sum", "sum+" (a sum whose terms must be >= 0), "max", "min"
    fn: Callable           # fn(*columns) -> (rows,)
    columns: tuple[str, ...]

    def value(self, data: dict[str, np.ndarray], rows: int) -> float:
        with np.errstate(all="ignore"):
            v = np.broadcast_to(np.asarray(self.fn(*[data[c] for c in self.columns]), float),
                                (rows,))
        if not np.all(np.isfinite(v)) or (self.kind == "sum+" and np.any(v < 0)):
            raise ValueError("statistic does not apply to these rows")
        if self.kind == "max":
            return float(np.max(v))
        if self.kind == "min":
            return float(np.min(v))
        return math.fsum(v)


@dataclass(frozen=True)
class ReducedTerm:
    """A sum over rows reduced to sufficient statistics."""

    fn: Callable          # fn(*theta_used, *stats) -> (B,)
    index: tuple[int, ...]
    stats: tuple[float, ...]
    conds: Callable | None
    fallback: RowTerm      # the same sum done row by row, to verify against
    defs: tuple[StatDef, ...] = ()
    #: Where `fallback` is a stable form (a family's): the sum of the magnitudes of the
    #: reduced form's terms, same arguments as `fn`. Points where the reduced sum would
    #: lose more than about `tol` to cancellation are summed row by row instead.
    magnitude: Callable | None = None
    tol: float = 1e-8
    #: `fn`, its conditions and `magnitude` as expressions in ``_t0, ...`` (the
    #: parameters of `index`) and ``_s0, ...`` (the statistics), for the tensor pass.
    source: sp.Expr | None = field(default=None, repr=False, compare=False)
    cond_source: sp.Basic | None = field(default=None, repr=False, compare=False)
    magnitude_source: sp.Expr | None = field(default=None, repr=False, compare=False)

    def restat(self, data: dict[str, np.ndarray], rows: int) -> "ReducedTerm":
        """The same term over other rows (a dict of column arrays of length `rows`).

        Raises ValueError where a statistic does not apply (then evaluate those rows
        with a fresh compile instead)."""
        # the row-wise form holds the original rows: it cannot stand in for these
        return replace(self, stats=tuple(d.value(data, rows) for d in self.defs),
                       magnitude=None, magnitude_source=None)

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        n = theta[0].shape[0] if theta else 1
        th = [theta[i] for i in self.index]
        with np.errstate(all="ignore"):
            out = _as_array(self.fn(*th, *self.stats), n).copy()
            if self.magnitude is not None:
                mag = _as_array(self.magnitude(*th, *self.stats), n)
                lost = ~(mag * 2.2e-16 <= self.tol)
                if lost.any():
                    out[lost] = self.fallback([t[lost] for t in theta])
            if self.conds is not None:
                ok = _as_array(self.conds(*th, *self.stats), n, bool)
                out[~ok] = -np.inf
        return out


@dataclass(frozen=True)
class ParamTerm:
    """A term in the parameters only (a prior, a free term with no data)."""

    fn: ParamFunction
    conds: ParamFunction | None

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        out = self.fn(theta).copy()
        if self.conds is not None:
            out[~self.conds(theta)] = -np.inf
        return out


@dataclass(frozen=True)
class TruncationTerm:
    """``-log`` of the prior mass on the domain, where it depends on parameters."""

    family: str
    args: tuple[ParamFunction, ...]
    lo: float
    hi: float
    values: tuple[float, ...] | None

    def __call__(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        f = fam.get(self.family)
        argv = [a(theta) for a in self.args]
        with np.errstate(all="ignore"):
            if self.values is not None:
                return -np.log(_domain_mass(f, argv, self.lo, self.hi, self.values))
            return -_log_interval_mass(f, argv, self.lo, self.hi)


def _domain_mass(f: fam.Family, argv, lo: float, hi: float, values) -> np.ndarray:
    if values is not None:
        dist = f.scipy(*argv)
        vals = np.asarray(values, float)
        shape = np.broadcast(*[np.asarray(a) for a in argv]).shape if argv else ()
        total = np.zeros(shape)
        for v in vals:
            total = total + (dist.pmf(v) if f.discrete else dist.pdf(v))
        return total
    with np.errstate(all="ignore"):
        return np.exp(_log_interval_mass(f, argv, lo, hi))


def _log_interval_mass(f: fam.Family, argv, lo: float, hi: float) -> np.ndarray:
    """``log P(lo <= X <= hi)`` under family `f` with arguments `argv`.

    A difference of cdfs is 1 - 1 = 0 when the interval lies in the upper tail
    (a prior centred far below a bounded domain); there the difference of
    survival functions keeps its digits, and both are taken in log space."""
    dist = f.scipy(*argv)
    if f.discrete and math.isfinite(lo):
        lo = lo - 1   # P(X <= hi) - P(X <= lo - 1)
    shape = np.broadcast(*[np.asarray(a) for a in argv]).shape if argv else ()

    def log_diff(a, b):
        # log(exp(a) - exp(b)) for a >= b
        a, b = np.broadcast_to(a, shape), np.broadcast_to(b, shape)
        out = a + np.log1p(-np.exp(b - a))
        return np.where(np.isneginf(a), -np.inf, out)

    lower = log_diff(dist.logcdf(hi) if math.isfinite(hi) else 0.0,
                     dist.logcdf(lo) if math.isfinite(lo) else -np.inf)
    upper = log_diff(dist.logsf(lo) if math.isfinite(lo) else 0.0,
                     dist.logsf(hi) if math.isfinite(hi) else -np.inf)
    in_upper_tail = (dist.cdf(lo) > 0.5) if math.isfinite(lo) else np.zeros(shape, bool)
    return np.where(in_upper_tail, upper, lower)


Term = ParamTerm | RowTerm | ReducedTerm | TruncationTerm


@dataclass(frozen=True)
class LikelihoodPart:
    """The compiled terms of one likelihood, with what they came from."""

    key: str                 # the column, or the formula of a free term
    terms: tuple[Term, ...]
    rows: int


@dataclass(frozen=True)
class Curvature:
    """Gradient and Hessian of the log posterior in the continuous parameters.

    Attributes
    ----------
    gradient : ndarray, shape (d,)
    hessian : ndarray, shape (d, d)
    """

    gradient: np.ndarray
    hessian: np.ndarray


@dataclass(frozen=True)
class Compiled:
    """The model's log-density, ready to evaluate on blocks of grid points.

    Attributes
    ----------
    params : tuple of Param
    prior_terms : tuple
        Parameter-dependent prior terms (each maps theta -> (B,)).
    prior_const : float
        The constant part of the log prior (uniform densities, truncation of
        priors with constant arguments).
    likelihood : tuple of LikelihoodPart
    proper : bool
        Whether the prior is proper, so that the evidence is defined.
    improper : tuple of str
        Why it is not, one reason each.
    notes : tuple of str
        What `show model` should say about the compiled form.
    free_prior : bool
        Whether free ``prior log`` terms are present (their normaliser is found
        numerically when every parameter is bounded).
    """

    params: tuple[Param, ...]
    prior_terms: tuple[Term, ...]
    prior_const: float
    likelihood: tuple[LikelihoodPart, ...]
    proper: bool
    improper: tuple[str, ...]
    notes: tuple[str, ...]
    free_prior: bool = False
    model: Model = field(default_factory=Model, repr=False, compare=False)
    #: The log-density as sympy terms, for symbolic derivatives; None where a term
    #: has no symbolic form.
    symbolic: "tuple[SymbolicTerm, ...] | None" = field(default=None, repr=False, compare=False)
    _cache: dict = field(default_factory=dict, repr=False, compare=False)

    def curvature(self, point: dict[str, float]) -> "Curvature | None":
        """Gradient and Hessian of the log posterior in the continuous parameters
        at `point`, found symbolically (sympy), or None where that is not possible
        (a term without derivatives, or values that are not finite)."""
        cont = [p for p in self.params if not p.discrete]
        if self.symbolic is None or not cont:
            return None
        if "curv" not in self._cache:
            self._cache["curv"] = _curvature_functions(self.symbolic, self.params, cont)
        fns = self._cache["curv"]
        if fns is None:
            return None
        d = len(cont)
        g = np.zeros(d)
        H = np.zeros((d, d))
        th = [np.array([point[p.name]], float) for p in self.params]
        with np.errstate(all="ignore"):
            for fn in fns:
                rows = max((len(c) for c in fn.values), default=1)
                targs = [t[:, None] for t in th] + [c[None, :] for c in fn.values]
                gv = [np.sum(np.broadcast_to(np.asarray(f(*targs), float), (1, rows)))
                      for f in fn.grad]
                hv = [np.sum(np.broadcast_to(np.asarray(f(*targs), float), (1, rows)))
                      for f in fn.hess]
                g += np.array(gv)
                k = 0
                for i in range(d):
                    for j in range(i, d):
                        H[i, j] += hv[k]
                        if i != j:
                            H[j, i] += hv[k]
                        k += 1
        if not (np.all(np.isfinite(g)) and np.all(np.isfinite(H))):
            return None
        return Curvature(g, H)

    @property
    def dims(self) -> int:
        return len(self.params)

    def log_prior(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        """Log prior at grid points, shape (B,) (constant part included)."""
        n = theta[0].shape[0] if theta else 1
        out = np.full(n, self.prior_const)
        for t in self.prior_terms:
            out += t(theta)
        return out

    def log_likelihood(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        """Log likelihood at grid points, shape (B,)."""
        n = theta[0].shape[0] if theta else 1
        out = np.zeros(n)
        for part in self.likelihood:
            for t in part.terms:
                out += t(theta)
        return out

    def log_density(self, theta: Sequence[np.ndarray]) -> np.ndarray:
        """Unnormalised log posterior at grid points, shape (B,)."""
        with np.errstate(invalid="ignore"):
            return self.log_prior(theta) + self.log_likelihood(theta)

    def function(self, expr: sp.Basic) -> ParamFunction:
        """Compile an expression of the parameters and lets."""
        e = expand_lets(expr, self.model)
        bad = {s.name for s in e.free_symbols} - {p.name for p in self.params}
        if bad:
            raise ModelError(f"`{sorted(bad)[0]}` is a data column; a question must be about "
                             "parameters and lets")
        return param_function(e, self.params)

    def verified(self, theta: Sequence[np.ndarray], *, tol: float = 1e-8) -> "Compiled":
        """Check reduced sums against row-by-row sums at sample points.

        A reduction to sufficient statistics can lose precision to cancellation
        (large data values, small scales). Where it disagrees with the row-wise
        sum by more than `tol` at sample points near the highest, that term is
        evaluated row by row instead.
        """
        parts = []
        changed = False
        for part in self.likelihood:
            terms = []
            for t in part.terms:
                if isinstance(t, ReducedTerm):
                    a = t(theta)
                    b = t.fallback(theta)
                    good = np.isfinite(b)
                    if not good.any():
                        terms.append(t)
                        continue
                    near = good & (b >= b[good].max() - 50)
                    same_inf = np.array_equal(np.isneginf(a), np.isneginf(b))
                    if not same_inf or np.max(np.abs(a[near] - b[near])) > tol * max(1.0, part.rows ** 0.5):
                        terms.append(t.fallback)
                        changed = True
                        continue
                terms.append(t)
            parts.append(replace(part, terms=tuple(terms)))
        if not changed:
            return self
        return replace(self, likelihood=tuple(parts))

    @property
    def reduced(self) -> bool:
        return any(isinstance(t, ReducedTerm) for p in self.likelihood for t in p.terms)

    @property
    def rows(self) -> int:
        return sum(p.rows for p in self.likelihood)


# ---------------------------------------------------------------------------
# compilation

@dataclass(frozen=True)
class _Conditions:
    """A term's support conditions, sorted by what they read."""

    const: tuple            # nothing: each is true or false once and for all
    data: tuple             # data columns only: checked on every row
    params: tuple           # parameters only
    mixed: tuple            # both


def _split_conds(conds, pset, dset) -> _Conditions:
    const, data_only, param_only, mixed = [], [], [], []
    for c in conds:
        fs = c.free_symbols
        if not fs:
            const.append(c)
        elif fs <= dset:
            data_only.append(c)
        elif fs <= pset:
            param_only.append(c)
        else:
            mixed.append(c)
    return _Conditions(tuple(const), tuple(data_only), tuple(param_only), tuple(mixed))


class _TooBig(Exception):
    pass


def _expand_poly(e: sp.Expr, budget: list[int]) -> sp.Expr:
    """Expand products and small integer powers of sums, but not inside functions."""
    if e.is_Add:
        out = sp.Add(*[_expand_poly(a, budget) for a in e.args])
    elif e.is_Mul:
        out = sp.expand_mul(sp.Mul(*[_expand_poly(a, budget) for a in e.args]), deep=False)
    elif e.is_Pow and e.exp.is_Integer and 2 <= int(e.exp) <= 6 and e.base.is_Add:
        base = _expand_poly(e.base, budget)
        if len(base.args) > 8:
            raise _TooBig
        out = sp.expand_multinomial(sp.Pow(base, e.exp), deep=False)
        out = sp.Add(*[sp.expand_mul(t, deep=False) for t in sp.Add.make_args(out)])
    else:
        return e
    budget[0] -= len(sp.Add.make_args(out))
    if budget[0] < 0:
        raise _TooBig
    return out


def _row_term(expr, conds, psyms, csyms, colvals) -> RowTerm:
    used = [i for i, s in enumerate(psyms) if s in expr.free_symbols or
            any(s in c.free_symbols for c in conds)]
    ucols = [j for j, s in enumerate(csyms) if s in expr.free_symbols or
             any(s in c.free_symbols for c in conds)]
    tp = _placeholders("t", len(used))
    cp = _placeholders("c", len(ucols))
    sub = {psyms[i]: tp[k] for k, i in enumerate(used)}
    sub.update({csyms[j]: cp[k] for k, j in enumerate(ucols)})
    fn = _lambdify(tp + cp, expr.xreplace(sub))
    cfn = _lambdify(tp + cp, sp.And(*conds).xreplace(sub)) if conds else None
    columns = tuple(colvals[j] for j in ucols)
    if not columns:
        # the sum has rows but reads no column: give it a row axis of the right length
        n = len(colvals[0]) if colvals else 1
        columns = (np.zeros(n),)
        cp2 = _placeholders("c", 1)
        fn = _lambdify(tp + cp2, expr.xreplace(sub) + 0 * cp2[0])
        cfn = _lambdify(tp + cp2, sp.And(*conds).xreplace(sub)) if conds else None
    return RowTerm(fn, tuple(used), columns, cfn)


@dataclass(frozen=True)
class _StatRecipe:
    """How a sufficient statistic is made: `kind` (see `StatDef`) over the rows of a
    data expression."""

    kind: str
    expr: sp.Expr


@dataclass(frozen=True)
class Reduction:
    """A sum over rows split into sufficient statistics and a row-wise remainder.

    Attributes
    ----------
    total : sympy expression
        In the parameters and the statistic symbols: the reduced sum.
    stat_symbols : tuple of Symbol
        ``_s0, _s1, ...``, one per statistic.
    stats : tuple of float
        Their values on the rows.
    conds : tuple
        Row conditions reduced to conditions on the statistics.
    remainder : sympy expression
        The per-row part that mixes data and parameters in a way that does not
        separate (0 if none).
    remainder_conds : tuple
        The row conditions left to check row by row.
    recipes : tuple of _StatRecipe
        How each statistic is made from the columns (for new rows).
    """

    total: sp.Expr
    stat_symbols: tuple[sp.Symbol, ...]
    stats: tuple[float, ...]
    conds: tuple
    remainder: sp.Expr
    remainder_conds: tuple
    recipes: tuple[_StatRecipe, ...]


class _Separation:
    """The working state of `_reduce_sum`: statistics made so far and where each
    term and condition of the sum went.

    Attributes
    ----------
    stats, symbols, recipes : lists
        Values, symbols and recipes of the statistics, in the order they were made.
    grouped : dict of sympy expression to list of Symbol
        A parameter factor and the statistics that multiply it.
    extra : list
        Terms in parameters and statistics that do not factor (xlogy of a count).
    remainder : list
        Per-row terms that do not separate.
    const_total, const_terms : float, list
        The sum of the terms that read no parameter, and those terms.
    conds, remainder_conds : lists
        Row conditions reduced to the statistics, and those left row by row.
    """

    def __init__(self, pset: set, csyms: Sequence[sp.Symbol], colvals: Sequence[np.ndarray]):
        self.pset, self.dset = pset, set(csyms)
        self.csyms, self.colvals = csyms, colvals
        self.rows = len(colvals[0]) if colvals else 1
        self.stats: list[float] = []
        self.symbols: list[sp.Symbol] = []
        self.recipes: list[_StatRecipe] = []
        self.grouped: dict[sp.Expr, list[sp.Expr]] = {}
        self.extra: list[sp.Expr] = []
        self.remainder: list[sp.Expr] = []
        self.const_total = 0.0
        self.const_terms: list[sp.Expr] = []
        self.conds: list = []
        self.remainder_conds: list = []
        self._values: dict = {}

    def data_values(self, e: sp.Expr) -> np.ndarray:
        """A data expression's value on every row, shape (rows,)."""
        if e not in self._values:
            csyms = self.csyms
            used = [j for j, s in enumerate(csyms) if s in e.free_symbols]
            cp = _placeholders("c", len(used))
            f = _lambdify(cp, e.xreplace({csyms[j]: cp[k] for k, j in enumerate(used)}))
            with np.errstate(all="ignore"):
                v = np.asarray(f(*[self.colvals[j] for j in used]), float)
            self._values[e] = np.broadcast_to(v, (self.rows,))
        return self._values[e]

    def stat(self, value: float, kind: str, e: sp.Expr) -> sp.Symbol:
        """A new statistic of `value`, made as `kind` of `e` over the rows."""
        s = sp.Symbol(f"_s{len(self.stats)}", real=True)
        self.stats.append(float(value))
        self.symbols.append(s)
        self.recipes.append(_StatRecipe(kind, e))
        return s

    def group(self, factor: sp.Expr, coefficient: sp.Symbol) -> None:
        self.grouped.setdefault(factor, []).append(coefficient)

    def has_reduced(self) -> bool:
        return bool(self.grouped or self.extra or self.conds)


def _reduce_sum(expr, conds, psyms, csyms, colvals) -> Reduction | None:
    """Split sum_rows expr into sufficient statistics and a row-wise remainder,
    term by term and condition by condition; None when nothing separates."""
    try:
        expanded = _expand_poly(expr, [400])
    except _TooBig:
        return None
    sep = _Separation(set(psyms), csyms, colvals)
    for term in sp.Add.make_args(expanded):
        if not _separate_term(term, sep):
            sep.remainder.append(term)
    for c in conds:
        _separate_cond(c, sep)
    if not sep.has_reduced():
        return None
    total = sp.Add(*[sp.Add(*coefs) * b for b, coefs in sep.grouped.items()], *sep.extra)
    total = total + sep.stat(sep.const_total, "sum", sp.Add(*sep.const_terms))
    return Reduction(total, tuple(sep.symbols), tuple(sep.stats), tuple(sep.conds),
                     sp.Add(*sep.remainder), tuple(sep.remainder_conds), tuple(sep.recipes))


def _separate_term(term: sp.Expr, sep: _Separation) -> bool:
    """Reduce one term of the expanded sum to statistics; False where it does not
    separate (it is then summed row by row)."""
    pset, dset = sep.pset, sep.dset
    fs = term.free_symbols
    if not fs & pset:
        # numerically, also for a constant: float() cannot evaluate gammaln(2)
        v = sep.data_values(term)
        if not np.all(np.isfinite(v)):
            return False
        sep.const_total += math.fsum(v)
        sep.const_terms.append(term)
        return True
    if not fs & dset:
        # summed over the rows: the row count is a statistic too
        sep.group(term, sep.stat(float(sep.rows), "sum", sp.Integer(1)))
        return True
    dpart, ppart, mixed = [], [], []
    for f_ in sp.Mul.make_args(term):
        ffs = f_.free_symbols
        if not ffs & dset:
            ppart.append(f_)
        elif not ffs & pset:
            dpart.append(f_)
        else:
            mixed.append(f_)
    if not mixed:
        v = sep.data_values(sp.Mul(*dpart))
        if np.all(np.isfinite(v)):
            sep.group(sp.Mul(*ppart), sep.stat(math.fsum(v), "sum", sp.Mul(*dpart)))
            return True
        return False
    if len(mixed) == 1 and isinstance(mixed[0], (S.xlogy, S.xlog1py)) and not dpart:
        return _separate_xlog(mixed[0], sp.Mul(*ppart), sep)
    return False


def _separate_xlog(f: sp.Expr, factor: sp.Expr, sep: _Separation) -> bool:
    """``factor * xlogy(a, b)`` (or xlog1py) summed over rows, where the rows allow."""
    pset, dset = sep.pset, sep.dset
    a, b = f.args
    fn = type(f)
    if a.free_symbols <= dset and not (b.free_symbols & dset):
        # sum_i xlogy(a_i, b) = xlogy(sum_i a_i, b) when every a_i >= 0
        v = sep.data_values(a)
        if np.all(np.isfinite(v)) and np.all(v >= 0):
            sep.extra.append(factor * fn(sep.stat(math.fsum(v), "sum+", a), b))
            return True
    elif fn is S.xlogy and a.free_symbols <= dset and b.is_Mul:
        # xlogy(a, b_theta * b_data) = xlogy(a, b_theta) + a log(b_data) where
        # b_data > 0 and a >= 0 on every row (a rate times an exposure)
        bp = sp.Mul(*[f_ for f_ in b.args if not (f_.free_symbols & dset)])
        bd = sp.Mul(*[f_ for f_ in b.args if f_.free_symbols & dset])
        if not (bd.free_symbols & pset) and bp != 1:
            va, vb = sep.data_values(a), sep.data_values(bd)
            if np.all(np.isfinite(va)) and np.all(va >= 0) and \
                    np.all(np.isfinite(vb)) and np.all(vb > 0):
                sep.extra.append(factor * fn(sep.stat(math.fsum(va), "sum+", a), bp))
                sep.group(factor, sep.stat(math.fsum(va * np.log(vb)), "sum", a * sp.log(bd)))
                return True
    elif not (a.free_symbols & dset) and b.free_symbols <= dset:
        # xlogy(a_theta, b) = a_theta log(b) where b > 0 on every row (and
        # xlog1py(a_theta, b) = a_theta log1p(b) where b > -1): a shape parameter
        vb = sep.data_values(b)
        ok = np.all(np.isfinite(vb)) and (np.all(vb > 0) if fn is S.xlogy else np.all(vb > -1))
        if ok:
            logs = np.log(vb) if fn is S.xlogy else np.log1p(vb)
            e = sp.log(b) if fn is S.xlogy else S.log1p(b)
            sep.group(factor * a, sep.stat(math.fsum(logs), "sum", e))
            return True
    return False


def _separate_cond(c, sep: _Separation) -> None:
    """A row condition as a condition on a statistic (the largest or smallest data
    value decides), or left to be checked row by row."""
    pset, dset = sep.pset, sep.dset
    if not isinstance(c, sp.core.relational.Relational):
        sep.remainder_conds.append(c)
        return
    lhs, rhs = c.lhs, c.rhs
    if rhs == 0 and lhs.is_Mul and lhs.free_symbols & dset and lhs.free_symbols & pset:
        # theta_part * data_part OP 0 with the data part > 0 on every row is
        # theta_part * min(data part) OP 0 (a rate times an exposure >= 0)
        tp_ = sp.Mul(*[f_ for f_ in lhs.args if not (f_.free_symbols & dset)])
        dp_ = sp.Mul(*[f_ for f_ in lhs.args if f_.free_symbols & dset])
        if not (dp_.free_symbols & pset):
            v = sep.data_values(dp_)
            if np.all(np.isfinite(v)) and np.all(v > 0):
                s = sep.stat(float(np.min(v)), "min", dp_)
                sep.conds.append(c.func(tp_ * s, 0))
                return
    ld, rd = lhs.free_symbols <= dset, rhs.free_symbols <= dset
    lp, rp = not (lhs.free_symbols & dset), not (rhs.free_symbols & dset)
    if ld and rp:
        v = sep.data_values(lhs)
    elif rd and lp:
        v = sep.data_values(rhs)
    else:
        sep.remainder_conds.append(c)
        return
    # data < param for every row: the largest data value decides (and so on)
    big = isinstance(c, (sp.StrictLessThan, sp.LessThan)) == ld
    side = lhs if ld else rhs
    s = sep.stat(float(np.max(v) if big else np.min(v)), "max" if big else "min", side)
    sep.conds.append(c.func(s, rhs) if ld else c.func(lhs, s))


def _sum_terms(expr, conds, params, csyms, colvals, *, reduce: bool = True,
               separable=None) -> list[Term]:
    """The terms of sum_rows expr (with its row conditions). `separable` is the same
    sum written in separable pieces (a family's textbook form), reduced in place of
    `expr` when it reduces whole; `expr` (the stable form) is what is checked against."""
    psyms = [p.symbol for p in params]
    red = _reduce_sum(expr if separable is None else separable, conds, psyms, csyms,
                      colvals) if reduce else None
    if red is not None and separable is not None and red.remainder != 0:
        red = None  # a stable form is not split into reduced and row-wise pieces
    if red is None:
        return [_row_term(expr, conds, psyms, csyms, colvals)]
    fallback = _row_term(expr - red.remainder, [c for c in conds if c not in red.remainder_conds],
                         psyms, csyms, colvals)
    used = [i for i, s in enumerate(psyms) if s in red.total.free_symbols or
            any(s in c.free_symbols for c in red.conds)]
    tp = _placeholders("t", len(used))
    sub = {psyms[i]: tp[k] for k, i in enumerate(used)}
    ssyms = list(red.stat_symbols)
    fn = _lambdify(tp + ssyms, red.total.xreplace(sub))
    cfn = _lambdify(tp + ssyms, sp.And(*red.conds).xreplace(sub)) if red.conds else None
    stat_fns = []
    for r in red.recipes:
        ucols = [j for j, sy in enumerate(csyms) if sy in r.expr.free_symbols]
        cp = _placeholders("c", len(ucols))
        stat_fns.append(StatDef(r.kind, _lambdify(cp, r.expr.xreplace(
            {csyms[j]: cp[k] for k, j in enumerate(ucols)})), tuple(csyms[j].name for j in ucols)))
    mfn = mag = None
    if separable is not None:
        # the reduced textbook form cancels at extreme parameters (a shape of 1e15):
        # its terms' magnitudes say where, and there the stable form is summed instead
        mag = sp.Add(*[sp.Abs(t) for t in sp.Add.make_args(red.total)]).xreplace(sub)
        mfn = _lambdify(tp + ssyms, mag)
    out: list[Term] = [ReducedTerm(fn, tuple(used), red.stats, cfn, fallback, tuple(stat_fns),
                                   mfn, 1e-8 * max(1.0, fallback.rows ** 0.5),
                                   red.total.xreplace(sub),
                                   sp.And(*red.conds).xreplace(sub) if red.conds else None,
                                   mag)]
    if red.remainder != 0 or red.remainder_conds:
        out.append(_row_term(red.remainder, list(red.remainder_conds), psyms, csyms, colvals))
    return out


def _param_term(expr, conds, params) -> ParamTerm:
    return ParamTerm(param_function(expr, params),
                     param_function(sp.And(*conds), params) if conds else None)


def _check_data_conds(conds, csyms, colvals, where: str, f: fam.Family | None, names):
    """Data-only conditions must hold on every row; name the first that breaks."""
    for c in conds:
        used = [j for j, s in enumerate(csyms) if s in c.free_symbols]
        cp = _placeholders("c", len(used))
        fn = _lambdify(cp, c.xreplace({csyms[j]: cp[k] for k, j in enumerate(used)}))
        with np.errstate(all="ignore"):
            ok = np.broadcast_to(np.asarray(fn(*[colvals[j] for j in used]), bool),
                                 colvals[used[0]].shape)
        if not ok.all():
            r = int(np.argmin(ok))
            col = names[used[0]]
            val = colvals[used[0]][r]
            rule = f"the support of `{f.name}` ({f.support})" if f else f"`{c}`"
            raise DataError(f"{where}: column `{col}` row {r + 1} value {val:g} is outside {rule}")


@dataclass(frozen=True)
class SymbolicTerm:
    """One term of the log-density in sympy, for symbolic derivatives: `expr`
    summed over the rows of the named columns (no columns: counted once)."""

    expr: sp.Expr
    columns: tuple[str, ...] = ()
    values: tuple[np.ndarray, ...] = ()


class _Gathered:
    """What compilation gathers, in the model's order: prior terms and constant,
    notes for `show model`, reasons the prior is improper, symbolic terms."""

    def __init__(self):
        self.prior_terms: list[Term] = []
        self.prior_const = 0.0
        self.notes: list[str] = []
        self.improper: list[str] = []
        self.symbolic: list[SymbolicTerm] = []
        self.symbolic_ok = True


def compile_model(model: Model, data: DataSet, *, reduce: bool = True,
                  rows_from: dict[str, int] | None = None) -> Compiled:
    """Compile `model` over `data` into a vectorised log-density.

    The priors are compiled first (`_compile_priors`), then each likelihood
    (`_compile_likelihood`).

    Parameters
    ----------
    model : Model
    data : DataSet
    reduce : bool, keyword-only
        Reduce sums over rows to sufficient statistics where possible.
    rows_from : dict of str to int, keyword-only
        Only rows from this index on, per likelihood key (used to add newly
        appended rows to an existing posterior).

    Raises
    ------
    ModelError, DataError
        A rule of the model or the data is broken; the message names where.
    """
    params = model.params
    if not params:
        raise ModelError("no parameters; declare one with `param NAME ...`")
    got = _Gathered()
    free = _compile_priors(model, got)
    parts = tuple(_compile_likelihood(lk, model, data, got, reduce=reduce, rows_from=rows_from)
                  for lk in model.likelihoods)
    return Compiled(tuple(params), tuple(got.prior_terms), got.prior_const, parts,
                    not got.improper, tuple(got.improper), tuple(got.notes), free, model,
                    tuple(got.symbolic) if got.symbolic_ok else None)


# -- the prior ------------------------------------------------------------------

def _prior_expr(e: sp.Basic, model: Model, what: str) -> sp.Basic:
    """A prior's argument or free term with lets expanded: parameters and numbers only."""
    e = expand_lets(e, model)
    extra = {s.name for s in e.free_symbols} - {p.name for p in model.params}
    if extra:
        raise ModelError(f"{what} uses `{sorted(extra)[0]}`, which is not a parameter; "
                         "priors take parameters and numbers only")
    return e


def _compile_priors(model: Model, got: _Gathered) -> bool:
    """Every parameter's prior (uniform on a bounded domain without one), then the
    free ``prior log`` terms; whether there are free terms."""
    named = {pr.target: pr for pr in model.priors if pr.target is not None}
    free_priors = [pr for pr in model.priors if pr.target is None]
    for p in model.params:
        pr = named.get(p.name)
        if pr is not None:
            _named_prior(p, pr, model, got)
            continue
        lu = p.log_uniform()
        if lu is None:
            got.improper.append(f"`{p.name}` has no prior and an unbounded domain: "
                                "a flat improper prior")
        else:
            got.prior_const += lu
    for pr in free_priors:
        e = _prior_expr(pr.log, model, "`prior log`")
        got.prior_terms.append(_param_term(e, [], model.params))
        got.symbolic.append(SymbolicTerm(e))
    if free_priors and not all(p.bounded or p.discrete for p in model.params):
        unb = [p.name for p in model.params if not (p.bounded or p.discrete)]
        got.improper.append(f"a free `prior log` term with unbounded `{unb[0]}`: quadrat cannot "
                            "normalise it")
    return bool(free_priors)


def _named_prior(p: Param, pr: Prior, model: Model, got: _Gathered) -> None:
    """``prior NAME ~ FAMILY(args)``: its log density, truncated to the domain."""
    params = model.params
    f = fam.get(pr.family)
    args = tuple(_prior_expr(a, model, f"prior of `{p.name}`") for a in pr.args)
    if f.discrete and not p.discrete:
        raise ModelError(f"prior of `{p.name}` is `{f.name}`, a discrete distribution, "
                         f"but `{p.name}` is continuous")
    term = fam.density(f.name, p.symbol, args)
    conds = _split_conds(term.conds, {q.symbol for q in params}, set())
    for c in conds.const:
        if c in (sp.false, False):
            raise ModelError(f"prior of `{p.name}`: `{f.name}` needs {'; '.join(f.constraints)}")
    got.prior_terms.append(_param_term(term.expr, conds.params + conds.mixed, params))
    got.symbolic.append(SymbolicTerm(term.expr))
    if not (p.discrete or math.isfinite(p.lo) or math.isfinite(p.hi)):
        return
    if all(not a.free_symbols for a in args):
        _truncate_constant(p, f, args, got)
        return
    got.symbolic_ok = False
    got.prior_terms.append(TruncationTerm(
        f.name, tuple(param_function(a, params) for a in args), p.lo, p.hi,
        p.values if p.discrete else None))
    got.notes.append(f"prior of `{p.name}` depends on other parameters; its truncation to "
                     "the domain is renormalised at every grid point")


def _truncate_constant(p: Param, f: fam.Family, args: tuple, got: _Gathered) -> None:
    """Renormalise a prior with constant arguments to the domain of `p`, and say what
    was cut."""
    argv = [float(a) for a in args]
    with np.errstate(all="ignore"):
        mass = float(_domain_mass(f, argv, p.lo, p.hi, p.values if p.discrete else None))
    if not mass > 0 or not math.isfinite(mass):
        raise ModelError(f"prior of `{p.name}` puts no mass on its domain "
                         f"({p.describe()})")
    got.prior_const -= math.log(mass)
    if p.discrete:
        if f.discrete and abs(mass - 1) > 1e-12:
            got.notes.append(f"prior of `{p.name}` is truncated to its {len(p.values)} values "
                             f"and renormalised: {1 - mass:.3g} of its mass was cut")
        elif not f.discrete:
            got.notes.append(f"prior of `{p.name}` is `{f.name}` read at its "
                             f"{len(p.values)} values and renormalised to sum to 1")
    elif abs(mass - 1) > 1e-12:
        got.notes.append(f"prior of `{p.name}` is truncated to its domain and renormalised: "
                         f"{1 - mass:.3g} of its mass was cut")


# -- the likelihoods ------------------------------------------------------------------

@dataclass(frozen=True)
class _Piece:
    """One density of a likelihood over the rows that `mask` selects (None: all);
    a censored likelihood has an observed and a censored piece."""

    term: fam.Term
    mask: np.ndarray | None
    label: str


@dataclass(frozen=True)
class _LikelihoodForm:
    """A likelihood as densities, before any row is read.

    Attributes
    ----------
    key : str
        The column, or the formula of a free term.
    where : str
        How error messages name it.
    family : Family or None
        None for a free ``likelihood log`` term.
    pieces : tuple of _Piece
    columns : frozenset of Symbol
        The data columns it reads.
    """

    key: str
    where: str
    family: fam.Family | None
    pieces: tuple[_Piece, ...]
    columns: frozenset


def _likelihood_form(lk: Likelihood, model: Model, data: DataSet) -> _LikelihoodForm:
    key = lk.column if lk.column is not None else (lk.text or "likelihood log")
    where = f"likelihood `{key}`"
    dset = {sp.Symbol(n, real=True) for n in data.names}
    if lk.column is None:
        e = expand_lets(lk.log, model)
        return _LikelihoodForm(key, where, None, (_Piece(fam.Term(e, ()), None, ""),),
                               frozenset(e.free_symbols & dset))
    f = fam.get(lk.family)
    if lk.column not in data:
        raise DataError(f"{where}: no data column `{lk.column}`")
    ysym = sp.Symbol(lk.column, real=True)
    args = tuple(expand_lets(a, model) for a in lk.args)
    used = {ysym} | set().union(*[a.free_symbols for a in args]) & dset
    if not lk.censor:
        return _LikelihoodForm(key, where, f, (_Piece(fam.density(f.name, ysym, args), None, ""),),
                               frozenset(used))
    if lk.censor not in data:
        raise DataError(f"{where}: no data column `{lk.censor}` for censoring flags")
    flags = data.values(lk.censor)
    bad = np.flatnonzero((flags != 0) & (flags != 1))
    if bad.size:
        raise DataError(f"{where}: column `{lk.censor}` row {bad[0] + 1} value "
                        f"{flags[bad[0]]:g}: censoring flags must be 0 or 1")
    pieces = (_Piece(fam.density(f.name, ysym, args), flags == 0, "observed"),
              _Piece(fam.density(f.name, ysym, args, survival=True), flags == 1, "censored"))
    return _LikelihoodForm(key, where, f, pieces,
                           frozenset(used | {sp.Symbol(lk.censor, real=True)}))


def _row_count(form: _LikelihoodForm, model: Model, data: DataSet) -> int:
    """The likelihood's rows, once its names are known and its columns agree in length."""
    known = {p.name for p in model.params} | set(data.names)
    unknown = set()
    for piece in form.pieces:
        unknown |= {s.name for s in piece.term.expr.free_symbols} - known
    if unknown:
        raise ModelError(f"{form.where} uses unknown `{sorted(unknown)[0]}`")
    lengths = {s.name: data.get(s.name).rows for s in form.columns}
    if len(set(lengths.values())) > 1:
        shown = ", ".join(f"`{k}` {v} rows" for k, v in sorted(lengths.items()))
        raise DataError(f"{form.where}: its columns differ in length ({shown})")
    return next(iter(lengths.values())) if lengths else 0


def _compile_likelihood(lk: Likelihood, model: Model, data: DataSet, got: _Gathered, *,
                        reduce: bool, rows_from: dict[str, int] | None) -> LikelihoodPart:
    """One likelihood's terms over its rows (from `rows_from[key]` on, if given)."""
    form = _likelihood_form(lk, model, data)
    nrows = _row_count(form, model, data)
    start = (rows_from or {}).get(form.key, 0)
    terms: list[Term] = []
    for piece in form.pieces:
        if not form.columns:
            # a term that reads no rows counts once, never again for new rows
            if rows_from is None or form.key not in rows_from:
                conds = _split_conds(piece.term.conds, {p.symbol for p in model.params},
                                     {sp.Symbol(n, real=True) for n in data.names})
                terms.append(_param_term(piece.term.expr, conds.params + conds.mixed,
                                         model.params))
                got.symbolic.append(SymbolicTerm(piece.term.expr))
            continue
        sel = np.arange(nrows) >= start
        if piece.mask is not None:
            sel &= piece.mask
        if sel.any():
            terms.extend(_piece_terms(piece, form, model, data, sel, nrows, got, reduce=reduce))
    return LikelihoodPart(form.key, tuple(terms), nrows)


def _piece_terms(piece: _Piece, form: _LikelihoodForm, model: Model, data: DataSet,
                 sel: np.ndarray, nrows: int, got: _Gathered, *, reduce: bool) -> list[Term]:
    """The terms of one piece summed over the rows `sel` selects."""
    params = model.params
    cols = list(data.names)
    csyms = [sp.Symbol(n, real=True) for n in cols]
    # columns of another length are not read by this term (its own were
    # checked to agree): stand-ins keep the row axis aligned
    colvals = [np.ascontiguousarray(data.values(n)[sel])
               if data.get(n).rows == nrows else np.zeros(int(sel.sum()))
               for n in cols]
    t, f = piece.term, form.family
    conds = _split_conds(t.conds, {p.symbol for p in params}, set(csyms))
    for c in conds.const:
        if c in (sp.false, False):
            raise ModelError(f"{form.where}: `{f.name if f else 'term'}` needs "
                             f"{'; '.join(f.constraints) if f else str(c)}")
    _check_data_conds(conds.data, csyms, colvals, form.where, f, cols)
    terms = _sum_terms(t.expr, conds.mixed, params, csyms, colvals, reduce=reduce,
                       separable=t.separable)
    rc = tuple(n for n, cs in zip(cols, csyms) if cs in t.expr.free_symbols)
    got.symbolic.append(SymbolicTerm(t.expr, rc, tuple(colvals[cols.index(n)] for n in rc)))
    if conds.params:
        terms.append(_param_term(sp.Integer(0), conds.params, params))
    return terms


@dataclass(frozen=True)
class _CurvatureFns:
    """Compiled first and second derivatives of one symbolic term, with the columns
    it is summed over."""

    grad: tuple[Callable, ...]
    hess: tuple[Callable, ...]   # the upper triangle, row by row
    values: tuple[np.ndarray, ...]


def _drop_point_masses(expr: sp.Expr) -> sp.Expr:
    """`expr` with DiracDelta terms (the derivative of a kink or a step) set to zero."""
    if not expr.has(sp.DiracDelta):
        return expr
    return expr.replace(lambda e: isinstance(e, sp.DiracDelta), lambda e: sp.S.Zero)


def _curvature_functions(symbolic: Sequence[SymbolicTerm], params, cont
                         ) -> list[_CurvatureFns] | None:
    """Compiled gradient and Hessian (upper triangle) of each symbolic term, or None
    if some derivative cannot be taken symbolically."""
    psyms = [p.symbol for p in params]
    csyms = [p.symbol for p in cont]
    tp = _placeholders("t", len(psyms))
    sub = dict(zip(psyms, tp))
    out = []
    try:
        for term in symbolic:
            cp = _placeholders("c", len(term.columns))
            csub = {sp.Symbol(n, real=True): c for n, c in zip(term.columns, cp)}
            grads = [sp.diff(term.expr, x) for x in csyms]
            hess = [sp.diff(grads[i], csyms[j]) for i in range(len(csyms))
                    for j in range(i, len(csyms))]
            # a kink (abs, sign, a step) differentiates to a point mass: zero almost
            # everywhere, which is what a curvature at a point can use
            grads = [_drop_point_masses(e) for e in grads]
            hess = [_drop_point_masses(e) for e in hess]
            for e in grads + hess:
                if e.has(sp.Derivative, sp.Subs):
                    return None
            gf = tuple(_lambdify(tp + cp, e.xreplace(sub).xreplace(csub)) for e in grads)
            hf = tuple(_lambdify(tp + cp, e.xreplace(sub).xreplace(csub)) for e in hess)
            out.append(_CurvatureFns(gf, hf, tuple(term.values)))
    except (TypeError, ValueError, NotImplementedError, AttributeError):
        return None
    return out
