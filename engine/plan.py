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
        return self.memory < 0.8 * self.machine_memory


def machine_memory() -> int:
    try:
        return int(os.sysconf("SC_PAGE_SIZE") * os.sysconf("SC_PHYS_PAGES"))
    except (ValueError, OSError, AttributeError):
        return 8 << 30


def memory_for(grid_points: int, axis_lengths: list[int], pairs: int = 0, *,
               block: int = BLOCK, store: bool | None = None, levels: int = 2) -> int:
    """Peak bytes of a pass over a grid with these axis lengths."""
    if store is None:
        store = grid_points <= STORE_LIMIT
    b = min(block, grid_points)
    mem = b * (BYTES_PER_BLOCK_POINT + 8 * len(axis_lengths))
    mem += 8 * (levels + 1) * sum(axis_lengths)
    if store:
        mem += 8 * grid_points
    if pairs:
        big = sorted(axis_lengths)[-2:] if len(axis_lengths) >= 2 else [1, 1]
        mem += 8 * pairs * big[0] * big[-1]
    return int(mem)


def seconds_per_point(compiled: Compiled, grid: Grid, *, sample: int = 20_000) -> float:
    """Measured seconds for one point: the density plus the reduction's share."""
    n = int(min(sample, max(grid.size, 1)))
    rng = np.random.default_rng(0)
    # per-axis indices: the grid may have more points than an int64 can count
    idx = tuple(rng.integers(0, a.n, size=n) for a in grid.axes)
    theta = [a.values[i] for a, i in zip(grid.axes, idx)]
    evaluate_block(compiled, theta)  # warm up (first calls build caches)
    best = math.inf
    for _ in range(3):
        t0 = time.perf_counter()
        lp = evaluate_block(compiled, theta)
        # the reduction: weights, exp, one bincount per axis and per level
        w = np.exp(lp - np.max(lp[np.isfinite(lp)], initial=0.0))
        for _lev in range(grid.levels + 1):
            for a, i in zip(grid.axes, idx):
                np.bincount(i, weights=w, minlength=a.n)
        best = min(best, time.perf_counter() - t0)
    return best / n


def estimate(compiled: Compiled, grid: Grid, *, pairs: int = 0) -> Cost:
    """Points, memory and predicted seconds of computing on `grid`."""
    points = math.prod(a.n for a in grid.axes)
    spp = seconds_per_point(compiled, grid)
    mem = memory_for(points, [a.n for a in grid.axes], pairs, levels=grid.levels)
    return Cost(points, mem, spp * points, spp, machine_memory())


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
