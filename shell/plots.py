"""Terminal plots of posterior results, rendered to text.

Four pictures, each a pure function returning a string:

- `marginal`     a 1-D posterior marginal: a line (continuous) or sticks (discrete),
                 with an optional interval shaded under the curve;
- `joint`        a 2-D joint marginal as a picture of its credible regions: each
                 character cell shaded by the smallest of the regions of highest
                 density holding 50%, 80%, 95%, 99% and 99.9% of the mass that it
                 lies in (the ramp ``RAMP``, legend above), coloured when asked;
- `histogram`    the distribution of a derived quantity, from bin edges and densities;
- `convergence`  how quantities moved over refinement steps, on a log axis when they
                 span decades.

They draw with plotext 6 through its master figure (`plotext.figure`): every call takes
a lock, clears the figure, draws, builds the matrix, and leaves the figure cleared and
on its default theme, so nothing carries over from one call to the next. No terminal
is needed and nothing is printed. Without colour the text holds no ANSI escape codes
and every mark reads in monochrome (quadrant blocks for curves, a dotted band for an
interval, a character ramp for densities).

The 2-D density picture is ours: the node masses are re-binned onto the character
cells of the canvas (each node's mass spread evenly over the cell of values nearest to
it) and every cell is drawn as a plotext point carrying one ramp character; plotext
draws the frame, the ticks and the labels around it.

Bad input raises ValueError with one line naming the argument and what is wrong.
"""

from __future__ import annotations

import contextlib
import math
import operator
import threading
from collections.abc import Iterator, Mapping
from dataclasses import dataclass

import numpy as np
import plotext

__all__ = ["RAMP", "MIN_WIDTH", "MIN_HEIGHT", "marginal", "joint", "histogram", "convergence"]

#: Characters from empty to densest, one per credible region of `joint`: a cell in the
#: region of highest density holding REGIONS[k] of the mass (and in no smaller one)
#: shows RAMP[k + 1]; a cell outside the largest region is blank.
RAMP = " ·░▒▓█"
REGIONS = (0.999, 0.99, 0.95, 0.8, 0.5)

#: Smallest plot accepted, in terminal columns and rows.
MIN_WIDTH = 20
MIN_HEIGHT = 8
#: Largest plot accepted: a guard against a mistyped size allocating a huge canvas.
MAX_WIDTH = 2000
MAX_HEIGHT = 1000

# The character shading the area under a marginal inside its interval, the one drawing
# the sticks of a discrete marginal inside its interval, and the one drawing the bars
# of a dense discrete marginal outside it.
_SHADE = "·"
# The dots of a second marginal drawn over the first.
_DOT = "•"
_BOLD = "█"
_LIGHT = "░"
# Markers of the convergence series, told apart without colour.
_SERIES_MARKERS = "*+ox#%&@"
# 256-colour codes for the ramp levels 1..5 (dark blue to amber).
_RAMP_COLOURS = (60, 67, 73, 143, 214)
# Rows of a plot that are not canvas: the frame top and bottom, the x ticks, the labels.
_FRAME_ROWS = 4

# plotext keeps one master figure per process: one picture at a time.
_LOCK = threading.Lock()


# --------------------------------------------------------------------------------------
# Public functions
# --------------------------------------------------------------------------------------

def marginal(values, density, *, name, width=80, height=20, discrete=False,
             interval=None, color=False, beside=None, labels=("what if", "now")) -> str:
    """Plot a 1-D posterior marginal.

    Parameters
    ----------
    values : array_like, shape (n,)
        The parameter's values (any order; no value twice).
    density : array_like, shape (n,)
        Density (continuous) or probability (discrete) at each value; non-negative,
        not all zero.
    name : str
        The parameter's name, written under the x axis.
    width, height : int
        Size of the picture in columns and rows (at least 20 by 8).
    discrete : bool
        Draw sticks of a probability mass function instead of a line. With more
        values than columns, the values under each quarter column become one bar at
        their mean probability, so the bars join without gaps.
    interval : (float, float), optional
        Ends of an interval to mark: the area under the curve between them is shaded
        with dots (continuous), or its sticks are drawn bold (discrete; joined bars
        are solid inside the interval and light shade outside). A title line says so.
    color : bool
        Colour the curve; when False the text has no ANSI codes.
    beside : (values, density), optional
        A second continuous marginal drawn over the first as a row of dots, on the
        same axes (the "now" of a what-if); the legend names both by `labels`.

    Returns
    -------
    str
        At most `height` lines of at most `width` columns (ANSI codes not counted).
    """
    width, height = _check_size(width, height)
    name = _check_label(name, "name")
    x, y = _marginal_points(values, density, discrete)
    ends = _interval(interval)
    other = None
    if beside is not None and not discrete:
        other = _marginal_points(beside[0], beside[1], False)
        span = (min(x[0], other[0][0]), max(x[-1], other[0][-1]))
        view = _marginal_view(x, y, discrete, width, xlim=span,
                              ymax=max(float(y.max()), float(other[1].max())))
    else:
        view = _marginal_view(x, y, discrete, width)

    title = None
    if other is not None:
        first, second = labels
        iv = f"   {_SHADE} {first} 95%: {_short(ends[0])} to {_short(ends[1])}" if ends else ""
        title = _first_fit([f"curve: {first}   {_DOT}{_DOT}{_DOT}: {second}{iv}",
                            f"curve: {first}   {_DOT}{_DOT}{_DOT}: {second}"], width)
    elif ends is not None:
        mark = _BOLD if discrete else _SHADE
        title = _first_fit([f"{mark} interval {_short(ends[0])} to {_short(ends[1])}",
                            f"{mark} {_short(ends[0])} to {_short(ends[1])}"], width)
    canvas_rows = height - _FRAME_ROWS - (title is not None)

    with _figure(width, height, color) as fig:
        if view.dense:
            _draw_bars(fig, view, ends)
        elif discrete:
            _draw_sticks(fig, view, ends, width)
        else:
            _draw_curve(fig, view, ends, width, canvas_rows)
            if other is not None:
                ox, oy = other
                u = view.xspan(ox)
                v = oy / view.yspan.hi
                ut, vt = _thin_even(u, v, width)
                fig.draw(fig.signal(ut.tolist(), vt.tolist(), marker=_DOT))
        _set_axes(fig, width, canvas_rows, view.xspan, view.yspan, xint=view.integer_x)
        ylabel, xlabel = _bar_labels(width, "probability" if discrete else "density", name)
        _set_labels(fig, ylabel, xlabel)
        if title is not None:
            fig.title(_fit(title, width))
        return _render(fig, color)


