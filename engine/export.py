"""Marginals and summaries to CSV and JSON files, written atomically.

The files are written with `engine.files.atomic_write`: a crash at any moment
leaves either the old file whole or the new one whole.
"""

from __future__ import annotations

import csv
import io
import json
import math
import os
from dataclasses import dataclass
from typing import Mapping

from .errors import QuadratError
from .files import atomic_write
from .framing import is_node, points_of
from .posterior import Estimate, Posterior

FORMATS = (".csv", ".json")


@dataclass(frozen=True)
class ExportReport:
    """What `export` wrote.

    Attributes
    ----------
    path : str
    what : str
        ``marginals``, ``summary`` or ``all``.
    rows : int
        Data rows written (CSV), or parameters (JSON).
    bytes : int
    """

    path: str
    what: str
    rows: int
    bytes: int


def _f(v) -> float | None:
    """A JSON-safe float (None for NaN or infinities)."""
    if v is None:
        return None
    v = float(v)
    return v if math.isfinite(v) else None


def _est(e: Estimate | None) -> dict | None:
    if e is None:
        return None
    return {"value": _f(e.value), "error": _f(e.error), "method": e.method}


def _csv_text(header, rows) -> str:
    buf = io.StringIO()
    w = csv.writer(buf, lineterminator="\n")
    w.writerow(header)
    w.writerows(rows)
    return buf.getvalue()


def marginals_csv(post: Posterior) -> tuple[str, int]:
    """Every 1-D marginal in one long table: ``parameter,value,density,mass``.

    `density` is in the parameter's own units (the probability for a discrete
    parameter); `mass` is the posterior mass each grid node carries.
    """
    rows = []
    for name in post.names:
        m = post.marginal(name)
        dens = m.density()
        for v, d, w in zip(m.values, dens, m.mass):
            rows.append([name, repr(float(v)), repr(float(d)), repr(float(w))])
    return _csv_text(["parameter", "value", "density", "mass"], rows), len(rows)


_STATS = (("mean", "mean"), ("sd", "sd"), ("q025", "q2.5"), ("q50", "q50"), ("q975", "q97.5"))


def summary_csv(summary) -> tuple[str, int]:
    """One row a parameter and a let: each statistic and its estimated error (empty
    where a let's could not be given)."""
    header = ["parameter"]
    for _, label in _STATS:
        header += [label, label + "_error"]
    rows = []
    for r in summary.rows:
        row = [r.name]
        for attr, _ in _STATS:
            e = getattr(r, attr)
            ok = math.isfinite(e.value)
            row += [repr(float(e.value)) if ok else "",
                    "" if e.error is None or not ok else repr(float(e.error))]
        rows.append(row)
    return _csv_text(header, rows), len(rows)


def to_json(post: Posterior, summary, *, meta: Mapping[str, object] | None = None,
            mode=None) -> str:
    """Summary, log evidence, the joint mode (anything with `values`, `converged` and `message`, when given) and every
    marginal as one JSON document, every number to full double precision."""
    params, lets = {}, {}
    for r in summary.rows:
        if r.let:
            lets[r.name] = {"mean": _est(r.mean), "sd": _est(r.sd), "q2.5": _est(r.q025),
                            "q50": _est(r.q50), "q97.5": _est(r.q975)}
            continue
        m = post.marginal(r.name)
        params[r.name] = {
            "discrete": bool(m.discrete),
            "mean": _est(r.mean), "sd": _est(r.sd),
            "q2.5": _est(r.q025), "q50": _est(r.q50), "q97.5": _est(r.q975),
            "marginal": {"values": [_f(v) for v in m.values],
                         "density": [_f(v) for v in m.density()],
                         "mass": [_f(v) for v in m.mass]},
        }
    doc = {
        **(dict(meta) if meta else {}),
        "points": int(points_of(post)),
        "grid": ([f"rule {post.label}"] if is_node(post) else
                 [a.describe() for a in post.grid.axes]),
        "log_evidence": _est(summary.log_evidence),
        "parameters": params,
        "lets": lets,
    }
    if mode is not None:
        doc["mode"] = {"values": {k: _f(v) for k, v in mode.values.items()},
                       "converged": bool(mode.converged), "message": mode.message}
    return json.dumps(doc, indent=1, allow_nan=False) + "\n"


def export(path: str, post: Posterior, summary, *, what: str = "marginals",
           meta: Mapping[str, object] | None = None, mode=None) -> ExportReport:
    """Write marginals or the summary to `path` (CSV), or everything (JSON).

    Parameters
    ----------
    path : str
        Ends in ``.csv`` or ``.json``.
    what : str, keyword-only
        For CSV: ``marginals`` (the long table) or ``summary``. JSON holds both.
    """
    ext = os.path.splitext(path)[1].lower()
    if ext not in FORMATS:
        raise QuadratError(f"`{os.path.basename(path)}`: export writes .csv or .json files")
    if ext == ".json":
        text = to_json(post, summary, meta=meta, mode=mode)
        rows, what = len(summary.rows), "all"
    elif what == "summary":
        text, rows = summary_csv(summary)
    elif what == "marginals":
        text, rows = marginals_csv(post)
    else:
        raise QuadratError(f"unknown export `{what}`; use marginals or summary")
    n = atomic_write(path, text)
    return ExportReport(path, what, rows, n)
