"""Benchmark: what the cost check costs, against the compute it guards (target <= 5%).

Run it by hand (pytest does not collect it):

    .venv/bin/python tests/bench_cost_check.py

For each case it times, side by side in one process, a compute alone and the check
`compute` makes first (`runs.check_cost`, i.e. `plan.estimate`) followed by the compute,
each on a freshly compiled model (nothing cached), and prints the check's own time, what
check and compute together cost beyond the compute alone (the check's share: what the
check builds, such as the layout of the density, the compute then reuses), and the
predicted against the measured seconds. The cases: a Student-t location-scale model over 10,000 rows (no
sufficient statistics: every point sums every row) on 51 x 51 = 2,601 points, the case
of the issue; the same on 201 x 201; and a normal model over 1,000 rows (sufficient
statistics) on 1001 x 1001. The data are invented benchmark inputs, not a scenario.
"""

from __future__ import annotations

import os
import sys
import time

import numpy as np

sys.path.insert(0, os.path.dirname(os.path.dirname(os.path.abspath(__file__))))

from engine.model import compile_model            # noqa: E402
from engine.posterior import compute              # noqa: E402
from engine.refine import AxisSpec, build_grid    # noqa: E402
from engine.runs import check_cost                # noqa: E402
from engine.workspace import Workspace            # noqa: E402


def workspace(family: str, rows: int) -> Workspace:
    y = np.random.default_rng(31).standard_t(5, rows) * 1.5 + 2.0
    w = Workspace()
    w.param("mu", "real")
    w.param("sigma", "positive")
    w.prior("mu", "normal(0, 10)")
    w.prior("sigma", "half_normal(5)")
    w.data_typed("y", [repr(float(v)) for v in y])
    w.likelihood("y", family)
    return w


def case(label: str, w: Workspace, n: int, bounds) -> None:
    specs = [AxisSpec("mu", *bounds[0], n), AxisSpec("sigma", *bounds[1], n)]
    rows = []
    for _ in range(2):
        compiled = compile_model(w.state.model, w.state.data)   # nothing cached
        grid = build_grid(compiled.params, specs)
        t0 = time.perf_counter()
        compute(compiled, grid)
        alone = time.perf_counter() - t0
        compiled = compile_model(w.state.model, w.state.data)
        grid = build_grid(compiled.params, specs)
        t0 = time.perf_counter()
        cost = check_cost(compiled, grid, budget_seconds=1e9)
        t1 = time.perf_counter()
        compute(compiled, grid)
        t2 = time.perf_counter()
        rows.append((t1 - t0, (t2 - t0) - alone, alone, cost.seconds))
    check, extra, run, predicted = min(rows, key=lambda r: r[1] / r[2])
    print(f"{label:<42} compute {run:7.3f} s; check {check * 1e3:7.1f} ms, check + compute "
          f"over compute alone {extra / run:+6.3f} (target <= 0.05); predicted / measured "
          f"{predicted / run:5.2f}")


def main() -> int:
    t = workspace("student_t(4, mu, sigma)", 10_000)
    case("student_t, 10,000 rows, 51 x 51", t, 51, [(1.8, 2.3), (1.3, 1.8)])
    case("student_t, 10,000 rows, 201 x 201", t, 201, [(1.8, 2.3), (1.3, 1.8)])
    nrm = workspace("normal(mu, sigma)", 1_000)
    case("normal, 1,000 rows (reduced), 1001 x 1001", nrm, 1001, [(1.5, 2.7), (1.5, 2.5)])
    return 0


if __name__ == "__main__":
    sys.exit(main())
