"""Memory and time of a 3-parameter posterior on a 400 x 400 x 400 grid.

Run as a script (pytest does not collect it):

    .venv/bin/python tests/bench_memory.py [--points 400]

It computes the same model twice, each in a fresh subprocess so that the two
peaks of resident memory are separate:

- streaming: engine.posterior.compute walks the 64 million points in blocks;
- naive: the whole meshgrid in memory, the compiled log-density evaluated on
  all of it at once, then log-sum-exp and marginal sums over axes (the baseline).

Each prints its seconds, its peak resident memory (VmHWM of /proc/self/status)
and the resident memory before the computation began; the parent prints both,
the ratios, and whether the streaming peak is under 1 GiB. The two log
evidences are printed side by side as a check that both computed the same thing.

The model is a straight-line regression with unknown intercept, slope and
noise sd on 50 invented points; the likelihood reduces to sufficient statistics,
so the cost is the grid itself, not the data.
"""

from __future__ import annotations

import argparse
import json
import math
import os
import subprocess
import sys
import time

GIB = 1 << 30


def _status_kib(field: str) -> int:
    with open("/proc/self/status") as fh:
        for line in fh:
            if line.startswith(field + ":"):
                return int(line.split()[1])
    raise RuntimeError(f"{field} not in /proc/self/status")


def _model(points: int):
    import numpy as np

    from engine.data import Column, DataSet
    from engine.expr import parse_call
    from engine.families import FAMILIES
    from engine.grid import Grid, make_axis
    from engine.model import Likelihood, Model, Prior, compile_model, make_param

    rng = np.random.default_rng(12)
    x = np.linspace(0.0, 10.0, 50)
    y = 1.5 + 0.8 * x + rng.normal(0.0, 1.2, x.size)
    d = DataSet()
    d, _ = d.with_column(Column("x", x))
    d, _ = d.with_column(Column("y", y))
    m = Model()
    for name, kind in (("a", "real"), ("b", "real"), ("s", "positive")):
        m, _ = m.with_param(make_param(name, kind))
    names = m.symbols(d)
    for target, text in (("a", "normal(0, 10)"), ("b", "normal(0, 10)"), ("s", "gamma(2, 1)")):
        fname, args = parse_call(text, names, FAMILIES)
        m, _ = m.with_prior(Prior(target, fname, args, text=text))
    fname, args = parse_call("normal(a + b * x, s)", names, FAMILIES)
    m, _ = m.with_likelihood(Likelihood("y", fname, args))
    c = compile_model(m, d)
    a, b, s = c.params
    grid = Grid((make_axis(a, -1.0, 4.0, points), make_axis(b, 0.4, 1.2, points),
                 make_axis(s, 0.5, 3.0, points)))
    return c, grid


def run_streaming(points: int) -> dict:
    from engine.posterior import compute

    c, grid = _model(points)
    before = _status_kib("VmRSS")
    t0 = time.perf_counter()
    post = compute(c, grid)
    seconds = time.perf_counter() - t0
    return {"seconds": seconds, "peak_kib": _status_kib("VmHWM"), "before_kib": before,
            "log_evidence": post.log_evidence.value, "points": grid.size}


def run_naive(points: int) -> dict:
    import numpy as np
    from scipy.special import logsumexp

    c, grid = _model(points)
    before = _status_kib("VmRSS")
    t0 = time.perf_counter()
    a, b, s = grid.axes
    A, B, S = np.meshgrid(a.values, b.values, s.values, indexing="ij")
    theta = [A.ravel(), B.ravel(), S.ravel()]
    lp = c.log_density(theta).reshape(A.shape)
    del theta, A, B, S
    lw = a.logw[:, None, None] + b.logw[None, :, None] + s.logw[None, None, :]
    t = lp + lw
    log_z = float(logsumexp(t))
    w = np.exp(t - log_z)
    marginals = [w.sum(axis=(1, 2)), w.sum(axis=(0, 2)), w.sum(axis=(0, 1))]
    means = [float(np.dot(m, ax.values)) for m, ax in zip(marginals, grid.axes)]
    seconds = time.perf_counter() - t0
    assert all(math.isfinite(v) for v in means)
    return {"seconds": seconds, "peak_kib": _status_kib("VmHWM"), "before_kib": before,
            "log_evidence": log_z, "points": grid.size}


def _child(kind: str, points: int) -> dict:
    out = subprocess.run([sys.executable, os.path.abspath(__file__), "--child", kind,
                          "--points", str(points)], capture_output=True, text=True, check=False)
    if out.returncode != 0:
        return {"error": (out.stderr.strip().splitlines() or ["exit %d" % out.returncode])[-1]}
    return json.loads(out.stdout.strip().splitlines()[-1])


def main(argv=None) -> int:
    ap = argparse.ArgumentParser(description=__doc__.splitlines()[0])
    ap.add_argument("--points", type=int, default=400, help="points per axis (default 400)")
    ap.add_argument("--child", choices=["streaming", "naive"], help=argparse.SUPPRESS)
    args = ap.parse_args(argv)
    if args.child:
        res = run_streaming(args.points) if args.child == "streaming" else run_naive(args.points)
        print(json.dumps(res))
        return 0
    n = args.points
    print(f"3-parameter regression posterior on a {n} x {n} x {n} grid ({n ** 3:,} points)")
    rows = {k: _child(k, n) for k in ("streaming", "naive")}
    print(f"{'run':<10} {'seconds':>9} {'peak RSS':>11} {'RSS before':>11} {'log evidence':>20}")
    for k, r in rows.items():
        if "error" in r:
            print(f"{k:<10} failed: {r['error']}")
            continue
        print(f"{k:<10} {r['seconds']:9.2f} {r['peak_kib'] / 1024:8.0f} MiB "
              f"{r['before_kib'] / 1024:8.0f} MiB {r['log_evidence']:20.12f}")
    s, v = rows["streaming"], rows["naive"]
    if "error" not in s and "error" not in v:
        print(f"naive / streaming: peak memory x{v['peak_kib'] / s['peak_kib']:.2f}, "
              f"time x{v['seconds'] / s['seconds']:.2f}")
        print(f"log evidences differ by {abs(s['log_evidence'] - v['log_evidence']):.3g}")
    if "error" not in s:
        ok = s["peak_kib"] * 1024 < GIB
        print(f"streaming peak {s['peak_kib'] / 1024:.0f} MiB: "
              f"{'under' if ok else 'NOT under'} 1 GiB")
        return 0 if ok else 1
    return 1


if __name__ == "__main__":
    sys.exit(main())
