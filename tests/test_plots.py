"""Tests of the terminal plots (shell/plots.py).

The pictures are read back the way a user reads them: the axis ticks printed by the
plot give the map from columns and rows to values, and the marks are located on it.
Reference densities come from scipy.stats (named beside each use); where a check rests
on a fact of the trade with no source, the comment says "common practice".
"""

import math
import re

import numpy as np
import plotext
import pytest
from hypothesis import given, settings, strategies as st
from scipy import stats

from shell import plots

ANSI = re.compile(r"\x1b\[[0-9;]*[A-Za-z]")
SIZES = [(20, 8), (45, 13), (80, 24), (133, 40)]


# --------------------------------------------------------------------------------------
# Reading a picture back
# --------------------------------------------------------------------------------------

def strip(text):
    return ANSI.sub("", text)


def frame(text):
    """(lines, top, bottom, left, right): the rows and columns of the frame corners."""
    lines = strip(text).split("\n")
    top = next(i for i, line in enumerate(lines) if "┌" in line)
    bottom = next(i for i, line in enumerate(lines) if "└" in line)
    return lines, top, bottom, lines[top].index("┌"), lines[top].index("┐")


def x_map(text):
    """Least-squares map column -> value from the x ticks ('┬') and their labels."""
    lines, top, bottom, left, right = frame(text)
    cols = [i for i, ch in enumerate(lines[bottom]) if ch == "┬"]
    labels = [float(m.group()) for m in re.finditer(r"\S+", lines[bottom + 1])]
    assert len(cols) == len(labels) >= 2, (cols, labels)
    slope, intercept = np.polyfit(cols, labels, 1)
    residual = np.max(np.abs(np.polyval([slope, intercept], cols) - labels))
    assert residual <= abs(slope), "ticks are not evenly placed"
    return lambda col: intercept + slope * col, abs(slope)


def y_map(text):
    """Least-squares map row -> value from the y ticks ('┤') and their labels."""
    lines, top, bottom, left, right = frame(text)
    rows = [r for r in range(top + 1, bottom) if lines[r][left] == "┤"]
    labels = [float(lines[r][:left]) for r in rows]
    assert len(rows) >= 2, rows
    slope, intercept = np.polyfit(rows, labels, 1)
    residual = np.max(np.abs(np.polyval([slope, intercept], rows) - labels))
    assert residual <= abs(slope), "ticks are not evenly placed"
    return lambda row: intercept + slope * row, abs(slope)


def canvas(text):
    """The cells inside the frame, as a list of strings (top row first), and the
    row and column of its top-left cell in the whole picture."""
    lines, top, bottom, left, right = frame(text)
    rows = [line[left + 1:right].ljust(right - left - 1) for line in lines[top + 1:bottom]]
    return rows, top + 1, left + 1


UPPER = set("▀▘▝▛▜▙▟▚▞▐▌█")        # quadrant blocks with a mark in their upper half


def highest_mark_column(text):
    """Column (in the whole picture) of the highest plotted point, and its row."""
    rows, row0, col0 = canvas(text)
    r = next(i for i, row in enumerate(rows) if row.strip())
    marked = [c for c, ch in enumerate(rows[r]) if ch != " "]
    upper = [c for c in marked if rows[r][c] in UPPER]
    cols = upper or marked
    return col0 + 0.5 * (min(cols) + max(cols)), row0 + r


# --------------------------------------------------------------------------------------
# Size and colour
# --------------------------------------------------------------------------------------

def _normal_marginal(width, height, color):
    x = np.linspace(-4, 4, 201)
    return plots.marginal(x, stats.norm.pdf(x), name="theta", width=width, height=height,
                          interval=(-1.96, 1.96), color=color)


def _poisson_marginal(width, height, color):
    k = np.arange(0, 20)
    return plots.marginal(k, stats.poisson.pmf(k, 4.2), name="count", discrete=True,
                          width=width, height=height, interval=(1, 8), color=color)


def _joint(width, height, color):
    x, y = np.linspace(-3, 3, 31), np.linspace(-2, 5, 41)
    X, Y = np.meshgrid(x, y, indexing="ij")
    mass = stats.multivariate_normal([0, 1], [[1, 0.5], [0.5, 2]]).pdf(np.dstack([X, Y]))
    return plots.joint(x, y, mass, xname="alpha", yname="beta", width=width, height=height,
                       color=color)


