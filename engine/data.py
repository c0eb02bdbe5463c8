"""Data columns: typed values, CSV files, validation and checksums.

A `DataSet` is an immutable set of named numeric columns. Columns loaded from one
CSV file form a table; the file's SHA-256 is kept so that a session replayed on
another machine can tell whether it reads the same data.
"""

from __future__ import annotations

import csv
import hashlib
import io
import math
import os
import re
from dataclasses import dataclass, field, replace

import numpy as np

from .errors import DataError, FormulaError
from .characters import quoted
from .expr import check_name
from .files import MAX_DATA_BYTES, decode_text, read_bytes
from .revision import next_revision

#: Values beyond this magnitude are refused: their squares overflow float64.
MAX_VALUE = 1e100
#: Largest CSV file read, in bytes.
MAX_FILE_BYTES = MAX_DATA_BYTES


@dataclass(frozen=True)
class Column:
    """One named column of numbers.

    Attributes
    ----------
    name : str
    values : ndarray, shape (rows,)
        Read-only float64 values.
    table : str or None
        The table (CSV file) the column belongs to, if loaded from one.
    """

    name: str
    values: np.ndarray
    table: str | None = None

    @property
    def rows(self) -> int:
        return int(self.values.shape[0])


@dataclass(frozen=True)
class FileRecord:
    """A data file read into the session, with the SHA-256 of its bytes."""

    path: str
    sha256: str
    rows: int
    columns: tuple[str, ...]
    role: str = "load"  # "load" or "append"


@dataclass(frozen=True)
class Table:
    """Columns read from one CSV file, named ``prefix`` + header name."""

    name: str
    prefix: str
    header: tuple[str, ...]


@dataclass(frozen=True)
class DataSet:
    """Named columns, the tables they came from and the files read. Every change
    returns a new `DataSet`, with a new `revision` (never reused, unlike ``id()``;
    not part of equality)."""

    columns: tuple[Column, ...] = ()
    tables: tuple[Table, ...] = ()
    files: tuple[FileRecord, ...] = field(default=())
    revision: int = field(init=False, default_factory=next_revision, compare=False, repr=False)

    # -- queries ---------------------------------------------------------
    @property
    def names(self) -> tuple[str, ...]:
        return tuple(c.name for c in self.columns)

    def __contains__(self, name: str) -> bool:
        return any(c.name == name for c in self.columns)

    def get(self, name: str) -> Column:
        for c in self.columns:
            if c.name == name:
                return c
        raise DataError(f"no data column `{name}`")

    def values(self, name: str) -> np.ndarray:
        return self.get(name).values

    # -- changes (each returns a new DataSet) ------------------------------
    def with_column(self, column: Column) -> tuple["DataSet", bool]:
        """Add or replace a column; also says whether it replaced one."""
        cols = list(self.columns)
        for i, c in enumerate(cols):
            if c.name == column.name:
                cols[i] = column
                return replace(self, columns=tuple(cols)), True
        cols.append(column)
        return replace(self, columns=tuple(cols)), False

    def append(self, name: str, values: np.ndarray) -> "DataSet":
        """Add rows at the end of column `name`."""
        col = self.get(name)
        new = _frozen(np.concatenate([col.values, values]))
        return self.with_column(replace(col, values=new))[0]

    def load_table(self, table: Table, columns: dict[str, np.ndarray],
                   record: FileRecord) -> "DataSet":
        """Add the columns of a freshly read table (replacing same-named ones)."""
        ds = self
        for name, vals in columns.items():
            ds, _ = ds.with_column(Column(table.prefix + name, _frozen(vals), table.name))
        tables = tuple(t for t in ds.tables if t.name != table.name) + (table,)
        return replace(ds, tables=tables, files=ds.files + (record,))

    def append_table(self, table: Table, columns: dict[str, np.ndarray],
                     record: FileRecord) -> "DataSet":
        ds = self
        for name, vals in columns.items():
            ds = ds.append(table.prefix + name, vals)
        return replace(ds, files=ds.files + (record,))

    def with_value(self, name: str, row: int, value: float) -> "DataSet":
        """Column `name` with the value in `row` (0-based) replaced."""
        col = self.get(name)
        new = np.array(col.values)
        new[row] = value
        return self.with_column(replace(col, values=_frozen(new)))[0]

    def row_group(self, name: str) -> tuple[str, ...]:
        """The columns a row of column `name` belongs to: every column of its table
        that still has as many rows, or the column alone when it was typed."""
        col = self.get(name)
        if col.table is None:
            return (name,)
        return tuple(c.name for c in self.columns
                     if c.table == col.table and c.rows == col.rows)

    def without_row(self, name: str, row: int) -> "DataSet":
        """Row `row` (0-based) taken out of every column of `row_group(name)`."""
        ds = self
        for n in self.row_group(name):
            col = ds.get(n)
            ds = ds.with_column(replace(col, values=_frozen(np.delete(col.values, row))))[0]
        return ds

    def table_for_header(self, header: tuple[str, ...], prefix: str | None) -> Table | None:
        for t in reversed(self.tables):
            if t.header == header and (prefix is None or t.prefix == prefix):
                return t
        return None


