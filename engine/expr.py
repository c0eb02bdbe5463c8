"""Formula text to sympy, safely.

A formula is parsed by Python's ``ast`` module and walked against a whitelist of
node types, names and functions; the sympy expression is built node by node.
Nothing here calls ``eval``, ``exec``, ``sympify`` or ``parse_expr`` on the text,
so a formula cannot run code. Constant arithmetic is folded in floating point
with range checks, so a formula such as ``9^9^9^9`` ends in an error at once
instead of an exact computation that never finishes.
"""

from __future__ import annotations

import ast
import keyword
import math
import re
import sys
import unicodedata
import warnings
from dataclasses import dataclass
from typing import Callable, Mapping

import numpy as np
import scipy.special as sc
import sympy as sp

from . import logspace as L
from . import special as S
from .characters import char_name, code, invisible, name_problem, quoted
from .errors import FormulaError

MAX_LENGTH = 10_000
MAX_DEPTH = 100
#: Magnitude beyond which a folded constant is refused (float64 range).
MAX_CONSTANT = 1e308
_NAME = re.compile(r"^[A-Za-z][A-Za-z0-9_]*$")
#: Number literals that Python reads but a formula does not: 0x10, 0o7, 0b1, 1_000.
_NOT_DECIMAL = re.compile(r"^(0[xXoObB]|.*\d_)")


@dataclass(frozen=True)
class Function:
    """A function a formula may call.

    Attributes
    ----------
    name : str
        The name as typed.
    nargs : tuple of int
        Smallest and largest number of arguments (largest 0 means no limit).
    build : callable
        Takes sympy arguments, returns the sympy expression.
    numeric : callable
        Takes float arguments, returns a float (used to fold constants).
    help : str
        One line for `help`.
    """

    name: str
    nargs: tuple[int, int]
    build: Callable[..., sp.Expr]
    numeric: Callable[..., float]
    help: str


def _logit(x):
    return sp.log(x) - S.log1p(-x)


def _lbeta(a, b):
    # one function (engine/logspace.py), not a difference of lgammas: that would have
    # no correct digit at a, b near 1e15
    return S.betaln(a, b)


def _lchoose(n, k):
    return S.lchoose(n, k)


def _log(x):
    # log of the normal cdf is kept accurate far into the tail
    if isinstance(x, S.ndtr):
        return S.log_ndtr(x.args[0])
    return sp.log(x)


def _np_min(*a):
    return float(np.min(a))


def _np_max(*a):
    return float(np.max(a))


