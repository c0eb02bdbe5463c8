"""What decides whether a posterior is current, and undo.

A posterior is current when it was computed from the state's own model, data,
grids and rule. Models and data sets carry revision numbers for this, issued
once per new object and never again: unlike ``id()``, which is reused once an
object is freed, a revision cannot make a stale posterior read as current.
"""

from dataclasses import replace

import numpy as np

from engine.data import Column, DataSet
from engine.model import Model, make_param


def test_every_new_model_and_data_set_has_a_revision_never_issued_before():
    m = Model()
    m2, _ = m.with_param(make_param("p", "unit"))
    m3 = replace(m2)
    d = DataSet()
    d2, _ = d.with_column(Column("y", np.zeros(2)))
    revs = [m.revision, m2.revision, m3.revision, d.revision, d2.revision]
    assert len(set(revs)) == len(revs)
    # the revision is not part of what a model is: equal content compares equal
    assert m3 == m2 and hash(m3) == hash(m2)
    seen = set(revs)
    for _ in range(500):
        # objects freed at once: their memory (and id) is reused, their revision is not
        r = DataSet().revision
        assert r not in seen
        seen.add(r)
