"""Which characters a line, a name or a file name may hold, and how text is quoted.

Three checks, each in one function, and one way to show a piece of text in a
message:

- `line_flaw`: a character that must never reach a terminal from a line, typed
  or read from a file, comments included: controls (an escape sequence, NUL),
  format characters (bidi overrides and isolates, marks, zero-width spaces, a
  byte-order mark), line and paragraph separators. `cat` of a file holding one
  could erase, reorder or hide what the file really says.
- `name_problem`: a parameter, column, let, prediction or keep name is plain
  ASCII; a name holding anything else is refused with the character named, an
  invisible one (a filler, a zero-width or non-ASCII space) said to be so, and a
  name that NFKC-normalises to another string (full-width or mathematical
  letters, ligatures) said to look like that string.
- `file_name_problem`: a file name may use any visible letter (accented, Greek,
  ...) but no invisible character, so that ``d<U+3164>.csv`` cannot pass for
  ``d.csv``.
- `escaped` and `quoted`: text with every such character written as ``\\x1b``
  or ``U+202E``, and at most a short piece of it (a file's content is never
  echoed at length).
"""

from __future__ import annotations

import unicodedata
from dataclasses import dataclass

#: Bidirectional controls (embeddings, overrides, isolates, marks). All are format
#: characters already; listed so that the rule reads plainly.
BIDI = frozenset(chr(c) for c in (0x061C, 0x200E, 0x200F, *range(0x202A, 0x202F),
                                  *range(0x2066, 0x206A)))
#: Letters and marks that draw nothing: Hangul fillers, the blank Braille pattern,
#: Khmer inherent vowels, the combining grapheme joiner, the Mongolian vowel separator.
FILLERS = frozenset(chr(c) for c in (0x115F, 0x1160, 0x3164, 0xFFA0, 0x2800, 0x17B4, 0x17B5,
                                     0x034F, 0x180E))
#: Names of the controls that have none in the Unicode database.
_CONTROL_NAMES = {"\x00": "NUL", "\x1b": "escape", "\x7f": "delete",
                  "\x9b": "control sequence introducer", "\r": "carriage return",
                  "\n": "line feed", "\x0c": "form feed", "\x0b": "vertical tab",
                  "\x08": "backspace", "\x07": "bell", "\x85": "next line",
                  "\t": "tab"}
#: The longest piece of a file's or a line's text a message quotes.
QUOTE_LIMIT = 40


def hidden(ch: str) -> bool:
    """A character no line may hold (a tab excepted): a control, a format character
    (bidi controls among them), a lone surrogate, a line or paragraph separator."""
    return ch != "\t" and (unicodedata.category(ch) in ("Cc", "Cf", "Cs", "Zl", "Zp")
                           or ch in BIDI)


def invisible(ch: str) -> bool:
    """A character that draws nothing or passes for a plain space: everything
    `hidden`, a tab, a space other than ASCII's, a filler, a variation selector."""
    o = ord(ch)
    return (hidden(ch) or ch == "\t" or ch in FILLERS
            or (unicodedata.category(ch) == "Zs" and ch != " ")
            or 0xFE00 <= o <= 0xFE0F or 0xE0100 <= o <= 0xE01EF)


def code(ch: str) -> str:
    """One character as an escape: ``\\x1b`` below U+0100, else ``U+202E``."""
    o = ord(ch)
    return f"\\x{o:02x}" if o < 0x100 else f"U+{o:04X}"


def char_name(ch: str) -> str:
    """The character's Unicode name in lower case (or a short description)."""
    if ch in _CONTROL_NAMES:
        return _CONTROL_NAMES[ch]
    name = unicodedata.name(ch, "")
    if name:
        return name.lower()
    return {"Cs": "a lone surrogate", "Cc": "a control character"}.get(
        unicodedata.category(ch), "an unnamed character")


def _inline(ch: str) -> str:
    """One character as written inside a piece of text: itself, or ``\\x1b`` /
    ``<U+3164>`` when it is invisible."""
    if not invisible(ch):
        return ch
    c = code(ch)
    return c if c.startswith("\\") else f"<{c}>"