FUNCTIONS: dict[str, Function] = {
    f.name: f
    for f in [
        Function("exp", (1, 1), sp.exp, np.exp, "exp(x): e to the power x"),
        Function("log", (1, 1), _log, np.log, "log(x): natural logarithm"),
        Function("log1p", (1, 1), S.log1p, np.log1p, "log1p(x): log(1 + x), accurate for small x"),
        Function("expm1", (1, 1), S.expm1, np.expm1, "expm1(x): exp(x) - 1, accurate for small x"),
        Function("log10", (1, 1), lambda x: sp.log(x) / sp.log(10), np.log10, "log10(x): base-10 logarithm"),
        Function("log2", (1, 1), lambda x: sp.log(x) / sp.log(2), np.log2, "log2(x): base-2 logarithm"),
        Function("sqrt", (1, 1), sp.sqrt, np.sqrt, "sqrt(x): square root"),
        Function("abs", (1, 1), sp.Abs, np.abs, "abs(x): absolute value"),
        Function("sin", (1, 1), sp.sin, np.sin, "sin(x)"),
        Function("cos", (1, 1), sp.cos, np.cos, "cos(x)"),
        Function("tan", (1, 1), sp.tan, np.tan, "tan(x)"),
        Function("atan", (1, 1), sp.atan, np.arctan, "atan(x): inverse tangent"),
        Function("tanh", (1, 1), sp.tanh, np.tanh, "tanh(x)"),
        Function("logit", (1, 1), _logit, sc.logit, "logit(p): log(p / (1 - p))"),
        Function("inv_logit", (1, 1), S.expit, sc.expit, "inv_logit(x): 1 / (1 + exp(-x))"),
        Function("lgamma", (1, 1), S.gammaln, sc.gammaln, "lgamma(x): log of the gamma function"),
        Function("lbeta", (2, 2), _lbeta, lambda a, b: float(L.lbeta(a, b)),
                 "lbeta(a, b): log of the beta function"),
        Function("lchoose", (2, 2), _lchoose,
                 lambda n, k: float(-np.log1p(n) - L.lbeta(n - k + 1, k + 1)),
                 "lchoose(n, k): log of the binomial coefficient"),
        Function("erf", (1, 1), sp.erf, sc.erf, "erf(x): error function"),
        Function("erfc", (1, 1), sp.erfc, sc.erfc, "erfc(x): 1 - erf(x)"),
        Function("normal_cdf", (1, 1), S.ndtr, sc.ndtr, "normal_cdf(z): standard normal cdf"),
        Function("min", (2, 0), sp.Min, _np_min, "min(a, b, ...): smallest argument"),
        Function("max", (2, 0), sp.Max, _np_max, "max(a, b, ...): largest argument"),
        Function("floor", (1, 1), sp.floor, np.floor, "floor(x): largest integer <= x"),
        Function("ceil", (1, 1), sp.ceiling, np.ceil, "ceil(x): smallest integer >= x"),
    ]
}

CONSTANTS: dict[str, sp.Expr] = {"pi": sp.pi}

#: Names a user may not give to a parameter, column or let.
RESERVED = frozenset(FUNCTIONS) | frozenset(CONSTANTS) | frozenset(keyword.kwlist) | \
    frozenset(keyword.softkwlist) | frozenset({"inf", "nan"})

_COMPARE = {ast.Lt: sp.Lt, ast.LtE: sp.Le, ast.Gt: sp.Gt, ast.GtE: sp.Ge,
            ast.Eq: sp.Eq, ast.NotEq: sp.Ne}
_CMP_TEXT = {ast.Lt: "<", ast.LtE: "<=", ast.Gt: ">", ast.GtE: ">=", ast.Eq: "==",
             ast.NotEq: "!="}
_FORBIDDEN = {
    ast.Attribute: "attribute access `.`",
    ast.Lambda: "`lambda`",
    ast.ListComp: "a comprehension",
    ast.SetComp: "a comprehension",
    ast.DictComp: "a comprehension",
    ast.GeneratorExp: "a comprehension",
    ast.Subscript: "indexing `[...]`",
    ast.List: "a list `[...]`",
    ast.Tuple: "a tuple",
    ast.Dict: "a dict `{...}`",
    ast.Set: "a set `{...}`",
    ast.IfExp: "`if ... else`",
    ast.Starred: "`*`",
    ast.NamedExpr: "`:=`",
    ast.Await: "`await`",
    ast.Yield: "`yield`",
    ast.YieldFrom: "`yield`",
    ast.JoinedStr: "an f-string",
    ast.Slice: "a slice",
}
_BINOP_TEXT = {ast.FloorDiv: "`//`", ast.Mod: "`%`", ast.MatMult: "`@`",
               ast.LShift: "`<<`", ast.RShift: "`>>`", ast.BitOr: "`|`",
               ast.BitAnd: "`&`", ast.BitXor: "`^`"}


def check_name(name: str, what: str = "name") -> str:
    """Check that `name` may name a parameter, column or let.

    Raises
    ------
    FormulaError
        If the name is not a plain identifier, starts with an underscore or is
        reserved (a function, a constant or a word of the command language).
    """
    problem = name_problem(name, what)
    if problem is not None:
        raise FormulaError(problem)
    if not _NAME.match(name):
        raise FormulaError(f"{what} `{quoted(name)}` must start with a letter and use only "
                           "letters, digits and _")
    if name in RESERVED:
        raise FormulaError(f"{what} `{name}` is a reserved word of quadrat; choose another")
    if len(name) > 64:
        raise FormulaError(f"{what} `{name[:20]}...` is longer than 64 characters")
    return name