def _histogram(width, height, color):
    edges = np.array([0, 0.5, 1, 2, 3, 5, 8])
    return plots.histogram(edges, [0.1, 0.3, 0.25, 0.1, 0.05, 0.01], name="ratio",
                           width=width, height=height, color=color)


def _convergence(width, height, color):
    steps = np.arange(1, 9)
    return plots.convergence(steps, {"largest change": 10.0 ** -steps, "evidence": 1 + 0 * steps},
                             width=width, height=height, color=color)


PICTURES = [_normal_marginal, _poisson_marginal, _joint, _histogram, _convergence]


@pytest.mark.parametrize("draw", PICTURES)
@pytest.mark.parametrize("width,height", SIZES)
@pytest.mark.parametrize("color", [False, True])
def test_fits_the_requested_size(draw, width, height, color):
    text = draw(width, height, color)
    lines = text.split("\n")
    assert len(lines) <= height
    assert max(len(strip(line)) for line in lines) <= width
    assert "┌" in text and "└" in text                # a frame was drawn at every size
    if color:
        assert ANSI.search(text)
    else:
        assert "\x1b" not in text


@pytest.mark.parametrize("draw", PICTURES)
def test_names_are_on_the_axes(draw):
    text = draw(80, 20, False)
    words = {"_normal_marginal": ["theta", "density"], "_poisson_marginal": ["count", "probability"],
             "_joint": ["alpha", "beta"], "_histogram": ["ratio", "density"],
             "_convergence": ["step", "largest change", "evidence"]}[draw.__name__]
    for word in words:
        assert word in text


def test_long_names_are_shortened_not_dropped():
    x = np.linspace(0, 1, 50)
    name = "a_parameter_with_a_very_long_name_indeed"
    text = plots.marginal(x, stats.beta.pdf(x, 2, 3), name=name, width=30, height=10)
    assert max(len(line) for line in text.split("\n")) <= 30
    assert "a_parameter" in text and "…" in text


def test_no_state_carries_over_between_calls():
    first = _normal_marginal(60, 16, False)
    _joint(90, 30, True)
    _convergence(40, 12, True)
    assert _normal_marginal(60, 16, False) == first


def test_nothing_is_printed_even_in_plotext_interactive_mode(capfd):
    plotext.figure.interactive(True)
    try:
        for draw in PICTURES:
            draw(50, 14, False)
    finally:
        plotext.figure.interactive(False)
    out = capfd.readouterr()           # plotext prints from C: capture the descriptors
    assert out.out == "" and out.err == ""


def test_size_does_not_depend_on_the_terminal(monkeypatch):
    # A pipe or a narrow terminal must not clamp a plot the shell asked to be wide.
    monkeypatch.setenv("COLUMNS", "40")
    monkeypatch.setenv("LINES", "10")
    text = _normal_marginal(120, 30, False)
    lines = text.split("\n")
    assert max(len(line) for line in lines) > 100
    assert len(lines) > 20


# --------------------------------------------------------------------------------------
# Geometry: marks land where the axes say
# --------------------------------------------------------------------------------------

@pytest.mark.parametrize("mean,sd,lo,hi", [(2.37, 0.35, -1.3, 5.9), (-40.0, 6.0, -75.0, 10.0),
                                           (0.0123, 0.002, 0.0, 0.03)])
@pytest.mark.parametrize("width,height", [(80, 20), (47, 15), (140, 35)])
def test_marginal_peak_is_at_the_mean(mean, sd, lo, hi, width, height):
    # Reference density: scipy.stats.norm; its mode is its mean (common practice).
    x = np.linspace(lo, hi, 401)
    density = stats.norm.pdf(x, mean, sd)
    text = plots.marginal(x, density, name="theta", width=width, height=height)
    to_value, column_span = x_map(text)
    col, row = highest_mark_column(text)
    assert abs(to_value(col) - mean) <= column_span
    # The top of the curve is at the height of the peak density, read on the y ticks.
    to_density, row_span = y_map(text)
    assert abs(to_density(row) - density.max()) <= row_span