def _marginal_points(values, density, discrete: bool) -> tuple[np.ndarray, np.ndarray]:
    """The marginal's values in increasing order and its non-negative densities."""
    x = _vector(values, "values")
    y = _vector(density, "density")
    _same_length(x, "values", y, "density")
    x, y = _sort_axis(x, y, "values")
    y = _non_negative(y, "density")
    if not discrete and x.size < 2:
        raise ValueError("`values` needs at least 2 points to draw a continuous marginal")
    return x, y


@dataclass(frozen=True)
class _MarginalView:
    """A marginal as plotext is handed it: positions and heights on [0, 1].

    Attributes
    ----------
    x : ndarray
        The values drawn, in data units (the bars' centres when `dense`).
    u, v : ndarray
        `x` and the heights mapped onto [0, 1].
    xspan, yspan : _Span
        The axes' ranges in data units.
    dense : bool
        More discrete values than columns: drawn as joined bars.
    integer_x : bool
        Discrete whole-number values: x ticks on whole numbers.
    """

    x: np.ndarray
    u: np.ndarray
    v: np.ndarray
    xspan: "_Span"
    yspan: "_Span"
    dense: bool
    integer_x: bool


def _marginal_view(x: np.ndarray, y: np.ndarray, discrete: bool, width: int, *,
                   xlim=None, ymax=None) -> _MarginalView:
    if xlim is not None:
        xspan = _span(float(xlim[0]), float(xlim[1]), "values")
    elif discrete:
        gaps = np.diff(x)
        half = 0.5 * (float(gaps.min()) if gaps.size else 1.0)
        xspan = _span(float(x[0]) - half, float(x[-1]) + half, "values")
    else:
        xspan = _span(float(x[0]), float(x[-1]), "values")
    integer_x = discrete and bool(np.all(x == np.round(x)))
    ymax = float(y.max()) if ymax is None else float(ymax)
    u, v = xspan(x), y / ymax                 # what plotext sees: values in [0, 1]
    # More values than columns: sticks would alias into uneven gaps, so the values under
    # each quarter column are drawn as one bar at their mean probability.
    dense = discrete and x.size > width - 8
    if dense:
        slices = np.linspace(0.0, 1.0, 4 * width + 1)
        cells = _node_cells(u)
        count = _rebin(cells, np.ones_like(v), slices)
        mean = np.divide(_rebin(cells, v, slices), count, out=np.zeros_like(count),
                         where=count > 1e-6)
        top = float(mean.max())
        if not top > 0:
            raise ValueError("`density` has its mass only between values too close to draw")
        u, v = 0.5 * (slices[:-1] + slices[1:]), mean / top
        x = xspan.lo + u * (xspan.hi - xspan.lo)
        ymax *= top
    return _MarginalView(x, u, v, xspan, _span(0.0, ymax, "density"), dense, integer_x)


def _inside(view: _MarginalView, ends, default: bool) -> np.ndarray:
    """Which drawn values lie in the interval (all `default` without one)."""
    if ends is None:
        return np.full(view.x.size, default)
    return (view.x >= ends[0]) & (view.x <= ends[1])


def _draw_bars(fig, view: _MarginalView, ends) -> None:
    """Solid bars; outside an interval they turn to light shade."""
    inside = _inside(view, ends, True)
    for part, marker in ((~inside, _LIGHT), (inside, None)):
        part &= view.v > 0
        if part.any():
            bars = fig.signal(view.u[part].tolist(), view.v[part].tolist(), marker=marker)
            fig.draw(bars.fillx().density("full"))


