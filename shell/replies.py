"""What handlers hand back to the dispatcher: frozen records."""

from __future__ import annotations

from dataclasses import dataclass

from engine.results import Answer

from .render import num, tol_text


@dataclass(frozen=True)
class Shown:
    """The numbers a question showed, as a saved `check` line states them."""

    question: str
    values: tuple[float, ...]
    tol: float

    def check_line(self) -> str:
        vals = ", ".join(num(v) for v in self.values)
        return f"check {self.question} = {vals} tol {tol_text(self.tol)}"


@dataclass(frozen=True)
class Asked:
    """A question answered, not yet printed."""

    answer: Answer
    lines: tuple[str, ...]
    shown: Shown


@dataclass(frozen=True)
class DataFile:
    """A data file a command read: where it is, and its SHA-256 then."""

    typed: str          # the path as typed in the command
    absolute: str
    sha256: str


@dataclass(frozen=True)
class Reply:
    """What a handler reports back to the dispatcher.

    Attributes
    ----------
    shown : tuple of Shown
        The numbers a question showed (each becomes a saved check line).
    status : str
        ``ok``; ``failed`` (a check did not hold); ``error`` (already reported).
    data_file : DataFile or None
    check_of : str or None
        For `check`: the question it checked (to fold it into that question).
    logged : bool
        Whether the session log keeps the command (a change that only listed: no).
    """

    shown: tuple[Shown, ...] = ()
    status: str = "ok"
    data_file: DataFile | None = None
    check_of: str | None = None
    logged: bool = True     # False: the command only looked (`keep` alone lists)