def test_marginal_shades_exactly_the_interval():
    # Reference density: scipy.stats.norm; 95 % central interval +-1.959964 sd
    # (scipy.stats.norm.ppf(0.975)).
    x = np.linspace(-4, 6, 301)
    lo, hi = stats.norm.ppf([0.025, 0.975], 1.0, 1.2)
    text = plots.marginal(x, stats.norm.pdf(x, 1.0, 1.2), name="mu", interval=(lo, hi))
    to_value, span = x_map(text)
    rows, row0, col0 = canvas(text)
    shaded = [col0 + c for row in rows for c, ch in enumerate(row) if ch == "·"]
    assert abs(to_value(min(shaded)) - lo) <= span
    assert abs(to_value(max(shaded)) - hi) <= span


def test_discrete_marginal_tallest_stick_is_the_mode():
    # Reference pmf: scipy.stats.poisson with mean 6.6; its largest value is at 6.
    k = np.arange(0, 25)
    pmf = stats.poisson.pmf(k, 6.6)
    assert k[np.argmax(pmf)] == 6
    text = plots.marginal(k, pmf, name="count", discrete=True, width=70, height=18)
    to_value, span = x_map(text)
    col, row = highest_mark_column(text)
    assert round(to_value(col)) == 6
    assert abs(to_value(col) - 6) <= span
    to_p, row_span = y_map(text)
    assert abs(to_p(row) - pmf.max()) <= row_span


def test_discrete_interval_sticks_are_bold():
    k = np.arange(0, 15)
    text = plots.marginal(k, stats.binom.pmf(k, 14, 0.3), name="k", discrete=True,
                          interval=(2, 6), width=70, height=16)
    to_value, span = x_map(text)
    rows, row0, col0 = canvas(text)
    bold = {round(to_value(col0 + c)) for row in rows for c, ch in enumerate(row) if ch == "█"}
    assert bold == {2, 3, 4, 5, 6}


def test_dense_discrete_marginal_is_solid_and_peaks_at_the_mode():
    # 100 values on about 63 columns (126 half columns, the finest marks), where single
    # sticks would leave uneven gaps. Reference pmf: scipy.stats.binom(180, 0.45) on
    # 40..139, largest at 81; its 95 % central interval from binom.ppf.
    k = np.arange(40, 140)
    pmf = stats.binom.pmf(k, 180, 0.45)
    assert k[np.argmax(pmf)] == 81
    lo, hi = stats.binom.ppf([0.025, 0.975], 180, 0.45)
    text = plots.marginal(k, pmf, name="N", discrete=True, width=70, height=18)
    to_value, span = x_map(text)
    rows, row0, col0 = canvas(text)
    # No gaps between the bars: inside each row's run of marks, no half-column block
    # ('▌' or '▐', a column with only one of its two halves drawn).
    for row in rows[:-1]:
        inner = row.strip()[1:-1]
        assert " " not in inner and "▌" not in inner and "▐" not in inner, row
    col, row = highest_mark_column(text)
    assert abs(to_value(col) - 81) <= span
    # With the interval: solid inside, light shade outside, split at its ends.
    text = plots.marginal(k, pmf, name="N", discrete=True, width=70, height=18, interval=(lo, hi))
    to_value, span = x_map(text)
    rows, row0, col0 = canvas(text)
    light = [to_value(col0 + c) for row in rows for c, ch in enumerate(row) if ch == "░"]
    solid = [to_value(col0 + c) for row in rows for c, ch in enumerate(row) if ch not in " ░"]
    assert light and all(v < lo + span or v > hi - span for v in light)
    assert min(solid) >= lo - span and max(solid) <= hi + span


def _node_weights(nodes):
    # Trapezoid weights on uneven nodes (common practice): half the distance between
    # the two neighbours, half a spacing at each end.
    w = np.empty_like(nodes)
    w[1:-1] = 0.5 * (nodes[2:] - nodes[:-2])
    w[0], w[-1] = 0.5 * (nodes[1] - nodes[0]), 0.5 * (nodes[-1] - nodes[-2])
    return w