def _draw_sticks(fig, view: _MarginalView, ends, width: int) -> None:
    """Sticks of a pmf; inside an interval they are bold."""
    u, v = view.u, view.v
    inside = _inside(view, ends, False)
    uo, vo = _thin(u[~inside], v[~inside], 4 * width)
    if uo.size:
        fig.draw(fig.signal(uo.tolist(), vo.tolist()).fillx().density("full"))
    if inside.any():
        ui, vi = _thin(u[inside], v[inside], 4 * width)
        bold = fig.signal(ui.tolist(), vi.tolist(), marker=_BOLD)
        fig.draw(bold.fillx().density("full"))


def _draw_curve(fig, view: _MarginalView, ends, width: int, canvas_rows: int) -> None:
    """A density curve, the area under it shaded with dots inside an interval."""
    x, u, v, xspan = view.x, view.u, view.v, view.xspan
    if ends is not None:
        lo, hi = float(xspan(max(ends[0], x[0]))), float(xspan(min(ends[1], x[-1])))
        if lo <= hi:
            us = np.linspace(lo, hi, 4 * width)
            # Lowered by half a row so the dots stay under the curve's own cells.
            vs = np.clip(np.interp(us, u, v) - 0.5 / canvas_rows, 0.0, None)
            shade = fig.signal(us.tolist(), vs.tolist(), marker=_SHADE)
            fig.draw(shade.fillx().density("full"))
    ut, vt = _thin(u, v, 4 * width)
    fig.draw(fig.signal(ut.tolist(), vt.tolist()).lines(True).density("full"))


def joint(xvalues, yvalues, mass, *, xname, yname, width=80, height=24, color=False) -> str:
    """Plot a 2-D joint marginal as a density picture.

    The mass of each node is spread evenly over the cell of values nearest to it (out
    to half a spacing beyond the end nodes) and re-binned onto the character cells of
    the canvas; each cell shows a character of `RAMP` by its mass relative to the
    densest cell (blank below 0.5 %), and with `color` also a colour of a ramp.

    Parameters
    ----------
    xvalues : array_like, shape (nx,)
        Nodes of the x axis (at least 2; any spacing, any order, no value twice).
    yvalues : array_like, shape (ny,)
        Nodes of the y axis (at least 2).
    mass : array_like, shape (nx, ny)
        Non-negative mass at each node, not all zero.
    xname, yname : str
        Names written on the axes.
    width, height : int
        Size of the picture (at least 20 by 8).
    color : bool
        Add a colour ramp to the character ramp.

    Returns
    -------
    str
    """
    width, height = _check_size(width, height)
    xname = _check_label(xname, "xname")
    yname = _check_label(yname, "yname")
    nodes = _joint_nodes(xvalues, yvalues, mass)
    xspan = _span(*_outer_edges(nodes.x), "xvalues")
    yspan = _span(*_outer_edges(nodes.y), "yvalues")
    title = _first_fit([ramp_legend(), ramp_legend(short=True)], width)
    canvas_rows = height - _FRAME_ROWS - 1

    with _figure(width, height, color) as fig:
        # With edge alignment the limits are the outer edges of the canvas cells, so
        # cell k of n covers [k / n, (k + 1) / n) exactly.
        fig.ruler("x").alignment(lim="edge")
        fig.ruler("y").alignment(lim="edge")
        _set_axes(fig, width, canvas_rows, xspan, yspan)
        ylabel, xlabel = _bar_labels(width, yname, xname)
        _set_labels(fig, ylabel, xlabel)
        fig.title(_fit(title, width))
        _draw_ramp(fig, nodes, xspan, yspan, color)
        return _render(fig, color)


@dataclass(frozen=True)
class _JointNodes:
    """A joint marginal's nodes in increasing order on both axes, and its mass scaled
    to a top of 1, shape (len(x), len(y))."""

    x: np.ndarray
    y: np.ndarray
    mass: np.ndarray


def _joint_nodes(xvalues, yvalues, mass) -> _JointNodes:
    xs = _vector(xvalues, "xvalues")
    ys = _vector(yvalues, "yvalues")
    m = _matrix(mass, "mass", (xs.size, ys.size))
    for axis, what in ((xs, "xvalues"), (ys, "yvalues")):
        if axis.size < 2:
            raise ValueError(f"`{what}` needs at least 2 nodes to draw a joint marginal")
    xorder = _order(xs, "xvalues")
    yorder = _order(ys, "yvalues")
    m = _non_negative(m[np.ix_(xorder, yorder)], "mass")
    return _JointNodes(xs[xorder], ys[yorder], m / m.max())


