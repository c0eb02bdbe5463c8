"""Numbers, tables and answers as text.

Every number the shell shows goes through `num` (about six significant
digits); an estimated error is shown beside it with one digit. `check_tol`
decides the tolerance a saved `check` line carries: the larger of one unit in
the last printed digit and a few times the estimated error, so that the file
replays anywhere and a real change fails.
"""

from __future__ import annotations

import math
from typing import Sequence

from engine.plan import format_bytes, format_duration

DIGITS = 6


def num(v: float | None, digits: int = DIGITS) -> str:
    """A number with `digits` significant digits (``-`` when missing)."""
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


def with_error(v: float, e: float | None) -> str:
    """``0.285714  (± 3e-12)``."""
    s = num(v)
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
