"""Where the shell keeps its own files: the XDG state folder.

``$XDG_STATE_HOME/quadrat`` (default ``~/.local/state/quadrat``) holds the
prompt's history and the log of unexpected errors.
"""

from __future__ import annotations

import os


def state_dir(environ=os.environ) -> str:
    base = environ.get("XDG_STATE_HOME", "")
    if not base or not os.path.isabs(base):
        base = os.path.join(os.path.expanduser("~"), ".local", "state")
    return os.path.join(base, "quadrat")


def history_file(environ=os.environ) -> str:
    return os.path.join(state_dir(environ), "history")