def _draw_ramp(fig, nodes: _JointNodes, xspan: _Span, yspan: _Span, color: bool) -> None:
    """The node masses re-binned onto the canvas cells, each cell one ramp character."""
    xedges = _node_cells(xspan(nodes.x))           # in [0, 1] from here on
    yedges = _node_cells(yspan(nodes.y))
    # First pass: the frame alone, to learn the canvas size in cells.
    ncols, nrows = _canvas_size(fig.build().string(colorless=True))
    cells = _rebin(yedges, _rebin(xedges, nodes.mass, np.linspace(0.0, 1.0, ncols + 1), axis=0),
                   np.linspace(0.0, 1.0, nrows + 1), axis=1)
    levels = _levels(cells)
    for level in range(1, len(RAMP)):
        cols, rows = np.nonzero(levels == level)
        if cols.size == 0:
            continue
        marker = plotext.marker(RAMP[level], pixel=_RAMP_COLOURS[level - 1] if color else None)
        fig.draw(fig.signal(((cols + 0.5) / ncols).tolist(), ((rows + 0.5) / nrows).tolist(),
                            marker=marker))


def histogram(edges, density, *, name, width=80, height=20, color=False) -> str:
    """Plot the distribution of a derived quantity as a histogram.

    Parameters
    ----------
    edges : array_like, shape (n + 1,)
        Bin edges, strictly increasing (bins may differ in width).
    density : array_like, shape (n,)
        Density in each bin; non-negative, not all zero.
    name : str
        The quantity's name, written under the x axis.
    width, height : int
        Size of the picture (at least 20 by 8).
    color : bool
        Colour the bars.

    Returns
    -------
    str
    """
    width, height = _check_size(width, height)
    name = _check_label(name, "name")
    e = _vector(edges, "edges")
    d = _vector(density, "density")
    if e.size < 2:
        raise ValueError("`edges` needs at least 2 values (one bin)")
    if d.size != e.size - 1:
        raise ValueError(f"`density` needs one value per bin: {e.size - 1} bins from "
                         f"{e.size} `edges`, but {d.size} densities")
    steps = np.diff(e)
    if np.any(steps <= 0):
        i = int(np.argmax(steps <= 0))
        raise ValueError(f"`edges` must be strictly increasing: edge {i + 1} ({_short(e[i + 1])}) "
                         f"does not exceed edge {i} ({_short(e[i])})")
    d = _non_negative(d, "density")
    xspan = _span(float(e[0]), float(e[-1]), "edges")
    dmax = float(d.max())
    canvas_rows = height - _FRAME_ROWS

    # Re-bin onto a display grid finer than the canvas (4 slices a column): each slice
    # carries the mean density over it, so bins narrower than a column still show
    # with their mass, and wide bins keep sharp edges. Worked in [0, 1] on both axes.
    slices = np.linspace(0.0, 1.0, 4 * width + 1)
    share = d / dmax * (steps / (e[-1] - e[0]))         # bin masses, widths taken in data units
    shown = _rebin(xspan(e), share, slices) / np.diff(slices)
    top = float(shown.max())
    if not top > 0:
        raise ValueError("`density` has its mass only in bins too narrow to draw")
    yspan = _span(0.0, top * dmax, "density")
    centres = 0.5 * (slices[:-1] + slices[1:])

    with _figure(width, height, color) as fig:
        keep = shown > 0
        bars = fig.signal(centres[keep].tolist(), (shown[keep] / top).tolist())
        fig.draw(bars.fillx().density("full"))
        _set_axes(fig, width, canvas_rows, xspan, yspan)
        ylabel, xlabel = _bar_labels(width, "density", name)
        _set_labels(fig, ylabel, xlabel)
        return _render(fig, color)


def convergence(steps, series, *, width=80, height=20, color=False, xname="step") -> str:
    """Plot how quantities moved over refinement steps.

    The y axis is logarithmic when every value is positive and they span more than
    two decades (largest / smallest > 100); the x axis likewise (as when x counts grid
    points that double each step).

    Parameters
    ----------
    steps : array_like, shape (n,)
        Step numbers (or point counts), strictly increasing.
    series : mapping of str to array_like, shape (n,)
        One curve per label, e.g. ``{"largest change": [...]}``; finite values.
    width, height : int
        Size of the picture (at least 20 by 8).
    color : bool
        Colour the curves; without colour each keeps its own marker (``* + o x ...``).
    xname : str
        Name of the x axis.

    Returns
    -------
    str
    """
    width, height = _check_size(width, height)
    xname = _check_label(xname, "xname")
    x = _steps(steps)
    curves = _curves(series, x)
    view = _convergence_view(x, curves)
    key = "   ".join(f"{_SERIES_MARKERS[i]} {c.label}" for i, c in enumerate(curves))
    canvas_rows = height - _FRAME_ROWS - 1
    integer_x = not view.logx and bool(np.all(x == np.round(x)))

    with _figure(width, height, color) as fig:
        for i, c in enumerate(view.curves):
            curve = fig.signal(view.xspan(view.x).tolist(), view.yspan(c.values).tolist(),
                               marker=_SERIES_MARKERS[i])
            fig.draw(curve.lines(True).density("full"))
        _set_axes(fig, width, canvas_rows, view.xspan, view.yspan, xint=integer_x,
                  xlog=view.logx, ylog=view.logy)
        fig.label(_fit(xname, width), axis="x")
        fig.title(_fit(key, width))
        return _render(fig, color)


def _steps(steps) -> np.ndarray:
    x = _vector(steps, "steps")
    if np.any(np.diff(x) <= 0):
        i = int(np.argmax(np.diff(x) <= 0))
        raise ValueError(f"`steps` must be strictly increasing: position {i + 1} "
                         f"({_short(x[i + 1])}) follows {_short(x[i])}")
    return x