def _frozen(a: np.ndarray) -> np.ndarray:
    a = np.array(a, dtype=np.float64)
    a.setflags(write=False)
    return a


def check_value(v: float, where: str) -> float:
    """Refuse NaN, infinities and values too large for float64 arithmetic."""
    if not math.isfinite(v):
        raise DataError(f"{where}: `{v}` is not a finite number")
    if abs(v) > MAX_VALUE:
        raise DataError(f"{where}: `{v:g}` is too large (beyond {MAX_VALUE:g})")
    return v


#: A decimal number as written in data files: ASCII digits, an optional sign,
#: point and exponent (Python's float() would also take "1_000" and non-ASCII digits).
_NUMBER = re.compile(r"[+-]?([0-9]+\.?[0-9]*|\.[0-9]+)([eE][+-]?[0-9]+)?")


def parse_number(text: str, where: str) -> float:
    """One cell or typed value to a float, with an error naming `where`."""
    t = text.strip()
    if not t:
        raise DataError(f"{where}: missing value")
    low = t.lower().lstrip("+-")
    if low in ("nan", "inf", "infinity"):
        raise DataError(f"{where}: `{quoted(t)}` is not a finite number")
    try:
        if not _NUMBER.fullmatch(t):
            raise ValueError
        v = float(t)
    except ValueError:
        raise DataError(f"{where}: `{quoted(t, 30)}` is not a number") from None
    if not math.isfinite(v):
        raise DataError(f"{where}: `{quoted(t)}` is out of range")
    if v == 0 and any(c in "123456789" for c in low.split("e")[0]):
        # a nonzero value below double precision would silently become 0
        raise DataError(f"{where}: `{quoted(t)}` is too small (it rounds to 0 in double "
                        "precision)")
    return check_value(v, where)


#: Most values one typed column may hold (ranges included).
MAX_TYPED_VALUES = 1_000_000


def _typed_range(text: str, where: str) -> np.ndarray:
    """``LO:HI`` or ``LO:HI:STEP``: LO, LO + STEP, ..., HI, both ends included."""
    parts = text.split(":")
    shown = text.strip()
    if len(parts) > 3:
        raise DataError(f"{where}: range `{shown}` has {len(parts)} parts; write LO:HI or "
                        "LO:HI:STEP")
    names = ("start", "end", "step")
    for k, part in enumerate(parts):
        if not part.strip():
            raise DataError(f"{where}: range `{shown}` is missing its {names[k]}; write LO:HI "
                            "or LO:HI:STEP")
    lo, hi = (parse_number(parts[k], f"{where} (the {names[k]} of range `{shown}`)")
              for k in range(2))
    step = parse_number(parts[2], f"{where} (the step of range `{shown}`)") \
        if len(parts) == 3 else 1.0
    if step <= 0:
        raise DataError(f"{where}: range `{shown}` needs a step > 0")
    if hi < lo:
        raise DataError(f"{where}: range `{shown}` runs backwards; write the smaller end "
                        f"first ({parts[1].strip()}:{parts[0].strip()}"
                        f"{':' + parts[2].strip() if len(parts) == 3 else ''})")
    steps = (hi - lo) / step
    whole = round(steps)
    if abs(steps - whole) > 1e-9 * max(1.0, steps):
        raise DataError(f"{where}: range `{shown}` does not end on a step: ({_g(hi)} - "
                        f"{_g(lo)})/{_g(step)} = {steps:.6g} steps, not a whole number")
    if whole + 1 > MAX_TYPED_VALUES:
        raise DataError(f"{where}: range `{shown}` has {whole + 1:,.0f} values; at most "
                        f"{MAX_TYPED_VALUES:,} may be typed (load more from a CSV file)")
    vals = lo + step * np.arange(whole + 1, dtype=float)
    vals[-1] = hi  # the end exactly, not lo + n*step rounded
    return vals


def _g(v: float) -> str:
    return f"{v:g}"


