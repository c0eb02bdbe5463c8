"""The bottom toolbar: a pure function of `Workspace.status()`."""

from __future__ import annotations

from engine.results import Status

from .render import count, num


def toolbar_text(status: Status, width: int = 80) -> str:
    """``params p, q | 40,401 points | posterior current | log evidence -7.31``."""
    params = ", ".join(status.params) if status.params else "none"
    parts = [f"params {params}"]
    parts.append(f"{count(status.points)} points" if status.points is not None else "no grid yet")
    parts.append({"absent": "no posterior", "current": "posterior current",
                  "out of date": "posterior out of date"}.get(status.posterior,
                                                              status.posterior))
    if status.log_evidence is not None:
        ev = f"log evidence {num(status.log_evidence)}"
        if status.posterior == "out of date":
            ev += " (before the change)"
        parts.append(ev)
    if status.whatif:
        parts.append("what-if")
    text = " | ".join(parts)
    if len(text) > width:
        # the parameters give way first: the rest is what a glance needs
        rest = " | ".join(parts[1:])
        room = max(width - len(rest) - 3, 10)
        head = parts[0] if len(parts[0]) <= room else parts[0][:room - 3] + "..."
        text = f"{head} | {rest}"[:width]
        if status.whatif and not text.endswith("what-if"):
            # an open what-if layer must never be cut off the end
            text = text[:max(width - len(" | what-if"), 0)] + " | what-if"
    return text