@pytest.mark.parametrize("width,height", [(80, 24), (57, 19), (120, 40)])
def test_joint_densest_character_is_at_the_mode(width, height):
    # Reference density: scipy.stats.multivariate_normal, mean (1.2, -0.7), sds 1.1 and
    # 0.6, correlation 0.8; its mode is its mean. Nodes are uneven (denser in the middle).
    mean = np.array([1.2, -0.7])
    sx, sy, rho = 1.1, 0.6, 0.8
    cov = [[sx * sx, rho * sx * sy], [rho * sx * sy, sy * sy]]
    xs = 1.2 + 4.5 * np.sinh(np.linspace(-2.0, 2.5, 61)) / np.sinh(2.0)
    ys = -0.7 + 2.4 * np.sinh(np.linspace(-2.5, 1.8, 47)) / np.sinh(1.8)
    X, Y = np.meshgrid(xs, ys, indexing="ij")
    pdf = stats.multivariate_normal(mean, cov).pdf(np.dstack([X, Y]))
    mass = pdf * np.outer(_node_weights(xs), _node_weights(ys))
    # Handed over in a shuffled order: the plot must sort its axes itself.
    px, py = np.random.default_rng(1).permutation(xs.size), np.random.default_rng(2).permutation(ys.size)
    text = plots.joint(xs[px], ys[py], mass[np.ix_(px, py)], xname="a", yname="b",
                       width=width, height=height)

    to_x, col_span = x_map(text)
    to_y, row_span = y_map(text)
    rows, row0, col0 = canvas(text)
    densest = plots.RAMP[-1]
    cells = [(r, c) for r, row in enumerate(rows) for c, ch in enumerate(row) if ch == densest]
    assert cells
    # The mode's cell, read on the ticks, carries the densest character ...
    col = min(range(len(rows[0])), key=lambda c: abs(to_x(col0 + c) - mean[0]))
    row = min(range(len(rows)), key=lambda r: abs(to_y(row0 + r) - mean[1]))
    assert rows[row][col] == densest
    # ... and the densest cells gather around it.
    assert abs(np.mean([c for _, c in cells]) - col) <= 1
    assert abs(np.mean([r for r, _ in cells]) - row) <= 1
    # Positive correlation: one sd right and up of the mode is denser than one sd right
    # and down (0.574 and 0.0067 of the peak, from the same multivariate_normal pdf).
    def char_at(x, y):
        c = min(range(len(rows[0])), key=lambda c: abs(to_x(col0 + c) - x))
        r = min(range(len(rows)), key=lambda r: abs(to_y(row0 + r) - y))
        return plots.RAMP.index(rows[r][c])
    assert char_at(mean[0] + sx, mean[1] + sy) > char_at(mean[0] + sx, mean[1] - sy) > 0


def test_joint_keeps_mass_of_a_coarse_grid_in_its_cells():
    # One node carrying all the mass on a 5 x 4 grid fills its own cell of values,
    # x in [2.5, 3.5] and y in [15, 25], evenly; cells straddling its edges are lighter.
    xs, ys = np.array([0.0, 1, 2, 3, 4]), np.array([10.0, 20, 30, 40])
    mass = np.zeros((5, 4))
    mass[3, 1] = 1.0
    text = plots.joint(xs, ys, mass, xname="x", yname="y", width=60, height=20)
    to_x, dx = x_map(text)
    to_y, dy = y_map(text)
    rows, row0, col0 = canvas(text)
    inside = outside = 0
    for r, row in enumerate(rows):
        for c, ch in enumerate(row):
            x, y = to_x(col0 + c), to_y(row0 + r)
            if 2.5 + dx < x < 3.5 - dx and 15 + dy < y < 25 - dy:
                assert ch == plots.RAMP[-1]
                inside += 1
            elif not (2.5 - dx <= x <= 3.5 + dx and 15 - dy <= y <= 25 + dy):
                assert ch == " "
                outside += 1
    assert inside >= 4 and outside > 100


def test_histogram_bar_heights_follow_the_density():
    # Reference: scipy.stats.gamma(a=3), bin densities = cdf differences / widths over
    # uneven bins.
    edges = np.array([0.0, 0.5, 1.0, 1.5, 2.0, 3.0, 4.0, 6.0, 9.0])
    density = np.diff(stats.gamma.cdf(edges, 3)) / np.diff(edges)
    text = plots.histogram(edges, density, name="time", width=90, height=22)
    to_x, col_span = x_map(text)
    to_y, row_span = y_map(text)
    rows, row0, col0 = canvas(text)
    checked = 0
    for c in range(len(rows[0])):
        x = to_x(col0 + c)
        i = np.searchsorted(edges, x) - 1
        if not 0 <= i < len(density) or min(x - edges[i], edges[i + 1] - x) < 1.5 * col_span:
            continue                                    # next to a bin edge: either height
        top = next(r for r, row in enumerate(rows) if row[c] != " ")
        assert abs(to_y(row0 + top) - density[i]) <= row_span, (x, density[i])
        checked += 1
    assert checked > 40


