"""Numbers, tables and answers as text.

Every number the shell shows goes through `num` (six significant digits, or as
many as the `digits` setting asks); a number with an estimated error goes
through `to_error`, which shows it only to the digit its error supports (and
as 0 when it lies within its error of 0), the error beside it with one digit. `check_tol`
decides the tolerance a saved `check` line carries: the larger of one unit in
the last printed digit and a few times the estimated error, so that the file
replays anywhere and a real change fails.
"""

from __future__ import annotations

import math
from contextlib import contextmanager
from contextvars import ContextVar
from typing import Iterator, Sequence

from engine.plan import format_bytes, format_duration

DIGITS = 6
#: The most significant digits the `digits` setting may ask for (a double holds 17).
MAX_DIGITS = 17
#: The significant digits numbers are shown with while a command runs: the App sets
#: it from its `digits` setting around each command (`showing`).
_DIGITS: ContextVar[int] = ContextVar("digits", default=DIGITS)


def digits() -> int:
    """The significant digits numbers are shown with now."""
    return _DIGITS.get()


@contextmanager
def showing(n: int) -> Iterator[None]:
    """Show numbers with `n` significant digits inside the block."""
    token = _DIGITS.set(n)
    try:
        yield
    finally:
        _DIGITS.reset(token)


def num(v: float | None, digits: int | None = None) -> str:
    """A number with `digits` significant digits (default: the setting; ``-`` when
    missing)."""
    digits = digits or _DIGITS.get()
    if v is None:
        return "-"
    v = float(v)
    if math.isnan(v):
        return "nan"
    if math.isinf(v):
        return "inf" if v > 0 else "-inf"
    if v == 0:
        return "0"
    return _compact(f"{v:.{digits}g}")


def _compact(s: str) -> str:
    """``1.5e-05`` -> ``1.5e-5``, ``2e+20`` -> ``2e20``."""
    if "e" not in s:
        return s
    mant, exp = s.split("e")
    return f"{mant}e{int(exp)}"


def err(e: float | None) -> str:
    """An estimated error: one significant digit."""
    if e is None:
        return ""
    if e == 0:
        return "exact"
    return "± " + _compact(f"{e:.0e}")


def to_error(v: float | None, e: float | None) -> str:
    """`v` to the digit its estimated error `e` supports: ``12.69`` for 12.6929 with
    an error of 0.03, ``0`` for a value within twice its error of 0; as `num` where there
    is no error (or it is 0: an exact sum)."""
    if v is None or e is None or not (math.isfinite(e) and e > 0) or not math.isfinite(v):
        return num(v)
    if abs(v) < 2 * e:
        # not twice its (one-digit, estimated) error away from 0: not told from 0
        return "0"
    shown = math.floor(math.log10(abs(v))) - math.floor(math.log10(e)) + 1
    return num(v, max(1, min(digits(), shown)))


def with_error(v: float, e: float | None, *, unresolved: bool = False) -> str:
    """``0.285714  (± 3e-12)``; a value of a posterior the grid does not resolve
    shows two digits and says so, never an error that would pass for converged."""
    if unresolved:
        return f"{num(v, 2)}  (not resolved)"
    s = to_error(v, e)
    if e is None:
        return s
    return f"{s}  ({err(e)})"


def count(n: int) -> str:
    return f"{n:,}"


#: Bytes and seconds are written the way the engine's own messages write them.
bytes_text = format_bytes
duration = format_duration


# ---------------------------------------------------------------------------
# tolerances of check lines

def _up1(t: float) -> float:
    """Round a positive number up to one significant digit."""
    e = math.floor(math.log10(t))
    m = t / 10.0**e
    c = math.ceil(m - 1e-9)
    if c >= 10:
        c, e = 1, e + 1
    return float(f"{c}e{e}")


def last_digit(v: float, digits: int = DIGITS) -> float:
    """One unit in the last of `digits` significant digits of `v`."""
    if v == 0 or not math.isfinite(v):
        return 0.0
    return 10.0 ** (math.floor(math.log10(abs(v))) - (digits - 1))


def check_tol(values: Sequence[float], errors: Sequence[float | None], *,
              scale: float | None = None, floor: float = 0.0) -> float:
    """The absolute tolerance a saved check line carries for these numbers.

    The larger of: one unit in the last printed digit, ten times the estimated
    error, 1e-10 of `scale` (the spread of the quantity, guarding numbers that
    are zero only by cancellation), and `floor`.
    """
    t = floor
    for v, e in zip(values, errors):
        t = max(t, last_digit(v))
        if e is not None and math.isfinite(e):
            t = max(t, 10.0 * e)
    if scale is not None and math.isfinite(scale):
        t = max(t, 1e-10 * abs(scale))
    if t <= 0:
        t = 1e-12
    return _up1(t)


def tol_text(t: float) -> str:
    return _compact(f"{t:g}")


def typed_precision(text: str) -> float:
    """Half a unit in the last digit of a number as typed: `0.2857` -> 5e-05,
    `120` -> 0.5, `1.5e-3` -> 5e-05."""
    t = text.strip().lower().lstrip("+-")
    exp = 0
    if "e" in t:
        t, e = t.split("e", 1)
        exp = int(e)
    decimals = len(t.split(".", 1)[1]) if "." in t else 0
    return 0.5 * 10.0 ** (exp - decimals)


# ---------------------------------------------------------------------------
# tables

def table(header: Sequence[str], rows: Sequence[Sequence[str]], *,
          align: str | None = None, indent: int = 0) -> list[str]:
    """Rows of text in columns: the first left-aligned, the rest right-aligned
    unless `align` (one of ``l``/``r`` per column) says otherwise."""
    cols = len(header)
    align = align or ("l" + "r" * (cols - 1))
    widths = [len(h) for h in header]
    for r in rows:
        for j, c in enumerate(r):
            widths[j] = max(widths[j], len(c))

    def fmt(r):
        cells = []
        for j, c in enumerate(r):
            cells.append(c.ljust(widths[j]) if align[j] == "l" else c.rjust(widths[j]))
        return (" " * indent + "  ".join(cells)).rstrip()

    return [fmt(header)] + [fmt(r) for r in rows]