@dataclass(frozen=True)
class _Curve:
    """One series of a convergence plot: its label and its values."""

    label: str
    values: np.ndarray


def _curves(series, x: np.ndarray) -> list[_Curve]:
    if not isinstance(series, Mapping) or len(series) == 0:
        raise ValueError("`series` must be a non-empty mapping of label -> values")
    if len(series) > len(_SERIES_MARKERS):
        raise ValueError(f"`series` has {len(series)} curves; at most {len(_SERIES_MARKERS)} "
                         "can be told apart")
    curves = []
    for label, values in series.items():
        label = _check_label(label, "series label")
        where = f"series {label!r}"
        v = _vector(values, where)
        if v.size != x.size:
            raise ValueError(f"`{where}` has {v.size} values but `steps` has {x.size}")
        curves.append(_Curve(label, v))
    return curves


@dataclass(frozen=True)
class _ConvergenceView:
    """The curves as drawn: a log axis is a linear one over log10 of the values, with
    its ticks on whole decades (plotext's own log scale does not take explicit
    limits and ticks).

    Attributes
    ----------
    x : ndarray
        The steps, or their log10.
    curves : list of _Curve
        The values, or their log10.
    logx, logy : bool
    xspan, yspan : _Span
    """

    x: np.ndarray
    curves: list[_Curve]
    logx: bool
    logy: bool
    xspan: _Span
    yspan: _Span


def _convergence_view(x: np.ndarray, curves: list[_Curve]) -> _ConvergenceView:
    allv = np.concatenate([c.values for c in curves])
    logy = bool(np.all(allv > 0) and np.log10(allv.max()) - np.log10(allv.min()) > 2)
    logx = bool(np.all(x > 0) and np.log10(x.max()) - np.log10(x.min()) > 2)
    px = np.log10(x) if logx else x
    drawn = [_Curve(c.label, np.log10(c.values) if logy else c.values) for c in curves]
    if px.size > 1:
        xspan = _span(float(px[0]), float(px[-1]), "steps")
    else:
        xspan = _span(float(px[0]) - 1, float(px[0]) + 1, "steps")
    low = min(float(c.values.min()) for c in drawn)
    high = max(float(c.values.max()) for c in drawn)
    if high == low:                          # one flat line: give it some room
        pad = max(abs(low) * 0.1, 1.0)
        low, high = low - pad, high + pad
    return _ConvergenceView(px, drawn, logx, logy, xspan, _span(low, high, "series"))


# --------------------------------------------------------------------------------------
# The figure: one at a time, cleared before and after
# --------------------------------------------------------------------------------------

@contextlib.contextmanager
def _figure(width: int, height: int, color: bool) -> Iterator:
    """The master figure, cleared and sized, with the terminal's size limit lifted.

    The caller asks for an exact size (the shell knows its own width; a pipe has no
    terminal at all), so plotext must not clamp it to the terminal it guesses.
    """
    fig = plotext.figure
    terminal = plotext.terminal
    with _LOCK:
        old_limit = list(getattr(terminal, "_limit", [True, True]))
        old_interactive = bool(getattr(fig, "_interactive", False))
        try:
            fig.interactive(False)          # interactive mode would print on every change
            terminal.limit(False, False)
            fig.clear()
            fig.theme("simple" if color else "colorless")
            fig.plot_size(width, height)
            yield fig
        finally:
            fig.theme("default")
            fig.clear()
            terminal.limit(*old_limit)
            fig.interactive(old_interactive)


def _render(fig, color: bool) -> str:
    """Build the figure; trailing blanks and blank last lines trimmed."""
    matrix = fig.build()
    text = matrix.string(colorless=not color)
    lines = text.split("\n")
    if not color:
        lines = [line.rstrip() for line in lines]
    plain = matrix.string(colorless=True).split("\n")
    while lines and plain and not plain[-1].strip():
        lines.pop()
        plain.pop()
    return "\n".join(lines)


def _canvas_size(text: str) -> tuple[int, int]:
    """Columns and rows inside the frame of a rendered, colourless figure."""
    lines = text.split("\n")
    top = next((i for i, line in enumerate(lines) if "┌" in line), None)
    bottom = next((i for i, line in enumerate(lines) if "└" in line), None)
    if top is None or bottom is None or "┐" not in lines[top]:
        raise ValueError("the plot is too small to hold a canvas")   # not reached for valid sizes
    left, right = lines[top].index("┌"), lines[top].index("┐")
    cols, rows = right - left - 1, bottom - top - 1
    if cols < 1 or rows < 1:
        raise ValueError("the plot is too small to hold a canvas")
    return cols, rows


# --------------------------------------------------------------------------------------
# Input checks: one helper per kind of argument, one line per problem
# --------------------------------------------------------------------------------------

