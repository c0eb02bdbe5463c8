"""Running hostile input through the shell's one-command path, and judging the outcome.

`Probe` is an `App` writing to strings, started from a shared base state (a small
model with a computed posterior, so that questions answer at once). `Probe.run`
runs one line and returns an `Outcome`: the status, what was printed, how long
it took, and whether anything changed. `Outcome.problems` lists what the user
would call a fault: a traceback or an "internal error" line (a crash), an error
that is not exactly one `error:` line, an error after more than a few seconds of
work (hung), or a change of state, session log or files after an error.
"""

from __future__ import annotations

import io
import os
import signal
import time
from dataclasses import dataclass, field

from shell.app import App
from shell.printer import Printer
from shell.words import Quit

#: An error must come within this many seconds of CPU time of this process (the work
#: done, which a loaded machine does not inflate as it does wall time); more is "hung".
HUNG_SECONDS = 5.0
#: A line still running after this many seconds is stopped (and counted as hung).
WATCHDOG_SECONDS = 30

#: The base model: two parameters, two likelihoods, a let, small grids. Invented
#: numbers, for exercising the shell only (no number here is checked).
BASE = [
    "param p unit", "param m real", "prior p ~ beta(2, 3)", "prior m ~ normal(0, 10)",
    "data k = 3, 2, 4", "data y = 1.2, 0.4, 2.2", "likelihood k ~ binomial(10, p)",
    "likelihood y ~ normal(m, 1)", "let odds = p / (1 - p)", "grid p 0.001 0.999 41",
    "grid m -5 5 41", "compute",
]
#: A CSV file the base folder holds (for `data load`), and a session file.
CSV = "n,z\n10,3\n10,2\n12,5\n"


class Hung(BaseException):
    """Raised by the watchdog: a line ran for longer than `WATCHDOG_SECONDS`."""


def _alarm(signum, frame):
    raise Hung()


@dataclass
class Outcome:
    line: str
    status: str
    out: str
    err: str
    seconds: float
    changed: bool
    files_changed: bool
    escaped: str = ""          # an exception that got out of App.run
    problems: list[str] = field(default_factory=list)

    @property
    def crashed(self) -> bool:
        return any(p.startswith("crash") for p in self.problems)

    @property
    def hung(self) -> bool:
        return any(p.startswith("hung") for p in self.problems)

    @property
    def changed_after_error(self) -> bool:
        return any(p.startswith("changed") for p in self.problems)


def judge(o: Outcome) -> Outcome:
    text = o.out + o.err
    if o.escaped:
        o.problems.append(f"crash: {o.escaped} escaped the one-command path")
    if "internal error" in text or "Traceback" in text:
        o.problems.append("crash: internal error or traceback printed")
    errors = [x for x in o.err.splitlines() if "error: " in x]
    if o.status == "error":
        if len(errors) != 1:
            o.problems.append(f"error printed {len(errors)} `error:` lines, not one")
        elif not errors[0].split("error: ", 1)[1].strip():
            o.problems.append("error line names nothing")
        if o.seconds > HUNG_SECONDS:
            o.problems.append(f"hung: the error came after {o.seconds:.1f} s of CPU time")
        if o.changed:
            o.problems.append("changed state after an error")
        if o.files_changed:
            o.problems.append("changed files after an error")
    elif o.status in ("ok", "checked", "failed", "blank", "quit"):
        if errors:
            o.problems.append(f"status {o.status} but printed an error line")
    elif o.status == "hung":
        o.problems.append(f"hung: still running after {WATCHDOG_SECONDS} s")
    else:
        o.problems.append(f"unexpected status {o.status!r}")
    return o


def base_app(folder: str, budget_seconds: float = 3.0) -> App:
    """An App in `folder` with the base model computed (built once, then shared)."""
    app = App(Printer(io.StringIO(), io.StringIO(), width=80, color=False),
              log_file=os.path.join(folder, "errors.log"))
    app.ws.base_dir = folder
    app.ws.budget_seconds = budget_seconds
    for line in BASE:
        assert app.run(line) == "ok", (line, app.printer.err.getvalue())
    return app


