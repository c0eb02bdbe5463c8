"""The engine's exceptions.

Every error the engine raises on bad input is a `QuadratError`: its message is one
line that names the offending thing in backticks and states the rule. The shell
prints that line and goes on.
"""

from __future__ import annotations


class QuadratError(ValueError):
    """Bad input to quadrat: one line naming the problem and its place."""


class FormulaError(QuadratError):
    """A formula that cannot be parsed or built.

    Parameters
    ----------
    message : str
        What is wrong, without the position.
    column : int or None
        1-based column in the formula text where the problem starts.
    """

    def __init__(self, message: str, column: int | None = None):
        self.reason = message
        self.column = column
        if column is not None:
            message = f"{message} at column {column}"
        super().__init__(message)


class ModelError(QuadratError):
    """A model declaration that breaks a rule (unknown name, bad domain, ...)."""


class DataError(QuadratError):
    """Data that cannot be used: names the file, row and column where known."""


class GridError(QuadratError):
    """A grid or rule that cannot be built or would not fit."""


class ComputeError(QuadratError):
    """A computation that cannot give a trustworthy answer (NaN, all zero, ...)."""


class FileError(DataError):
    """A file that cannot be read or written: not there, not a regular file, too
    large, not UTF-8 text. Names the file as the user typed it."""