def _odd_character(ch: str) -> str:
    """Why a character outside printable ASCII cannot be in a formula, naming it."""
    shown = code(ch) if invisible(ch) or ord(ch) < 32 or ord(ch) == 127 else ch
    about = char_name(ch) if shown == code(ch) else f"U+{ord(ch):04X} {char_name(ch)}"
    normal = unicodedata.normalize("NFKC", ch)
    like = f" (it looks like `{normal}`)" if normal != ch and normal.isascii() \
        and normal.isprintable() else ""
    return f"character `{shown}` ({about}) is not allowed; formulas are plain ASCII{like}"


def _check_text(text: str) -> str:
    if not text.strip():
        raise FormulaError("empty formula")
    depth = 0
    for i, ch in enumerate(text):
        if ord(ch) > 126 or (ord(ch) < 32 and ch not in "\t"):
            raise FormulaError(_odd_character(ch), i + 1)
        if ch in "([{":
            depth += 1
            if depth > MAX_DEPTH:
                raise FormulaError(f"formula nests more than {MAX_DEPTH} levels deep", i + 1)
        elif ch in ")]}":
            depth -= 1
        elif ch in "'\"":
            raise FormulaError("text in quotes is not allowed in a formula", i + 1)
        elif ch in "#;\\`$":
            raise FormulaError(f"character `{ch}` is not allowed in a formula", i + 1)
    if len(text) > MAX_LENGTH:
        raise FormulaError(f"formula is longer than {MAX_LENGTH:,} characters")
    return text


#: A number written as a percentage: digits (not the end of a name) and `%`, with no
#: operand after it (`%` is no operator of the formula language).
_PERCENT = re.compile(r"(?<![\w.])((?:\d+\.?\d*|\.\d+)(?:[eE][-+]?\d+)?)%(?!\s*(?!(?:and|or|not)\b)[\w.(])")


def _translate(text: str) -> tuple[str, list[int]]:
    """Replace ``^`` by ``**`` and a percentage ``5%`` by ``(5/100)``; return the new
    text and, for each of its characters, the 0-based column it came from."""
    out: list[str] = []
    where: list[int] = []
    percent = {m.start(1): m.end(1) for m in _PERCENT.finditer(text)}
    i = 0
    while i < len(text):
        ch = text[i]
        if i in percent:
            end = percent[i]
            out.append("(" + text[i:end] + "/100)")
            where.extend([i] + list(range(i, end)) + [end] * 5)
            i = end + 1
            continue
        if ch == "^":
            out.append("**")
            where.extend([i, i])
        else:
            out.append(ch)
            where.append(i)
        i += 1
    where.append(len(text))
    return "".join(out), where