def _check_size(width, height) -> tuple[int, int]:
    out = []
    for value, what, low, high, unit in ((width, "width", MIN_WIDTH, MAX_WIDTH, "columns"),
                                         (height, "height", MIN_HEIGHT, MAX_HEIGHT, "rows")):
        if isinstance(value, bool):
            raise ValueError(f"`{what}` must be a whole number of {unit}, not {value!r}")
        try:
            n = operator.index(value)
        except TypeError:
            raise ValueError(f"`{what}` must be a whole number of {unit}, not {value!r}") from None
        if n < low:
            raise ValueError(f"`{what}` must be at least {low} {unit} (got {n})")
        if n > high:
            raise ValueError(f"`{what}` must be at most {high} {unit} (got {n})")
        out.append(n)
    return out[0], out[1]


def _check_label(text, what: str) -> str:
    if not isinstance(text, str) or not text.strip():
        raise ValueError(f"`{what}` must be a non-empty text, not {text!r}")
    # One line only, no control characters: they would break the layout.
    return "".join(ch if ch.isprintable() else "?" for ch in text.strip())


def _vector(data, what: str) -> np.ndarray:
    try:
        a = np.asarray(data, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"`{what}` must be a sequence of numbers") from None
    if a.ndim != 1:
        raise ValueError(f"`{what}` must be one-dimensional (got shape {a.shape})")
    if a.size == 0:
        raise ValueError(f"`{what}` is empty")
    _finite(a, what)
    return a


def _matrix(data, what: str, shape: tuple[int, int]) -> np.ndarray:
    try:
        a = np.asarray(data, dtype=float)
    except (TypeError, ValueError):
        raise ValueError(f"`{what}` must be a 2-D array of numbers") from None
    if a.size == 0:
        raise ValueError(f"`{what}` is empty")
    if a.shape != shape:
        raise ValueError(f"`{what}` has shape {a.shape}; expected {shape} "
                         "(len(xvalues), len(yvalues))")
    _finite(a, what)
    return a


def _finite(a: np.ndarray, what: str) -> None:
    bad = ~np.isfinite(a)
    if bad.any():
        flat = int(np.argmax(bad))
        where = np.unravel_index(flat, a.shape)
        where = int(where[0]) if len(where) == 1 else tuple(int(i) for i in where)
        kind = "NaN" if np.isnan(a.flat[flat]) else "an infinite value"
        raise ValueError(f"`{what}` has {kind} at position {where}")


def _same_length(a: np.ndarray, what_a: str, b: np.ndarray, what_b: str) -> None:
    if a.size != b.size:
        raise ValueError(f"`{what_a}` and `{what_b}` differ in length ({a.size} vs {b.size})")


def _order(a: np.ndarray, what: str) -> np.ndarray:
    """Sorting permutation of an axis; a value given twice is refused."""
    order = np.argsort(a, kind="stable")
    s = a[order]
    same = np.diff(s) <= 0
    if same.any():
        raise ValueError(f"`{what}` has the value {_short(s[int(np.argmax(same))])} twice")
    return order


def _sort_axis(x: np.ndarray, y: np.ndarray, what: str) -> tuple[np.ndarray, np.ndarray]:
    order = _order(x, what)
    return x[order], y[order]


def _non_negative(a: np.ndarray, what: str) -> np.ndarray:
    scale = float(np.abs(a).max())
    # Round-off may leave tiny negative values; anything larger is an error upstream.
    low = a < -1e-9 * scale
    if low.any():
        where = np.unravel_index(int(np.argmax(low)), a.shape)
        where = int(where[0]) if len(where) == 1 else tuple(int(i) for i in where)
        raise ValueError(f"`{what}` is negative at position {where} ({_short(a[where])})")
    if float(a.max()) <= 0:
        raise ValueError(f"`{what}` is zero everywhere: nothing to plot")
    return np.clip(a, 0.0, None)


def _interval(interval) -> tuple[float, float] | None:
    if interval is None:
        return None
    try:
        lo, hi = (float(v) for v in interval)
    except (TypeError, ValueError):
        raise ValueError(f"`interval` must be a (low, high) pair of numbers, not {interval!r}") from None
    if not (math.isfinite(lo) and math.isfinite(hi)):
        raise ValueError(f"`interval` must have finite ends, not ({lo}, {hi})")
    if lo > hi:
        raise ValueError(f"`interval` runs backwards: low {_short(lo)} is above high {_short(hi)}")
    return lo, hi


class _Span:
    """An axis range [lo, hi] in data units and its map onto [0, 1].

    plotext is only ever handed numbers in [0, 1] (the tick labels carry the data
    units), so no magnitude of the data can upset its arithmetic.
    """

    def __init__(self, lo: float, hi: float):
        self.lo, self.hi = lo, hi

    def __call__(self, v):
        return (np.asarray(v, dtype=float) - self.lo) / (self.hi - self.lo)


def _span(lo: float, hi: float, what: str) -> _Span:
    width = hi - lo
    digits = next((d for d in range(4, 17) if f"{lo:.{d}g}" != f"{hi:.{d}g}"), 17)
    ends = f"{lo:.{digits}g} to {hi:.{digits}g}"
    if not math.isfinite(width):
        raise ValueError(f"`{what}` span too wide a range to plot ({ends})")
    if not width > max(1e-9 * max(abs(lo), abs(hi)), 1e-290):
        raise ValueError(f"`{what}` span too narrow a range to plot ({ends})")
    return _Span(lo, hi)


