"""Screens of our own and pictures worth keeping: the joint picture's credible regions,
`plot ... to FILE.txt`, now and what-if on one plot, the recompute note.

References: the highest-density regions of a bivariate normal are the ellipses of
Mahalanobis radius r with r^2 = -2 log(1 - p) (the chi-square distribution with two
degrees of freedom, common practice), checked with scipy.stats.chi2.
"""

from __future__ import annotations

import io
import math
import os

import numpy as np
import pytest
import scipy.stats as st

from shell import plots
from shell.app import App
from shell.printer import Printer

BETA = ["param p unit", "prior p ~ beta(2, 3)", "data k = 3, 2, 4",
        "likelihood k ~ binomial(10, p)"]


def canvas(text):
    lines = text.split("\n")
    top = next(i for i, x in enumerate(lines) if "┌" in x)
    bottom = next(i for i, x in enumerate(lines) if "└" in x)
    left = lines[top].index("┌")
    right = lines[top].index("┐")
    return [x[left + 1:right] for x in lines[top + 1:bottom]]


def test_the_joint_picture_shades_the_highest_density_regions():
    # a standard bivariate normal (independent axes) on a fine symmetric grid: the cell
    # shaded for region p lies inside radius sqrt(chi2(2).ppf(p)), cells outside the
    # 99.9% region are blank
    xs = np.linspace(-5, 5, 201)
    X, Y = np.meshgrid(xs, xs, indexing="ij")
    mass = st.multivariate_normal([0, 0], np.eye(2)).pdf(np.dstack([X, Y]))
    text = plots.joint(xs, xs, mass, xname="a", yname="b", width=80, height=40)
    assert plots.ramp_legend() in text.split("\n")[0]
    rows = canvas(text)
    nrows, ncols = len(rows), len(rows[0])
    # the canvas spans the outer cell edges, -5.025 .. 5.025 on both axes
    half = 5.025

    def radius(r, c):
        x = -half + (c + 0.5) * 2 * half / ncols
        y = half - (r + 0.5) * 2 * half / nrows
        return math.hypot(x, y)

    # one cell of slack on each axis: a cell straddling a region's edge
    slack = math.hypot(2 * half / ncols, 2 * half / nrows)
    for level, p in enumerate(plots.REGIONS, 1):
        bound = math.sqrt(st.chi2(2).ppf(p))
        ch = plots.RAMP[level]
        for r, row in enumerate(rows):
            for c, got in enumerate(row):
                if got == ch:
                    assert radius(r, c) <= bound + slack, (ch, p, r, c)
    inner = math.sqrt(st.chi2(2).ppf(0.5))
    densest = [radius(r, c) for r, row in enumerate(rows) for c, ch in enumerate(row)
               if ch == plots.RAMP[-1]]
    # and the 50% region reaches out to its radius (within a cell)
    assert max(densest) >= inner - slack


def _shell(tmp_path, width=80):
    out, err = io.StringIO(), io.StringIO()
    app = App(Printer(out, err, width=width, color=False), log_file=str(tmp_path / "log"))
    app.ws.base_dir = str(tmp_path)
    return app, out, err


def test_plot_to_a_text_file_writes_the_picture(tmp_path):
    app, out, err = _shell(tmp_path)
    for line in BETA:
        app.run(line)
    assert app.run("plot p") == "ok"
    screen = out.getvalue().split("\n")
    assert app.run("plot p to p_plot.txt") == "ok", err.getvalue()
    assert out.getvalue().rstrip().endswith("(20 lines, " + out.getvalue().rstrip()
                                            .split("(20 lines, ")[-1])
    text = (tmp_path / "p_plot.txt").read_text(encoding="utf-8")
    # the file holds the picture as drawn on the screen, without colour codes
    lines = text.rstrip("\n").split("\n")
    assert len(lines) == 20 and "\x1b" not in text
    assert all(x in screen for x in lines)
    # a file this session did not write is kept unless `force`
    (tmp_path / "notes.txt").write_text("mine\n")
    assert app.run("plot p to notes.txt") == "error"
    assert "`notes.txt` exists and this session did not write it" in err.getvalue()
    assert (tmp_path / "notes.txt").read_text() == "mine\n"
    assert app.run("plot p to notes.txt force") == "ok"
    assert app.run("plot p to p_plot.png") == "error"
    assert "a plot is written to a .txt file" in err.getvalue()


def test_a_replayed_session_never_overwrites_a_picture(tmp_path):
    (tmp_path / "p_plot.txt").write_text("kept\n")
    (tmp_path / "s.qd").write_text("\n".join(BETA + ["plot p to p_plot.txt"]) + "\n")
    app, out, err = _shell(tmp_path)
    assert app.run("replay s.qd") == "error"
    assert "writes new files only" in err.getvalue()
    assert (tmp_path / "p_plot.txt").read_text() == "kept\n"


def test_plot_inside_whatif_draws_now_and_what_if(tmp_path):
    app, out, err = _shell(tmp_path)
    for line in BETA + ["compute", "whatif", "data append k = 10, 10, 9"]:
        assert app.run(line) == "ok", err.getvalue()
    out.seek(0)
    out.truncate()
    assert app.run("plot p") == "ok", err.getvalue()
    text = out.getvalue()
    assert "curve: what if   •••: now" in text
    rows = canvas(text[text.index("curve: what if"):])
    # now beta(11, 24) peaks near 0.30, what if beta(40, 25) near 0.62 (conjugacy,
    # common practice): the dots lie left of the curve's peak
    dots = [c for row in rows for c, ch in enumerate(row) if ch == "•"]
    assert dots and np.median(dots) < len(rows[0]) * 0.5


def test_the_recompute_note_says_what_changed(tmp_path):
    app, out, err = _shell(tmp_path)
    for line in BETA + ["compute", "data append k = 5"]:
        app.run(line)
    out.seek(0)
    out.truncate()
    app.run("grid p 0.001 0.999 301")
    app.run("prior p ~ beta(1, 1)")
    app.run("mean p")
    assert ("note: the model and the grid changed since the posterior was computed: "
            "recomputed on the whole grid (301 points)") in out.getvalue()