class Probe:
    """A fresh App that starts from the state of `base` (states are immutable, so
    sharing them is safe) or from nothing."""

    def __init__(self, folder: str, base: App | None = None, budget_seconds: float = 3.0):
        self.folder = folder
        self.out, self.err = io.StringIO(), io.StringIO()
        self.app = App(Printer(self.out, self.err, width=80, color=False),
                       log_file=os.path.join(folder, "errors.log"))
        ws = self.app.ws
        ws.base_dir = folder
        ws.budget_seconds = budget_seconds
        if base is not None:
            # the compiled model is cached on the state itself, so it comes along
            ws.restore(base.ws.state)

    def snapshot(self) -> tuple:
        app, ws = self.app, self.app.ws
        return (id(ws.state), tuple(id(s) for s in ws.history.earlier), ws.in_whatif,
                tuple((e.text, e.kind, len(e.shown)) for e in app.log), ws.base_dir)

    def files(self) -> dict:
        """Size and time of every file in the folder, except those this session's
        own `save` and `export` wrote (a replayed file may save before it fails)."""
        out = {}
        for top, _dirs, names in os.walk(self.folder):
            for name in names:
                path = os.path.join(top, name)
                if name == "errors.log" or os.path.realpath(path) in self.app.written:
                    continue
                try:
                    st = os.stat(path)
                except OSError:
                    continue
                out[os.path.relpath(path, self.folder)] = (st.st_size, st.st_mtime_ns)
        return out

    def run(self, line: str) -> Outcome:
        for s in (self.out, self.err):
            s.seek(0)
            s.truncate()
        before, files = self.snapshot(), self.files()
        escaped = ""
        old = signal.signal(signal.SIGALRM, _alarm)
        signal.alarm(WATCHDOG_SECONDS)
        t0 = time.process_time()
        try:
            status = self.app.run(line)
        except Quit:
            status = "quit"
        except Hung:
            status = "hung"
        except Exception as exc:  # noqa: BLE001 - that is what is being looked for
            status, escaped = "error", f"{type(exc).__name__}: {exc}"
        finally:
            signal.alarm(0)
            signal.signal(signal.SIGALRM, old)
        seconds = time.process_time() - t0
        changed = self.snapshot() != before
        after = self.files()
        files = {k: v for k, v in files.items() if k in after or
                 os.path.realpath(os.path.join(self.folder, k)) not in self.app.written}
        return judge(Outcome(line, status, self.out.getvalue(), self.err.getvalue(), seconds,
                             changed, after != files, escaped))


def prepare_folder(folder: str) -> None:
    """The files a probe's folder holds: a CSV file and its look-alike; two pipes (FIFOs, which git cannot
    hold: `pipe.fifo` named by a checksum line, `pipe.qd` as the target of `save`); a
    session file `target.qd` with a symbolic link `link.qd` to it, and a link
    `dangling.qd` to nothing."""
    with open(os.path.join(folder, "d.csv"), "w", encoding="utf-8") as fh:
        fh.write(CSV)
    # the same name with an invisible Hangul filler after the `d`: another file, which
    # looks like `d.csv` on the screen (git would carry the odd name badly)
    with open(os.path.join(folder, "d\u3164.csv"), "w", encoding="utf-8") as fh:
        fh.write("n,z\n99,99\n")
    for name in ("pipe.fifo", "pipe.qd"):
        os.mkfifo(os.path.join(folder, name))
    with open(os.path.join(folder, "target.qd"), "w", encoding="utf-8") as fh:
        fh.write("# quadrat session, saved by hand (invented)\nparam p unit\n")
    os.symlink("target.qd", os.path.join(folder, "link.qd"))
    os.symlink("nowhere.qd", os.path.join(folder, "dangling.qd"))