# --------------------------------------------------------------------------------------
# Numerics of the pictures
# --------------------------------------------------------------------------------------

def _outer_edges(nodes: np.ndarray) -> tuple[float, float]:
    """Outer edges of the end cells of `_node_cells`, in data units."""
    a, b, y, z = (float(v) for v in (nodes[0], nodes[1], nodes[-2], nodes[-1]))
    return a - 0.5 * (b - a), z + 0.5 * (z - y)          # Python floats: overflow gives inf quietly


def _node_cells(nodes: np.ndarray) -> np.ndarray:
    """Edges of the cells of values nearest to each node, shape (n + 1,).

    Interior edges are midpoints; the end cells reach half a spacing beyond the end
    nodes, so every node sits at the centre of its cell (right for discrete axes and
    for any rule whose end nodes carry their share of mass).
    """
    mid = 0.5 * nodes[1:] + 0.5 * nodes[:-1]
    first = nodes[0] - (mid[0] - nodes[0])
    last = nodes[-1] + (nodes[-1] - mid[-1])
    return np.concatenate([[first], mid, [last]])


def _rebin(source: np.ndarray, mass: np.ndarray, target: np.ndarray, axis: int = 0) -> np.ndarray:
    """Masses on the cells of `source` moved to the cells of `target`, along `axis`.

    `source` and `target` are increasing cell edges, shapes (ns + 1,) and (nt + 1,);
    `mass` has ns entries along `axis`, and the result nt. Each source cell's mass is
    spread evenly over it (the cumulative mass is interpolated linearly at the target
    edges), so the work is linear in the sizes; a cell too narrow to have a width in
    floating point goes whole to the target cell holding it; mass outside the target
    edges is dropped.
    """
    m = np.moveaxis(np.asarray(mass, dtype=float), axis, 0)
    cum = np.concatenate([np.zeros((1,) + m.shape[1:]), np.cumsum(m, axis=0)])
    t = np.clip(target, source[0], source[-1])
    k = np.clip(np.searchsorted(source, t, side="right") - 1, 0, source.size - 2)
    width = source[k + 1] - source[k]
    frac = np.divide(t - source[k], width, out=np.zeros_like(t), where=width > 0)
    frac = frac.reshape((-1,) + (1,) * (m.ndim - 1))
    at = cum[k] + frac * (cum[k + 1] - cum[k])
    return np.moveaxis(np.clip(np.diff(at, axis=0), 0.0, None), 0, axis)


def ramp_legend(short: bool = False) -> str:
    """``credible regions  █ 50%  ▓ 80%  ▒ 95%  ░ 99%  · 99.9%``."""
    marks = [f"{RAMP[k + 1]} {100 * p:g}%" for k, p in reversed(list(enumerate(REGIONS)))]
    return ("regions " if short else "credible regions  ") + ("  " if not short else " ").join(
        marks)


def _levels(cells: np.ndarray) -> np.ndarray:
    """Ramp level of each cell (0 blank .. len(REGIONS) densest): the smallest region of
    highest density it lies in. A cell is in the region holding p of the mass when the
    cells denser than it hold less than p, so cells of equal mass share a level."""
    # masses equal but for rounding in the re-binning count as ties
    flat = np.round(cells.ravel() / cells.max() * 1e9)
    total = float(flat.sum())
    order = np.argsort(-flat, kind="stable")
    sorted_mass = flat[order]
    denser = np.concatenate([[0.0], np.cumsum(sorted_mass)[:-1]]) / total
    # cells tied in mass: the mass strictly denser than the first of them
    first = np.searchsorted(-sorted_mass, -sorted_mass, side="left")
    denser = denser[first]
    level_sorted = np.zeros(flat.size, dtype=int)
    for k, p in enumerate(REGIONS):
        level_sorted[denser < p] = k + 1
    level_sorted[sorted_mass <= 0] = 0
    level = np.empty_like(level_sorted)
    level[order] = level_sorted
    return level.reshape(cells.shape)