class _Builder:
    def __init__(self, names: Mapping[str, sp.Expr], where: list[int], conditions: bool,
                 source: str):
        self.names = names
        self.where = where
        self.conditions = conditions
        self.source = source

    def col(self, node: ast.AST) -> int:
        off = getattr(node, "col_offset", 0)
        off = min(max(off, 0), len(self.where) - 1)
        return self.where[off] + 1

    def segment(self, node: ast.AST) -> str:
        a = getattr(node, "col_offset", None)
        b = getattr(node, "end_col_offset", None)
        if a is None or b is None:
            return "..."
        a = self.where[min(a, len(self.where) - 1)]
        b = self.where[min(b, len(self.where) - 1)]
        seg = self.source[a:b]
        return seg if len(seg) <= 40 else seg[:37] + "..."

    def fail(self, message: str, node: ast.AST):
        raise FormulaError(message, self.col(node))

    # -- numbers ---------------------------------------------------------
    def number(self, value, node) -> sp.Expr:
        if _NOT_DECIMAL.match(self.segment(node)):
            self.fail(f"write the number `{self.segment(node)}` in decimal digits "
                      "(no 0x, 0o, 0b or _)", node)
        if isinstance(value, bool) or not isinstance(value, (int, float)):
            if isinstance(value, str):
                self.fail("text in quotes is not allowed in a formula", node)
            if isinstance(value, complex):
                self.fail(f"complex number `{self.segment(node)}` is not allowed", node)
            self.fail(f"`{self.segment(node)}` is not a number", node)
        if isinstance(value, int):
            if abs(value) > MAX_CONSTANT:
                self.fail(f"number `{self.segment(node)}` is out of range (beyond 1e308)", node)
            return sp.Integer(value) if abs(value) < 2**53 else sp.Float(float(value))
        if not math.isfinite(value):
            self.fail(f"number `{self.segment(node)}` is out of range (beyond 1e308)", node)
        return sp.Float(value)

    def checked(self, value: sp.Expr, node) -> sp.Expr:
        """Refuse a constant result that is not a finite real number."""
        if isinstance(value, sp.Expr) and value.is_number:
            if value.has(sp.zoo, sp.nan, sp.oo, -sp.oo, sp.I):
                self.fail(f"`{self.segment(node)}` is undefined or not a real number", node)
            if value.is_Number and abs(float(value)) > MAX_CONSTANT:
                self.fail(f"`{self.segment(node)}` overflows (beyond 1e308)", node)
        return value

    def fold_pow(self, base: sp.Expr, exp: sp.Expr, node) -> sp.Expr:
        if base.is_Number and exp.is_Number:
            b, e = float(base), float(exp)
            if b == 0 and e < 0:
                self.fail(f"`{self.segment(node)}` divides by zero", node)
            if b < 0 and not float(e).is_integer():
                self.fail(f"`{self.segment(node)}` is a negative number to a fractional power", node)
            # the size of the result, 10^r, before any exact arithmetic is tried
            r = e * math.log10(abs(b)) if b != 0 else -math.inf
            if r > 308:
                self.fail(f"`{self.segment(node)}` overflows (about 10^{r:.3g})", node)
            if r < -300:
                # far below double precision: it rounds to zero, as a typed 1e-400 does
                return sp.Float(b**e)
            if base.is_Integer and exp.is_Integer and int(exp) >= 0:
                return sp.Integer(int(base) ** int(exp))
            if base.is_Rational and exp.is_Integer:
                return base**exp
            return self.checked(sp.Float(b**e), node)
        if exp.is_Number and abs(float(exp)) > 1e6:
            self.fail(f"power `{self.segment(node)}` is out of range (exponent beyond 1e6)", node)
        return base**exp

    # -- the walk --------------------------------------------------------
    def build(self, node: ast.AST, depth: int = 0) -> sp.Basic:
        if depth > MAX_DEPTH:
            self.fail(f"formula nests more than {MAX_DEPTH} levels deep", node)
        kind = type(node)
        if kind is ast.Expression:
            return self.build(node.body, depth)
        if kind is ast.Constant:
            return self.number(node.value, node)
        if kind is ast.Name:
            return self.name(node)
        if kind is ast.BinOp:
            return self.binop(node, depth)
        if kind is ast.UnaryOp:
            return self.unary(node, depth)
        if kind is ast.Call:
            return self.call(node, depth)
        if kind is ast.Compare:
            return self.compare(node, depth)
        if kind is ast.BoolOp:
            return self.boolop(node, depth)
        if kind in _FORBIDDEN:
            self.fail(f"{_FORBIDDEN[kind]} is not allowed in a formula", node)
        self.fail(f"`{self.segment(node)}` is not allowed in a formula", node)

    def name(self, node: ast.Name) -> sp.Expr:
        ident = node.id
        if ident in self.names:
            return self.names[ident]
        if ident in CONSTANTS:
            return CONSTANTS[ident]
        if ident in FUNCTIONS:
            self.fail(f"`{ident}` is a function; call it as {ident}(...)", node)
        if ident.startswith("_"):
            self.fail(f"name `{ident}` is not allowed (names cannot start with _)", node)
        self.fail(f"unknown name `{ident}`", node)

    def arith(self, value, node) -> sp.Expr:
        # a condition where a number is expected (an operand of arithmetic, an argument
        # of a function) counts 1 where it holds and 0 where it does not
        if _is_condition(value):
            return indicator(value)
        return value

    def binop(self, node: ast.BinOp, depth: int) -> sp.Expr:
        op = type(node.op)
        if op in _BINOP_TEXT:
            self.fail(f"operator {_BINOP_TEXT[op]} is not allowed", node)
        if op is ast.Pow:
            base = self.arith(self.build(node.left, depth + 1), node.left)
            exp = self.arith(self.build(node.right, depth + 1), node.right)
            return self.checked(self.fold_pow(base, exp, node), node)
        # flatten left-leaning chains of + - or * / so long sums do not nest
        group = (ast.Add, ast.Sub) if op in (ast.Add, ast.Sub) else (ast.Mult, ast.Div)
        chain = []
        cur: ast.AST = node
        while isinstance(cur, ast.BinOp) and type(cur.op) in group:
            chain.append((type(cur.op), cur.right, cur))
            cur = cur.left
        parts = [self.arith(self.build(cur, depth + 1), cur)]
        for op_i, right, whole in reversed(chain):
            rhs = self.arith(self.build(right, depth + 1), right)
            if op_i is ast.Sub:
                rhs = -rhs
            elif op_i is ast.Div:
                if rhs.is_number and rhs.is_zero:
                    self.fail(f"`{self.segment(whole)}` divides by zero", whole)
                rhs = 1 / rhs
            parts.append(rhs)
        # one n-ary node: sympy combines a long sum in one go, not term by term
        acc = sp.Add(*parts) if group[0] is ast.Add else sp.Mul(*parts)
        return self.checked(acc, node)

    def unary(self, node: ast.UnaryOp, depth: int):
        op = type(node.op)
        # count a run of unary operators without recursion
        inner: ast.AST = node
        ops = []
        while isinstance(inner, ast.UnaryOp):
            ops.append(type(inner.op))
            inner = inner.operand
            if len(ops) > MAX_DEPTH:
                self.fail(f"formula nests more than {MAX_DEPTH} levels deep", node)
        value = self.build(inner, depth + 1)
        for op in reversed(ops):
            if op is ast.Not:
                value = sp.Not(self.condition(value, inner))
            elif op is ast.USub:
                value = -self.arith(value, inner)
            elif op is ast.UAdd:
                value = self.arith(value, inner)
            else:
                self.fail("operator `~` is not allowed", node)
        return value

    def call(self, node: ast.Call, depth: int) -> sp.Expr:
        if not isinstance(node.func, ast.Name):
            if isinstance(node.func, ast.Attribute):
                self.fail("attribute access `.` is not allowed in a formula", node.func)
            self.fail(f"`{self.segment(node.func)}` cannot be called", node)
        fname = node.func.id
        if fname not in FUNCTIONS:
            if fname in self.names:
                self.fail(f"`{fname}` is not a function", node)
            self.fail(f"unknown function `{fname}`", node)
        if node.keywords:
            self.fail(f"`{fname}` takes no named arguments", node.keywords[0].value)
        fn = FUNCTIONS[fname]
        lo, hi = fn.nargs
        n = len(node.args)
        if n < lo or (hi and n > hi):
            want = (f"{lo}" if lo == hi else f"at least {lo}") + \
                (" argument" if lo == 1 and lo == hi else " arguments")
            self.fail(f"`{fname}` takes {want}, got {n}", node)
        args = [self.arith(self.build(a, depth + 1), a) for a in node.args]
        if all(isinstance(a, sp.Expr) and a.is_number for a in args):
            return self.fold_call(fn, args, node)
        return fn.build(*args)

    def fold_call(self, fn: Function, args: list[sp.Expr], node) -> sp.Expr:
        vals = []
        for a in args:
            try:
                vals.append(float(a))
            except (TypeError, ValueError, OverflowError):
                self.fail(f"`{self.segment(node)}` is not a real number", node)
        with np.errstate(all="ignore"):
            out = float(fn.numeric(*vals))
        if not math.isfinite(out):
            self.fail(f"`{self.segment(node)}` is undefined or overflows", node)
        if out.is_integer() and abs(out) < 2**53 and fn.name in ("floor", "ceil", "abs", "min", "max"):
            return sp.Integer(int(out))
        return sp.Float(out)

    def condition(self, value, node):
        if isinstance(value, sp.Expr):
            self.fail(f"`{self.segment(node)}` is a number, not a condition "
                      "(compare it, as in x > 0)", node)
        return value

    def compare(self, node: ast.Compare, depth: int):
        left = self.arith(self.build(node.left, depth + 1), node.left)
        parts = []
        for op, right in zip(node.ops, node.comparators):
            if type(op) not in _COMPARE:
                self.fail(f"`{type(op).__name__}` comparisons are not allowed", node)
            rhs = self.arith(self.build(right, depth + 1), right)
            try:
                rel = _COMPARE[type(op)](left, rhs)
            except TypeError:
                self.fail(f"cannot compare `{self.segment(node)}`", node)
            parts.append(rel)
            left = rhs
        return parts[0] if len(parts) == 1 else sp.And(*parts)

    def boolop(self, node: ast.BoolOp, depth: int):
        values = [self.condition(self.build(v, depth + 1), v) for v in node.values]
        return sp.And(*values) if isinstance(node.op, ast.And) else sp.Or(*values)


