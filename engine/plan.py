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


def _sampled_seconds(compiled: Compiled, grid: Grid, sample: int = 20_000, *,
                     repeats: int = 3) -> float:
    """Seconds per point from the density and a reduction's share on random points."""
    rng = np.random.default_rng(0)
    idx = tuple(rng.integers(0, a.n, size=sample) for a in grid.axes)
    theta = [a.values[i] for a, i in zip(grid.axes, idx)]
    evaluate_block(compiled, theta)
    best = math.inf
    for _ in range(repeats):
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
    return pass_timing(compiled, grid).per_point


#: A quick look that predicts less than this many seconds is taken as it is.
TINY_SECONDS = 0.05
#: The reduction's share of a pass, over the density's, on sample points (measured
#: on this kind of machine with tests/bench_cost.py; only used for a first look).
QUICK_FACTOR = 2.0
#: A timed block stops growing once it takes this long (seconds); `cost` times longer.
TIMED_SECONDS = 0.01
PRECISE_SECONDS = 0.05


def pass_timing(compiled: Compiled, grid: Grid, *, precise: bool = False):
    """The `posterior.PassTiming` of `grid`, timed once per compiled model and grid
    (kept on the compiled model, which belongs to one revision of the model and data)."""
    from .posterior import _grid_key, pass_timing as timed
    key = ("timing", _grid_key(grid), precise)
    got = compiled._cache.get(key)
    if got is None:
        got = timed(compiled, grid, enough=PRECISE_SECONDS if precise else TIMED_SECONDS)
        if len(compiled._cache) > 64:
            for k in [k for k in compiled._cache if k and k[0] == "timing"]:
                del compiled._cache[k]
        compiled._cache[key] = got
    return got


def estimate(compiled: Compiled, grid: Grid, *, pairs: int = 0, precise: bool = False) -> Cost:
    """Points, memory and predicted seconds of computing on `grid`.

    A first look times the density on a few sample points; unless that predicts a
    tiny job, a few blocks of the real pass are timed on this grid (once per compiled
    model and grid), which costs a small share of the pass itself."""
    points = math.prod(a.n for a in grid.axes)
    mem = memory_for(points, [a.n for a in grid.axes], pairs, levels=grid.levels)
    spp = _sampled_seconds(compiled, grid, 16, repeats=1) * QUICK_FACTOR
    seconds = spp * points
    # a grid beyond 2^50 points (about 10^15) will never run: the first look is enough
    if (precise or seconds > TINY_SECONDS) and points < 2**50:
        t = pass_timing(compiled, grid, precise=precise)
        seconds, spp = t.seconds(points), t.per_point
    return Cost(points, mem, seconds, spp, machine_memory())


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
