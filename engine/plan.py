"""What a computation will cost before it runs: points, memory, seconds.

The seconds come from a short measured run of this model's compiled density on
this machine (a few thousand points, timed), scaled by the number of points;
the memory from the block size, the kept log-density and the marginals.
"""

from __future__ import annotations

import math
import os
import time
from dataclasses import dataclass

import numpy as np

from .grid import Grid
from .model import Compiled
from .posterior import BLOCK, STORE_LIMIT, evaluate_block

#: Bytes of working memory per grid point of a block (theta, weights, indices...).
BYTES_PER_BLOCK_POINT = 8 * 24
#: Bytes an axis holds per node (nodes, values, weights, Jacobian, log weights and the
#: log weights of two nested levels), besides the marginal sums of a pass.
BYTES_PER_AXIS_NODE = 8 * 7
#: Share of the memory quadrat may use that one computation may take.
MEMORY_SHARE = 0.8


@dataclass(frozen=True)
class Cost:
    """The cost of computing a posterior on a grid.

    Attributes
    ----------
    points : int
        Grid points (may be astronomically large: an exact Python int).
    memory : int
        Peak bytes the computation needs.
    seconds : float
        Predicted wall time.
    seconds_per_point : float
        The measured cost of one density evaluation and its reduction.
    machine_memory : int
        Physical memory of this machine, in bytes.
    """

    points: int
    memory: int
    seconds: float
    seconds_per_point: float
    machine_memory: int

    @property
    def fits(self) -> bool:
        return self.memory < MEMORY_SHARE * self.machine_memory


def machine_memory() -> int:
    """The memory this process may use, in bytes: the machine's physical memory,
    or less where a limit applies (a container's cgroup limit, `ulimit -v` or
    `ulimit -d`), as on shared servers. Going past it gets the process killed,
    and the session with it, so grids are sized against it."""
    try:
        total = int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        total = 8 << 30
    limits = [total]
    try:
        import resource
        for which in (resource.RLIMIT_AS, resource.RLIMIT_DATA):
            soft = resource.getrlimit(which)[0]
            if soft != resource.RLIM_INFINITY and soft > 0:
                limits.append(int(soft))
    except (ImportError, ValueError, OSError):
        pass
    for path in ("/sys/fs/cgroup/memory.max", "/sys/fs/cgroup/memory/memory.limit_in_bytes"):
        try:
            with open(path, encoding="ascii") as fh:
                text = fh.read().strip()
        except OSError:
            continue
        if text.isdigit() and 0 < int(text) < total:
            limits.append(int(text))
    return min(limits)


def memory_for(grid_points: int, axis_lengths: list[int], pairs: int = 0, *,
               block: int = BLOCK, store: bool | None = None, levels: int = 2) -> int:
    """Peak bytes of a pass over a grid with these axis lengths."""
    if store is None:
        store = grid_points <= STORE_LIMIT
    b = min(block, grid_points)
    mem = b * (BYTES_PER_BLOCK_POINT + 8 * len(axis_lengths))
    mem += (BYTES_PER_AXIS_NODE + 8 * (levels + 1)) * sum(axis_lengths)
    if store:
        mem += 8 * grid_points
    if pairs:
        big = sorted(axis_lengths)[-2:] if len(axis_lengths) >= 2 else [1, 1]
        mem += 8 * pairs * big[0] * big[-1]
    return int(mem)


def _sub_grid(grid: Grid, target: int) -> Grid:
    """A grid over the same bounds, scales and rules with about `target` points."""
    from .grid import make_axis
    cont = [a for a in grid.axes if not a.discrete]
    fixed = math.prod(a.n for a in grid.axes if a.discrete)
    if not cont:
        return grid
    f = (target / max(fixed, 1) / math.prod(a.n for a in cont)) ** (1 / len(cont))
    axes = []
    for a in grid.axes:
        if a.discrete:
            axes.append(a)
            continue
        n = max(5, min(a.n, int(round(a.n * f))))
        n = min(a.n, n + 1 - n % 2)
        axes.append(make_axis(a.param(), a.lo, a.hi, n, rule=a.rule, scale=a.scale))
    return Grid(tuple(axes))


@dataclass(frozen=True)
class Timing:
    """How long a pass takes: `fixed` seconds plus `per_point` seconds a point."""

    fixed: float
    per_point: float


def timing(compiled: Compiled, grid: Grid, *, small: int = 16_384, large: int = 65_536
           ) -> Timing:
    """The time of a compute on `grid`, from timed computes of the real pass on two
    smaller grids of the same shape on this machine (so every overhead of the pass
    is counted, not only the density)."""
    from .posterior import compute
    smallest = math.prod(a.n if a.discrete else min(a.n, 5) for a in grid.axes)
    if smallest > large:
        # too many dimensions for a small grid of the same shape: time the density and
        # the reduction on sample points instead
        return Timing(0.0, _sampled_seconds(compiled, grid))
    if grid.size <= large:
        g = grid
        t0 = time.perf_counter()
        compute(compiled, g, pairs=[], store=False)
        t = time.perf_counter() - t0
        return Timing(0.0, t / max(g.size, 1))
    times = []
    for target in (small, large):
        g = _sub_grid(grid, target)
        best = math.inf
        for _ in range(2):
            t0 = time.perf_counter()
            compute(compiled, g, pairs=[], store=False)
            best = min(best, time.perf_counter() - t0)
        times.append((g.size, best))
    (n1, t1), (n2, t2) = times
    slope = (t2 - t1) / (n2 - n1) if n2 > n1 else t2 / n2
    slope = max(slope, t2 / n2 * 0.5)
    return Timing(max(t2 - slope * n2, 0.0), slope)


