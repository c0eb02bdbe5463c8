"""Revision numbers: one for every new `Model` and `DataSet` object.

A basis (what a posterior was computed from) and a cache of compiled models are
keyed on these, never on ``id()``: an id is reused once its object is freed, so
a stale posterior could read as current, while a revision is issued once per
process and never again.
"""

from __future__ import annotations

import itertools

# one counter for the process: a revision must never be issued twice, so it
# cannot live on any one object
_ISSUED = itertools.count(1)


def next_revision() -> int:
    """A revision number not issued before in this process."""
    return next(_ISSUED)