def _parse(src: str) -> ast.Expression:
    # the parser's own warnings (`1if`, `1 is 1`) would print to standard error
    # beside quadrat's one error line; the builder judges those formulas itself
    with warnings.catch_warnings():
        warnings.simplefilter("ignore")
        return ast.parse(src, mode="eval")


def _syntax_message(exc: SyntaxError) -> str:
    msg = (exc.msg or "cannot read the formula").split("(")[0].strip()
    if msg.startswith("invalid syntax"):
        return "cannot read the formula here"
    if msg.startswith("leading zeros"):
        return "a number cannot start with 0 (write 7, not 07)"
    return msg


def parse(text: str, names: Mapping[str, sp.Expr], *, condition: bool = False) -> sp.Basic:
    """Build the sympy expression of formula `text`.

    Parameters
    ----------
    text : str
        The formula as typed: arithmetic ``+ - * / ^ **``, parentheses, numbers,
        names and the functions of `FUNCTIONS`; with ``condition=True`` a condition
        built of ``< <= > >= == !=`` and ``and or not``. A condition used where a
        number is expected (in parentheses as an operand, ``b * (year > k)``, or as
        a function's argument) is an indicator: 1 where it holds, 0 where not.
    names : mapping of str to sympy expression
        What each name stands for.
    condition : bool, keyword-only
        Whether the formula is a condition (its value true or false).

    Returns
    -------
    sympy.Expr or sympy Boolean

    Raises
    ------
    FormulaError
        One line naming the offending token and its column.
    """
    _check_text(text)
    tree, where = _read(text)
    builder = _Builder(names, where, condition, text)
    try:
        value = builder.build(tree)
    except RecursionError:
        raise FormulaError("formula is too complex to read") from None
    if condition:
        if isinstance(value, sp.Expr):
            raise FormulaError(
                f"`{text.strip()[:40]}` is a number, not a condition (compare it, as in x > 0)")
        return value
    if _is_condition(value):
        if not _parenthesised(text):
            shown = text.strip()[:40]
            raise FormulaError(f"`{shown}` is a condition, not a number; for 1 where it "
                               f"holds and 0 where not, put it in parentheses: ({shown})",
                               len(text) - len(text.lstrip()) + 1)
        return indicator(value)
    return value