def test_histogram_keeps_a_bin_narrower_than_a_column():
    edges = np.array([0.0, 4.0, 4.01, 10.0])
    text = plots.histogram(edges, [0.05, 10.0, 0.05], name="q", width=60, height=15)
    to_x, span = x_map(text)
    col, _ = highest_mark_column(text)
    assert abs(to_x(col) - 4.0) <= span


def test_convergence_uses_a_log_axis_when_values_span_decades():
    steps = [1, 2, 3, 4, 5, 6]
    change = [0.5, 0.04, 3e-3, 2e-4, 1e-5, 8e-7]
    text = plots.convergence(steps, {"largest change": change}, width=70, height=20)
    lines, top, bottom, left, right = frame(text)
    labels = [float(lines[r][:left]) for r in range(top + 1, bottom) if lines[r][left] == "┤"]
    # Ticks on powers of ten (log axis), equally spaced per decade.
    assert all(abs(math.log10(v) - round(math.log10(v))) < 1e-9 for v in labels)
    to_log, row_span = _log_y_map(text)
    rows, row0, col0 = canvas(text)
    to_x, col_span = x_map(text)
    for step, value in zip(steps, change):
        col = min(range(len(rows[0])), key=lambda c: abs(to_x(col0 + c) - step))
        marks = [r for r, row in enumerate(rows) if row[col] == "*"]
        assert min(abs(to_log(row0 + r) - math.log10(value)) for r in marks) <= row_span


def _log_y_map(text):
    lines, top, bottom, left, right = frame(text)
    rows = [r for r in range(top + 1, bottom) if lines[r][left] == "┤"]
    logs = [math.log10(float(lines[r][:left])) for r in rows]
    slope, intercept = np.polyfit(rows, logs, 1)
    assert np.max(np.abs(np.polyval([slope, intercept], rows) - logs)) <= abs(slope)
    return (lambda row: intercept + slope * row), abs(slope)


@pytest.mark.parametrize("values", [[3.0, 2.5, 2.2, 2.0, 1.9], [1e-3, -2e-4, 5e-6, 1e-7, 0.0]])
def test_convergence_stays_linear_when_values_are_close_or_not_positive(values):
    text = plots.convergence([1, 2, 3, 4, 5], {"mean": values}, width=60, height=16)
    to_y, row_span = y_map(text)            # evenly spaced values: a linear axis
    lines, top, bottom, left, right = frame(text)
    labels = [float(lines[r][:left]) for r in range(top + 1, bottom) if lines[r][left] == "┤"]
    assert len(set(np.round(np.diff(labels), 12))) == 1


def test_convergence_series_keep_their_own_markers():
    steps = [1, 2, 3, 4]
    text = plots.convergence(steps, {"evidence": [1, 2, 3, 4], "mean": [4, 3, 2, 1]},
                             width=50, height=14)
    assert "* evidence" in text and "+ mean" in text
    rows, _, _ = canvas(text)
    assert any("*" in row for row in rows) and any("+" in row for row in rows)


# --------------------------------------------------------------------------------------
# Bad input: one clear ValueError naming the problem
# --------------------------------------------------------------------------------------

X = np.linspace(0, 1, 11)
D = stats.beta.pdf(X, 2, 2)


