"""Benchmark: the speed of the pass, as ratios measured side by side in one process.

Run it by hand (pytest does not collect it):

    .venv/bin/python tests/bench_pass.py [--quick]

It prints

- points per second of `engine.posterior.compute` divided by this process's rate of
  `np.exp` on 65,536 float64 (measured right before each run, best of many), for a
  normal model with unknown mean and sd over 1,000 rows at 2001 x 2001 (target >= 0.25)
  and for a straight-line regression with unknown sd (3 parameters, sufficient
  statistics) at 400^3 (target >= 0.1);
- the time of quadrat's pass over the hand-written numpy baselines in tests/bench (the
  same model, nodes, weights and answers): sufficient statistics by hand (target
  <= 0.5), the rows broadcast against the mesh (<= 0.2) and a loop over the rows (<= 0.01),
  with the largest difference of the answers as a check that all computed the same thing.

Every time is the best of several runs (the machines are shared and noisy); the compiled
model's layout is built by a first, untimed compute (its cost is printed apart). The data
are invented benchmark inputs, not a scenario. `--quick` uses 1001 x 1001 and 200^3 and
skips the slowest baseline.
"""

from __future__ import annotations

import argparse
import math
import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from engine.model import compile_model            # noqa: E402
from engine.posterior import compute              # noqa: E402
from engine.refine import AxisSpec, build_grid    # noqa: E402
from engine.workspace import Workspace            # noqa: E402
from tests.bench import broadcast, rowloop, suffstats  # noqa: E402


def exp_rate(repeats: int = 200) -> float:
    """np.exp evaluations per second on 65,536 float64 (best of `repeats`)."""
    x = np.random.default_rng(0).random(65_536)
    out = np.empty_like(x)
    best = math.inf
    for _ in range(repeats):
        t0 = time.perf_counter()
        np.exp(x, out=out)
        best = min(best, time.perf_counter() - t0)
    return x.size / best


def best_of(f, repeats: int) -> tuple[float, object]:
    best, got = math.inf, None
    for _ in range(repeats):
        t0 = time.perf_counter()
        got = f()
        best = min(best, time.perf_counter() - t0)
    return best, got


def normal_model(rows: int = 1000):
    rng = np.random.default_rng(2024)
    y = rng.normal(3.0, 2.0, rows)
    w = Workspace()
    w.param("mu", "real")
    w.param("sigma", "positive")
    w.prior("mu", "normal(0, 10)")
    w.prior("sigma", "half_normal(5)")
    w.data_typed("y", [repr(float(v)) for v in y])
    w.likelihood("y", "normal(mu, sigma)")
    return y, compile_model(w.state.model, w.state.data)


def regression_model(rows: int = 50):
    rng = np.random.default_rng(12)
    x = np.linspace(0.0, 10.0, rows)
    y = 1.5 + 0.8 * x + rng.normal(0.0, 1.2, rows)
    w = Workspace()
    for name, kind in (("a", "real"), ("b", "real"), ("s", "positive")):
        w.param(name, kind)
    w.prior("a", "normal(0, 10)")
    w.prior("b", "normal(0, 10)")
    w.prior("s", "gamma(2, 1)")
    w.data_typed("x", [repr(float(v)) for v in x])
    w.data_typed("y", [repr(float(v)) for v in y])
    w.likelihood("y", "normal(a + b * x, s)")
    return compile_model(w.state.model, w.state.data)


def ratio_to_exp(compiled, grid, repeats: int) -> tuple[float, float, float]:
    """(points/s over exp/s, seconds of the best pass, seconds of the first pass)."""
    t0 = time.perf_counter()
    compute(compiled, grid)
    first = time.perf_counter() - t0
    rate = exp_rate()
    secs, _ = best_of(lambda: compute(compiled, grid), repeats)
    rate = max(rate, exp_rate())
    return grid.size / secs / rate, secs, first


def quadrat_answers(post) -> dict:
    return {"log_evidence": post.log_evidence.value, "mean_mu": float(post.mean[0]),
            "mean_sigma": float(post.mean[1]), "sd_mu": math.sqrt(post.cov[0, 0]),
            "sd_sigma": math.sqrt(post.cov[1, 1])}


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--quick", action="store_true", help="smaller grids, no row loop")
    args = ap.parse_args(argv)
    n2, n3 = (1001, 200) if args.quick else (2001, 400)

    y, c2 = normal_model()
    g2 = build_grid(c2.params, [AxisSpec("mu", 2.5, 3.5, n2), AxisSpec("sigma", 1.7, 2.35, n2)])
    r2, s2, f2 = ratio_to_exp(c2, g2, 5)
    print(f"normal, 1,000 rows, {n2} x {n2}: {g2.size / s2:.3g} points/s, "
          f"{r2:.3f} of np.exp's rate (target >= 0.25); pass {s2 * 1e3:.0f} ms, "
          f"first pass {f2 * 1e3:.0f} ms")

    c3 = regression_model()
    g3 = build_grid(c3.params, [AxisSpec("a", -1.0, 4.0, n3), AxisSpec("b", 0.4, 1.2, n3),
                                AxisSpec("s", 0.5, 3.0, n3)])
    r3, s3, f3 = ratio_to_exp(c3, g3, 2)
    print(f"regression, 3 parameters, {n3}^3: {g3.size / s3:.3g} points/s, "
          f"{r3:.3f} of np.exp's rate (target >= 0.1); pass {s3:.2f} s, first {f3:.2f} s")

    mu, sg = g2.axes
    nodes = (y, mu.values, sg.values, np.exp(mu.logw), np.exp(sg.logw))
    post = compute(c2, g2)
    ours = quadrat_answers(post)
    print(f"against hand-written numpy on the same model, nodes and answers ({n2} x {n2}):")
    baselines = [("sufficient statistics", suffstats, 3, 0.5), ("broadcast rows", broadcast, 1, 0.2)]
    if not args.quick:
        baselines.append(("row-by-row loop", rowloop, 1, 0.01))
    for name, mod, reps, target in baselines:
        secs, got = best_of(lambda: mod.run(*nodes), reps)
        diff = max(abs(got[k] - ours[k]) / max(abs(ours[k]), 1e-300) for k in ours)
        print(f"  {name:<22} {secs:8.3f} s   quadrat / baseline {s2 / secs:7.4f} "
              f"(target <= {target}); answers agree to {diff:.1e} relative")
    return 0


if __name__ == "__main__":
    sys.exit(main())
