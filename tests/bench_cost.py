"""Benchmark: does `cost` predict the time of `compute`? (issue: within a factor of 3)

Runs a 3-parameter model on grids of about 10^6 and 10^7 points, asks the engine's
cost estimate first, then times the computation, and prints predicted seconds,
measured seconds and their ratio. Run it by hand:

    .venv/bin/python tests/bench_cost.py

The model is a normal regression with an unknown sd on 40 invented rows (a benchmark
input, not a scenario); one run each uses the sufficient-statistic reduction and the
row-by-row evaluation, whose costs differ by orders of magnitude.
"""

import time

import numpy as np

from engine import plan
from engine.model import compile_model
from engine.posterior import compute
from engine.refine import AxisSpec, build_grid
from engine.workspace import Workspace


def workspace() -> Workspace:
    rng = np.random.default_rng(7)
    x = np.linspace(0, 10, 40)
    y = 1.5 + 0.8 * x + rng.normal(0, 1.2, x.size)
    w = Workspace()
    w.param("a", "real")
    w.param("b", "real")
    w.param("s", "positive")
    w.prior("a", "normal(0, 10)")
    w.prior("b", "normal(0, 10)")
    w.prior("s", "half_normal(5)")
    w.data_typed("x", [repr(float(v)) for v in x])
    w.data_typed("y", [repr(float(v)) for v in y])
    w.likelihood("y", "normal(a + b*x, s)")
    return w


def main() -> None:
    w = workspace()
    print(f"{'form':<10} {'points':>12} {'predicted s':>12} {'measured s':>11} {'ratio':>7}")
    for reduce in (True, False):
        compiled = compile_model(w.state.model, w.state.data, reduce=reduce)
        for n in ((101, 215) if reduce else (41, 101)):
            specs = [AxisSpec("a", -2, 5, n), AxisSpec("b", 0.2, 1.4, n),
                     AxisSpec("s", 0.5, 3.0, n)]
            grid = build_grid(compiled.params, specs)
            predicted = plan.estimate(compiled, grid, precise=True).seconds  # what `cost` shows
            t0 = time.perf_counter()
            compute(compiled, grid, pairs=[])
            measured = time.perf_counter() - t0
            form = "reduced" if reduce else "row-wise"
            print(f"{form:<10} {grid.size:>12,} {predicted:>12.2f} {measured:>11.2f} "
                  f"{measured / predicted:>7.2f}")


def blocks() -> None:
    """Block size: the same 10^7-point pass with blocks of 2^16 and 2^20 points."""
    w = workspace()
    compiled = compile_model(w.state.model, w.state.data)
    specs = [AxisSpec("a", -2, 5, 215), AxisSpec("b", 0.2, 1.4, 215), AxisSpec("s", 0.5, 3.0, 215)]
    grid = build_grid(compiled.params, specs)
    times = {}
    for blk in (1 << 16, 1 << 20):
        t0 = time.perf_counter()
        compute(compiled, grid, pairs=[], block=blk)
        times[blk] = time.perf_counter() - t0
        print(f"block {blk:>9,}: {times[blk]:.2f} s")
    print(f"ratio (2^20 / 2^16): {times[1 << 20] / times[1 << 16]:.2f}")


if __name__ == "__main__":
    main()
    blocks()
