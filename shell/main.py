"""The `quadrat` command: the prompt, a session file, ``-c`` text or stdin.

Exit status: 0 when all went well, 1 when a check failed, 2 at the first error
(or after all of them with ``--keep-going``), 130 when interrupted, 141 when the
reader of the output went away (a closed pipe, as with ``| head``).
"""

from __future__ import annotations

import argparse
import os
import sys
import warnings

from . import __version__
from .app import App
from .printer import Printer
from .words import ShellError, split_commands

EXIT_INTERRUPTED = 130
#: The status of a command stopped by a closed pipe (128 + SIGPIPE), as the shell reports it.
EXIT_PIPE = 141


def parser() -> argparse.ArgumentParser:
    p = argparse.ArgumentParser(
        prog="quadrat",
        description="Stepwise posterior work on small Bayesian models, in the terminal. "
                    "With no FILE and no -c, opens the prompt on a terminal, or runs the "
                    "commands piped on standard input.",
        epilog="Exit status: 0 all went well, 1 a check failed, 2 an error.")
    p.add_argument("file", nargs="?", metavar="FILE",
                   help="a session file (.qd) to replay and verify")
    p.add_argument("-c", dest="commands", metavar="TEXT",
                   help='commands to run, separated by ";" or new lines')
    p.add_argument("--keep-going", action="store_true",
                   help="run on after an error (the exit status is still 2)")
    p.add_argument("--allow-changed-data", action="store_true",
                   help="replay even when a data file's SHA-256 differs from the one saved")
    p.add_argument("--debug", action="store_true",
                   help="print the traceback of an unexpected error on standard error")
    p.add_argument("--budget", type=float, metavar="SECONDS", default=None,
                   help="the time budget: `compute` refuses jobs predicted to take longer "
                        "(default 600 s; `budget SECONDS` sets it inside a session)")
    p.add_argument("--version", action="version", version=f"quadrat {__version__}")
    return p


def main(argv: list[str] | None = None, *, stdin=None, stdout=None, stderr=None) -> int:
    """Run quadrat with command-line arguments `argv`; returns the exit status."""
    args = parser().parse_args(argv)
    if not args.debug:
        # numpy's floating-point warnings are the engine's business: it reports
        # what they mean in its own messages
        warnings.simplefilter("ignore", RuntimeWarning)
    stdin = stdin if stdin is not None else sys.stdin
    stdout = stdout if stdout is not None else sys.stdout
    stderr = stderr if stderr is not None else sys.stderr
    if args.file and args.commands is not None:
        stderr.write("quadrat: give a session FILE or -c TEXT, not both\n")
        return 2
    interactive = args.file is None and args.commands is None and _isatty(stdin)
    printer = Printer(stdout, stdout if interactive else stderr)
    app = App(printer, debug=args.debug, keep_going=args.keep_going,
              allow_changed_data=args.allow_changed_data)
    if args.budget is not None:
        if not (args.budget > 0 and args.budget < float("inf")):
            stderr.write("quadrat: --budget needs a positive number of seconds\n")
            return 2
        app.ws.budget_seconds = args.budget
    from . import journal as J
    held = J.catch_signals()
    journal = None
    try:
        journal = J.start(app, interactive=interactive)
        if interactive:
            from .repl import Repl
            return Repl(app).run()
        if args.file is not None:
            return run_file(app, args.file)
        if args.commands is not None:
            lines = split_commands(args.commands)
            return finish(app.run_lines(lines, lambda i: f"-c command {i}"))
        return finish(app.run_lines(_lines(stdin), lambda i: f"stdin line {i}"))
    except KeyboardInterrupt:
        printer.error("interrupted")
        return EXIT_INTERRUPTED
    except BrokenPipeError:
        # the reader went away (as with `| head`): stop quietly; the output stream
        # now points at the null device so that nothing complains at exit
        try:
            devnull = os.open(os.devnull, os.O_WRONLY)
            os.dup2(devnull, stdout.fileno())
        except (OSError, ValueError, AttributeError):
            pass
        return EXIT_PIPE
    except J.Ended as ended:
        # a dropped connection (SIGHUP) or a stop (SIGTERM): what the session did is in
        # the journal; say so if anyone can still read it
        if journal is not None:
            journal.finish(ended.name)
            try:
                printer.error(f"quadrat: ended by {ended.name}; `journal restore` in the next "
                              f"`quadrat` brings the session back (journal {journal.id})")
            except (OSError, ValueError):
                pass
        return ended.code
    finally:
        J.release_signals(held)
        if journal is not None:
            journal.finish("quit")


def run_file(app: App, path: str) -> int:
    from . import script
    from .commands.session import report

    try:
        tally = script.replay(app, path)
    except ShellError as exc:
        app.printer.error(f"error: {exc}")
        return 2
    report(app, path, tally)
    return finish(tally)


def finish(tally) -> int:
    if tally.cancelled:
        return EXIT_INTERRUPTED
    return tally.exit_code


def _isatty(stream) -> bool:
    try:
        return bool(stream.isatty())
    except (AttributeError, ValueError):
        return False


def _lines(stream):
    for i, raw in enumerate(stream):
        line = raw.rstrip("\r\n")
        # a byte-order mark that an editor put at the start of the text
        yield line.removeprefix("\ufeff") if i == 0 else line


if __name__ == "__main__":  # pragma: no cover
    sys.exit(main())