def _thin_even(u: np.ndarray, v: np.ndarray, width: int) -> tuple[np.ndarray, np.ndarray]:
    """A curve on [0, 1] as one point every other column: a dotted line."""
    us = np.linspace(max(float(u[0]), 0.0), min(float(u[-1]), 1.0), max(width // 2, 2))
    return us, np.interp(us, u, v)


def _thin(x: np.ndarray, y: np.ndarray, bins: int) -> tuple[np.ndarray, np.ndarray]:
    """Keep a curve's shape with few points: per slice of x, its first, last, lowest
    and highest points. Curves already short enough pass unchanged."""
    if x.size <= 2 * bins:
        return x, y
    slot = np.minimum(((x - x[0]) / (x[-1] - x[0]) * bins).astype(int), bins - 1)
    starts = np.flatnonzero(np.r_[True, slot[1:] != slot[:-1]])
    ends = np.r_[starts[1:], x.size]
    keep = set()
    for a, b in zip(starts, ends):          # one pass per slice, not per point
        part = y[a:b]
        keep.update((a, b - 1, a + int(np.argmax(part)), a + int(np.argmin(part))))
    idx = np.array(sorted(keep))
    return x[idx], y[idx]


# --------------------------------------------------------------------------------------
# Ticks and labels
# --------------------------------------------------------------------------------------

def _set_axes(fig, width: int, rows: int, xspan: _Span, yspan: _Span, *, xint: bool = False,
              xlog: bool = False, ylog: bool = False) -> None:
    """Limits [0, 1] on both axes and round ticks in data units, as many as fit: on y
    one every other row at most; on x as many as leave room between their labels on
    the canvas beside the y labels. A log axis's span is in decades (log10 values)."""
    fig.ruler("x").lim(0.0, 1.0)
    fig.ruler("y").lim(0.0, 1.0)
    ypos, ylab = _choose_ticks(yspan, lambda p, l: len(p) <= max(2, rows // 2 + 1), log=ylog)
    canvas = width - 2 - max(map(len, ylab))
    xpos, xlab = _choose_ticks(xspan, lambda p, l: len(p) * (max(map(len, l)) + 3) <= canvas,
                               log=xlog, integer=xint)
    fig.ruler("x").ticks(xspan(xpos).tolist(), xlab)
    fig.ruler("y").ticks(yspan(ypos).tolist(), ylab)


def _choose_ticks(span: _Span, fits, *, log: bool = False,
                  integer: bool = False) -> tuple[list, list]:
    """The densest round ticks within `span` that `fits(positions, labels)` accepts.

    Linear axes step by 1, 2 or 5 times a power of ten; log axes (limits in decades)
    put a tick on every decade, or every 2nd, 3rd, 5th, ... one.
    """
    lo, hi = span.lo, span.hi
    if log:
        steps = [1, 2, 3, 5, 10, 20, 50, 100, 200, 500]
    else:
        base = 10.0 ** math.floor(math.log10((hi - lo) / 50))
        steps = [f * base * 10 ** d for d in range(5) for f in (1, 2, 5)]
        if integer:
            steps = [s for s in steps if s >= 1 and s == round(s)] or [1.0]
    found = None
    for step in steps:
        first, last = math.ceil(lo / step - 1e-9), math.floor(hi / step + 1e-9)
        if last < first:
            continue
        positions = [k * step for k in range(first, last + 1)]
        labels = _decade_labels(positions) if log else _tick_labels(positions, step)
        found = positions, labels
        if fits(positions, labels):
            return found
    if found is None:                       # a range narrower than any round step: its middle
        middle = 0.5 * (lo + hi)
        found = [middle], ([_short(10 ** middle)] if log else [_short(middle)])
    return found


def _tick_labels(positions: list, step: float) -> list[str]:
    biggest = max(abs(p) for p in positions)
    if biggest >= 1e5 or biggest < 1e-3:
        digits = max(0, int(math.floor(math.log10(biggest)) - math.floor(math.log10(step) + 1e-9))) if biggest else 0
        return ["0" if p == 0 else _compact_exponent(f"{p:.{digits}e}") for p in positions]
    decimals = max(0, -int(math.floor(math.log10(step) + 1e-9)))
    labels = [f"{p:.{decimals}f}" for p in positions]
    return ["0" if float(t) == 0 else t for t in labels]


def _decade_labels(powers: list) -> list[str]:
    out = []
    for k in (int(round(p)) for p in powers):
        out.append(f"{10.0 ** k:.{max(0, -k)}f}" if -2 <= k <= 3 else f"1e{k}")
    return out


def _compact_exponent(text: str) -> str:
    mantissa, exponent = text.split("e")
    return f"{mantissa}e{int(exponent)}"


def _short(value: float) -> str:
    return f"{float(value):.4g}"


def _first_fit(options: list[str], room: int) -> str:
    """The first text that fits `room` columns, else the last one shortened."""
    return next((text for text in options if len(text) <= room), _fit(options[-1], room))


def _fit(text: str, room: int) -> str:
    return text if len(text) <= room else text[: max(0, room - 1)] + "…"


def _set_labels(fig, ylabel: str, xlabel: str) -> None:
    if xlabel:
        fig.label(xlabel, axis="x")
    if ylabel:
        fig.label(ylabel, axis="y")


def _bar_labels(width: int, ylabel: str, xlabel: str) -> tuple[str, str]:
    """The y label (left) and x label (centred) shortened until both fit one row.

    plotext writes the y label from column 0 and centres the x label on width // 2;
    the x label keeps at least a third of the width before the y label gives way.
    """
    def fits(ly: int, lx: int) -> bool:
        start = width // 2 - lx // 2
        return start >= ly + 1 and start + lx <= width

    keep_x = min(len(xlabel), max(4, width // 3))
    for ly in range(len(ylabel), -1, -1):
        for lx in range(len(xlabel), keep_x - 1, -1):
            if fits(ly, lx):
                return _fit(ylabel, ly) if ly else "", _fit(xlabel, lx)
    return "", _fit(xlabel, keep_x)
