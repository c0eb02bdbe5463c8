"""Benchmark: the frame rules on normal linear regressions with 5 to 8 parameters.

For 4 to 7 coefficients plus an unknown sd on 200 invented rows (a benchmark input,
tests/reference_regression.py), the prototype path of tests/rules_pipeline.py
(quadrat model -> compiled log-density -> mode and curvature -> frame -> rule ->
reduction) is run with each rule, and compared with the exact reference. Printed
per rule: log-density evaluations (the rule's, then the mode search's), the true
and the estimated error of the log evidence (relative to it), and the worst true
and estimated errors of the means and sds in units of the posterior sd, and the
seconds. Run it by hand:

    .venv/bin/python tests/bench_rules_regression.py

The rotated grid is costed first (engine/rule_cost.py) and run only where its
predicted points fit the budget; in 5 or more dimensions they do not.
"""

from __future__ import annotations

import math
import sys
import time
from pathlib import Path

import numpy as np

sys.path.insert(0, str(Path(__file__).resolve().parent))

from engine.model import compile_model  # noqa: E402
from engine.reduction import reduce_nodes  # noqa: E402
from engine.rotated import rotated  # noqa: E402
from engine.rule_cost import rule_cost  # noqa: E402
from reference_regression import exact_reference, invented_case, model_and_data  # noqa: E402
from rules_pipeline import run_hermite, run_sparse, setup  # noqa: E402

BUDGET = 100_000


def worst(estimates, ref_values, ref_sd):
    true = max(abs(e.value - r) / s for e, r, s in zip(estimates, ref_values, ref_sd))
    est = max((e.error if e.error is not None else math.inf) / s
              for e, s in zip(estimates, ref_sd))
    return true, est


def row(label, evals, modes, le, ref, means, sds, seconds):
    rel = abs(le.value - ref.log_evidence) / abs(ref.log_evidence)
    rel_est = (le.error / abs(le.value)) if le.error is not None else math.inf
    mt, me = worst(means, ref.mean, ref.sd)
    st, se = worst(sds, ref.sd, ref.sd)
    print(f"  {label:<44} {evals:>8,} +{modes:>6,}  {rel:9.1e} {rel_est:9.1e}  "
          f"{mt:8.1e} {me:8.1e}  {st:8.1e} {se:8.1e}  {seconds:6.2f}")


def main() -> None:
    print("relative error of the log evidence; errors of means and sds in posterior sds")
    print(f"  {'rule':<44} {'evals':>8} +{'mode':>6}  {'ev true':>9} {'ev est':>9}  "
          f"{'mean tr':>8} {'mean est':>8}  {'sd tr':>8} {'sd est':>8}  {'sec':>6}")
    for k in (4, 5, 6, 7):
        case = invented_case(k)
        ref = exact_reference(case)
        model, data = model_and_data(case)
        compiled = compile_model(model, data)
        t0 = time.perf_counter()
        s = setup(compiled)
        t_setup = time.perf_counter() - t0
        print(f"{k + 1} parameters ({k} coefficients and the sd), 200 rows; mode search "
              f"{t_setup:.2f} s; log evidence {ref.log_evidence:.6f}")
        for fn in (run_sparse, run_hermite):
            t0 = time.perf_counter()
            r = fn(compiled, s=s, budget=BUDGET)
            row(r.rule + ("" if r.met_targets else " (not shown met)"), r.rule_evaluations,
                r.mode_evaluations, r.log_evidence, ref, r.means, r.sds,
                time.perf_counter() - t0)
        for step in (1.0, 0.5):
            c = rule_cost("rotated", k + 1, step=step, mass=1e-6)
            if c.points > BUDGET:
                print(f"  rotated step {step:g}: about {c.points:,} points predicted, over the "
                      f"budget of {BUDGET:,}: not run")
                continue
            t0 = time.perf_counter()
            ex = rotated(s.frame.log_density(s.target), k + 1, step=step, mass=1e-6,
                         max_points=BUDGET)
            red = reduce_nodes(ex.nodes, ex.logf, frame=s.frame,
                               values=lambda U: np.column_stack(s.target.theta(U)),
                               value_names=case.names)
            note = "" if ex.complete else " (incomplete: budget)"
            row(f"rotated step {step:g}{note}", ex.nodes.points, s.mode_evaluations, red.log_integral,
                ref, red.values.mean, red.values.sd, time.perf_counter() - t0)


if __name__ == "__main__":
    main()