def _sampled_seconds(compiled: Compiled, grid: Grid, sample: int = 20_000) -> float:
    """Seconds per point from the density and a reduction's share on random points."""
    rng = np.random.default_rng(0)
    idx = tuple(rng.integers(0, a.n, size=sample) for a in grid.axes)
    theta = [a.values[i] for a, i in zip(grid.axes, idx)]
    evaluate_block(compiled, theta)
    best = math.inf
    for _ in range(3):
        t0 = time.perf_counter()
        lp = evaluate_block(compiled, theta)
        lw = np.zeros(sample)
        for a, i in zip(grid.axes, idx):
            lw += a.logw[i]
        with np.errstate(all="ignore"):  # a log-density of -inf everywhere is timed too
            w = np.exp(lp + lw - np.max(lp + lw))
        for _lev in range(grid.levels + 1):
            for a, i in zip(grid.axes, idx):
                np.bincount(i, weights=w, minlength=a.n)
        best = min(best, time.perf_counter() - t0)
    return best / sample


def seconds_per_point(compiled: Compiled, grid: Grid) -> float:
    """Measured seconds per grid point of the whole pass (density and reduction)."""
    return timing(compiled, grid).per_point


#: A quick estimate above this many seconds is replaced by the precise one.
QUICK_SECONDS = 2.0
#: The reduction's share of a pass, over the density's, on sample points (measured
#: on this kind of machine with tests/bench_cost.py; only used for a first look).
QUICK_FACTOR = 2.0


def estimate(compiled: Compiled, grid: Grid, *, pairs: int = 0, precise: bool = False) -> Cost:
    """Points, memory and predicted seconds of computing on `grid`.

    A quick estimate times the density on sample points; when that predicts more
    than `QUICK_SECONDS`, or when `precise`, the real pass is timed on two smaller
    grids of the same shape (`timing`)."""
    points = math.prod(a.n for a in grid.axes)
    fixed, spp = 0.0, _sampled_seconds(compiled, grid, 4096) * QUICK_FACTOR
    if precise or spp * points > QUICK_SECONDS:
        t = timing(compiled, grid)
        fixed, spp = t.fixed, t.per_point
    mem = memory_for(points, [a.n for a in grid.axes], pairs, levels=grid.levels)
    return Cost(points, mem, fixed + spp * points, spp, machine_memory())


def check_memory(axis_lengths: list[int], *, pair: tuple[str, str] | None = None) -> None:
    """Refuse, before anything is allocated, a grid (axes of these lengths) whose
    pass would not fit in the memory this process may use, or, with `pair`, the
    2-D marginal of two axes of these lengths. The message gives the figures.

    Raises
    ------
    GridError
    """
    from .errors import GridError

    have = machine_memory()
    points = math.prod(axis_lengths)
    if pair is not None:
        need = 8 * points
        what = (f"the joint of `{pair[0]}` and `{pair[1]}` ({format_count(axis_lengths[0])} x "
                f"{format_count(axis_lengths[1])} = {format_count(points)} cells)")
    else:
        need = memory_for(points, list(axis_lengths))
        axes = " x ".join(format_count(n) for n in axis_lengths)
        what = f"this grid ({format_count(points)} points on axes of {axes})"
    if need >= MEMORY_SHARE * have:
        raise GridError(f"{what} needs about {format_bytes(need)} of memory; quadrat may use "
                        f"{format_bytes(have)} here: use fewer points")


def format_bytes(n: float) -> str:
    """A number of bytes as people read it: 1.5 GiB."""
    for unit in ("bytes", "KiB", "MiB", "GiB", "TiB", "PiB"):
        if abs(n) < 1024 or unit == "PiB":
            return f"{n:,.0f} {unit}" if unit == "bytes" else f"{n:,.1f} {unit}"
        n /= 1024
    return f"{n:,.1f} PiB"


def format_duration(s: float) -> str:
    """Seconds as people read them: 40 ms, 3.2 s, 12.5 minutes, 300,000 years."""
    if not math.isfinite(s):
        return "forever"
    if s < 1e-3:
        return "under 1 ms"
    if s < 1:
        return f"{s * 1000:.0f} ms"
    if s < 120:
        return f"{s:.1f} s"
    if s < 7200:
        return f"{s / 60:.1f} minutes"
    if s < 172800:
        return f"{s / 3600:.1f} hours"
    years = s / (365.25 * 86400)
    if years < 1:
        return f"{s / 86400:.1f} days"
    if years < 100:
        return f"{years:.3g} years"
    if years < 1e15:
        # two significant digits, written out: "300,000 years"
        return f"{float(f'{years:.2g}'):,.0f} years"
    return f"{years:.2g} years"


def format_count(n: int) -> str:
    """A point count as people read it: 1,000 or 10^20 or 3.4 x 10^17."""
    n = int(n)
    if n < 10**12:
        return f"{n:,}"
    e = len(str(n)) - 1
    lead = n / 10**e
    if n == 10**e:
        return f"10^{e}"
    return f"{lead:.2g} x 10^{e}"


def estimate_counts(compiled: Compiled, counts: list[int], grid: Grid | None = None) -> Cost:
    """Like `estimate`, for axis counts that may be too many to build a grid of."""
    points = math.prod(counts)
    spp = seconds_per_point(compiled, grid) if grid is not None else 1e-6
    mem = memory_for(points, counts) if points < 10**18 else 8 * points
    return Cost(points, mem, spp * points, spp, machine_memory())
