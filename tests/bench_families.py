"""Benchmark: the stable log-densities against their textbook forms, in one process.

For each family with a stable form, a block of grid points x data rows (the shape the
row-wise sum evaluates) is timed with the stable form (Term.expr) and with the
textbook form (Term.separable, or the lgamma form written out here), both compiled
as engine/model.py compiles them. Printed: milliseconds and the ratio stable /
textbook, for parameters in a moderate range and in a large one (where only the
stable form is right). Run by hand: ``.venv/bin/python tests/bench_families.py``.
The data are random draws, for timing only.
"""

from __future__ import annotations

import time

import numpy as np
import sympy as sp

from engine import families as fam
from engine import special as S
from engine.model import _lambdify

B, R = 20_000, 50          # grid points x rows per block
rng = np.random.default_rng(1)


def _textbook(name, x, syms):
    term = fam.FAMILIES[name].logpdf(x, *syms)
    if term.separable is not None:
        return term.separable
    if name == "beta_binomial":
        n, a, b = syms
        lchoose = S.gammaln(n + 1) - S.gammaln(x + 1) - S.gammaln(n - x + 1)
        return (lchoose + S.gammaln(x + a) + S.gammaln(n - x + b) - S.gammaln(n + a + b)
                - S.gammaln(a) - S.gammaln(b) + S.gammaln(a + b))
    if name == "student_t":
        nu, m, s = syms
        z = (x - m) / s
        return (S.gammaln((nu + 1) / 2) - S.gammaln(nu / 2) - sp.log(nu * sp.pi) / 2
                - sp.log(s) - (nu + 1) / 2 * S.log1p(z**2 / nu))
    return None


CASES = [
    # name, rows (1, R), argument makers (None: a parameter column (B, 1))
    ("beta_binomial", np.floor(rng.random((1, R)) * 21), [np.full((1, R), 20.0), None, None]),
    ("gamma", rng.random((1, R)) * 5 + 0.1, [None, None]),
    ("poisson", np.floor(rng.random((1, R)) * 30), [None]),
    ("binomial", np.floor(rng.random((1, R)) * 21), [np.full((1, R), 20.0), "unit"]),
    ("neg_binomial", np.floor(rng.random((1, R)) * 30), [None, "unit"]),
    ("beta", rng.random((1, R)), [None, None]),
    ("student_t", rng.standard_normal((1, R)), [None, 0.0, 1.0]),
]


def _time(fn, args) -> float:
    with np.errstate(all="ignore"):
        fn(*args)
        t0 = time.perf_counter()
        for _ in range(3):
            fn(*args)
    return (time.perf_counter() - t0) / 3 * 1e3


def main() -> None:
    print(f"{B:,} grid points x {R} rows; ms per block (stable / textbook = ratio)")
    for name, xs, makers in CASES:
        f = fam.FAMILIES[name]
        x = sp.Symbol("x", real=True)
        syms = [sp.Symbol(f"a{i}", real=True) for i in range(len(f.params))]
        stable = _lambdify([x] + syms, f.logpdf(x, *syms).expr)
        plain = _lambdify([x] + syms, _textbook(name, x, syms))
        for lo, hi in ((0.5, 50.0), (1e3, 1e8)):
            args = [xs]
            for m in makers:
                if m is None:
                    args.append(np.exp(rng.uniform(np.log(lo), np.log(hi), (B, 1))))
                elif isinstance(m, str):
                    args.append(rng.uniform(0.01, 0.99, (B, 1)))
                else:
                    args.append(m)
            ts, tp = _time(stable, args), _time(plain, args)
            print(f"  {name:14s} parameters {lo:g} .. {hi:g}: {ts:7.1f} / {tp:7.1f} = "
                  f"{ts / tp:4.2f}")


if __name__ == "__main__":
    main()
