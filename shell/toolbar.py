"""The bottom toolbar: a pure function of `Workspace.status()`.

When the full text does not fit the width, words give way before numbers: the list
of parameters shortens to a count, labels to short forms (``posterior current`` to
``current``, ``log evidence`` to ``log ev``), and only then whole parts drop, the
parameters first; a number is never cut, and an open what-if layer always shows.
"""

from __future__ import annotations

from engine.results import Status

from .layout import cells
from .render import count, num, to_error


def _params(names: tuple[str, ...]) -> list[str]:
    if not names:
        return ["params none", "no params", ""]
    forms = ["params " + ", ".join(names)]
    for k in range(len(names) - 1, 0, -1):
        forms.append("params " + ", ".join(names[:k]) + f", +{len(names) - k}")
    forms.append(f"{len(names)} param{'s' if len(names) != 1 else ''}")
    return forms + [""]


def _forms(status: Status) -> list[list[str]]:
    """Each part of the toolbar as its forms, longest first; an empty form drops it."""
    parts = [_params(status.params)]
    if status.points is not None:
        parts.append([f"{count(status.points)} points", f"{count(status.points)} pts", ""])
    else:
        parts.append(["no grid yet", "no grid", ""])
    parts.append({"absent": ["no posterior", "no posterior", ""],
                  "current": ["posterior current", "current", ""],
                  "out of date": ["posterior out of date", "out of date", ""]}.get(
        status.posterior, [status.posterior]))
    if status.log_evidence is not None:
        v = (num(status.log_evidence, 2) + " (not resolved)" if status.unresolved
             else to_error(status.log_evidence, status.log_evidence_error))
        if status.posterior == "out of date":
            parts.append([f"log evidence {v} (before the change)", f"log evidence {v} (before)",
                          f"log ev {v} (before)", f"log ev {v} (old)"])
        else:
            parts.append([f"log evidence {v}", f"log ev {v}"])
    if status.whatif:
        parts.append(["what-if"])
    return parts


#: The order in which parts shorten, one step at a time: (part, form). Parts are
#: 0 params, 1 points, 2 posterior, 3 log evidence; the last steps drop parts whole.
def _steps(parts: list[list[str]]) -> list[tuple[int, int]]:
    names = len(parts[0]) - 2                      # forms of the params: names ... count
    steps = [(0, k) for k in range(1, names)]      # fewer names, down to one and `+k`
    ev = len(parts) > 3 and parts[3][0].startswith("log")
    if ev and len(parts[3]) > 2:
        steps.append((3, 1))                       # "(before the change)" -> "(before)"
    steps += [(2, 1), (1, 1)]                      # short labels
    if ev:
        steps += [(3, k) for k in range(1, len(parts[3]))]
    if names > 1:
        steps.append((0, names))                   # a count of the params
    steps += [(0, names + 1), (1, 2), (2, 2)]      # drop params, points, posterior
    return steps


def toolbar_text(status: Status, width: int = 80) -> str:
    """``params p, q | 40,401 points | posterior current | log evidence -7.31``."""
    parts = _forms(status)
    pick = [0] * len(parts)

    def text(sep=" | "):
        return sep.join(p[i] for p, i in zip(parts, pick) if p[i])

    if cells(text()) <= width:
        return text()
    for part, k in _steps(parts):
        if part < len(parts) and k < len(parts[part]):
            pick[part] = k
        if cells(text()) <= width:
            return text()
    return text("|")