@pytest.mark.parametrize("call,match", [
    (lambda: plots.marginal([], [], name="p"), r"`values` is empty"),
    (lambda: plots.marginal(X, np.r_[D[:3], np.nan, D[4:]], name="p"), r"`density` has NaN at position 3"),
    (lambda: plots.marginal(np.r_[X[:-1], np.inf], D, name="p"), r"`values` has an infinite value at position 10"),
    (lambda: plots.marginal(X, 0 * D, name="p"), r"`density` is zero everywhere"),
    (lambda: plots.marginal(X, -D, name="p"), r"`density` is negative at position 1"),
    (lambda: plots.marginal(X, D - 0.5, name="p"), r"`density` is negative at position 0"),
    (lambda: plots.marginal(X, D[:-1], name="p"), r"`values` and `density` differ in length \(11 vs 10\)"),
    (lambda: plots.marginal(X, D, name="p", width=19), r"`width` must be at least 20 columns \(got 19\)"),
    (lambda: plots.marginal(X, D, name="p", height=5), r"`height` must be at least 8 rows"),
    (lambda: plots.marginal(X, D, name="p", width=50.5), r"`width` must be a whole number"),
    (lambda: plots.marginal(X, D, name=""), r"`name` must be a non-empty text"),
    (lambda: plots.marginal(X, D, name="p", interval=(0.8, 0.2)), r"`interval` runs backwards"),
    (lambda: plots.marginal(X, D, name="p", interval=(0.2, np.nan)), r"`interval` must have finite ends"),
    (lambda: plots.marginal(X, D, name="p", interval=3), r"`interval` must be a \(low, high\) pair"),
    (lambda: plots.marginal(np.r_[X[:5], X[4:-1]], D, name="p"), r"`values` has the value 0.4 twice"),
    (lambda: plots.marginal([1.0], [1.0], name="p"), r"`values` needs at least 2 points"),
    (lambda: plots.marginal(["a", "b"], [1, 2], name="p"), r"`values` must be a sequence of numbers"),
    (lambda: plots.marginal(np.ones((2, 3)), np.ones((2, 3)), name="p"), r"`values` must be one-dimensional"),
    (lambda: plots.joint([], [1, 2], np.ones((0, 2)), xname="a", yname="b"), r"`xvalues` is empty"),
    (lambda: plots.joint([1, 2], [1, 2, 3], np.ones((3, 2)), xname="a", yname="b"), r"`mass` has shape \(3, 2\); expected \(2, 3\)"),
    (lambda: plots.joint([1, 2], [1, 2], [[1, np.nan], [1, 1]], xname="a", yname="b"), r"`mass` has NaN at position \(0, 1\)"),
    (lambda: plots.joint([1, 2], [1, 2], np.zeros((2, 2)), xname="a", yname="b"), r"`mass` is zero everywhere"),
    (lambda: plots.joint([1], [1, 2], np.ones((1, 2)), xname="a", yname="b"), r"`xvalues` needs at least 2 nodes"),
    (lambda: plots.joint([1, 2], [1, 2], np.ones((2, 2)), xname="a", yname="b", width=10), r"`width` must be at least 20"),
    (lambda: plots.joint([1, 2], [1, 2], np.ones((2, 2)), xname="a", yname=None), r"`yname` must be a non-empty text"),
    (lambda: plots.histogram([], [], name="q"), r"`edges` is empty"),
    (lambda: plots.histogram([0, 1, 2], [1, 2, 3], name="q"), r"`density` needs one value per bin: 2 bins"),
    (lambda: plots.histogram([0, 1, 1, 2], [1, 2, 3], name="q"), r"`edges` must be strictly increasing: edge 2"),
    (lambda: plots.histogram([0, 1, 2], [0, 0], name="q"), r"`density` is zero everywhere"),
    (lambda: plots.histogram([0, 1, 2], [1, np.nan], name="q"), r"`density` has NaN at position 1"),
    (lambda: plots.histogram([0, 1, 2], [1, 1], name="q", width=0), r"`width` must be at least 20"),
    (lambda: plots.convergence([], {"a": []}), r"`steps` is empty"),
    (lambda: plots.convergence([1, 2], {}), r"`series` must be a non-empty mapping"),
    (lambda: plots.convergence([1, 2], {"a": [1.0]}), r"`series 'a'` has 1 values but `steps` has 2"),
    (lambda: plots.convergence([1, 2], {"a": [1.0, np.nan]}), r"`series 'a'` has NaN at position 1"),
    (lambda: plots.convergence([2, 1], {"a": [1.0, 2.0]}), r"`steps` must be strictly increasing"),
    (lambda: plots.convergence([1, 2], {"a": [1.0, 2.0]}, width=19), r"`width` must be at least 20"),
])
def test_bad_input_gives_one_clear_line(call, match):
    with pytest.raises(ValueError, match=match) as info:
        call()
    assert "\n" not in str(info.value)