def _is_condition(value) -> bool:
    return isinstance(value, (sp.logic.boolalg.Boolean, sp.core.relational.Relational)) \
        and not isinstance(value, sp.Expr)


def indicator(cond) -> sp.Expr:
    """1 where condition `cond` holds and 0 where it does not, as a sympy expression
    (a Piecewise, which compiles to numpy's select; derivatives are 0 almost everywhere)."""
    if cond is sp.true or cond == sp.true:
        return sp.Integer(1)
    if cond is sp.false or cond == sp.false:
        return sp.Integer(0)
    return sp.Piecewise((sp.Integer(1), cond), (sp.Integer(0), True))


def _parenthesised(text: str) -> bool:
    """Whether the whole of `text` is one pair of parentheses and what they hold."""
    t = text.strip()
    if not t.startswith("("):
        return False
    depth = 0
    for i, ch in enumerate(t):
        depth += ch == "("
        depth -= ch == ")"
        if depth == 0:
            return i == len(t) - 1
    return False


def _read(text: str) -> tuple[ast.Expression, list[int]]:
    """Parse checked formula text into an ``ast`` tree whose columns point into
    `text`; also the map from translated to original columns."""
    src, where = _translate(text)
    stripped = src.lstrip()
    shift = len(src) - len(stripped)
    limit = sys.getrecursionlimit()
    try:
        # a long flat sum is a deep tree for the parser; the text is bounded by
        # MAX_LENGTH, so this bounded lift of the limit is safe
        sys.setrecursionlimit(max(limit, 4 * MAX_LENGTH))
        tree = _parse(stripped)
    except SyntaxError as exc:
        off = (exc.offset or 1) - 1 + shift
        col = where[min(max(off, 0), len(where) - 1)] + 1
        raise FormulaError(_syntax_message(exc), col) from None
    except (RecursionError, MemoryError, ValueError):
        raise FormulaError("formula is too complex to read") from None
    finally:
        sys.setrecursionlimit(limit)
    if shift:
        for node in ast.walk(tree):
            if hasattr(node, "col_offset"):
                node.col_offset += shift
                if getattr(node, "end_col_offset", None) is not None:
                    node.end_col_offset += shift
    return tree, where