def typed_column(name: str, texts: list[str]) -> np.ndarray:
    """Values typed as ``data NAME = v1, v2, ...``; a value may be a range ``LO:HI`` or
    ``LO:HI:STEP`` (both ends included)."""
    pieces = []
    total = 0
    for i, t in enumerate(texts):
        where = f"data `{name}` value {i + 1}"
        if ":" in t:
            if t.strip() == ":":
                raise DataError(f"{where}: `:` alone is not a value; write a range without "
                                "blanks, as 5:8")
            piece = _typed_range(t, where)
        else:
            piece = np.array([parse_number(t, where)])
        total += piece.size
        if total > MAX_TYPED_VALUES:
            raise DataError(f"data `{name}` has more than {MAX_TYPED_VALUES:,} values (at "
                            f"value {i + 1}); load more from a CSV file")
        pieces.append(piece)
    if not pieces:
        raise DataError(f"data `{name}` has no values")
    return _frozen(np.concatenate(pieces))


@dataclass(frozen=True)
class CsvTable:
    """A CSV file as read: header, numeric columns, rows and checksum."""

    path: str
    header: tuple[str, ...]
    columns: dict[str, np.ndarray]
    rows: int
    sha256: str


def read_csv(path: str, *, shown: str | None = None) -> CsvTable:
    """Read a CSV file with a header row and numeric cells.

    A UTF-8 byte-order mark and Windows line ends are accepted. Every other
    problem is a `DataError` naming the file, and the row (1-based, the header
    being row 1) and column where it is.
    """
    name = os.path.basename(path)
    raw = read_bytes(path, shown=shown, what="CSV file", limit=MAX_FILE_BYTES)
    rows = _csv_rows(_decode(raw, name), name)
    header = _header(rows[0], name)
    body = rows[1:]
    if not body:
        raise DataError(f"file `{name}` has a header but no rows of data")
    values = np.empty((len(body), len(header)))
    for k, row in enumerate(body):
        if len(row.cells) != len(header):
            raise DataError(f"file `{name}` row {row.line}: {len(row.cells)} cells where the "
                            f"header has {len(header)}")
        for j, cell in enumerate(row.cells):
            values[k, j] = parse_number(cell, f"file `{name}` row {row.line}, column "
                                              f"`{header[j]}`")
    cols = {h: _frozen(values[:, j]) for j, h in enumerate(header)}
    return CsvTable(path, tuple(header), cols, len(body), hashlib.sha256(raw).hexdigest())


def _decode(raw: bytes, name: str) -> str:
    """UTF-8 text with no NUL byte, not blank."""
    text = decode_text(raw, shown=name, what="CSV text file")
    if not text.strip():
        raise DataError(f"file `{name}` is empty")
    return text


@dataclass(frozen=True)
class _CsvRow:
    """A non-blank row of a CSV file: its line number (1-based) and its cells."""

    line: int
    cells: list[str]


def _csv_rows(text: str, name: str) -> list[_CsvRow]:
    """The rows that hold something (blank lines, as a trailing newline, skipped);
    at least one."""
    try:
        rows = list(csv.reader(io.StringIO(text, newline="")))
    except csv.Error as exc:
        raise DataError(f"file `{name}`: cannot read as CSV ({exc})") from None
    numbered = [_CsvRow(i + 1, r) for i, r in enumerate(rows) if any(c.strip() for c in r)]
    if not numbered:
        raise DataError(f"file `{name}` is empty")
    return numbered


#: What a header cell must look like before it is shown in a message: a word (letters
#: of any script, digits, _); the rules for names then apply, the name quoted short.
_NAME_LIKE = re.compile(r"[^\W\d]\w*")


def _header(row: _CsvRow, name: str) -> list[str]:
    """Column names: each a valid name, none twice."""
    header = [h.strip() for h in row.cells]
    for j, h in enumerate(header):
        if not h:
            raise DataError(f"file `{name}` row {row.line}, column {j + 1}: empty column name")
        if not _NAME_LIKE.fullmatch(h):
            # the file's own text is not echoed: it may be anything (a password file)
            raise DataError(f"file `{name}` row {row.line}, column {j + 1}: not a CSV file "
                            "with a header of names (a column name starts with a letter and "
                            "uses only letters, digits and _)")
        try:
            check_name(h, "column name")
        except FormulaError as exc:
            raise DataError(f"file `{name}` row {row.line}, column {j + 1}: {exc}") from None
    dup = {h for h in header if header.count(h) > 1}
    if dup:
        raise DataError(f"file `{name}` row {row.line}: column `{sorted(dup)[0]}` appears twice")
    return header