def escaped(text: str) -> str:
    """`text` with every invisible character written as ``\\x1b`` or ``<U+3164>``."""
    if not any(invisible(ch) for ch in text):
        return text
    return "".join(map(_inline, text))


def terminal_safe(text: str) -> str:
    """`text` with every `hidden` character escaped (tabs, spaces and fillers kept):
    what may go to a terminal."""
    if not any(hidden(ch) for ch in text):
        return text
    return "".join(_inline(ch) if hidden(ch) else ch for ch in text)


def quoted(text: str, limit: int = QUOTE_LIMIT) -> str:
    """At most `limit` characters of `escaped(text)`, cut with ``...``."""
    pieces = [_inline(ch) for ch in text]
    if sum(map(len, pieces)) <= limit:
        return "".join(pieces)
    out: list[str] = []
    n = 0
    for piece in pieces:
        if n + len(piece) > limit - 3:
            break
        out.append(piece)
        n += len(piece)
    return "".join(out) + "..."


@dataclass(frozen=True)
class Flaw:
    """A character a text may not hold, and where (0-based)."""

    index: int
    char: str

    @property
    def shown(self) -> str:
        return code(self.char)

    @property
    def name(self) -> str:
        return char_name(self.char)


def line_flaw(text: str, body: tuple[int, int] | None = None) -> Flaw | None:
    """The first character of line `text` that it may not hold, if any: a `hidden`
    one anywhere, comments included, and within `body` (the command, 0-based start
    and end) also a space other than ASCII's (a no-break or thin space)."""
    a, b = body if body is not None else (0, 0)
    for i, ch in enumerate(text):
        if hidden(ch) or (a <= i < b and _odd_space(ch)):
            return Flaw(i, ch)
    return None


def _odd_space(ch: str) -> bool:
    """A space other than ASCII's (no-break, thin, ideographic, ...): words split at
    it unseen. Fillers are letters to the splitter; the checks of names, file names
    and formulas refuse them with their own message."""
    return ch != " " and unicodedata.category(ch) == "Zs"


def line_message(flaw: Flaw) -> str:
    """The one line for a line that holds `flaw` (the caller adds its place)."""
    if not hidden(flaw.char):
        return (f"character `{flaw.shown}` ({flaw.name}) is not allowed in a command; type "
                "a plain space")
    return (f"character `{flaw.shown}` ({flaw.name}) is not allowed in a command or a "
            "comment")


def name_problem(name: str, what: str = "name") -> str | None:
    """Why `name` cannot name a parameter, column, let, prediction or kept model,
    as far as its characters go (None when all are ASCII). The ASCII rules
    themselves (a letter first, then letters, digits and _) are the caller's."""
    if name.isascii():
        return None
    for i, ch in enumerate(name):
        if invisible(ch):
            return (f"{what} `{quoted(name)}` holds `{code(ch)}` ({char_name(ch)}), an "
                    f"invisible character, at character {i + 1}; names use ASCII letters, "
                    "digits and _ only")
    normal = unicodedata.normalize("NFKC", name)
    if normal != name and normal.isascii():
        return (f"{what} `{quoted(name)}` looks like `{quoted(normal)}` but is written with "
                f"other characters; type `{quoted(normal)}` in plain ASCII")
    for i, ch in enumerate(name):
        if not ch.isascii():
            return (f"{what} `{quoted(name)}` holds `{ch}` (U+{ord(ch):04X} {char_name(ch)}) at "
                    f"character {i + 1}; names use ASCII letters, digits and _ only")
    return None  # pragma: no cover - a non-ASCII name holds a non-ASCII character


def file_name_problem(name: str) -> str | None:
    """Why `name` (a file name as typed) is refused, or None: it holds an invisible
    character, which would let it pass for another name."""
    for i, ch in enumerate(name):
        if invisible(ch):
            return (f"file name `{quoted(name)}` holds `{code(ch)}` ({char_name(ch)}), an "
                    f"invisible character, at character {i + 1}; quadrat refuses file names "
                    "that could pass for another")
    return None