def names_in(expr: sp.Basic) -> set[str]:
    """The names of the free symbols of `expr`."""
    return {s.name for s in expr.free_symbols}


def parse_call(text: str, names: Mapping[str, sp.Expr], known: Mapping[str, object],
               what: str = "distribution") -> tuple[str, tuple[sp.Expr, ...]]:
    """Parse ``NAME(arg, ...)`` where NAME is one of `known` (a distribution).

    Returns the name and the sympy arguments. Errors name the column.
    """
    _check_text(text)
    tree, where = _read(text)
    body = tree.body
    builder = _Builder(names, where, False, text)
    if not (isinstance(body, ast.Call) and isinstance(body.func, ast.Name)):
        raise FormulaError(f"expected a {what} such as normal(0, 1)", builder.col(body))
    fname = body.func.id
    if fname not in known:
        shown = ", ".join(sorted(known))
        raise FormulaError(f"unknown {what} `{fname}`; known: {shown}", builder.col(body))
    if body.keywords:
        raise FormulaError(f"`{fname}` takes no named arguments", builder.col(body.keywords[0].value))
    try:
        args = tuple(builder.arith(builder.build(a, 1), a) for a in body.args)
    except RecursionError:
        raise FormulaError("formula is too complex to read") from None
    return fname, args