# --------------------------------------------------------------------------------------
# Any input: a picture within bounds, or one ValueError line; never a crash inside plotext
# --------------------------------------------------------------------------------------

_numbers = st.one_of(st.floats(allow_nan=True, allow_infinity=True),      # anything at all
                     st.floats(-1e6, 1e6), st.floats(0, 1e-300))           # plottable or tiny
_lists = st.lists(_numbers, max_size=25)
_sizes = st.tuples(st.integers(15, 160), st.integers(5, 50))


def _within_bounds_or_one_line_error(call, width, height):
    try:
        text = call()
    except ValueError as error:
        message = str(error)
        assert message.startswith("`") and "\n" not in message, message
        return
    lines = text.split("\n")
    assert len(lines) <= height and max(len(strip(line)) for line in lines) <= width


@pytest.mark.filterwarnings("error")        # numpy warnings would reach the user's screen
@settings(max_examples=40, deadline=None)
@given(_lists, _lists, _sizes, st.booleans(), st.booleans())
def test_marginal_any_input(values, density, size, discrete, color):
    _within_bounds_or_one_line_error(
        lambda: plots.marginal(values, density, name="p", width=size[0], height=size[1],
                               discrete=discrete, interval=(-1.0, 1.0), color=color), *size)


_points = st.lists(st.tuples(st.floats(-1e300, 1e300), st.floats(0, 1e300)), min_size=2,
                   max_size=25, unique_by=lambda point: point[0])


@pytest.mark.filterwarnings("error")        # numpy warnings would reach the user's screen
@settings(max_examples=40, deadline=None)
@given(_points, _sizes, st.booleans())
def test_marginal_extreme_magnitudes(points, size, discrete):
    # Well-formed input of any magnitude, from subnormal to 1e300.
    values, density = zip(*points)
    _within_bounds_or_one_line_error(
        lambda: plots.marginal(values, density, name="p", width=size[0], height=size[1],
                               discrete=discrete, interval=(min(values), max(values))), *size)
    _within_bounds_or_one_line_error(
        lambda: plots.histogram(sorted(values), density[1:], name="q", width=size[0],
                                height=size[1]), *size)
    _within_bounds_or_one_line_error(
        lambda: plots.convergence(sorted(values), {"a": density, "b": values}, width=size[0],
                                  height=size[1]), *size)


@pytest.mark.filterwarnings("error")        # numpy warnings would reach the user's screen
@settings(max_examples=30, deadline=None)
@given(_lists, _lists, st.lists(_numbers, min_size=1, max_size=80), _sizes)
def test_joint_any_input(xs, ys, flat, size):
    mass = np.resize(np.array(flat), (len(xs), len(ys)))
    _within_bounds_or_one_line_error(
        lambda: plots.joint(xs, ys, mass, xname="a", yname="b", width=size[0], height=size[1]), *size)


@pytest.mark.filterwarnings("error")        # numpy warnings would reach the user's screen
@settings(max_examples=30, deadline=None)
@given(_lists, _lists, _sizes)
def test_histogram_and_convergence_any_input(edges, density, size):
    _within_bounds_or_one_line_error(
        lambda: plots.histogram(edges, density, name="q", width=size[0], height=size[1]), *size)
    _within_bounds_or_one_line_error(
        lambda: plots.convergence(list(range(len(edges))), {"a": edges}, width=size[0],
                                  height=size[1]), *size)


@pytest.mark.parametrize("draw", PICTURES)
def test_colour_only_adds_to_the_monochrome_picture(draw):
    plain = draw(70, 18, False).split("\n")
    coloured = [strip(line).rstrip() for line in draw(70, 18, True).split("\n")]
    assert coloured == plain


def test_marginal_of_a_very_fine_grid_keeps_its_peak():
    # 200 001 points and a peak a few columns wide: thinning must not lose it.
    # Reference density: scipy.stats.norm.
    x = np.linspace(0.0, 100.0, 200_001)
    text = plots.marginal(x, stats.norm.pdf(x, 61.3, 0.4), name="t", width=80, height=20)
    to_value, span = x_map(text)
    col, _ = highest_mark_column(text)
    assert abs(to_value(col) - 61.3) <= span
